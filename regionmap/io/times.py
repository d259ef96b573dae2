"""Times given by users (config values, CLI options, file headers) as UTC datetime64."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd

from regionmap.errors import InputError

__all__ = ["utc_datetime64"]


def utc_datetime64(value, where: str) -> np.datetime64:
    """An ISO-8601 text, datetime or datetime64 as naive UTC ``datetime64[s]``.

    Times without a zone are taken as UTC; times with one are converted to UTC.

    Raises
    ------
    InputError
        When ``value`` is not a time, naming ``where``.
    """
    if isinstance(value, dt.datetime) and value.tzinfo is not None:
        value = value.astimezone(dt.UTC).replace(tzinfo=None)
    try:
        stamp = pd.Timestamp(value.strip() if isinstance(value, str) else value)
    except (ValueError, TypeError):
        stamp = pd.NaT
    if pd.isna(stamp):
        raise InputError(
            f"{where}: expected an ISO-8601 time such as '2026-02-10T09:30Z' (UTC), got {value!r}"
        )
    if stamp.tzinfo is not None:
        stamp = stamp.tz_convert("UTC").tz_localize(None)
    return np.datetime64(stamp.to_datetime64(), "s")

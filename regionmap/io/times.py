"""Times given by users (config values, CLI options, file headers) as UTC datetime64, and
times shown to users: the local clock time with UTC beside it."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd

from regionmap.errors import InputError

__all__ = [
    "utc_datetime64",
    "local_time_label",
    "local_date_label",
    "utc_offset_label",
    "event_date_label",
]


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


def _local(t, local_timezone: str) -> pd.Timestamp:
    return pd.Timestamp(np.datetime64(t, "s")).tz_localize("UTC").tz_convert(local_timezone)


def utc_offset_label(t, local_timezone: str) -> str:
    """The local zone's offset from UTC at ``t`` [UTC], as ``UTC+01`` or ``UTC-06:30``."""
    off = _local(t, local_timezone).utcoffset()
    minutes = int(off.total_seconds() // 60)
    sign = "+" if minutes >= 0 else "-"
    h, m = divmod(abs(minutes), 60)
    return f"UTC{sign}{h:02d}" + (f":{m:02d}" if m else "")


def local_time_label(t, local_timezone: str, *, year: bool = False) -> str:
    """A time as people read it: local clock time with the offset, UTC beside it.

    ``"Sun 15 Feb 07:00 UTC+01 (06:00 UTC)"``; the UTC part repeats the date when it falls
    on another day (``"(14 Feb 23:00 UTC)"``); with ``year`` the local date carries the year.
    When the local zone is UTC itself: ``"Sun 15 Feb 06:00 UTC"``.

    Parameters
    ----------
    t : datetime-like, naive UTC.
    local_timezone : IANA time-zone name.
    """
    utc = pd.Timestamp(np.datetime64(t, "s"))
    local = _local(t, local_timezone)
    day = f"{local:%a} {local.day} {local:%b}" + (f" {local.year}" if year else "")
    offset = utc_offset_label(t, local_timezone)
    if local.utcoffset().total_seconds() == 0:
        return f"{day} {utc:%H:%M} UTC"
    same_day = local.date() == utc.date()
    utc_part = f"{utc:%H:%M}" if same_day else f"{utc.day} {utc:%b} {utc:%H:%M}"
    return f"{day} {local:%H:%M} {offset} ({utc_part} UTC)"


def local_date_label(date) -> str:
    """A local calendar date (``"2025-12-22"``, a date or a Timestamp) as ``"22 Dec"``."""
    d = pd.Timestamp(date)
    return f"{d.day} {d:%b}"


def event_date_label(event_id_h: int, local_timezone: str) -> str:
    """An event by its start, the local date: the event id (its start as whole hours since
    1970-01-01 UTC) as ``"16 Jan 2026"``."""
    start = (
        pd.Timestamp(np.datetime64(int(event_id_h), "h"))
        .tz_localize("UTC")
        .tz_convert(local_timezone)
    )
    return f"{start.day} {start:%b %Y}"

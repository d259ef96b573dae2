"""Forecast cycles: a reference-time × lead-time layout flattened to valid time.

A forecast file (or a folder of them) holds one or more cycles, each a run from its reference
time ``forecast_reference_time`` (cfgrib: ``time``) along its lead time ``forecast_period``
(cfgrib: ``step``). Each cycle becomes a series of its own on valid time = reference + lead,
with time bounds from the reference time to the valid time: amounts and means in a cycle are
taken as accumulated since the cycle's start (as GRIB's accumulations are; GRIB fields per
output interval are summed up first by :mod:`regionmap.io.forcing_grib`) and taken apart
within that cycle only. The reference time itself (lead 0) is left out, since its
accumulation interval is empty. Cycles are ordered by reference time, so that where they
overlap the latest cycle wins, as a later file does.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from regionmap.errors import ForcingReadError
from regionmap.io import units as U

__all__ = ["split_cycles"]

_LEAD_NAMES = ("step", "forecast_period", "leadtime", "lead_time")
_REFERENCE_NAMES = ("forecast_reference_time", "reference_time", "time")


def _lead_dim(ds):
    for name, c in ds.coords.items():
        if c.ndim != 1 or c.dims[0] != name:
            continue
        timedelta = np.issubdtype(c.dtype, np.timedelta64)
        if (
            timedelta
            or c.attrs.get("standard_name") == "forecast_period"
            or (name in _LEAD_NAMES and "since" not in str(c.attrs.get("units", "")))
        ):
            return str(name)
    return None


def _lead_seconds(coord, path):
    if np.issubdtype(coord.dtype, np.timedelta64):
        return coord.values.astype("timedelta64[s]").astype(np.int64)
    try:
        scale, _ = U.affine_conversion(str(coord.attrs.get("units", "")), "s")
    except U.UnitsProblem:
        raise ForcingReadError(
            f"forcing file {path!r}, lead time {coord.name!r}: units "
            f"{coord.attrs.get('units')!r}; expected a time span such as 'hours'"
        ) from None
    return np.rint(coord.values.astype(np.float64) * scale).astype(np.int64)


def _reference(ds, lead):
    for name in _REFERENCE_NAMES:
        c = ds.coords.get(name)
        if c is not None and c.ndim <= 1 and np.issubdtype(c.dtype, np.datetime64):
            if c.ndim == 0 or c.dims[0] != lead:
                return name
    for name, c in ds.coords.items():
        if c.attrs.get("standard_name") == "forecast_reference_time" and c.ndim <= 1:
            return str(name)
    return None


def _held(ds, lead):
    """Lead times that this cycle has data for: cycles of one GRIB file share cfgrib's union
    of steps, and a step that only another cycle has is all NaN here (in-memory data only;
    lazy files are taken as written)."""
    held = np.zeros(ds.sizes[lead], bool)
    loaded = [v for v in ds.data_vars.values() if lead in v.dims and isinstance(v.data, np.ndarray)]
    if len(loaded) < sum(lead in v.dims for v in ds.data_vars.values()):
        return ~held
    for v in loaded:
        held |= v.notnull().any([d for d in v.dims if d != lead]).values
    return held


def split_cycles(ds: xr.Dataset, path: str):
    """The cycles of ``ds`` as datasets on valid time, or None when ``ds`` has no lead time.

    Returns
    -------
    list of (reference time datetime64[s], dataset) or None
    """
    lead = _lead_dim(ds)
    if lead is None:
        return None
    ref_name = _reference(ds, lead)
    if ref_name is None:
        raise ForcingReadError(
            f"forcing file {path!r}: lead time {lead!r} without a reference time; expected a "
            f"coordinate forecast_reference_time (or cfgrib's 'time')"
        )
    ref = ds[ref_name]
    refs = np.atleast_1d(ref.values.astype("datetime64[s]"))
    lead_s = _lead_seconds(ds[lead], path)
    keep = np.flatnonzero(lead_s > 0)
    valid_names = [
        str(n)
        for n, c in ds.coords.items()
        if n != ref_name and lead in c.dims and np.issubdtype(c.dtype, np.datetime64)
    ]
    cycles = []
    for k, r in enumerate(refs):
        one = ds.isel({ref.dims[0]: k}) if ref.ndim == 1 else ds
        steps = keep[_held(one, lead)[keep]]
        one = one.drop_vars([ref_name, *valid_names]).isel({lead: steps})
        valid = r + lead_s[steps].astype("timedelta64[s]")
        bounds = np.stack([np.full(valid.size, r), valid], axis=1).astype("datetime64[ns]")
        one = one.assign_coords(
            time=(lead, valid.astype("datetime64[ns]"), {"bounds": "time_bnds"})
        )
        one = one.swap_dims({lead: "time"}).drop_vars(lead)
        one["time_bnds"] = (("time", "nv"), bounds)
        cycles.append((r, one))
    return cycles

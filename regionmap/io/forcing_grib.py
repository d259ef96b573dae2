"""GRIB edition 1 and 2 forcing through the cfgrib engine (ecCodes).

cfgrib turns a file's messages into datasets (one per level type and step type) with the
reference time ``time``, the lead time ``step`` and ``valid_time``; this module merges them,
says which fields the forcing needs by their ecCodes short names, and makes every
accumulation and average run from the reference time: ecCodes' ``startStep`` tells whether a
field is accumulated since the run start (``0-6``) or per output interval (``5-6``); interval
values are summed up so the cycle can be taken apart like any accumulation
(:mod:`regionmap.io.forcing_cycles`). The data are read into memory when the file is opened
(ecCodes is not used from several threads).
"""

from __future__ import annotations

import os
import tempfile

import numpy as np
import xarray as xr

from regionmap.errors import ForcingReadError
from regionmap.io.forcing_mapping import PRODUCT_KEY

__all__ = ["is_grib", "open_grib"]

# cfgrib variable name -> standard name (ecCodes parameter database, WMO GRIB2 code table 4.2)
_FIELDS = {
    "t2m": "air_temperature",
    "d2m": "dew_point_temperature",
    "r2": "relative_humidity",
    "u10": "eastward_wind",
    "v10": "northward_wind",
    "sp": "surface_air_pressure",
    "tp": "precipitation_amount",
    "ssrd": "integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air",
    "strd": "integral_wrt_time_of_surface_downwelling_longwave_flux_in_air",
    "sdswrf": "surface_downwelling_shortwave_flux_in_air",
    "sdlwrf": "surface_downwelling_longwave_flux_in_air",
    "orog": "surface_altitude",
    "z": "surface_geopotential",
}
_EARTH_ALIGNED = {"regular_ll", "regular_gg", "reduced_ll", "reduced_gg"}
"""Grids whose rows run east-west: grid-relative winds are earth-relative there."""
_KIND = {"accum": "sum", "avg": "mean", "instant": "instantaneous"}
_DATASET_KEYS = ("time", "step", "valid_time", "latitude", "longitude", "x", "y")


def is_grib(path: str) -> bool:
    """A GRIB file starts with the four bytes ``GRIB`` (WMO Manual on Codes, FM 92)."""
    try:
        with open(path, "rb") as fh:
            return fh.read(4) == b"GRIB"
    except OSError:
        return False


def _scan(path):
    """The kinds of field the forcing uses, as (shortName, typeOfLevel, stepType), and per
    cfgrib name the (startStep, endStep) [h] of its accumulated or averaged messages."""
    import eccodes

    kinds, spans = set(), {}
    with open(path, "rb") as fh:
        while (h := eccodes.codes_grib_new_from_file(fh)) is not None:
            try:
                name = eccodes.codes_get(h, "cfVarName")
                if name not in _FIELDS:
                    continue
                step_type = eccodes.codes_get(h, "stepType")
                grid = eccodes.codes_get(h, "gridType")
                # code tables 7 (GRIB1) and 3.3 (GRIB2): flag bit 5 (value 8) = relative to grid
                flags = eccodes.codes_get(h, "resolutionAndComponentFlags")
                relative = name in ("u10", "v10") and bool(flags & 8)
                if relative and grid not in _EARTH_ALIGNED:
                    raise ForcingReadError(
                        f"forcing file {path!r}: {name} is relative to its {grid} grid "
                        "(resolution and component flags); expected earth-relative winds; hint: "
                        "ask "
                        f"for earth-relative winds or convert them (e.g. with ecCodes tools)"
                    )
                kinds.add(
                    (
                        eccodes.codes_get(h, "shortName"),
                        eccodes.codes_get(h, "typeOfLevel"),
                        step_type,
                    )
                )
                if step_type in ("accum", "avg"):
                    eccodes.codes_set(h, "stepUnits", "h")
                    span = (eccodes.codes_get(h, "startStep"), eccodes.codes_get(h, "endStep"))
                    spans.setdefault(name, set()).add(span)
            finally:
                eccodes.codes_release(h)
    return sorted(kinds), {k: sorted(v, key=lambda s: s[1]) for k, v in spans.items()}


def _since_start(var, spans, step_type, path):
    """Values over output intervals turned into values since the reference time.

    Each message holds a sum (``accum``) or mean (``avg``) over its steps ``start-end``; its
    total since the start is the total at ``start`` (0, or the end of another message) plus
    its own amount. This covers intervals that follow one another (``5-6``) and buckets that
    restart every few hours (``0-3``, ``0-6``, ``6-9``, ``6-12``). Means are returned as
    means since the start.
    """
    if all(start == 0 for start, _ in spans):
        return var
    start_of = {end: start for start, end in spans}
    steps_h = var["step"].values / np.timedelta64(1, "h")
    at = {float(h): k for k, h in enumerate(steps_h)}
    axis = var.dims.index("step")
    values = np.moveaxis(np.asarray(var.values, dtype=np.float64), axis, 0)
    total = np.full_like(values, np.nan)
    chained = len(start_of) == len(spans) and all(s == 0 or s in start_of for s, _ in spans)
    if not chained:
        raise ForcingReadError(
            f"forcing file {path!r}, variable {var.name!r}: {step_type} intervals "
            f"{[f'{s}-{e}' for s, e in spans][:8]} h cannot be summed from the run start; "
            f"expected each interval to start at 0 or where another one ends"
        )
    for end in sorted(start_of):
        start = start_of[end]
        k = at[float(end)]
        amount = values[k] * ((end - start) if step_type == "avg" else 1.0)
        total[k] = amount + (0.0 if start == 0 else total[at[float(start)]])
    if step_type == "avg":
        total /= np.where(steps_h > 0, steps_h, np.nan).reshape((-1,) + (1,) * (values.ndim - 1))
    return var.copy(data=np.moveaxis(total, 0, axis).astype(var.dtype))


def open_grib(path: str):
    """The fields of one GRIB file as one in-memory dataset, and their mapping entries.

    Returns
    -------
    (dataset, mapping) : dims ([time,] [step,] y, x) as cfgrib names them.
    """
    from cfgrib.xarray_plugin import CfGribBackend

    try:
        kinds, spans = _scan(path)
        # one opening per kind of field; the index (in a scratch folder, never beside the
        # user's file) is built once; naming the backend class skips xarray's search of
        # every installed engine
        with tempfile.TemporaryDirectory(prefix="regionmap-grib-") as scratch:
            index = os.path.join(scratch, "grib.{short_hash}.idx")
            parts = [
                xr.open_dataset(
                    path,
                    engine=CfGribBackend,
                    indexpath=index,
                    filter_by_keys={"shortName": n, "typeOfLevel": lev, "stepType": st},
                ).load()
                for n, lev, st in kinds
            ]
    except ForcingReadError:
        raise
    except Exception as exc:
        raise ForcingReadError(
            f"forcing file {path!r} cannot be read as GRIB ({type(exc).__name__}: {exc})"
        ) from None
    merged = []
    for ds in parts:
        # single-level fields only (the same short name may also come on pressure levels)
        keep = [n for n in ds.data_vars if n in _FIELDS and set(ds[n].dims) <= set(_DATASET_KEYS)]
        if not keep:
            continue
        ds = ds[keep]
        # level coordinates (heightAboveGround = 2 or 10, surface) differ between parts
        scalar = [c for c in ds.coords if c not in ds.dims and c not in _DATASET_KEYS]
        if "step" not in ds.dims:
            scalar += [c for c in ("step", "valid_time") if c in ds.coords]
        ds = ds.drop_vars(scalar)
        for name in keep:
            step_type = ds[name].attrs.get("GRIB_stepType", "instant")
            if name in spans and "step" in ds[name].dims:
                ds[name] = _since_start(ds[name], spans[name], step_type, path)
        merged.append(ds)
    if not merged:
        raise ForcingReadError(
            f"forcing file {path!r}: no GRIB field the forcing uses; expected some of "
            f"{sorted(_FIELDS)} (ecCodes short names)"
        )
    ds = xr.merge(merged, join="outer", compat="override", combine_attrs="drop_conflicts")
    mapping = {}
    for name in ds.data_vars:
        entry = {"name": name, PRODUCT_KEY: "GRIB"}
        step_type = ds[name].attrs.get("GRIB_stepType", "instant")
        if _FIELDS[name] not in ("surface_altitude", "surface_geopotential"):
            entry["kind"] = _KIND.get(step_type, "instantaneous")
            entry["accumulated"] = step_type in ("accum", "avg")
        if _FIELDS[name].endswith("_amount") or _FIELDS[name].startswith("integral_"):
            entry["kind"] = "sum"
        mapping[_FIELDS[name]] = entry
    return ds, mapping

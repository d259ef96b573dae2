"""WRF ARW history output (``wrfout_d0N_*``) read as it is written.

What is taken from the files (Skamarock et al. 2019, "A Description of the Advanced Research
WRF Model Version 4", NCAR/TN-556+STR, doi:10.5065/1dfh-6p97, and the variables' own
``description`` attributes):

* times from ``Times`` (``YYYY-MM-DD_hh:mm:ss``), else ``XTIME`` (minutes since the start);
* the map projection from the global attributes ``MAP_PROJ`` (1 Lambert conformal,
  2 polar stereographic, 3 Mercator; 6 latitude-longitude is read through its 2-D
  ``XLAT``/``XLONG``), ``TRUELAT1``, ``TRUELAT2``, ``STAND_LON``, ``MOAD_CEN_LAT``, ``DX``,
  ``DY`` on WRF's sphere of radius 6 370 km; the grid's x/y come from projecting
  ``XLAT``/``XLONG`` (which carry a Time dimension) and must be regular to 5 % of DX;
* ``T2`` [K]; ``Q2`` a water-vapour mixing ratio [kg kg-1]; ``PSFC`` [Pa]; ``U10``/``V10``
  relative to the grid, turned to earth-relative with ``COSALPHA``/``SINALPHA``; ``SWDOWN``
  and ``GLW`` [W m-2] instantaneous at the output time (the radiation call's value held until
  the next call), not interval means; ``HGT`` [m] the model terrain;
* precipitation ``RAINNC + RAINC`` [mm] accumulated since the model start, plus
  ``bucket_mm`` × ``I_RAINNC``/``I_RAINC`` where the run used precipitation buckets
  (global attribute ``BUCKET_MM`` > 0).

Files of one run (the same ``SIMULATION_START_DATE``, restarts included: a restart carries the
accumulations on) are joined along time before the accumulation is taken apart, so nothing is
lost at file boundaries; a time written twice (a restart's first output) is taken from the
later file. A new run (another start date) is a separate series; later runs win where they
overlap.

The xwrf package (0.0.5) decodes times and projection coordinates the same way, but neither
folds buckets back, joins a split run nor refuses projection attributes that do not fit
XLAT/XLONG, so it would cover the easy half of this module for an extra dependency.
"""

from __future__ import annotations

import numpy as np
import xarray as xr
from pyproj import CRS, Transformer

from regionmap.errors import ForcingReadError
from regionmap.io.forcing_mapping import PRODUCT_KEY

__all__ = ["is_wrf", "wrf_runs", "WRF_EARTH_RADIUS_M"]

WRF_EARTH_RADIUS_M = 6370000.0
"""Radius of the sphere on which WRF's map projections are defined (WPS/WRF constants)."""
_MAPPED = "wrf_projection"
_ROTATION = ["COSALPHA", "SINALPHA"]


def is_wrf(ds: xr.Dataset) -> bool:
    """WRF history output: the map projection in the global attributes and WRF's grid."""
    return "MAP_PROJ" in ds.attrs and "XLAT" in ds.variables and "south_north" in ds.dims


def _times(ds, path):
    if "Times" in ds.variables:
        chars = np.ascontiguousarray(ds["Times"].values)
        if chars.ndim == 2:  # (Time, DateStrLen) characters
            chars = chars.astype("S1").view(f"S{chars.shape[1]}")[:, 0]
        text = np.char.decode(chars.astype("S19"), "ascii")
        try:
            return np.array([np.datetime64(t.replace("_", "T"), "s") for t in text])
        except ValueError:
            raise ForcingReadError(
                f"forcing file {path!r}, variable 'Times': expected YYYY-MM-DD_hh:mm:ss, got "
                f"{text[:3].tolist()}"
            ) from None
    if "XTIME" in ds.coords and np.issubdtype(ds["XTIME"].dtype, np.datetime64):
        return ds["XTIME"].values.astype("datetime64[s]")
    raise ForcingReadError(
        f"forcing file {path!r}: WRF output without 'Times' or a decodable 'XTIME'"
    )


def _projection(attrs, path) -> CRS | None:
    """pyproj CRS of WRF's MAP_PROJ and its parameters (None for MAP_PROJ 6, lat-lon)."""
    proj = int(attrs["MAP_PROJ"])
    try:
        t1, lon0 = float(attrs["TRUELAT1"]), float(attrs["STAND_LON"])
        sphere = {"a": WRF_EARTH_RADIUS_M, "b": WRF_EARTH_RADIUS_M, "units": "m"}
        if proj == 1:
            params = {"proj": "lcc", "lat_1": t1, "lat_2": float(attrs.get("TRUELAT2", t1))}
            params |= {"lat_0": float(attrs["MOAD_CEN_LAT"]), "lon_0": lon0}
        elif proj == 2:
            pole = 90.0 if t1 >= 0 else -90.0
            params = {"proj": "stere", "lat_0": pole, "lat_ts": t1, "lon_0": lon0}
        elif proj == 3:
            params = {"proj": "merc", "lat_ts": t1, "lon_0": lon0}
        elif proj == 6:
            return None
        else:
            raise ForcingReadError(
                f"forcing file {path!r}: WRF MAP_PROJ = {proj}; expected 1 (Lambert conformal), 2 "
                f"(polar stereographic), 3 (Mercator) or 6 (latitude-longitude)"
            )
    except KeyError as exc:
        raise ForcingReadError(
            f"forcing file {path!r}: WRF global attribute {exc.args[0]} is missing (needed for "
            f"MAP_PROJ = {proj})"
        ) from None
    return CRS.from_dict(params | sphere)


def _grid_coords(ds, crs, path):
    """Regular x/y [m] of the mass points from XLAT/XLONG projected with ``crs``."""
    lat = np.asarray(ds["XLAT"].values, dtype=np.float64)
    lon = np.asarray(ds["XLONG"].values, dtype=np.float64)
    lat, lon = lat.reshape(-1, *lat.shape[-2:])[0], lon.reshape(-1, *lon.shape[-2:])[0]
    to_xy = Transformer.from_crs(crs.geodetic_crs, crs, always_xy=True)
    px, py = (np.asarray(a) for a in to_xy.transform(lon, lat))
    x, y = px.mean(axis=0), py.mean(axis=1)
    dx = float(ds.attrs["DX"]) if "DX" in ds.attrs else float(np.diff(x).mean())
    dy = float(ds.attrs.get("DY", dx))
    spread = max(np.abs(px - x).max(), np.abs(py - y[:, None]).max())
    steps = np.r_[np.diff(x) - dx, np.diff(y) - dy] if x.size > 1 and y.size > 1 else [0.0]
    if spread > 0.05 * dx or np.abs(steps).max() > 0.05 * dx:
        raise ForcingReadError(
            f"forcing file {path!r}: XLAT/XLONG projected with MAP_PROJ = "
            f"{ds.attrs['MAP_PROJ']} are not a regular grid of DX = {dx:g} m (off by up to "
            f"{max(spread, np.abs(steps).max()):.0f} m); expected the projection attributes "
            f"of the run that wrote the file"
        )
    return x, y


def _normalised(ds, path):
    """One file with a valid-time coordinate, the projection as a CF grid mapping and the
    precipitation buckets folded back into the accumulations."""
    t = _times(ds, path)
    ds = ds.drop_vars([v for v in ("Times", "XTIME") if v in ds.variables])
    ds = ds.assign_coords(time=("Time", t.astype("datetime64[ns]")))
    crs = _projection(ds.attrs, path)
    lat, lon = ds["XLAT"], ds["XLONG"]
    ds = ds.drop_vars(["XLAT", "XLONG"])
    extra = {}
    if crs is None:  # MAP_PROJ 6: the 2-D latitude/longitude of the mass points
        for name, var, units in (("lat", lat, "degrees_north"), ("lon", lon, "degrees_east")):
            plain = var.isel({d: 0 for d in var.dims[:-2]}, drop=True)
            extra[name] = plain.assign_attrs(units=units)
    else:
        x, y = _grid_coords(xr.Dataset({"XLAT": lat, "XLONG": lon}, attrs=ds.attrs), crs, path)
        xy = {"units": "m"}
        extra["west_east"] = ("west_east", x, {"standard_name": "projection_x_coordinate", **xy})
        extra["south_north"] = (
            "south_north",
            y,
            {"standard_name": "projection_y_coordinate", **xy},
        )
    ds = ds.assign_coords(extra)
    bucket = float(ds.attrs.get("BUCKET_MM", -1.0))
    for name in ("RAINNC", "RAINC"):
        if name in ds and bucket > 0 and f"I_{name}" in ds:
            ds[name] = (ds[name] + bucket * ds[f"I_{name}"]).assign_attrs(ds[name].attrs)
    if crs is not None:
        ds[_MAPPED] = xr.DataArray(np.int32(0), attrs=crs.to_cf())
        for var in ds.data_vars.values():
            if var.dims[-2:] == ("south_north", "west_east"):
                var.attrs["grid_mapping"] = _MAPPED
    return ds


def wrf_runs(datasets, paths):
    """WRF files grouped into runs and joined along time.

    Returns
    -------
    (datasets, labels, mapping) : one dataset per run (sorted by start), a label naming its
    files for messages, and the mapping entries of the WRF variables present.
    """
    domains = {int(ds.attrs.get("GRID_ID", 1)) for ds in datasets}
    if len(domains) > 1:
        raise ForcingReadError(
            f"forcing {paths[0]!r}: WRF output of several domains {sorted(domains)}; expected "
            f"one; hint: choose one domain in [forcing] path, e.g. 'wrfout_d02_*'"
        )
    runs: dict[str, list] = {}
    for ds, p in zip(datasets, paths, strict=True):
        key = str(ds.attrs.get("SIMULATION_START_DATE", ""))
        runs.setdefault(key, []).append((_normalised(ds, p), p))
    out, labels = [], []
    for key in sorted(runs):
        parts = sorted(runs[key], key=lambda item: item[0]["time"].values[0])
        joined = xr.concat(
            [d for d, _ in parts],
            dim="Time",
            data_vars="minimal",
            coords="minimal",
            compat="override",
            join="override",
            combine_attrs="override",
        )
        t = joined["time"].values
        # a time written twice (a restart's first output): the later file's value
        last = t.size - 1 - np.unique(t[::-1], return_index=True)[1]
        joined = joined.isel(Time=np.sort(last))
        out.append(joined)
        names = [p for _, p in parts]
        labels.append(names[0] if len(names) == 1 else f"{names[0]} (+{len(names) - 1} files)")
    return out, labels, _mapping(out[0])


def _mapping(ds) -> dict:
    entries = {
        "air_temperature": {"name": "T2"},
        "specific_humidity": {"name": "Q2", "mixing_ratio": True},
        "surface_air_pressure": {"name": "PSFC"},
        "eastward_wind": {"name": "U10"},
        "northward_wind": {"name": "V10"},
        "surface_downwelling_shortwave_flux_in_air": {"name": "SWDOWN", "kind": "instantaneous"},
        "surface_downwelling_longwave_flux_in_air": {"name": "GLW", "kind": "instantaneous"},
        "precipitation_amount": {"name": ["RAINNC", "RAINC"], "accumulated": True},
        "surface_altitude": {"name": "HGT"},
    }
    if int(ds.attrs["MAP_PROJ"]) != 3:  # on a Mercator grid, grid north is true north
        for sn in ("eastward_wind", "northward_wind"):
            entries[sn]["rotation"] = list(_ROTATION)
    rain = [n for n in ("RAINNC", "RAINC") if n in ds]
    if rain:
        entries["precipitation_amount"]["name"] = rain
    else:
        del entries["precipitation_amount"]
    return {
        sn: {**e, PRODUCT_KEY: "WRF"}
        for sn, e in entries.items()
        if all(n in ds for n in ([e["name"]] if isinstance(e["name"], str) else e["name"]))
    }

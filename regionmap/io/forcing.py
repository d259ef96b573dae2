"""Read gridded NWP forcing (CF NetCDF or Zarr) into canonical, hourly, lazy arrays.

Products that are not CF (WRF output, GRIB, ERA5 NetCDF, forecast cycles) are first brought
to CF datasets on valid time by :mod:`regionmap.io.forcing_products`.

The conventions (docs/forcing.md):

* a time label closes its interval; interval means and sums come from ``time_bnds`` and
  ``cell_methods``; amounts accumulated since a reference time are recognised from bounds
  that share a start, or from ``accumulated = true`` in the mapping — never from values;
* every time transformation (de-accumulation, coarser → hourly, sub-hourly → hourly, later
  files winning) is one sparse linear operator per variable, built once from the time
  coordinates alone; amounts are conserved, states interpolated linearly;
* units are converted with pint (:mod:`regionmap.io.units`), never guessed.

Without ``time_bnds`` a label's interval starts at the previous label (the first label of an
accumulated series is then only the baseline of the next). Steps longer than 3 h without
bounds are gaps; with contiguous bounds, coarser steps up to 6 h are data by design.

Data checks (NaN runs, negative precipitation, RH above 100 %) are made by one pass over the
data at open time, so bad input fails before a long run and ``counts`` is known; the values
themselves stay lazy (dask) and are recomputed block by block when used.

CF has no standard name for a freezing-rain or precipitation-type field: map it with the key
``freezing_rain_frac`` (fraction of precipitation falling as freezing rain [1]). Upper-air
temperature is any ``air_temperature`` with a pressure dimension between time and the grid
(or the mapping key ``upper_air_temperature``).
"""

from __future__ import annotations

import glob as _glob
import os
import re
from dataclasses import dataclass, field

import cf_xarray  # noqa: F401  (registers the .cf accessor)
import dask
import dask.array as da
import numpy as np
import xarray as xr
from scipy import sparse

from regionmap.constants import GRAVITY_M_S2, ZERO_CELSIUS_K
from regionmap.downscale import thermo as _thermo
from regionmap.errors import ConfigError, ForcingReadError, GridMismatchError
from regionmap.io import forcing_mapping as M
from regionmap.io import forcing_products as P
from regionmap.io import units as U
from regionmap.io.forcing_grid import ForcingGrid, grid_from_dataset

__all__ = ["GridForcing", "open_forcing", "MAX_GAP_H", "NEGATIVE_PRECIP_TOL_KG_M2"]

MAX_GAP_H = 3
"""Longest run of missing hours that is filled by interpolation (and counted)."""
MAX_STATE_STEP_H = 6
"""Longest step between labels over which states are interpolated when bounds say so."""
NEGATIVE_PRECIP_TOL_KG_M2 = 0.05
"""De-accumulated amounts down to minus this are rounding noise: clipped to 0 and counted."""

_TARGET = {
    "air_temperature": "K",
    "relative_humidity": "1",
    "specific_humidity": "1",
    "dew_point_temperature": "K",
    "wind_speed": "m s-1",
    "wind_from_direction": "degree",
    "eastward_wind": "m s-1",
    "northward_wind": "m s-1",
    "surface_downwelling_shortwave_flux_in_air": "W m-2",
    "integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air": "J m-2",
    "surface_downwelling_longwave_flux_in_air": "W m-2",
    "integral_wrt_time_of_surface_downwelling_longwave_flux_in_air": "J m-2",
    "precipitation_flux": "kg m-2 s-1",
    "lwe_precipitation_rate": "kg m-2 s-1",
    "precipitation_amount": "kg m-2",
    "lwe_thickness_of_precipitation_amount": "kg m-2",
    "surface_air_pressure": "Pa",
    "freezing_rain_frac": "1",
    "upper_air_temperature": "K",
    "surface_altitude": "m",
    "surface_geopotential": "m2 s-2",
}
_TERRAIN = ("surface_altitude", "surface_geopotential")
_AMOUNTS = {
    "precipitation_amount",
    "lwe_thickness_of_precipitation_amount",
    "integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air",
    "integral_wrt_time_of_surface_downwelling_longwave_flux_in_air",
}
_FLUXES = {
    "precipitation_flux",
    "lwe_precipitation_rate",
    "surface_downwelling_shortwave_flux_in_air",
    "surface_downwelling_longwave_flux_in_air",
    "freezing_rain_frac",
}
# role -> alternatives (tuples of standard names that together provide it)
_ROLES = {
    "air_temperature": [("air_temperature",)],
    "humidity": [("relative_humidity",), ("specific_humidity",), ("dew_point_temperature",)],
    "wind": [("wind_speed", "wind_from_direction"), ("eastward_wind", "northward_wind")],
    "shortwave": [
        ("surface_downwelling_shortwave_flux_in_air",),
        ("integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air",),
    ],
    "precipitation": [
        ("precipitation_flux",),
        ("precipitation_amount",),
        ("lwe_thickness_of_precipitation_amount",),
        ("lwe_precipitation_rate",),
    ],
    "longwave": [
        ("surface_downwelling_longwave_flux_in_air",),
        ("integral_wrt_time_of_surface_downwelling_longwave_flux_in_air",),
    ],
    "pressure": [("surface_air_pressure",)],
    "freezing_rain": [("freezing_rain_frac",)],
    "upper_air": [("upper_air_temperature",)],
}
_OPTIONAL = {"longwave", "pressure", "freezing_rain", "upper_air"}
_OUTPUTS = {  # canonical output -> roles it needs
    "air_temperature": ("air_temperature",),
    "relative_humidity": ("humidity", "air_temperature", "pressure"),
    "surface_air_pressure": ("pressure",),
    "wind_speed": ("wind",),
    "wind_from_direction": ("wind",),
    "shortwave_down": ("shortwave",),
    "longwave_down": ("longwave",),
    "precipitation": ("precipitation",),
    "freezing_rain_frac": ("freezing_rain",),
    "upper_air_temperature": ("upper_air",),
}
_OUT_UNITS = {
    "air_temperature": "K",
    "relative_humidity": "1",
    "surface_air_pressure": "Pa",
    "wind_speed": "m s-1",
    "wind_from_direction": "degree",
    "shortwave_down": "W m-2",
    "longwave_down": "W m-2",
    "precipitation": "kg m-2",
    "freezing_rain_frac": "1",
    "upper_air_temperature": "K",
}
_H = 3600


@dataclass
class _Source:
    """One input variable across all files, with its conversion and time operator."""

    standard_name: str
    names: list[str]  # variable name in each file
    paths: list[str]
    data: da.Array  # files concatenated along native time, (time, [level], y, x)
    scale: float
    offset: float
    kind: str  # "point" or "interval"
    file_of: np.ndarray  # native index -> file index
    t_all: np.ndarray  # native labels [s since epoch]
    level_pa: np.ndarray | None = None
    accumulated: bool = False  # summed since a reference time ([forcing] mapping)
    D: sparse.csr_matrix | None = None  # native values -> native amounts (interval kind)
    S: sparse.csr_matrix | None = None  # native (amounts) -> hourly
    covered: np.ndarray | None = None
    hours: np.ndarray | None = None

    def label(self) -> str:
        return f"forcing file {self.paths[0]!r}, variable {self.names[0]!r} ({self.standard_name})"


@dataclass
class GridForcing:
    """Canonical hourly forcing on the model grid (time label = end of interval).

    Attributes
    ----------
    time : ndarray (time,) datetime64[s]
    air_temperature, relative_humidity, surface_air_pressure, wind_speed,
    wind_from_direction, shortwave_down, precipitation : xarray.DataArray (time, y, x) float32
        [K], [1], [Pa], [m s-1], [deg, from, 0 = N], [W m-2 interval mean], [kg m-2 per hour].
    longwave_down, freezing_rain_frac : DataArray (time, y, x) or None
        [W m-2 interval mean]; liquid share falling as freezing rain [1].
    upper_air_temperature : DataArray (time, level, y, x) or None, with
        ``upper_air_pressure_pa`` (level,) [Pa].
    surface_altitude : ndarray (y, x) float64 [m]
    grid : :class:`ForcingGrid` (``lon``, ``lat``, ``crs``, native ``x``/``y``)
    heights_m : dict ``{"wind": m, "temperature": m}`` and ``heights_source``.
    counts : dict for run.json: ``gap_hours_filled``, ``nan_filled``,
        ``negative_precip_clipped``, ``rh_clipped``.
    reads : int — number of :meth:`read_block` calls (tests check reads per time block).
    """

    time: np.ndarray
    air_temperature: xr.DataArray
    relative_humidity: xr.DataArray
    surface_air_pressure: xr.DataArray
    wind_speed: xr.DataArray
    wind_from_direction: xr.DataArray
    shortwave_down: xr.DataArray
    longwave_down: xr.DataArray | None
    precipitation: xr.DataArray
    surface_altitude: np.ndarray
    grid: ForcingGrid
    heights_m: dict
    heights_source: str
    counts: dict
    paths: list[str]
    upper_air_temperature: xr.DataArray | None = None
    upper_air_pressure_pa: np.ndarray | None = None
    freezing_rain_frac: xr.DataArray | None = None
    reads: int = 0
    points_read: int = 0
    _sources: dict = field(default_factory=dict, repr=False)

    # geometry pass-throughs
    @property
    def lon(self) -> np.ndarray:
        return self.grid.lon

    @property
    def lat(self) -> np.ndarray:
        return self.grid.lat

    @property
    def crs(self):
        return self.grid.crs

    def grid_index_of(self, lon, lat):
        """Fractional (row along y, column along x) indices of points; NaN outside."""
        return self.grid.index_of(lon, lat)

    def extent_lonlat(self):
        """(lon_min, lon_max, lat_min, lat_max) of the grid points [deg]."""
        return self.grid.extent_lonlat()

    def check_covers(self, lon, lat) -> None:
        """Raise GridMismatchError unless every point lies inside the grid (4 neighbours)."""
        self.grid.check_covers(lon, lat, where=self.paths[0])

    @property
    def available(self) -> list[str]:
        return [n for n in _OUTPUTS if getattr(self, n) is not None]

    def read_block(self, names, iy, ix, time_slice=slice(None)) -> dict:
        """Read canonical series for some grid points over a block of hours.

        Only the file chunks that hold these points, and only the native time steps the
        block needs (plus a few hours of margin for gap filling), are read.

        Parameters
        ----------
        names : sequence of str — canonical names (see :attr:`available`).
        iy, ix : int arrays (point,) — grid row and column of each point.
        time_slice : slice of hourly indices into :attr:`time`.

        Returns
        -------
        dict name -> float32 ndarray (time, point); ``upper_air_temperature`` is
        (time, level, point).
        """
        iy = np.asarray(iy, dtype=np.intp)
        ix = np.asarray(ix, dtype=np.intp)
        n_h = self.time.size
        start, stop, step = time_slice.indices(n_h)
        if step != 1:
            raise ValueError("read_block takes a contiguous time slice")
        lo, hi = max(0, start - MAX_GAP_H - 1), min(n_h, stop + MAX_GAP_H + 1)
        rows = np.arange(lo, hi)
        self.reads += 1
        self.points_read += iy.size * len(names)
        alt = self.surface_altitude[iy, ix]
        out, _ = _compute(
            self._sources, list(names), rows, alt, lambda s, cols: _read_points(s, cols, iy, ix)
        )
        cut = slice(start - lo, stop - lo)
        return {k: v[cut] for k, v in out.items()}


# ----------------------------------------------------------------------------- opening


def open_forcing(
    path_or_glob,
    *,
    variables=None,
    heights_m=None,
    start=None,
    end=None,
    static_path=None,
    base_dir=None,
) -> GridForcing:
    """Open CF NetCDF/Zarr forcing (one file or a glob) as canonical hourly arrays.

    Parameters
    ----------
    path_or_glob : str or path, or a ``[forcing]`` settings object
        A file, a Zarr store or a glob; sorted, later files win where times overlap. A
        settings object (with ``path``, ``variables``, ``heights_m``, ``start``, ``end``,
        ``static``) supplies all options at once.
    variables : mapping, optional
        ``{standard_name: {name=, units=, accumulated=}}``; also the keys
        ``freezing_rain_frac`` and ``upper_air_temperature``. ``None``: by standard_name only.
    heights_m : mapping, optional
        ``{"wind": m, "temperature": m}`` where the file has no ``height`` coordinates.
    start, end : datetime-like, optional
        First and last hourly label wanted; ``None``: what all variables cover.
    static_path : path, optional
        File with ``surface_altitude`` or ``surface_geopotential``.
    base_dir : path, optional
        Directory that relative paths are relative to (the config file's).

    Raises
    ------
    ForcingReadError, ConfigError, GridMismatchError
    """
    if hasattr(path_or_glob, "path") and not isinstance(path_or_glob, (str, os.PathLike)):
        s = path_or_glob
        return open_forcing(
            s.path,
            variables=s.variables,
            heights_m=s.heights_m,
            start=s.start,
            end=s.end,
            static_path=getattr(s, "static", None),
            base_dir=base_dir,
        )
    M.normalise_mapping(variables, _TARGET)  # config errors before any file is opened
    files = _expand(path_or_glob, base_dir)
    opened = P.open_products(files, _open_one)
    datasets, paths = opened.datasets, opened.paths  # paths: a label per dataset
    if static_path is not None:
        static = P.open_products(_expand(static_path, base_dir)[:1], _open_one)
        opened.implied.update({k: v for k, v in static.implied.items() if k in _TERRAIN})
    mapping = M.normalise_mapping(variables, _TARGET, opened.implied)
    tnames = [_time_coord(ds, p) for ds, p in zip(datasets, paths, strict=True)]
    tdims = [ds[tn].dims[0] for ds, tn in zip(datasets, tnames, strict=True)]
    times = [_file_times(ds, tn, p) for ds, tn, p in zip(datasets, tnames, paths, strict=True)]

    chosen = {}
    for role, alternatives in _ROLES.items():
        found = _resolve_role(role, alternatives, datasets, paths, mapping, heights_m)
        if found is None:
            if role in _OPTIONAL:
                continue
            _missing(role, alternatives, datasets[0], paths[0])
        chosen[role] = found
    ref = chosen["air_temperature"][0]
    ydim, xdim = ref[1][0].dims[-2:]
    grid = grid_from_dataset(datasets[0], ref[1][0], paths[0])
    shape = (datasets[0].sizes[ydim], datasets[0].sizes[xdim])

    sources = {}
    for role, members in chosen.items():
        sources[role] = [
            _make_source(sn, das, paths, times, tdims, (ydim, xdim), shape, mapping)
            for sn, das in members
        ]
    if static_path is not None:
        datasets, paths = static.datasets, static.paths
    alt = _surface_altitude(datasets, paths, shape, mapping)

    wide = _wide_axis(times)
    for members in sources.values():
        for s in members:
            _build_operator(s, times, wide)
    hours = _final_axis(sources, wide, start, end, paths)
    gap_hours = _check_gaps(sources, hours)
    heights, height_src = _heights(chosen, heights_m)
    counts = _validate(sources, alt, hours.size)
    counts["gap_hours_filled"] = gap_hours
    arrays = {name: _lazy(sources, name, alt, hours) for name in _OUTPUTS}
    up = sources.get("upper_air")
    return GridForcing(
        time=hours.astype("datetime64[s]"),
        surface_altitude=alt,
        grid=grid,
        heights_m=heights,
        heights_source=height_src,
        counts=counts,
        paths=files,
        upper_air_pressure_pa=None if up is None else up[0].level_pa,
        _sources=sources,
        **arrays,
    )


def _expand(path_or_glob, base_dir) -> list[str]:
    text = os.fspath(path_or_glob)
    if base_dir is not None and not os.path.isabs(text):
        text = os.path.join(os.fspath(base_dir), text)
    if any(c in text for c in "*?["):
        paths = sorted(_glob.glob(text))
        if not paths:
            raise ForcingReadError(f"forcing: no file matches {text!r}; check [forcing] path")
        return paths
    if not os.path.exists(text):
        raise ForcingReadError(f"forcing file {text!r} does not exist; check [forcing] path")
    return [text]


def _open_one(path: str) -> xr.Dataset:
    """Open lazily with one dask chunk along time (the time operators need the whole axis)."""

    def open_(chunks):
        if path.rstrip("/").endswith(".zarr") or os.path.isdir(path):
            consolidated = os.path.exists(os.path.join(path, ".zmetadata"))
            return xr.open_zarr(path, chunks=chunks, consolidated=consolidated)
        # the engine named: guessing it imports every installed xarray backend plugin
        return xr.open_dataset(path, engine="netcdf4", chunks=chunks, decode_timedelta=False)

    try:
        probe = open_(None)
        tdims = [
            c.dims[0]
            for c in probe.coords.values()
            if c.ndim == 1 and np.issubdtype(c.dtype, np.datetime64)
        ]
        probe.close()
        return open_({tdims[0]: -1} if tdims else {})
    except Exception as exc:
        raise ForcingReadError(
            f"forcing file {path!r} cannot be opened as NetCDF or Zarr ({type(exc).__name__}: "
            f"{exc})"
        ) from None


_TIME_NAMES = ("time", "valid_time", "XTIME", "Time", "t")
"""Names that products give their valid-time coordinate (CF, ERA5/cfgrib, WRF)."""
_REFERENCE_TIME = ("forecast_reference_time", "reference_time")


def _time_coord(ds: xr.Dataset, path: str) -> str:
    """The name of the valid-time coordinate, found by meaning: CF axis T (cf_xarray),
    ``standard_name = time`` or a product's known name — never a dimension's index."""
    found = [
        str(name)
        for name, c in ds.coords.items()
        if c.ndim == 1
        and np.issubdtype(c.dtype, np.datetime64)
        and c.attrs.get("standard_name") not in _REFERENCE_TIME
    ]
    if not found:
        raise ForcingReadError(
            f"forcing file {path!r}: no decodable time coordinate (CF units 'hours since ...' "
            f"expected)"
        )
    axis_t = set(ds.cf.axes.get("T", [])) | set(ds.cf.coordinates.get("time", []))

    def rank(name):
        c = ds[name]
        known = _TIME_NAMES.index(name) if name in _TIME_NAMES else len(_TIME_NAMES)
        return (name not in axis_t, c.attrs.get("standard_name") != "time", known)

    return min(found, key=rank)


def _file_times(ds, tname, path):
    """Labels and (optional) bounds in int64 seconds; checks order and duplicates."""
    t = ds[tname].values.astype("datetime64[s]").astype(np.int64)
    d = np.diff(t)
    if np.any(d <= 0):
        k = int(np.argmax(d <= 0))
        what = "duplicated" if d[k] == 0 else "not increasing"
        raise ForcingReadError(
            f"forcing file {path!r}, variable {tname!r}: times are {what} at "
            f"{np.datetime64(int(t[k + 1]), 's')} (after {np.datetime64(int(t[k]), 's')}); "
            f"expected strictly increasing labels; hint: sort the file or drop duplicates"
        )
    bname = ds[tname].attrs.get("bounds") or ds[tname].encoding.get("bounds")
    bounds = None
    if bname and bname in ds:
        bounds = ds[bname].values.astype("datetime64[s]").astype(np.int64)
        if bounds.shape != (t.size, 2) or np.any(bounds[:, 1] != t) or np.any(bounds[:, 0] >= t):
            raise ForcingReadError(
                f"forcing file {path!r}, variable {bname!r}: time bounds must be (time, 2) with "
                f"the label as the interval end; hint: relabel to interval ends"
            )
    return {"t": t, "bounds": bounds, "path": path}


def _squeezed(var):
    """Drop length-1 dimensions between time and the grid (a 2 m level stored as a dim)."""
    return var.squeeze([d for d in var.dims[1:-2] if var.sizes[d] == 1])


def _candidates(ds, sn):
    return [_squeezed(ds[v]) for v in ds.cf.standard_names.get(sn, []) if v in ds.data_vars]


def _vertical_dims(var):
    return list(var.dims[1:-2])


def _height_of(var):
    """The variable's own scalar height coordinate [m] (CF: named in its ``coordinates``)."""
    own = str(var.encoding.get("coordinates") or var.attrs.get("coordinates") or "").split()
    found = [
        c
        for c in var.coords.values()
        if c.ndim == 0
        and (c.attrs.get("standard_name") == "height" or str(c.name).startswith("height"))
    ]
    mine = [c for c in found if c.name in own] or (found if len(found) == 1 else [])
    return float(mine[0].values) if mine else None


def _pick(sn, cands, path, want_height, upper):
    """Choose among variables sharing a standard name."""
    cands = [c for c in cands if bool(_vertical_dims(c)) == upper]
    if len(cands) <= 1:
        return cands[0] if cands else None
    if want_height is not None:
        hit = [
            c
            for c in cands
            if _height_of(c) is not None and abs(_height_of(c) - want_height) < 1e-6
        ]
        if len(hit) == 1:
            return hit[0]
    listing = ", ".join(f"{c.name} (height {_height_of(c)})" for c in cands)
    raise ForcingReadError(
        f"forcing file {path!r}: several variables have standard_name {sn!r}: {listing}; "
        f"expected one, or a scalar 'height' coordinate matching [forcing] heights_m; hint: "
        f"set heights_m or map the variable by name in [forcing] variables"
    )


def _resolve_role(role, alternatives, datasets, paths, mapping, heights_m):
    want = _hget(heights_m, "wind" if role == "wind" else "temperature")
    for alt in M.ranked_alternatives(alternatives, mapping):
        per_sn = []
        for sn in alt:
            das = []
            for ds, p in zip(datasets, paths, strict=True):
                if sn in mapping:
                    das.append(_squeezed(M.mapped_variable(ds, sn, mapping, p)))
                    continue
                if sn in ("freezing_rain_frac", "upper_air_temperature"):
                    das.append(
                        _pick("air_temperature", _candidates(ds, "air_temperature"), p, None, True)
                        if sn == "upper_air_temperature"
                        else None
                    )
                    continue
                das.append(_pick(sn, _candidates(ds, sn), p, want, False))
            if any(d is None for d in das):
                if not all(d is None for d in das):
                    k = [d is None for d in das].index(True)
                    raise ForcingReadError(
                        f"forcing file {paths[k]!r}: variable with standard_name "
                        f"{sn!r} is missing but present in {paths[0]!r}"
                    )
                break
            per_sn.append((sn, das))
        else:
            return per_sn
    return None


def _missing(role, alternatives, ds, path):
    alts = " or ".join(" + ".join(a) for a in alternatives)
    raise ForcingReadError(
        f"forcing file {path!r}: no variable for {role}: expected standard_name {alts}; found "
        f"standard names {sorted(ds.cf.standard_names)} and variables {sorted(ds.data_vars)}; "
        f"hint: map the file's names in [forcing] variables"
    )


def _hget(obj, key):
    if obj is None:
        return None
    return obj.get(key) if isinstance(obj, dict) else getattr(obj, key, None)


def _heights(chosen, heights_m):
    heights, source = {}, "file"
    for key, role in (("temperature", "air_temperature"), ("wind", "wind")):
        h_file = _height_of(chosen[role][0][1][0])
        h_arg = _hget(heights_m, key)
        if h_file is not None and h_arg is not None and abs(h_file - float(h_arg)) > 1e-6:
            raise ConfigError(
                f"[forcing] heights_m.{key} = {h_arg} m but the file's 'height' "
                f"coordinate says {h_file} m; hint: drop heights_m.{key}"
            )
        if h_file is None and h_arg is None:
            source = "standard exposure (WMO: 2 m temperature, 10 m wind)"
        elif h_file is None and source == "file":
            source = "[forcing] heights_m"
        heights[key] = (
            h_file
            if h_file is not None
            else float(h_arg if h_arg is not None else (2.0 if key == "temperature" else 10.0))
        )
    return heights, source


def _cell_method(var) -> str | None:
    m = re.search(r"time\s*:\s*(\w+)", str(var.attrs.get("cell_methods", "")))
    return m.group(1) if m else None


def _make_source(sn, das, paths, times, tdims, spatial, shape, mapping):
    entry = mapping.get(sn, {})
    var = das[0]
    # a mixing ratio arrives converted to specific humidity [1]
    units = var.attrs.get("units") if entry.get("mixing_ratio") else None
    units = units or entry.get("units") or var.attrs.get("units")
    sn = M.with_kind(sn, entry, units, _TARGET) if entry else sn
    where = f"forcing file {paths[0]!r}, variable {var.name!r} ({sn})"
    if units is None:
        raise ForcingReadError(
            f"{where}: no 'units' attribute; expected units convertible to "
            f"{_TARGET[sn]!r}; hint: give units in [forcing] variables.{sn}"
        )
    try:
        scale, offset = U.affine_conversion(units, _TARGET[sn])
    except U.UnitsProblem as exc:
        raise ForcingReadError(
            f"{where}: {exc}; expected units convertible to {_TARGET[sn]!r}; "
            f"hint: fix the attribute or set units in [forcing] variables"
        ) from None
    method = M.KINDS[entry["kind"]] if entry.get("kind") else _cell_method(var)
    if method == "point" and sn in _AMOUNTS:
        raise ForcingReadError(
            f'{where}: an amount cannot be instantaneous; expected kind = "sum" (or a flux '
            f'standard name with kind = "instantaneous")'
        )
    kind = "interval" if sn in _AMOUNTS or sn in _FLUXES else "point"
    if method == "point" and sn in _FLUXES:
        kind = "point"
    if method not in (None, "point", "mean", "sum"):
        raise ForcingReadError(
            f"{where}: cell_methods 'time: {method}' cannot be used; expected "
            f"time: mean, sum or point"
        )
    blocks, level_pa = [], None
    for d, p, td in zip(das, paths, tdims, strict=True):
        if d.dims[-2:] != spatial or tuple(d.shape[-2:]) != shape or d.dims[0] != td:
            raise GridMismatchError(
                f"forcing file {p!r}, variable {d.name!r}: dims {d.dims} "
                f"{d.shape}; expected (time, [level,] {spatial[0]}, "
                f"{spatial[1]}) with grid {shape}"
            )
        blocks.append(d.data if isinstance(d.data, da.Array) else da.from_array(d.data))
    if sn == "upper_air_temperature":
        level_pa = _level_pressure(das[0], paths[0])
    file_of = np.concatenate([np.full(t["t"].size, k) for k, t in enumerate(times)])
    t_all = np.concatenate([t["t"] for t in times])
    return _Source(
        sn,
        [d.name for d in das],
        paths,
        da.concatenate(blocks, axis=0),
        scale,
        offset,
        kind,
        file_of,
        t_all,
        level_pa,
        accumulated=bool(entry.get("accumulated", False)),
    )


def _level_pressure(var, path):
    lev = var[var.dims[1]]
    try:
        scale, offset = U.affine_conversion(lev.attrs.get("units", ""), "Pa")
    except U.UnitsProblem:
        raise ForcingReadError(
            f"forcing file {path!r}, variable {var.name!r}: vertical coordinate "
            f"{lev.name!r} must be pressure (units Pa or hPa), got "
            f"{lev.attrs.get('units')!r}"
        ) from None
    return lev.values.astype(np.float64) * scale + offset


def _surface_altitude(datasets, paths, shape, mapping):
    ds, p = datasets[0], paths[0]
    factors = {"surface_altitude": 1.0, "surface_geopotential": 1 / GRAVITY_M_S2}
    for (sn,) in M.ranked_alternatives([(sn,) for sn in factors], mapping):
        factor, entry = factors[sn], mapping.get(sn, {})
        mapped = entry and all(n in ds for n in M.names_of(entry))
        cands = [M.mapped_variable(ds, sn, mapping, p)] if mapped else _candidates(ds, sn)
        if not cands:
            continue
        var = cands[0]
        try:
            scale, offset = U.affine_conversion(
                entry.get("units") or var.attrs.get("units", ""), _TARGET[sn]
            )
        except U.UnitsProblem as exc:
            raise ForcingReadError(
                f"forcing file {p!r}, variable {var.name!r} ({sn}): {exc}"
            ) from None
        while var.ndim > 2:
            var = var.isel({var.dims[0]: 0})
        if tuple(var.shape) != shape:
            raise GridMismatchError(
                f"static file {p!r}, variable {var.name!r}: grid {var.shape}, "
                f"expected {shape} like the forcing"
            )
        return (np.asarray(var.values, dtype=np.float64) * scale + offset) * factor
    raise ForcingReadError(
        f"forcing file {p!r}: no model terrain: expected standard_name "
        f"surface_altitude or surface_geopotential; hint: give [forcing] static"
    )


# ------------------------------------------------------------------------ time operators


def _wide_axis(times):
    lo = min(int(t["t"][0]) if t["bounds"] is None else int(t["bounds"][0, 0]) for t in times)
    lo -= MAX_STATE_STEP_H * _H
    hi = max(int(t["t"][-1]) for t in times)
    return np.arange(-(-lo // _H) * _H, (hi // _H) * _H + 1, _H, dtype=np.int64)


def _native_intervals(tinfo, accumulated, where):
    """Per native step: start of its value's interval, same-run flag, start of its own
    interval after de-accumulation, and whether it defines an interval at all."""
    t, b = tinfo["t"], tinfo["bounds"]
    if b is not None:
        starts = b[:, 0]
        same = np.r_[False, starts[1:] == starts[:-1]]
        if accumulated and not same.any() and t.size > 1:
            raise ForcingReadError(
                f"{where}: accumulated = true in [forcing] variables but the "
                f"time bounds do not share a start; hint: drop accumulated"
            )
        return starts, same, np.where(same, np.r_[t[0], t[:-1]], starts), np.ones(t.size, bool)
    prev = np.r_[t[0] - (t[1] - t[0] if t.size > 1 else _H), t[:-1]]
    if accumulated:  # one run from the first label, which is the baseline only
        same = np.r_[False, np.ones(t.size - 1, bool)]
        return np.full(t.size, t[0]), same, prev, same
    return prev, np.zeros(t.size, bool), prev, np.ones(t.size, bool)


def _build_operator(s: _Source, times, hours):
    """Sparse operators native -> hourly (``S``) and values -> amounts (``D``).

    Amounts are spread over the hours they overlap in proportion to the overlap, so every
    interval's amount is conserved; states are linear in time between labels. An hour is
    owned by the last file that covers it whole (later files win).
    """
    acc = s.accumulated
    n_native, n_h = s.file_of.size, hours.size
    offsets = np.r_[0, np.cumsum([t["t"].size for t in times])]
    owner = np.full(n_h, -1)
    parts, d_parts = [], []
    for k, tinfo in enumerate(times):
        t, off = tinfo["t"], offsets[k]
        where = f"forcing file {tinfo['path']!r}, variable {s.names[k]!r}"
        step = np.diff(t)
        limit = (MAX_STATE_STEP_H if tinfo["bounds"] is not None else MAX_GAP_H) * _H
        if step.size and step.max() > limit:
            j = int(np.argmax(step))
            raise ForcingReadError(
                f"{where}: a step of {step[j] / _H:g} h ({step[j] / _H - 1:g} h missing) after "
                f"{np.datetime64(int(t[j]), 's')}; expected steps of at most {limit // _H} h; "
                "hint: fill the gap, or give time_bnds when the "
                f"file is coarser by design"
            )
        idx = np.arange(t.size)
        if s.kind == "point":
            h = np.flatnonzero((hours >= t[0]) & (hours <= t[-1]))
            owner[h] = k
            continue
        starts, same, begin, valid = _native_intervals(tinfo, acc, where)
        basis = np.ones(t.size) if s.standard_name in _AMOUNTS else (t - starts).astype(np.float64)
        prev = np.maximum(idx - 1, 0)
        d_parts.append(
            (
                np.r_[idx, idx[same]] + off,
                np.r_[idx, prev[same]] + off,
                np.r_[basis, -basis[prev][same]],
            )
        )
        a, b, gi = begin[valid], t[valid], (idx + off)[valid]
        h_first = -(-(a + 1) // _H) * _H
        nk = ((-(-b // _H) * _H - h_first) // _H + 1).astype(np.int64)
        rep = np.repeat(np.arange(a.size), nk)
        hl = h_first[rep] + (np.arange(rep.size) - np.repeat(np.cumsum(nk) - nk, nk)) * _H
        ov = (np.minimum(b[rep], hl) - np.maximum(a[rep], hl - _H)).astype(np.float64)
        keep = (ov > 0) & (hl >= hours[0]) & (hl <= hours[-1])
        hrow = (hl[keep] - hours[0]) // _H
        cover = np.bincount(hrow, weights=ov[keep], minlength=n_h)
        owner[np.isclose(cover, _H)] = k
        parts.append((hrow, gi[rep][keep], (ov / (b - a)[rep])[keep], np.full(hrow.size, k)))
    if s.kind == "point":
        parts = []
        for k, tinfo in enumerate(times):
            h, t = np.flatnonzero(owner == k), tinfo["t"]
            if t.size == 1:
                parts.append((h, np.full(h.size, offsets[k]), np.ones(h.size), None))
                continue
            j = np.clip(np.searchsorted(t, hours[h], side="right") - 1, 0, t.size - 2)
            w = (hours[h] - t[j]) / (t[j + 1] - t[j])
            parts.append((np.r_[h, h], np.r_[j, j + 1] + offsets[k], np.r_[1 - w, w], None))
    else:
        parts = [(r[o], c[o], v[o], None) for r, c, v, f in parts for o in [owner[r] == f]]
        r, c, v = (np.concatenate(x) for x in zip(*d_parts, strict=True))
        s.D = sparse.csr_matrix((v, (r, c)), shape=(n_native, n_native))
    r, c, v = (np.concatenate([p[i] for p in parts]) if parts else np.empty(0) for i in range(3))
    S = sparse.csr_matrix(
        (v.astype(np.float64), (r.astype(np.int64), c.astype(np.int64))), shape=(n_h, n_native)
    )
    S.eliminate_zeros()
    s.S, s.covered = S, owner >= 0


def _final_axis(sources, wide, start, end, paths):
    """Hours covered by every variable, cut to [start, end]; operators cut alike."""
    lo, hi = 0, wide.size - 1
    for members in sources.values():
        for s in members:
            cov = np.flatnonzero(s.covered)
            if cov.size == 0:
                raise ForcingReadError(f"{s.label()}: covers no whole hour")
            lo, hi = max(lo, cov[0]), min(hi, cov[-1])
    for val, name in ((start, "start"), (end, "end")):
        if val is None:
            continue
        v = int(np.datetime64(val, "s").astype(np.int64))
        k = int((v - wide[0]) // _H) if name == "end" else int(-(-(v - wide[0]) // _H))
        if not lo <= k <= hi:
            raise ForcingReadError(
                f"forcing {paths[0]!r}: [forcing] {name} = {np.datetime64(v, 's')} lies outside "
                "the "
                f"hours every variable covers, {np.datetime64(int(wide[lo]), 's')} .. "
                f"{np.datetime64(int(wide[hi]), 's')}; hint: change [forcing] {name}"
            )
        lo, hi = (k, hi) if name == "start" else (lo, k)
    if hi < lo:
        raise ForcingReadError(f"forcing {paths[0]!r}: no whole hour is covered by all variables")
    for members in sources.values():
        for s in members:
            s.S, s.covered, s.hours = s.S[lo : hi + 1], s.covered[lo : hi + 1], wide[lo : hi + 1]
    return wide[lo : hi + 1]


def _check_gaps(sources, hours) -> int:
    """Uncovered hours: runs longer than MAX_GAP_H fail; shorter ones are counted."""
    missing = np.zeros(hours.size, bool)
    for members in sources.values():
        for s in members:
            run, (at, _) = _longest_run(~s.covered[:, None])
            if run > MAX_GAP_H:
                raise ForcingReadError(
                    f"{s.label()}: {run} h without data from "
                    f"{np.datetime64(int(hours[at]) - _H, 's')} "
                    f"(files {s.paths}); expected gaps of at most {MAX_GAP_H} h; hint: fill the "
                    f"forcing or choose [forcing] start/end around the gap"
                )
            missing |= ~s.covered
    return int(missing.sum())


# --------------------------------------------------------------------------- computation


def _longest_run(mask):
    """Longest run of True along axis 0 of a (time, point) mask, and (start, point)."""
    if not mask.any():
        return 0, (0, 0)
    idx = np.arange(mask.shape[0])[:, None]
    length = np.where(mask, idx - np.maximum.accumulate(np.where(~mask, idx, -1), axis=0), 0)
    t_end, p = divmod(int(np.argmax(length)), mask.shape[1])
    run = int(length[t_end, p])
    return run, (t_end - run + 1, p)


def _fill_nan(y):
    """Linear interpolation along time over NaN runs (persistence at the ends)."""
    bad = np.isnan(y)
    if not bad.any():
        return y
    n = y.shape[0]
    idx = np.arange(n)[:, None]
    prev = np.maximum.accumulate(np.where(~bad, idx, -1), axis=0)
    nxt = np.minimum.accumulate(np.where(~bad, idx, n)[::-1], axis=0)[::-1]
    cols = np.broadcast_to(np.arange(y.shape[1]), y.shape)
    yp, yn = y[np.clip(prev, 0, n - 1), cols], y[np.clip(nxt, 0, n - 1), cols]
    yp, yn = np.where(prev < 0, yn, yp), np.where(nxt >= n, yp, yn)
    w = np.where((prev >= 0) & (nxt < n), (idx - prev) / np.maximum(nxt - prev, 1), 0.0)
    return np.where(bad, yp + w * (yn - yp), y)


def _series(s: _Source, rows, reader, stats, fn=None):
    """Hourly float64 series (rows, [level,] point) of one source: converted, brought to
    hourly, gap-filled and checked. ``fn`` (optional) maps converted values first."""
    S = s.S[rows]
    need = np.unique(S.indices)
    D = s.D[need] if s.kind == "interval" else None
    raw_cols = np.unique(D.indices) if D is not None else need
    x = reader(s, raw_cols).astype(np.float64) * s.scale + s.offset
    if fn is not None:
        x = fn(x)
    rest = x.shape[1:]
    x = x.reshape(x.shape[0], -1)
    if D is None:
        y = S[:, raw_cols] @ x
    else:
        amount = D[:, raw_cols] @ x
        if "precipitation" in s.standard_name and amount.size:
            worst = np.nanmin(amount, initial=0.0)
            if worst < -NEGATIVE_PRECIP_TOL_KG_M2:
                r, p = np.unravel_index(np.nanargmin(amount), amount.shape)
                k = need[r]
                raise ForcingReadError(
                    f"forcing file {s.paths[s.file_of[k]]!r}, variable {s.names[s.file_of[k]]!r}: "
                    f"precipitation of {worst:.3f} kg m-2 in the interval ending "
                    f"{np.datetime64(int(s.t_all[k]), 's')} at grid point {p}; expected >= "
                    f"-{NEGATIVE_PRECIP_TOL_KG_M2} kg m-2; hint: an accumulation reset not marked "
                    f"by time_bnds, or accumulated = true on a per-interval variable"
                )
            neg = amount < 0
            stats["negative_precip_clipped"] += int(neg.sum())
            amount[neg] = 0.0
        y = S[:, need] @ amount / _H  # interval means; amounts are re-multiplied by the caller
    y[~s.covered[rows]] = np.nan
    _check_physical(s, y, rows)
    run, (t_at, _) = _longest_run(np.isnan(y))
    if run > MAX_GAP_H:
        raise ForcingReadError(
            f"{s.label()}: {run} consecutive missing hours (NaN) from "
            f"{np.datetime64(int(s.hours[rows[t_at]]), 's')}; expected NaN runs of at most "
            f"{MAX_GAP_H} h; hint: "
            f"fill the forcing or choose [forcing] start/end around them"
        )
    stats["nan_filled"] += int((np.isnan(y) & s.covered[rows][:, None]).sum())
    y = _fill_nan(y)
    return y.reshape((y.shape[0],) + rest)


#: Values no weather model produces near the ground: standard name -> (low, high, unit,
#: factor from the reader's hourly series to the checked unit). Bounds well outside the
#: records (about 184 K to 330 K air temperature, 113 m s-1 gust, about 300 mm of rain in
#: an hour; common knowledge of the world's weather records, not fitted values).
_PHYSICAL = {
    "air_temperature": (180.0, 340.0, "K", 1.0),
    "upper_air_temperature": (150.0, 340.0, "K", 1.0),
    "dew_point_temperature": (150.0, 340.0, "K", 1.0),
    "wind_speed": (0.0, 75.0, "m s-1", 1.0),
    "eastward_wind": (-75.0, 75.0, "m s-1", 1.0),
    "northward_wind": (-75.0, 75.0, "m s-1", 1.0),
    "precipitation_flux": (-np.inf, 200.0, "kg m-2 per hour", _H),
    "lwe_precipitation_rate": (-np.inf, 200.0, "kg m-2 per hour", _H),
    "precipitation_amount": (-np.inf, 200.0, "kg m-2 per hour", _H),
    "lwe_thickness_of_precipitation_amount": (-np.inf, 200.0, "kg m-2 per hour", _H),
    "surface_downwelling_shortwave_flux_in_air": (-50.0, 1500.0, "W m-2", 1.0),
    "integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air": (
        -50.0,
        1500.0,
        "W m-2",
        1.0,
    ),
    "surface_downwelling_longwave_flux_in_air": (30.0, 700.0, "W m-2", 1.0),
    "integral_wrt_time_of_surface_downwelling_longwave_flux_in_air": (30.0, 700.0, "W m-2", 1.0),
    "surface_air_pressure": (2.5e4, 1.1e5, "Pa", 1.0),
}


def _unit_hint(s: _Source, low: float, high: float, value: float) -> str:
    """The likely unit mix-up behind an impossible value, or ''."""
    sn = s.standard_name
    if sn.endswith("temperature"):
        if s.offset == 0.0 and -90.0 < value < 60.0:
            return '; the values look like degrees Celsius labelled K: set units = "degC"'
        if s.offset != 0.0 and low < value - ZERO_CELSIUS_K < high:
            return '; the values look like kelvin labelled degrees Celsius: set units = "K"'
    if "precipitation" in sn and low < value / 1000.0 < high:
        return "; the values look 1000 times too large: mm labelled m?"
    if "wind" in sn and low <= value / 3.6 <= high:
        return '; the speeds look like km h-1 labelled m s-1: set units = "km h-1"'
    return ""


def _check_physical(s: _Source, y: np.ndarray, rows: np.ndarray) -> None:
    """Refuse values that cannot be physical (unit mix-ups), naming file, variable and time.

    Raises
    ------
    ForcingReadError
        With the first offending value, the plausible range and, where one fits, the likely
        unit mix-up.
    """
    if s.standard_name not in _PHYSICAL or not y.size:
        return
    name = "upper_air_temperature" if s.level_pa is not None else s.standard_name
    low, high, unit, factor = _PHYSICAL[name]
    v = y * factor
    with np.errstate(invalid="ignore"):
        bad = (v < low) | (v > high)
    if not bad.any():
        return
    t, p = np.unravel_index(int(np.argmax(bad)), bad.shape)
    value = float(v[t, p])
    raise ForcingReadError(
        f"{s.label()}: {value:.6g} {unit} at {np.datetime64(int(s.hours[rows[t]]), 's')} cannot "
        f"be physical (expected {low:g} to {high:g} {unit}){_unit_hint(s, low, high, value)}"
    )


def _available(sources, name):
    return name == "surface_air_pressure" or _OUTPUTS[name][0] in sources


def _compute(sources, names, rows, alt, reader):
    """Canonical outputs at points; ``reader(source, native_cols) -> (cols, [level,] point)``."""
    stats = {"nan_filled": 0, "negative_precip_clipped": 0, "rh_clipped": 0}
    cache = {}

    def get(role, k=0, fn=None, tag=None):
        if (role, k, tag) not in cache:
            cache[(role, k, tag)] = _series(sources[role][k], rows, reader, stats, fn)
        return cache[(role, k, tag)]

    def pressure():
        if "pressure" in sources:
            return get("pressure")
        return np.broadcast_to(
            _thermo.pressure_standard_atmosphere_icao(alt), (rows.size, alt.size)
        )

    out = {}
    for name in names:
        if name not in _OUTPUTS or not _available(sources, name):
            raise KeyError(
                f"forcing has no {name!r}; available: "
                f"{[n for n in _OUTPUTS if _available(sources, n)]}"
            )
        if name in ("air_temperature", "shortwave_down", "longwave_down", "upper_air_temperature"):
            v = get(_OUTPUTS[name][0])
        elif name == "precipitation":
            v = get("precipitation") * _H
        elif name == "freezing_rain_frac":
            v = np.clip(get("freezing_rain"), 0.0, 1.0)
        elif name == "surface_air_pressure":
            v = pressure()
        elif name == "relative_humidity":
            sn = sources["humidity"][0].standard_name
            if sn == "relative_humidity":
                v = get("humidity")
            elif sn == "specific_humidity":
                v = _thermo.relative_humidity_from_specific_humidity(
                    get("humidity"), get("air_temperature"), pressure()
                )
            else:
                v = _thermo.relative_humidity_from_dew_point(
                    get("humidity"), get("air_temperature")
                )
            stats["rh_clipped"] += int(((v > 1.0) | (v < 0.0)).sum())
            v = np.clip(v, 0.0, 1.0)
        elif sources["wind"][0].standard_name == "eastward_wind":
            v = U.wind_from_components(get("wind", 0), get("wind", 1))[
                name == "wind_from_direction"
            ]
        elif name == "wind_speed":
            v = get("wind", 0)
        else:  # direction interpolated through its unit vector
            sin = get("wind", 1, lambda d: np.sin(np.radians(d)), "sin")
            cos = get("wind", 1, lambda d: np.cos(np.radians(d)), "cos")
            v = np.mod(np.degrees(np.arctan2(sin, cos)), 360.0)
        out[name] = np.asarray(v, dtype=np.float32)
    return out, stats


def _read_points(s: _Source, cols, iy, ix):
    arr = s.data[cols]
    # synchronous: a chunk task of the run already runs on a dask worker thread; it must not
    # submit nested tasks to the cluster (xarray's HDF5 lock guards the file reads)
    got = arr.vindex[(slice(None),) * (arr.ndim - 2) + (iy, ix)].compute(scheduler="synchronous")
    return np.moveaxis(got, 0, -1)  # (cols, [level,] point)


def _members(sources, names):
    roles = {r for n in names for r in _OUTPUTS[n] if r in sources}
    return [(r, k) for r in sorted(roles) for k in range(len(sources[r]))]


def _chunked(sources, members, alt):
    n = max(
        sources[r][k].data.shape[0] * int(np.prod(sources[r][k].data.shape[1:-2]))
        for r, k in members
    )
    side = int(max(8, min(256, np.sqrt(4e6 / max(n, 1)))))
    cy, cx = min(side, alt.shape[0]), min(side, alt.shape[1])
    arrays = [
        sources[r][k].data.rechunk((-1,) * (sources[r][k].data.ndim - 2) + (cy, cx))
        for r, k in members
    ]
    return arrays, da.from_array(alt, chunks=(cy, cx))


def _block_fn(sources, names, members, rows):
    """A function of (alt block, *source blocks) -> (dict of (rows, ..., cy, cx), stats)."""

    def fn(alt_blk, *blocks):
        lookup = {id(sources[r][k]): b for (r, k), b in zip(members, blocks, strict=True)}

        def reader(s, cols):
            b = lookup[id(s)][cols]
            return b.reshape(b.shape[:-2] + (-1,))

        out, stats = _compute(sources, names, rows, alt_blk.reshape(-1), reader)
        return {k: v.reshape(v.shape[:-1] + alt_blk.shape) for k, v in out.items()}, stats

    return fn


def _lazy(sources, name, alt, hours):
    """The canonical DataArray ``name`` as a dask graph over spatial blocks (or None)."""
    if not _available(sources, name):
        return None
    coords = {"time": hours.astype("datetime64[ns]")}
    attrs = {"units": _OUT_UNITS[name]}
    members = _members(sources, [name])
    if not members:  # pressure from the standard atmosphere at model height
        p = da.broadcast_to(
            da.from_array(_thermo.pressure_standard_atmosphere_icao(alt).astype(np.float32)),
            (hours.size,) + alt.shape,
        )
        return xr.DataArray(p, dims=("time", "y", "x"), coords=coords, name=name, attrs=attrs)
    arrays, alt_d = _chunked(sources, members, alt)
    fn = _block_fn(sources, [name], members, np.arange(hours.size))
    extra = arrays[0].shape[1:-2] if name == "upper_air_temperature" else ()
    lead = (None,) * (1 + len(extra))

    def block(alt_blk, *blocks):
        return fn(alt_blk[(0,) * len(lead)], *blocks)[0][name]

    chunks = ((hours.size,),) + tuple((e,) for e in extra) + alt_d.chunks
    data = da.map_blocks(block, alt_d[lead], *arrays, chunks=chunks, dtype=np.float32)
    dims = ("time",) + (("level",) if extra else ()) + ("y", "x")
    if extra:
        coords["level"] = (
            "level",
            sources["upper_air"][0].level_pa,
            {"units": "Pa", "standard_name": "air_pressure"},
        )
    return xr.DataArray(data, dims=dims, coords=coords, name=name, attrs=attrs)


def _validate(sources, alt, n_h) -> dict:
    """One pass over all data: raise on bad values, count repairs (for run.json)."""
    names = [n for n in _OUTPUTS if _available(sources, n) and _members(sources, [n])]
    members = _members(sources, names)
    arrays, alt_d = _chunked(sources, members, alt)
    fn = _block_fn(sources, names, members, np.arange(n_h))
    blocks = [a.to_delayed().reshape((-1,) + a.numblocks[-2:])[0] for a in arrays]
    alt_blocks = alt_d.to_delayed()
    tasks = [
        dask.delayed(lambda *a: fn(*a)[1])(alt_blocks[j, i], *[b[j, i] for b in blocks])
        for j in range(alt_d.numblocks[0])
        for i in range(alt_d.numblocks[1])
    ]
    counts = {"nan_filled": 0, "negative_precip_clipped": 0, "rh_clipped": 0}
    try:
        results = dask.compute(*tasks)
    except ForcingReadError:
        raise
    except (RuntimeError, OSError, ValueError) as exc:  # netCDF-C/HDF5 and codec errors
        raise _unreadable(sources, members, exc) from None
    for r in results:
        for k in counts:
            counts[k] += r[k]
    return counts


def _unreadable(sources, members, exc: Exception) -> ForcingReadError:
    """The error naming the file and variable that could not be read, found by reading
    each variable of each file again in spatial blocks (after a failed pass over all data)."""
    for r, k in members:
        s = sources[r][k]
        for f, path in enumerate(s.paths):
            rows = np.flatnonzero(s.file_of == f)
            if rows.size == 0:
                continue
            part = s.data[rows[0] : rows[-1] + 1]
            side = max(8, int(np.sqrt(4e6 / max(int(np.prod(part.shape[:-2])), 1))))
            part = part.rechunk((-1,) * (part.ndim - 2) + (side, side))
            try:
                for block in part.to_delayed().ravel():
                    block.compute(scheduler="synchronous")
            except (RuntimeError, OSError, ValueError) as inner:
                return ForcingReadError(
                    f"forcing file {path!r}, variable {s.names[f]!r}: cannot be read "
                    f"({type(inner).__name__}: {inner}); the file is damaged (e.g. a corrupted "
                    "compressed chunk) or truncated; hint: write or download it again"
                )
    return ForcingReadError(
        f"forcing file {sources['air_temperature'][0].paths[0]!r}: reading the data failed "
        f"({type(exc).__name__}: {exc})"
    )

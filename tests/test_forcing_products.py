"""Forcing as weather models distribute it: WRF output (one file and a split run with a
restart), GRIB2 written with ecCodes from its sample templates (two cycles with a coarser
tail), both ERA5 NetCDF layouts of the climate data store and a CF reference-time × lead-time
file — each compared, grid point by grid point, with the same weather written as plain
CF-1.8 (the twin file, built from the same arrays).

Outside references named beside the checks: WRF ARW technical note (Skamarock et al. 2019,
NCAR/TN-556+STR) for the wrfout layout; pyproj (PROJ) for the map projections and the grid
rotation; ecCodes for GRIB encoding; CF-1.8 §7.3 for bounds and cell methods.
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from pyproj import CRS, Transformer

from regionmap.errors import ForcingReadError
from regionmap.io.forcing import open_forcing

T0 = np.datetime64("2026-01-10T00:00", "s")
H = np.timedelta64(3600, "s")
NY, NX = 5, 6
NAMES = [
    "air_temperature",
    "relative_humidity",
    "surface_air_pressure",
    "wind_speed",
    "wind_from_direction",
    "shortwave_down",
    "longwave_down",
    "precipitation",
]


def weather(n, seed=7):
    """Hourly weather (time, y, x) with labels T0 .. T0 + (n-1) h: states at the labels,
    precipitation per hour ending at the label (exact binary fractions)."""
    rng = np.random.default_rng(seed)
    hours = np.arange(n)[:, None, None]
    ramp = np.arange(NY)[:, None] * 0.3 + np.arange(NX)[None, :] * 0.2
    t = 265.0 + ramp + 3.0 * np.sin(hours / 4.0)
    return {
        "t": t,
        "td": t - 2.0 - rng.uniform(0, 3, (n, NY, NX)),
        "p": 80000.0 + 50.0 * ramp + 10.0 * hours,
        "u": 2.0 + np.cos(hours / 5.0) + 0 * ramp,
        "v": -3.0 + 0.5 * ramp + 0 * hours,
        "sw": np.maximum(0.0, 400.0 * np.sin((hours - 7) / 10.0 * np.pi)) + 0 * ramp,
        "lw": 250.0 + 5.0 * ramp + hours,
        "pr": rng.integers(0, 40, (n, NY, NX)) / 16.0,
        "orog": 1200.0 + 100.0 * ramp,
    }


def twin_cf(w, labels, path, *, grid, sw_point=True, amounts=None, bounds=None):
    """The weather as plain CF-1.8 on ``grid`` = (coords, dims, grid_mapping attrs or None)."""
    coords, (ydim, xdim), gm = grid
    dims = ("time", ydim, xdim)
    gattr = {"grid_mapping": "crs"} if gm else {}
    data = {
        "tas": (dims, w["t"], {"standard_name": "air_temperature", "units": "K", **gattr}),
        "tdps": (dims, w["td"], {"standard_name": "dew_point_temperature", "units": "K"}),
        "ps": (dims, w["p"], {"standard_name": "surface_air_pressure", "units": "Pa"}),
        "uas": (dims, w["u"], {"standard_name": "eastward_wind", "units": "m s-1"}),
        "vas": (dims, w["v"], {"standard_name": "northward_wind", "units": "m s-1"}),
        "rsds": (
            dims,
            w["sw"],
            {
                "standard_name": "surface_downwelling_shortwave_flux_in_air",
                "units": "W m-2",
                "cell_methods": "time: point" if sw_point else "time: mean",
            },
        ),
        "rlds": (
            dims,
            w["lw"],
            {
                "standard_name": "surface_downwelling_longwave_flux_in_air",
                "units": "W m-2",
                "cell_methods": "time: point" if sw_point else "time: mean",
            },
        ),
        "pr": (
            dims,
            w["pr"] if amounts is None else amounts,
            {
                "standard_name": "precipitation_amount",
                "units": "kg m-2",
                "cell_methods": "time: sum",
            },
        ),
        "orog": ((ydim, xdim), w["orog"], {"standard_name": "surface_altitude", "units": "m"}),
    }
    ds = xr.Dataset(data, coords={"time": ("time", labels), **coords})
    if bounds is not None:
        ds["time"].attrs["bounds"] = "time_bnds"
        ds["time_bnds"] = (("time", "nv"), bounds)
    if gm:
        ds["crs"] = xr.DataArray(np.int32(0), attrs=gm)
    save(ds, path)
    return path


def save(ds, path):
    enc = {
        k: {"units": "hours since 2026-01-01 00:00:00", "dtype": "float64"}
        for k, v in ds.variables.items()
        if np.issubdtype(v.dtype, np.datetime64)
    }
    ds.to_netcdf(path, encoding=enc)


def read_all(gf):
    iy, ix = np.divmod(np.arange(NY * NX), NX)
    return gf.read_block(NAMES, iy, ix)


def assert_same_weather(gf, twin, *, rtol=1e-6, atol=1e-4):
    assert np.array_equal(gf.time, twin.time)
    a, b = read_all(gf), read_all(twin)
    for name in NAMES:
        np.testing.assert_allclose(a[name], b[name], rtol=rtol, atol=atol, err_msg=name)
    np.testing.assert_allclose(gf.surface_altitude, twin.surface_altitude, rtol=1e-6)
    np.testing.assert_allclose(gf.lon, twin.lon, atol=2e-5)
    np.testing.assert_allclose(gf.lat, twin.lat, atol=1e-6)
    assert gf.counts["gap_hours_filled"] == 0 and gf.counts["nan_filled"] == 0


# ------------------------------------------------------------------------------------ WRF

WRF_ATTRS = {
    "TITLE": " OUTPUT FROM WRF V4.5.2 MODEL",
    "MAP_PROJ": np.int32(1),
    "MAP_PROJ_CHAR": "Lambert Conformal",
    "TRUELAT1": np.float32(45.0),
    "TRUELAT2": np.float32(48.0),
    "STAND_LON": np.float32(10.5),
    "MOAD_CEN_LAT": np.float32(46.5),
    "CEN_LAT": np.float32(46.6),
    "CEN_LON": np.float32(11.2),
    "DX": np.float32(3000.0),
    "DY": np.float32(3000.0),
    "GRID_ID": np.int32(1),
    "BUCKET_MM": np.float32(10.0),
    "SIMULATION_START_DATE": "2026-01-10_00:00:00",
}
WRF_SPHERE = {"a": 6370000.0, "b": 6370000.0}


def wrf_grid(attrs=WRF_ATTRS):
    """The projection of the global attributes (on WRF's sphere), mass-point x/y, XLAT/XLONG,
    and the angle of north from the grid's y axis (clockwise) at each point."""
    proj = int(attrs["MAP_PROJ"])
    if proj == 1:
        crs = CRS.from_dict(
            {
                "proj": "lcc",
                "lat_1": 45.0,
                "lat_2": 48.0,
                "lat_0": 46.5,
                "lon_0": 10.5,
                **WRF_SPHERE,
            }
        )
    elif proj == 2:
        crs = CRS.from_dict(
            {"proj": "stere", "lat_0": 90, "lat_ts": 60.0, "lon_0": -100.0, **WRF_SPHERE}
        )
    else:
        crs = CRS.from_dict({"proj": "merc", "lat_ts": 30.0, "lon_0": 0.0, **WRF_SPHERE})
    centre = {1: (11.2, 46.6), 2: (-95.0, 58.0), 3: (20.0, 35.0)}[proj]
    to_xy = Transformer.from_crs(crs.geodetic_crs, crs, always_xy=True)
    cx, cy = to_xy.transform(*centre)
    x = cx + (np.arange(NX) - (NX - 1) / 2) * 3000.0
    y = cy + (np.arange(NY) - (NY - 1) / 2) * 3000.0
    xx, yy = np.meshgrid(x, y)
    lon, lat = Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True).transform(xx, yy)
    # north seen from the grid: a step of 1e-4 deg towards the pole, projected (PROJ)
    nx_, ny_ = to_xy.transform(lon, lat + 1e-4)
    theta = np.arctan2(nx_ - xx, ny_ - yy)
    return crs, x, y, lon, lat, theta


def wrf_file(path, w, rows, attrs=WRF_ATTRS, *, start_acc=None):
    """A wrfout file holding hours ``rows`` of the weather: dims Time, south_north,
    west_east, DateStrLen; XLAT/XLONG with Time; winds relative to the grid; RAINNC/RAINC
    accumulated since the model start with the bucket counters I_RAINNC/I_RAINC."""
    crs, x, y, lon, lat, theta = wrf_grid(attrs)
    n = len(rows)
    times = [str(T0 + r * H).replace("T", "_") for r in rows]
    chars = np.array([list(t) for t in times], dtype="S1")
    d3 = ("Time", "south_north", "west_east")

    def field(a, units, desc):
        return (d3, a.astype(np.float32), {"units": units, "description": desc, "stagger": ""})

    # grid-relative components of the earth-relative wind: rotate by theta (see module
    # docstring; WRF's COSALPHA/SINALPHA are cos/sin of theta, u_e = u cos - v sin)
    cos, sin = np.cos(theta), np.sin(theta)
    u, v = w["u"][rows], w["v"][rows]
    u_grid, v_grid = u * cos + v * sin, -u * sin + v * cos
    acc = np.cumsum(w["pr"], axis=0)[rows] if start_acc is None else start_acc
    nc_total, c_total = 0.75 * acc, 0.25 * acc
    bucket = float(attrs["BUCKET_MM"])
    td = w["td"][rows]
    vapour = 611.2 * np.exp(17.67 * (td - 273.15) / (td - 29.65))  # Bolton (1980) eq. 10 [Pa]
    mix = 0.622 * vapour / (w["p"][rows] - vapour)  # mixing ratio of that vapour pressure
    data = {
        "Times": (("Time", "DateStrLen"), chars),
        "XLAT": field(
            np.broadcast_to(lat, (n, NY, NX)), "degree_north", "LATITUDE, SOUTH IS NEGATIVE"
        ),
        "XLONG": field(
            np.broadcast_to(lon, (n, NY, NX)), "degree_east", "LONGITUDE, WEST IS NEGATIVE"
        ),
        "T2": field(w["t"][rows], "K", "TEMP at 2 M"),
        "Q2": field(mix, "kg kg-1", "QV at 2 M"),
        "PSFC": field(w["p"][rows], "Pa", "SFC PRESSURE"),
        "U10": field(u_grid, "m s-1", "U at 10 M"),
        "V10": field(v_grid, "m s-1", "V at 10 M"),
        "COSALPHA": field(np.broadcast_to(cos, (n, NY, NX)), "", "Local cosine of map rotation"),
        "SINALPHA": field(np.broadcast_to(sin, (n, NY, NX)), "", "Local sine of map rotation"),
        "SWDOWN": field(w["sw"][rows], "W m-2", "DOWNWARD SHORT WAVE FLUX AT GROUND SURFACE"),
        "GLW": field(w["lw"][rows], "W m-2", "DOWNWARD LONG WAVE FLUX AT GROUND SURFACE"),
        "RAINNC": field(
            np.mod(nc_total, bucket), "mm", "ACCUMULATED TOTAL GRID SCALE PRECIPITATION"
        ),
        "RAINC": field(np.mod(c_total, bucket), "mm", "ACCUMULATED TOTAL CUMULUS PRECIPITATION"),
        "I_RAINNC": (
            d3,
            (nc_total // bucket).astype(np.int32),
            {"description": "BUCKET FOR RAINNC"},
        ),
        "I_RAINC": (d3, (c_total // bucket).astype(np.int32), {"description": "BUCKET FOR RAINC"}),
        "HGT": field(np.broadcast_to(w["orog"], (n, NY, NX)), "m", "Terrain Height"),
    }
    xtime = (
        (np.array(rows) * 60.0).astype(np.float32),
        {
            "units": f"minutes since {str(T0).replace('T', ' ')}",
            "description": f"minutes since {times[0]}",
        },
    )
    ds = xr.Dataset(data, coords={"XTIME": ("Time", *xtime)}, attrs=attrs)
    ds.to_netcdf(path, format="NETCDF4")
    return path, mix


def wrf_twin(w, rows, path, attrs=WRF_ATTRS):
    crs, x, y, lon, lat, theta = wrf_grid(attrs)
    coords = {
        "x": ("x", x, {"standard_name": "projection_x_coordinate", "units": "m"}),
        "y": ("y", y, {"standard_name": "projection_y_coordinate", "units": "m"}),
    }
    labels = T0 + np.asarray(rows) * H
    sub = {k: (v[rows] if v.ndim == 3 else v) for k, v in w.items()}
    sub["pr"] = w["pr"][rows]
    bounds = np.stack([labels - H, labels], axis=1)
    return twin_cf(sub, labels, path, grid=(coords, ("y", "x"), crs.to_cf()), bounds=bounds)


@pytest.mark.parametrize("proj", [1, 2, 3])
def test_wrf_single_file_matches_its_cf_twin(tmp_path, proj):
    attrs = dict(WRF_ATTRS, MAP_PROJ=np.int32(proj))
    if proj == 2:
        attrs |= {"TRUELAT1": np.float32(60.0), "STAND_LON": np.float32(-100.0)}
    if proj == 3:
        attrs |= {"TRUELAT1": np.float32(30.0), "STAND_LON": np.float32(0.0)}
    w = weather(30)
    rows = list(range(30))
    wrf_file(tmp_path / "wrfout_d01_2026-01-10_00:00:00", w, rows, attrs)
    gf = open_forcing(tmp_path / "wrfout_d01_2026-01-10_00:00:00")
    # the first output (the model start) is the baseline of the accumulation
    twin = open_forcing(wrf_twin(w, rows[1:], tmp_path / "twin.nc", attrs))
    assert gf.time[0] == T0 + H and gf.time[-1] == T0 + 29 * H
    # relative humidity: WRF gives Q2, the twin the dew point of the same vapour pressure
    # (Bolton 1980 for the synthetic pair; the reader uses Buck 1981: within 0.3 %)
    a, b = read_all(gf), read_all(twin)
    for name in NAMES:
        tol = 5e-3 if name == "relative_humidity" else 1e-5
        np.testing.assert_allclose(a[name], b[name], rtol=tol, atol=1e-3, err_msg=name)
    # the grid: x/y recovered from XLAT/XLONG on WRF's sphere match the twin's grid (PROJ),
    # to the metre that float32 degrees resolve (8e-6 deg at 100 deg longitude)
    np.testing.assert_allclose(gf.lon, twin.lon, atol=2e-5)
    np.testing.assert_allclose(gf.grid.x, twin.grid.x, atol=1.0)
    np.testing.assert_allclose(gf.grid.y, twin.grid.y, atol=1.0)
    assert gf.counts["gap_hours_filled"] == 0 and gf.counts["nan_filled"] == 0


def test_wrf_split_run_with_restart_loses_nothing_at_file_boundaries(tmp_path):
    w = weather(50)
    # daily files 00..23 of a run started at T0; a restart at 36 h writes 36 h again
    wrf_file(tmp_path / "wrfout_d01_2026-01-10_00:00:00", w, list(range(0, 24)))
    wrf_file(tmp_path / "wrfout_d01_2026-01-11_00:00:00", w, list(range(24, 37)))
    wrf_file(tmp_path / "wrfout_d01_2026-01-11_12:00:00", w, list(range(36, 50)))
    whole = tmp_path / "whole"
    whole.mkdir()
    wrf_file(whole / "wrfout_d01_2026-01-10_00:00:00", w, list(range(50)))
    split = open_forcing(str(tmp_path / "wrfout_d01_*"))
    one = open_forcing(whole / "wrfout_d01_2026-01-10_00:00:00")
    assert split.time.size == 49 and split.counts["gap_hours_filled"] == 0
    a, b = read_all(split), read_all(one)
    for name in NAMES:
        np.testing.assert_array_equal(a[name], b[name], err_msg=name)
    # every hour's precipitation, across both boundaries and the bucket resets (10 mm), is
    # the hour's amount that was accumulated (mm = kg m-2)
    np.testing.assert_allclose(a["precipitation"], w["pr"][1:].reshape(49, -1), atol=2e-5)


def test_wrf_new_run_restarts_the_accumulation_and_later_run_wins(tmp_path):
    w = weather(40)
    wrf_file(tmp_path / "wrfout_d01_2026-01-10_00:00:00", w, list(range(0, 30)))
    # a new run from 24 h: its own SIMULATION_START_DATE, accumulations from zero
    attrs = dict(WRF_ATTRS, SIMULATION_START_DATE="2026-01-11_00:00:00")
    acc = np.cumsum(w["pr"][24:40], axis=0) - w["pr"][24]
    wrf_file(
        tmp_path / "wrfout_d01_2026-01-11_00:00:00", w, list(range(24, 40)), attrs, start_acc=acc
    )
    gf = open_forcing(str(tmp_path / "wrfout_d01_*"))
    pr = read_all(gf)["precipitation"]
    np.testing.assert_allclose(pr, w["pr"][1:40].reshape(39, -1), atol=2e-5)


def test_wrf_errors_name_the_file(tmp_path):
    w = weather(6)
    attrs = dict(WRF_ATTRS, MAP_PROJ=np.int32(1), TRUELAT1=np.float32(30.0))
    path, _ = wrf_file(tmp_path / "wrfout_d01_x", w, list(range(6)))
    bad = xr.open_dataset(path).load()
    bad.attrs["MAP_PROJ"] = np.int32(4)
    bad.to_netcdf(tmp_path / "wrfout_d01_bad")
    with pytest.raises(ForcingReadError, match=r"wrfout_d01_bad.*MAP_PROJ = 4; expected 1"):
        open_forcing(tmp_path / "wrfout_d01_bad")
    del attrs

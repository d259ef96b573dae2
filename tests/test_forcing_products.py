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


def weather(n, seed=7, shape=(NY, NX)):
    """Hourly weather (time, y, x) with labels T0 .. T0 + (n-1) h: states at the labels,
    precipitation per hour ending at the label (exact binary fractions)."""
    rng = np.random.default_rng(seed)
    hours = np.arange(n)[:, None, None]
    ramp = np.arange(shape[0])[:, None] * 0.3 + np.arange(shape[1])[None, :] * 0.2
    t = 265.0 + ramp + 3.0 * np.sin(hours / 4.0)
    return {
        "t": t,
        "td": t - 2.0 - rng.uniform(0, 3, (n, *shape)),
        "p": 80000.0 + 50.0 * ramp + 10.0 * hours,
        "u": 2.0 + np.cos(hours / 5.0) + 0 * ramp,
        "v": -3.0 + 0.5 * ramp + 0 * hours,
        "sw": np.maximum(0.0, 400.0 * np.sin((hours - 7) / 10.0 * np.pi)) + 0 * ramp,
        "lw": 250.0 + 5.0 * ramp + hours,
        "pr": rng.integers(0, 40, (n, *shape)) / 16.0,
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


def wrf_grid(attrs=WRF_ATTRS, shape=(NY, NX), centre=None):
    """The projection of the global attributes (on WRF's sphere), mass-point x/y, XLAT/XLONG,
    and the angle of north from the grid's y axis (clockwise) at each point."""
    proj = int(attrs["MAP_PROJ"])
    if proj in (1, 6):  # 6: a latitude-longitude run, here on a turned (Lambert) grid
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
    centre = centre or {1: (11.2, 46.6), 2: (-95.0, 58.0), 3: (20.0, 35.0), 6: (11.2, 46.6)}[proj]
    to_xy = Transformer.from_crs(crs.geodetic_crs, crs, always_xy=True)
    cx, cy = to_xy.transform(*centre)
    x = cx + (np.arange(shape[1]) - (shape[1] - 1) / 2) * 3000.0
    y = cy + (np.arange(shape[0]) - (shape[0] - 1) / 2) * 3000.0
    xx, yy = np.meshgrid(x, y)
    lon, lat = Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True).transform(xx, yy)
    # north seen from the grid: a step of 1e-4 deg towards the pole, projected (PROJ)
    nx_, ny_ = to_xy.transform(lon, lat + 1e-4)
    theta = np.arctan2(nx_ - xx, ny_ - yy)
    return crs, x, y, lon, lat, theta


def wrf_file(path, w, rows, attrs=WRF_ATTRS, *, start_acc=None, centre=None):
    """A wrfout file holding hours ``rows`` of the weather: dims Time, south_north,
    west_east, DateStrLen; XLAT/XLONG with Time; winds relative to the grid; RAINNC/RAINC
    accumulated since the model start with the bucket counters I_RAINNC/I_RAINC."""
    shape = w["t"].shape[1:]
    crs, x, y, lon, lat, theta = wrf_grid(attrs, shape, centre)
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
            np.broadcast_to(lat, (n, *shape)), "degree_north", "LATITUDE, SOUTH IS NEGATIVE"
        ),
        "XLONG": field(
            np.broadcast_to(lon, (n, *shape)), "degree_east", "LONGITUDE, WEST IS NEGATIVE"
        ),
        "T2": field(w["t"][rows], "K", "TEMP at 2 M"),
        "Q2": field(mix, "kg kg-1", "QV at 2 M"),
        "PSFC": field(w["p"][rows], "Pa", "SFC PRESSURE"),
        "U10": field(u_grid, "m s-1", "U at 10 M"),
        "V10": field(v_grid, "m s-1", "V at 10 M"),
        "COSALPHA": field(np.broadcast_to(cos, (n, *shape)), "", "Local cosine of map rotation"),
        "SINALPHA": field(np.broadcast_to(sin, (n, *shape)), "", "Local sine of map rotation"),
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
        "HGT": field(np.broadcast_to(w["orog"], (n, *shape)), "m", "Terrain Height"),
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


def wrf_twin(w, rows, path, attrs=WRF_ATTRS, centre=None):
    crs, x, y, lon, lat, theta = wrf_grid(attrs, w["t"].shape[1:], centre)
    coords = {
        "x": ("x", x, {"standard_name": "projection_x_coordinate", "units": "m"}),
        "y": ("y", y, {"standard_name": "projection_y_coordinate", "units": "m"}),
    }
    if int(attrs["MAP_PROJ"]) == 6:  # 2-D latitude/longitude without a grid mapping
        coords = {
            "lat": (("y", "x"), lat, {"standard_name": "latitude", "units": "degrees_north"}),
            "lon": (("y", "x"), lon, {"standard_name": "longitude", "units": "degrees_east"}),
        }
        crs = None
    labels = T0 + np.asarray(rows) * H
    sub = {k: (v[rows] if v.ndim == 3 else v) for k, v in w.items()}
    sub["pr"] = w["pr"][rows]
    bounds = np.stack([labels - H, labels], axis=1)
    gm = None if crs is None else crs.to_cf()
    return twin_cf(sub, labels, path, grid=(coords, ("y", "x"), gm), bounds=bounds)


@pytest.mark.parametrize("proj", [1, 2, 3, 6])
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
    if proj != 6:
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


def test_wrf_per_cell_forcing_matches_its_cf_twin(tmp_path, demo_cells):
    from regionmap.downscale.pipeline import downscale_cells, prepare_cells
    from regionmap.downscale.settings import DownscaleSettings

    # a WRF domain of 16 x 16 points at 3 km over the demo range, the grid turned against
    # north there (Lambert conformal about 10.5 E)
    table = demo_cells.table
    centre = (float(table["lon"].mean()), float(table["lat"].mean()))
    w = weather(12, shape=(16, 16))
    rows = list(range(12))
    wrf, _ = wrf_file(tmp_path / "wrfout_d01_2026-01-10_00:00:00", w, rows, centre=centre)
    twin = wrf_twin(w, rows[1:], tmp_path / "twin.nc", centre=centre)
    settings = DownscaleSettings()
    cells = []
    for path in (wrf, twin):
        gf = open_forcing(path)
        cells.append(downscale_cells(gf, prepare_cells(demo_cells, gf, settings), settings))
    a, b = cells
    for name in ("t_air_k", "pressure_pa", "wind_m_s", "sw_in_w_m2"):
        np.testing.assert_allclose(getattr(a, name), getattr(b, name), rtol=1e-5, err_msg=name)
    # wrfout stores the accumulations in float32: differences of ~60 mm totals keep 1e-5 mm
    np.testing.assert_allclose(a.precip_kg_m2, b.precip_kg_m2, rtol=0, atol=1e-4)
    # humidity from Q2 (Bolton 1980 vapour pressure) and from the dew point (Buck 1981 in the
    # reader) agree to 0.3 % (Buck 1981, Table 2); the longwave carried to the cell (through
    # the air's emissivity) and the precipitation phase follow it
    np.testing.assert_allclose(a.rh_frac, b.rh_frac, rtol=5e-3)
    np.testing.assert_allclose(a.lw_in_w_m2, b.lw_in_w_m2, rtol=1e-4)
    np.testing.assert_allclose(a.snow_frac, b.snow_frac, atol=0.02)


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
    path, _ = wrf_file(tmp_path / "wrfout_d01_x", w, list(range(6)))
    good = xr.open_dataset(path).load()
    cases = {
        "unknown_projection": (
            good.assign_attrs(MAP_PROJ=np.int32(4)),
            r"MAP_PROJ = 4; expected 1 \(Lambert conformal\)",
        ),
        # projection attributes that do not match XLAT/XLONG (another run's TRUELAT1)
        "wrong_projection": (
            good.assign_attrs(TRUELAT1=np.float32(20.0), TRUELAT2=np.float32(70.0)),
            r"not a regular grid of DX = 3000 m",
        ),
        "no_rotation": (
            good.drop_vars(["COSALPHA", "SINALPHA"]),
            r"'COSALPHA' \(used for eastward_wind in WRF output\) is missing",
        ),
    }
    for name, (ds, message) in cases.items():
        ds.to_netcdf(tmp_path / f"wrfout_d01_{name}")
        with pytest.raises(ForcingReadError, match=rf"wrfout_d01_{name}.*{message}"):
            open_forcing(tmp_path / f"wrfout_d01_{name}")


# ----------------------------------------------------------------------- GRIB and cycles

LAT = 47.0 - 0.1 * np.arange(NY)  # north to south, as GRIB scans by default
LON = 10.0 + 0.1 * np.arange(NX)
CYCLES = {0: list(range(13)) + [15, 18], 12: list(range(7)) + [9, 12]}
"""Reference hour (from T0) -> output steps [h]: hourly, then 3-hourly (a coarser tail)."""


def cycle_weather(w, ref):
    """The weather a cycle forecasts: the truth, except that the 00 cycle is off beyond 12 h
    (where the 12 cycle must win; a negative control)."""
    out = {k: v.copy() for k, v in w.items()}
    if ref == 0:
        for key, delta in (("t", 5.0), ("td", 5.0), ("u", 4.0), ("sw", 50.0), ("lw", 30.0)):
            out[key][13:] += delta
        out["pr"][13:] *= 3.0
    return out


def since_start(x, ref, steps):
    """Sum of hourly values over (ref, ref + step] for each step."""
    c = np.concatenate([np.zeros((1,) + x.shape[1:]), np.cumsum(x[ref + 1 :], axis=0)])
    return c[np.asarray(steps)]


def grib_messages(path, w, cycles=CYCLES, per_interval=False, bucket_h=None):
    """GRIB2 from ecCodes' regular_ll_sfc_grib2 sample: IEEE-packed values; accumulations
    since the cycle start (steps 0-N) or, with ``per_interval``, over each output interval
    (steps M-N), as ERA5's GRIB forecasts are, or in buckets restarting every ``bucket_h``
    hours (0-3, 0-6, 6-9, 6-12), as some centres' are."""
    import eccodes

    with open(path, "wb") as out:
        for ref, steps in cycles.items():
            cw = cycle_weather(w, ref)
            fields = [
                ("2t", "heightAboveGround", 2, "instant", cw["t"]),
                ("2d", "heightAboveGround", 2, "instant", cw["td"]),
                ("10u", "heightAboveGround", 10, "instant", cw["u"]),
                ("10v", "heightAboveGround", 10, "instant", cw["v"]),
                ("sp", "surface", 0, "instant", cw["p"]),
            ]
            for k, step in enumerate(steps):
                vals = [(n, tl, lev, st, a[ref + step]) for n, tl, lev, st, a in fields]
                first = steps[k - 1] if per_interval and k > 0 else 0
                if bucket_h:
                    first = max(0, (step - 1) // bucket_h * bucket_h)
                # accumulations over (first, step]: m of water, J m-2
                acc = {
                    "tp": cw["pr"] / 1000.0,
                    "ssrd": cw["sw"] * 3600.0,
                    "strd": cw["lw"] * 3600.0,
                }
                if not ((per_interval or bucket_h) and step == 0):  # no empty interval 0-0
                    vals += [
                        (
                            n,
                            "surface",
                            0,
                            "accum",
                            since_start(a, ref, [step])[0] - since_start(a, ref, [first])[0],
                        )
                        for n, a in acc.items()
                    ]
                if ref == 0 and step == 0:
                    vals.append(("orog", "surface", 0, "instant", w["orog"]))
                for name, level_type, level, step_type, values in vals:
                    h = eccodes.codes_grib_new_from_samples("regular_ll_sfc_grib2")
                    keys = {
                        "centre": "ecmf",
                        "dataDate": 20260110 + ref // 24,
                        "dataTime": (ref % 24) * 100,
                        "Ni": NX,
                        "Nj": NY,
                        "latitudeOfFirstGridPointInDegrees": LAT[0],
                        "latitudeOfLastGridPointInDegrees": LAT[-1],
                        "longitudeOfFirstGridPointInDegrees": LON[0],
                        "longitudeOfLastGridPointInDegrees": LON[-1],
                        "iDirectionIncrementInDegrees": 0.1,
                        "jDirectionIncrementInDegrees": 0.1,
                        "typeOfLevel": level_type,
                        "level": level,
                        "shortName": name,
                    }
                    for key, value in keys.items():
                        eccodes.codes_set(h, key, value)
                    if step_type == "accum":
                        eccodes.codes_set(h, "stepType", "accum")
                        eccodes.codes_set(h, "startStep", first)
                        eccodes.codes_set(h, "endStep", step)
                    else:
                        eccodes.codes_set(h, "step", step)
                    eccodes.codes_set(h, "packingType", "grid_ieee")
                    eccodes.codes_set_values(h, np.asarray(values, dtype=np.float64).ravel())
                    eccodes.codes_write(h, out)
                    eccodes.codes_release(h)
    return path


def latlon_grid(lat=LAT, lon=LON):
    coords = {
        "lat": ("lat", lat, {"standard_name": "latitude", "units": "degrees_north"}),
        "lon": ("lon", lon, {"standard_name": "longitude", "units": "degrees_east"}),
    }
    return coords, ("lat", "lon"), None


def cycles_twin(w, path):
    """What the cycles say on valid time: hours 1-12 from the 00 cycle, then the 12 cycle
    (hourly to 18 h, 3-hourly to 24 h), amounts per interval, radiation interval means."""
    labels_h = [s for s in CYCLES[0] if 0 < s <= 12] + [12 + s for s in CYCLES[12] if s > 0]
    labels_h = np.array(labels_h)
    prev = np.r_[0, labels_h[:-1]]
    amount = {
        k: np.stack([w[k][a + 1 : b + 1].sum(0) for a, b in zip(prev, labels_h, strict=True)])
        for k in ("pr", "sw", "lw")
    }
    sub = {k: v[labels_h] if v.ndim == 3 else v for k, v in w.items()}
    sub["sw"] = amount["sw"] / (labels_h - prev)[:, None, None]
    sub["lw"] = amount["lw"] / (labels_h - prev)[:, None, None]
    labels = T0 + labels_h * H
    bounds = np.stack([T0 + prev * H, labels], axis=1)
    return twin_cf(
        sub, labels, path, grid=latlon_grid(), sw_point=False, amounts=amount["pr"], bounds=bounds
    )


def test_eccodes_ships_its_library():
    import eccodes

    # the binary wheel carries the ecCodes C library (major version 2)
    assert eccodes.codes_get_api_version().startswith("2.")


@pytest.fixture(scope="module")
def grib_case(tmp_path_factory):
    """The weather, a GRIB2 file of both cycles and the forcing read from it."""
    folder = tmp_path_factory.mktemp("grib")
    w = weather(25)
    path = grib_messages(folder / "fc.grib2", w)
    return w, path, open_forcing(path)


def test_grib2_two_cycles_latest_wins_and_tail_brought_to_hourly(tmp_path, grib_case):
    w, _, gf = grib_case
    twin = open_forcing(cycles_twin(w, tmp_path / "twin.nc"))
    assert gf.time[0] == T0 + H and gf.time[-1] == T0 + 24 * H
    assert_same_weather(gf, twin, rtol=1e-5, atol=1e-3)
    # negative control: nothing of the 00 cycle's forecast beyond 12 h (5 K warmer) is used
    t = read_all(gf)["air_temperature"]
    assert np.abs(t[12:18] - w["t"][13:19].reshape(6, -1)).max() < 1e-3


def test_grib_cycles_in_separate_files_of_a_folder(tmp_path, grib_case):
    import eccodes

    _, whole, one = grib_case
    # the same messages split by cycle into two files, as a centre's folder has them
    with open(whole, "rb") as fh, open(tmp_path / "c00.grib2", "wb") as a:
        with open(tmp_path / "c12.grib2", "wb") as b:
            while (h := eccodes.codes_grib_new_from_file(fh)) is not None:
                eccodes.codes_write(h, a if eccodes.codes_get(h, "dataTime") == 0 else b)
                eccodes.codes_release(h)
    folder = open_forcing(str(tmp_path / "c*.grib2"))
    for name, v in read_all(one).items():
        np.testing.assert_array_equal(read_all(folder)[name], v, err_msg=name)


def test_grib_accumulations_per_interval_are_summed_per_cycle(tmp_path):
    w = weather(25)
    cycles = {0: [0, 1, 2, 3, 6, 9]}
    interval = open_forcing(grib_messages(tmp_path / "i.grib2", w, cycles, per_interval=True))
    since = open_forcing(grib_messages(tmp_path / "s.grib2", w, cycles))
    a, b = read_all(interval), read_all(since)
    for name in NAMES:
        np.testing.assert_allclose(a[name], b[name], rtol=1e-6, atol=1e-4, err_msg=name)
    # buckets restarting every 6 h (steps 0-3, 0-6, 6-9, 6-12)
    buckets = {0: [0, 3, 6, 9, 12]}
    got = read_all(open_forcing(grib_messages(tmp_path / "b.grib2", w, buckets, bucket_h=6)))
    ref = read_all(open_forcing(grib_messages(tmp_path / "r.grib2", w, buckets)))
    for name in NAMES:
        np.testing.assert_allclose(got[name], ref[name], rtol=1e-6, atol=1e-4, err_msg=name)
    # the 3-hour tail spread evenly: hours 7-9 share the amount of (6, 9] (CF-1.8 §7.3)
    np.testing.assert_allclose(
        a["precipitation"][6:9], w["pr"][7:10].mean(0).reshape(1, -1).repeat(3, 0), rtol=1e-6
    )


def test_grib_grid_relative_winds_on_a_projected_grid_are_refused(tmp_path):
    import eccodes

    path = tmp_path / "ps.grib2"
    h = eccodes.codes_grib_new_from_samples("polar_stereographic_pl_grib2")
    for key, value in (("typeOfLevel", "heightAboveGround"), ("level", 10), ("shortName", "10u")):
        eccodes.codes_set(h, key, value)
    eccodes.codes_set(h, "resolutionAndComponentFlags", 8)  # GRIB2 code table 3.3, bit 5
    with open(path, "wb") as out:
        eccodes.codes_write(h, out)
    eccodes.codes_release(h)
    with pytest.raises(
        ForcingReadError, match=r"ps.grib2.*u10 is relative to its polar_stereographic grid"
    ):
        open_forcing(path)


def test_cf_reference_time_by_lead_time_file(tmp_path):
    w = weather(25)
    steps = np.arange(13)
    dims = ("forecast_reference_time", "forecast_period", "lat", "lon")
    data = {}
    for key, name, sn, units, extra in (
        ("t", "tas", "air_temperature", "K", {}),
        ("td", "tdps", "dew_point_temperature", "K", {}),
        ("p", "ps", "surface_air_pressure", "Pa", {}),
        ("u", "uas", "eastward_wind", "m s-1", {}),
        ("v", "vas", "northward_wind", "m s-1", {}),
    ):
        arr = np.stack([cycle_weather(w, r)[key][r + steps] for r in (0, 12)])
        data[name] = (dims, arr, {"standard_name": sn, "units": units, **extra})
    for key, name, sn, units, scale in (
        ("pr", "pr", "precipitation_amount", "kg m-2", 1.0),
        (
            "sw",
            "rsds",
            "integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air",
            "J m-2",
            3600.0,
        ),
        (
            "lw",
            "rlds",
            "integral_wrt_time_of_surface_downwelling_longwave_flux_in_air",
            "J m-2",
            3600.0,
        ),
    ):
        arr = np.stack([since_start(cycle_weather(w, r)[key] * scale, r, steps) for r in (0, 12)])
        data[name] = (dims, arr, {"standard_name": sn, "units": units, "cell_methods": "time: sum"})
    data["orog"] = (("lat", "lon"), w["orog"], {"standard_name": "surface_altitude", "units": "m"})
    coords, _, _ = latlon_grid()
    refs = np.array([T0, T0 + 12 * H])
    ds = xr.Dataset(
        data,
        coords={
            "forecast_reference_time": (
                "forecast_reference_time",
                refs,
                {"standard_name": "forecast_reference_time"},
            ),
            "forecast_period": (
                "forecast_period",
                steps.astype(float),
                {"standard_name": "forecast_period", "units": "hours"},
            ),
            **coords,
        },
    )
    save(ds, tmp_path / "cycles.nc")
    gf = open_forcing(tmp_path / "cycles.nc")
    labels_h = np.arange(1, 25)
    sub = {k: v[labels_h] if v.ndim == 3 else v for k, v in w.items()}
    twin = open_forcing(
        twin_cf(
            sub,
            T0 + labels_h * H,
            tmp_path / "twin.nc",
            grid=latlon_grid(),
            sw_point=False,
            bounds=np.stack([T0 + (labels_h - 1) * H, T0 + labels_h * H], axis=1),
        )
    )
    assert_same_weather(gf, twin, rtol=1e-6, atol=1e-4)


# ----------------------------------------------------------------------------------- ERA5

ERA5_LAT = 64.0 - 0.25 * np.arange(NY)  # descending, as the data store delivers it
ERA5_LON = 340.0 + 0.25 * np.arange(NX)  # 0-360: 20 W .. 18.75 W


def era5_fields(w):
    dims = ("t", "latitude", "longitude")
    return {
        "t2m": (w["t"], "K", "2 metre temperature"),
        "d2m": (w["td"], "K", "2 metre dewpoint temperature"),
        "u10": (w["u"], "m s**-1", "10 metre U wind component"),
        "v10": (w["v"], "m s**-1", "10 metre V wind component"),
        "sp": (w["p"], "Pa", "Surface pressure"),
        "tp": (w["pr"] / 1000.0, "m", "Total precipitation"),
        "ssrd": (w["sw"] * 3600.0, "J m**-2", "Surface short-wave (solar) radiation downwards"),
        "strd": (w["lw"] * 3600.0, "J m**-2", "Surface long-wave (thermal) radiation downwards"),
    }, dims


def era5_old(w, path, *, expver_split=None, with_z=True):
    """The data store's former layout: time, latitude, longitude; int16 packed fields."""
    fields, _ = era5_fields(w)
    n = w["t"].shape[0]
    times = T0 + np.arange(n) * H
    data, enc = {}, {}
    for name, (arr, units, long_name) in fields.items():
        data[name] = (
            ("time", "latitude", "longitude"),
            arr,
            {"units": units, "long_name": long_name},
        )
        lo, hi = float(arr.min()), float(arr.max())
        scale = (hi - lo) / 60000.0 or 1.0
        enc[name] = {
            "dtype": "int16",
            "scale_factor": scale,
            "add_offset": (hi + lo) / 2,
            "_FillValue": -32767,
        }
    if with_z:
        data["z"] = (
            ("time", "latitude", "longitude"),
            np.broadcast_to(w["orog"] * 9.80665, (n, NY, NX)),
            {"units": "m**2 s**-2", "long_name": "Geopotential", "standard_name": "geopotential"},
        )
    coords = {
        "longitude": (
            "longitude",
            ERA5_LON.astype(np.float32),
            {"units": "degrees_east", "long_name": "longitude"},
        ),
        "latitude": (
            "latitude",
            ERA5_LAT.astype(np.float32),
            {"units": "degrees_north", "long_name": "latitude"},
        ),
        "time": ("time", times, {"long_name": "time"}),
    }
    ds = xr.Dataset(
        data, coords=coords, attrs={"Conventions": "CF-1.6", "history": "data store download"}
    )
    if expver_split is not None:
        # final ERA5 (1) then preliminary ERA5T (5), each NaN where the other holds data
        first = ds.where(ds["time"] < times[expver_split])
        second = ds.where(ds["time"] >= times[expver_split])
        ds = xr.concat([first, second], dim=xr.DataArray([1, 5], dims="expver", name="expver"))
        ds = ds.transpose("time", "expver", "latitude", "longitude")
        enc = {k: {**v, "dtype": "float32"} for k, v in enc.items()}
        for v in enc.values():
            v.pop("scale_factor"), v.pop("add_offset")
    enc["time"] = {"units": "hours since 1900-01-01 00:00:00.0", "dtype": "int32"}
    ds.to_netcdf(path, encoding=enc)
    return path


def era5_new(w, path, *, with_z=True):
    """The data store's current layout: valid_time, with expver and number coordinates."""
    fields, _ = era5_fields(w)
    n = w["t"].shape[0]
    times = T0 + np.arange(n) * H
    data = {}
    for name, (arr, units, long_name) in fields.items():
        attrs = {
            "units": units,
            "long_name": long_name,
            "standard_name": "unknown",
            "GRIB_shortName": name,
            "GRIB_stepType": "accum" if name in ("tp", "ssrd", "strd") else "instant",
        }
        data[name] = (("valid_time", "latitude", "longitude"), arr.astype(np.float32), attrs)
    if with_z:
        data["z"] = (
            ("valid_time", "latitude", "longitude"),
            np.broadcast_to(w["orog"] * 9.80665, (n, NY, NX)).astype(np.float32),
            {"units": "m**2 s**-2", "long_name": "Geopotential", "standard_name": "geopotential"},
        )
    coords = {
        "number": (
            (),
            np.int64(0),
            {"long_name": "ensemble member numerical id", "standard_name": "realization"},
        ),
        "valid_time": ("valid_time", times, {"long_name": "time", "standard_name": "time"}),
        "latitude": ("latitude", ERA5_LAT, {"units": "degrees_north", "standard_name": "latitude"}),
        "longitude": (
            "longitude",
            ERA5_LON,
            {"units": "degrees_east", "standard_name": "longitude"},
        ),
        "expver": (
            "valid_time",
            np.array(["0001"] * n, dtype=object),
            {"long_name": "model experiment version"},
        ),
    }
    ds = xr.Dataset(data, coords=coords, attrs={"GRIB_centre": "ecmf", "Conventions": "CF-1.7"})
    enc = {"valid_time": {"units": "seconds since 1970-01-01", "dtype": "int64"}}
    ds.to_netcdf(path, encoding=enc)
    return path


def era5_twin(w, path):
    # ERA5 accumulations are sums over the hour ending at the valid time
    labels = T0 + np.arange(w["t"].shape[0]) * H
    bounds = np.stack([labels - H, labels], axis=1)
    grid = latlon_grid(ERA5_LAT, np.where(ERA5_LON > 180, ERA5_LON - 360, ERA5_LON))
    return twin_cf(w, labels, path, grid=grid, sw_point=False, bounds=bounds)


@pytest.mark.parametrize("layout", ["old", "old_expver", "new", "new_static_z"])
def test_era5_layouts_without_mapping(tmp_path, layout):
    w = weather(30)
    twin = open_forcing(era5_twin(w, tmp_path / "twin.nc"))
    static = None
    if layout == "old":
        path = era5_old(w, tmp_path / "era5.nc")
    elif layout == "old_expver":
        path = era5_old(w, tmp_path / "era5.nc", expver_split=20)
    elif layout == "new":
        path = era5_new(w, tmp_path / "era5.nc")
    else:
        path = era5_new(w, tmp_path / "era5.nc", with_z=False)
        static = tmp_path / "geo.nc"
        zz = xr.Dataset(
            {
                "z": (
                    ("valid_time", "latitude", "longitude"),
                    (w["orog"] * 9.80665)[None].astype(np.float32),
                    {"units": "m**2 s**-2", "long_name": "Geopotential"},
                )
            },
            coords={"valid_time": [T0], "latitude": ERA5_LAT, "longitude": ERA5_LON},
        )
        zz.to_netcdf(static)
    gf = open_forcing(path, static_path=static)
    # int16 packing keeps 1/60000 of each field's range
    packed = layout == "old"
    assert_same_weather(gf, twin, rtol=1e-5, atol=5e-3 if packed else 1e-3)
    # the grid: 0-360 longitudes and descending latitudes locate a point (18.9 W, 63.5 N)
    fi, fj = gf.grid_index_of(-18.9, 63.5)
    np.testing.assert_allclose([fi[0], fj[0]], [2.0, 4.4], atol=1e-9)


def test_era5_explicit_mapping_still_wins(tmp_path):
    w = weather(30)
    path = era5_new(w, tmp_path / "era5.nc")
    ds = xr.open_dataset(path).load()
    ds["t_other"] = ds["t2m"] + 10.0
    ds.to_netcdf(tmp_path / "era5b.nc")
    gf = open_forcing(tmp_path / "era5b.nc", variables={"air_temperature": {"name": "t_other"}})
    t = read_all(gf)["air_temperature"]
    np.testing.assert_allclose(t, w["t"].reshape(30, -1) + 10.0, atol=1e-3)

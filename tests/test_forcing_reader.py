"""Forcing reader: the grid x precipitation-form matrix and the reader's conversions.

External references named beside each check: CF conventions 1.8 (time bounds, cell_methods,
grid mappings), pyproj (projection round trips), MetPy (humidity and wind conversions).
"""

from __future__ import annotations

import numpy as np
import pytest
import xarray as xr
from pyproj import CRS, Transformer

from regionmap.io.forcing import open_forcing

LCC = {
    "grid_mapping_name": "lambert_conformal_conic",
    "standard_parallel": [45.0, 47.0],
    "longitude_of_central_meridian": 11.0,
    "latitude_of_projection_origin": 46.0,
}
T0 = np.datetime64("2026-01-01T01:00", "s")
GRIDS = ["latlon1d", "projected_m", "projected_km", "latlon2d"]
PRECIP = ["flux", "amount", "accumulated", "lwe_mm"]


def hourly_amounts(n_h, ny, nx, seed=1):
    """Per-hour amounts that are multiples of 1/64 kg m-2 (exact in binary floating point)."""
    rng = np.random.default_rng(seed)
    return (rng.integers(0, 200, size=(n_h, ny, nx)) / 64.0).astype(np.float64)


def grid_coords(kind, ny=6, nx=7):
    """(coords dict, field of the grid's own coordinates (ny, nx), truth(lon, lat) function)."""
    if kind == "latlon1d":
        lon = 11.0 + 0.05 * np.arange(nx)
        lat = 46.3 - 0.04 * np.arange(ny)  # decreasing, as many models write it
        coords = {
            "lat": ("y", lat, {"units": "degrees_north", "standard_name": "latitude"}),
            "lon": ("x", lon, {"units": "degrees_east", "standard_name": "longitude"}),
        }
        # a linear field of a few kelvin (centred on the grid, so 270 K + field is physical)
        field = 2.0 * (lon[None, :] - 11.0) + 3.0 * (lat[:, None] - 46.0)
        return coords, field, (lambda lo, la: 2.0 * (lo - 11.0) + 3.0 * (la - 46.0)), None
    x = -9000.0 + 3000.0 * np.arange(nx)
    y = -6000.0 + 3000.0 * np.arange(ny)
    crs = CRS.from_cf(LCC)
    to_xy = Transformer.from_crs("EPSG:4326", crs, always_xy=True)

    def truth(lo, la):
        px, py = to_xy.transform(lo, la)
        return 1e-4 * np.asarray(px) + 2e-4 * np.asarray(py)

    field = 1e-4 * x[None, :] + 2e-4 * y[:, None]
    if kind in ("projected_m", "projected_km"):
        f = 1e-3 if kind == "projected_km" else 1.0
        u = "km" if kind == "projected_km" else "m"
        coords = {
            "x": ("x", x * f, {"units": u, "standard_name": "projection_x_coordinate"}),
            "y": ("y", y * f, {"units": u, "standard_name": "projection_y_coordinate"}),
        }
        return coords, field, truth, "crs"
    xx, yy = np.meshgrid(x, y)
    lon2, lat2 = Transformer.from_crs(crs, "EPSG:4326", always_xy=True).transform(xx, yy)
    coords = {
        "latitude": (("y", "x"), lat2, {"units": "degrees_north", "standard_name": "latitude"}),
        "longitude": (("y", "x"), lon2, {"units": "degrees_east", "standard_name": "longitude"}),
    }
    return coords, field, truth, None


def make_forcing(
    grid="projected_m",
    precip="amount",
    n_h=48,
    ny=6,
    nx=7,
    *,
    amounts=None,
    reset_at=24,
    drop=(),
    extra=None,
):
    """A small CF-1.8 forcing Dataset on the requested grid with hourly time bounds."""
    coords, field, _, gm = grid_coords(grid, ny, nx)
    t = T0 + np.arange(n_h) * np.timedelta64(3600, "s")
    bnds = np.stack([t - np.timedelta64(3600, "s"), t], axis=1)
    hours = np.arange(n_h, dtype=float)[:, None, None]
    amounts = hourly_amounts(n_h, ny, nx) if amounts is None else amounts
    dims = ("time", "y", "x")
    gattr = {"grid_mapping": "crs"} if gm else {}
    data = {
        "t2m": (
            dims,
            270.0 + field[None] + 0.1 * hours,
            {"standard_name": "air_temperature", "units": "K", **gattr},
        ),
        "rh": (
            dims,
            np.broadcast_to(80.0 + 0 * hours, (n_h, ny, nx)).copy(),
            {"standard_name": "relative_humidity", "units": "%", **gattr},
        ),
        "u10": (
            dims,
            np.full((n_h, ny, nx), 3.0),
            {"standard_name": "eastward_wind", "units": "m s-1", **gattr},
        ),
        "v10": (
            dims,
            np.full((n_h, ny, nx), -4.0),
            {"standard_name": "northward_wind", "units": "m s-1", **gattr},
        ),
        "ssrd": (
            dims,
            np.full((n_h, ny, nx), 100.0),
            {
                "standard_name": "surface_downwelling_shortwave_flux_in_air",
                "units": "W m-2",
                "cell_methods": "time: mean",
                **gattr,
            },
        ),
        "orog": (
            ("y", "x"),
            1500.0 + 100 * field,
            {"standard_name": "surface_altitude", "units": "m", **gattr},
        ),
    }
    tattrs = {"bounds": "time_bnds"}
    if precip == "flux":
        data["pr"] = (
            dims,
            amounts / 3600.0,
            {
                "standard_name": "precipitation_flux",
                "units": "kg m-2 s-1",
                "cell_methods": "time: mean",
            },
        )
    elif precip == "amount":
        data["pr"] = (
            dims,
            amounts,
            {
                "standard_name": "precipitation_amount",
                "units": "kg m-2",
                "cell_methods": "time: sum",
            },
        )
    elif precip == "lwe_mm":
        data["pr"] = (
            dims,
            amounts,
            {
                "standard_name": "lwe_thickness_of_precipitation_amount",
                "units": "mm",
                "cell_methods": "time: sum",
            },
        )
    elif precip == "accumulated":
        acc = np.concatenate(
            [np.cumsum(amounts[:reset_at], axis=0), np.cumsum(amounts[reset_at:], axis=0)]
        )
        data["pr"] = (
            dims,
            acc,
            {
                "standard_name": "precipitation_amount",
                "units": "kg m-2",
                "cell_methods": "time: sum",
            },
        )
        bnds[:reset_at, 0] = bnds[0, 0]
        if reset_at < n_h:
            bnds[reset_at:, 0] = bnds[reset_at, 0]
    data.update(extra or {})
    ds = xr.Dataset(data, coords={"time": ("time", t, tattrs), **coords})
    ds["time_bnds"] = (("time", "nv"), bnds)
    ds = ds.assign_coords(
        height2=xr.DataArray(2.0, attrs=HEIGHT), height10=xr.DataArray(10.0, attrs=HEIGHT)
    )
    own_coords(ds, "t2m", "height2")
    for name in ("u10", "v10"):
        own_coords(ds, name, "height10")
    ds = ds.drop_vars(list(drop))
    if gm:
        ds["crs"] = xr.DataArray(np.int32(0), attrs=LCC)
    ds.attrs["Conventions"] = "CF-1.8"
    return ds


HEIGHT = {"units": "m", "standard_name": "height", "axis": "Z", "positive": "up"}


def own_coords(ds, name, height):
    """CF per-variable ``coordinates`` attribute (xarray would list every scalar coord)."""
    spatial = [
        c
        for c in ds.coords
        if ds[c].ndim > 0 and c != "time" and set(ds[c].dims) <= set(ds[name].dims)
    ]
    ds[name].encoding["coordinates"] = " ".join([height] + spatial)


def write(ds, tmp_path, name="f.nc"):
    path = tmp_path / name
    enc = {
        k: {"units": "hours since 2025-10-01 00:00:00", "dtype": "float64"}
        for k in ("time", "time_bnds")
        if k in ds.variables
    }
    if "time_bnds" not in ds.variables:
        ds["time"].attrs.pop("bounds", None)
    ds.to_netcdf(path, encoding=enc)
    return path


def bilinear(field, fi, fj):
    i0 = np.clip(np.floor(fi).astype(int), 0, field.shape[0] - 2)
    j0 = np.clip(np.floor(fj).astype(int), 0, field.shape[1] - 2)
    a, b = fi - i0, fj - j0
    return (
        (1 - a) * (1 - b) * field[i0, j0]
        + (1 - a) * b * field[i0, j0 + 1]
        + a * (1 - b) * field[i0 + 1, j0]
        + a * b * field[i0 + 1, j0 + 1]
    )


@pytest.mark.parametrize("precip", PRECIP)
@pytest.mark.parametrize("grid", GRIDS)
def test_reader_matrix_linear_field_and_deaccumulation(tmp_path, grid, precip):
    ds = make_forcing(grid, precip)
    gf = open_forcing(write(ds, tmp_path))
    _, _, truth, _ = grid_coords(grid)
    # points well inside the grid, from the grid's own lon/lat with fractional offsets
    rng = np.random.default_rng(3)
    fi_true = rng.uniform(0.2, 4.8, 20)
    fj_true = rng.uniform(0.2, 5.8, 20)
    lon = bilinear(gf.lon, fi_true, fj_true)
    lat = bilinear(gf.lat, fi_true, fj_true)
    fi, fj = gf.grid_index_of(lon, lat)
    t0 = (
        gf.read_block(
            ["air_temperature"], np.arange(6).repeat(7), np.tile(np.arange(7), 6), slice(0, 1)
        )["air_temperature"][0]
        .reshape(6, 7)
        .astype(np.float64)
    )
    # The reader keeps float32 values: compare relative to float32 resolution of ~270 K.
    # CF-1.8 §4-5: the field is linear in the grid's own coordinates (degrees, or projected
    # metres via pyproj's CRS.from_cf of the grid mapping), so bilinear interpolation in
    # index space reproduces it at any point.
    expect = 270.0 + truth(lon, lat)
    field = 270.0 + grid_coords(grid)[1]
    np.testing.assert_allclose(bilinear(field, fi, fj), expect, atol=1e-6)
    np.testing.assert_allclose(t0, field.astype(np.float32), rtol=0, atol=0)
    # de-accumulation / unit conversion round trip: hourly amounts come back as written
    # (CF-1.8 §7.3.1 time: sum with bounds; shared-start bounds = accumulation since start;
    # 1 mm of liquid water = 1 kg m-2 at 1000 kg m-3).
    precip_out = gf.precipitation.values
    amounts = hourly_amounts(48, 6, 7).astype(np.float32)
    if precip == "accumulated":
        np.testing.assert_array_equal(precip_out, amounts)
    else:
        np.testing.assert_allclose(precip_out, amounts, rtol=1e-6, atol=1e-7)
    assert gf.time[0] == T0 and gf.time.size == 48
    assert gf.heights_m == {"temperature": 2.0, "wind": 10.0} and gf.heights_source == "file"
    assert gf.counts == {
        "nan_filled": 0,
        "negative_precip_clipped": 0,
        "rh_clipped": 0,
        "gap_hours_filled": 0,
    }

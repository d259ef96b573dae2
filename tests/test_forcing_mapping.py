"""Forcing reader: the time coordinate found by meaning, and the ``[forcing.variables]``
mapping (explicit entries win; sums, interval kinds, mixing ratio, grid-relative winds).

Each check compares with the same weather written as plain CF-1.8 (the twin file) or with an
analytic value named beside the assertion.
"""

from __future__ import annotations

import numpy as np
import pytest
from test_forcing_reader import T0, hourly_amounts, make_forcing, write

from regionmap.config import config_from_dict
from regionmap.errors import ConfigError
from regionmap.io.forcing import open_forcing

ALL = ["air_temperature", "relative_humidity", "wind_speed", "wind_from_direction"]
ALL += ["shortwave_down", "precipitation", "surface_air_pressure"]


def save(ds, tmp_path, name):
    """Write with the time coordinate's CF units whatever the time coordinate is named."""
    path = tmp_path / name
    enc = {
        k: {"units": "hours since 2025-10-01 00:00:00", "dtype": "float64"}
        for k, v in ds.variables.items()
        if np.issubdtype(v.dtype, np.datetime64)
    }
    ds.to_netcdf(path, encoding=enc)
    return path


def read_all(gf, names=ALL):
    """Every grid point's series (time, point) of the named canonical outputs."""
    ny, nx = gf.surface_altitude.shape
    iy, ix = np.divmod(np.arange(ny * nx), nx)
    return gf.read_block(names, iy, ix)


def test_time_coordinate_on_another_dimension_is_found_by_meaning(tmp_path):
    # WRF writes XTIME on the dimension Time (which has no coordinate of its own): the integer
    # index of Time is not a time (it read as 1970-01-01 plus seconds)
    ds = make_forcing(precip="amount").drop_vars("time_bnds")
    ds["time"].attrs.pop("bounds")
    twin = open_forcing(write(ds, tmp_path, "twin.nc"))
    wrf_like = ds.rename({"time": "Time"}).rename_vars({"Time": "XTIME"})
    gf = open_forcing(save(wrf_like, tmp_path, "xtime.nc"))
    assert gf.time[0] == twin.time[0] == T0
    for name, v in read_all(twin).items():
        np.testing.assert_array_equal(read_all(gf)[name], v, err_msg=name)


def test_valid_time_as_dimension_coordinate(tmp_path):
    ds = make_forcing(precip="amount").drop_vars("time_bnds")
    ds["time"].attrs.pop("bounds")
    cds = ds.rename({"time": "valid_time"})
    gf = open_forcing(save(cds, tmp_path, "cds.nc"))
    assert gf.time[-1] == np.datetime64(ds["time"].values[-1], "s")


def test_explicit_mapping_wins_over_standard_name(tmp_path):
    ds = make_forcing()
    # a dew point without standard_name beside the file's relative_humidity (80 %)
    ds["d2m"] = (("time", "y", "x"), ds["t2m"].values - 10.0, {"units": "K"})
    mapped = open_forcing(write(ds, tmp_path), variables={"dew_point_temperature": {"name": "d2m"}})
    rh = mapped.relative_humidity.values
    # 10 K dew-point depression near 270-285 K gives roughly 45-50 % (Magnus formula, WMO-No.
    # 8 2018, Annex 4.B); the file's own RH is 80 %
    assert np.all((rh > 0.40) & (rh < 0.55))
    assert np.allclose(open_forcing(write(ds, tmp_path, "g.nc")).relative_humidity.values, 0.8)


def test_mapping_sums_variables_and_declares_interval_sums(tmp_path):
    ds = make_forcing(precip="amount")
    amounts = ds["pr"].values
    # convective and large-scale parts in mm, without standard names
    ds["rain_a"] = (("time", "y", "x"), amounts * 0.25, {"units": "mm"})
    ds["rain_b"] = (("time", "y", "x"), amounts * 0.75, {"units": "mm"})
    # ERA5's ssrd: J m-2 over the hour ending at the label
    ds["ssrd_j"] = (("time", "y", "x"), ds["ssrd"].values * 3600.0, {"units": "J m-2"})
    twin = open_forcing(write(ds, tmp_path, "twin.nc"))
    gf = open_forcing(
        write(ds.drop_vars(["pr", "ssrd"]), tmp_path, "parts.nc"),
        variables={
            "precipitation_amount": {"name": ["rain_a", "rain_b"], "kind": "sum"},
            "surface_downwelling_shortwave_flux_in_air": {"name": "ssrd_j"},
        },
    )
    a, b = read_all(gf), read_all(twin)
    # 1 mm of water = 1 kg m-2; 3600 J m-2 in one hour = 1 W m-2 (definitions)
    np.testing.assert_allclose(a["precipitation"], b["precipitation"], rtol=1e-6)
    np.testing.assert_allclose(a["shortwave_down"], b["shortwave_down"], rtol=1e-6)
    np.testing.assert_allclose(a["precipitation"].sum(), hourly_amounts(48, 6, 7).sum(), rtol=1e-6)


def test_instantaneous_flux_is_interpolated_not_spread(tmp_path):
    ds = make_forcing(precip="amount").drop_vars("time_bnds").isel(time=slice(0, None, 3))
    ds["time"].attrs.pop("bounds")
    sw = np.arange(ds.sizes["time"], dtype=float)[:, None, None] * 30.0 + np.zeros((1, 6, 7))
    ds["ssrd"] = (("time", "y", "x"), sw, {"units": "W m-2"})
    gf = open_forcing(
        write(ds, tmp_path),
        variables={
            "surface_downwelling_shortwave_flux_in_air": {"name": "ssrd", "kind": "instantaneous"}
        },
    )
    # instantaneous values at labels 3 h apart: linear in time between them (0, 10, 20, 30 ...
    # W m-2 for the hours ending 0, 1, 2, 3 h after the first label)
    got = read_all(gf, ["shortwave_down"])["shortwave_down"][:7, 0]
    np.testing.assert_allclose(got, np.arange(7) * 10.0, atol=1e-4)


def test_mixing_ratio_and_grid_relative_winds(tmp_path):
    ds = make_forcing()
    w = np.linspace(0.001, 0.005, 48)[:, None, None] * np.ones((1, 6, 7))
    q = w / (1.0 + w)  # specific humidity of mixing ratio w (WMO-No. 8 2018, Annex 4.B)
    ds["q"] = (("time", "y", "x"), q, {"standard_name": "specific_humidity", "units": "1"})
    twin = open_forcing(write(ds.drop_vars("rh"), tmp_path, "twin.nc"))
    # grid-relative components of the earth-relative wind (3, -4) m/s on a grid turned by
    # alpha: u_g = u cos a + v sin a, v_g = -u sin a + v cos a (the inverse rotation)
    alpha = np.radians(np.linspace(-20.0, 25.0, 42).reshape(6, 7))
    cos, sin = np.cos(alpha), np.sin(alpha)
    grid = ds.drop_vars(["rh", "u10", "v10"])
    grid["Q2"] = (("time", "y", "x"), w * 1000.0, {"units": "g kg-1"})
    grid["U10"] = (("time", "y", "x"), np.broadcast_to(3.0 * cos - 4.0 * sin, (48, 6, 7)), {})
    grid["V10"] = (("time", "y", "x"), np.broadcast_to(-3.0 * sin - 4.0 * cos, (48, 6, 7)), {})
    grid["COSALPHA"] = (("time", "y", "x"), np.broadcast_to(cos, (48, 6, 7)), {"units": "1"})
    grid["SINALPHA"] = (("time", "y", "x"), np.broadcast_to(sin, (48, 6, 7)), {"units": "1"})
    for v in ("U10", "V10"):
        grid[v].attrs["units"] = "m s-1"
    rot = ["COSALPHA", "SINALPHA"]
    gf = open_forcing(
        write(grid, tmp_path, "grid.nc"),
        variables={
            "specific_humidity": {"name": "Q2", "mixing_ratio": True},
            "eastward_wind": {"name": "U10", "rotation": rot},
            "northward_wind": {"name": "V10", "rotation": rot},
        },
    )
    a, b = read_all(gf), read_all(twin)
    for name in ("relative_humidity", "wind_speed", "wind_from_direction"):
        np.testing.assert_allclose(a[name], b[name], rtol=1e-5, atol=1e-4, err_msg=name)


def test_mapping_options_in_config_and_their_errors():
    region = {"dem": "d.tif", "zones": "z.geojson"}
    base = {"region": region, "forcing": {"path": "f.nc"}}
    cfg = config_from_dict(
        {
            "region": region,
            "forcing": {
                "path": "f.nc",
                "variables": {
                    "precipitation_amount": {"name": ["RAINNC", "RAINC"], "accumulated": True},
                    "eastward_wind": {"name": "U10", "rotation": ["COSALPHA", "SINALPHA"]},
                    "surface_downwelling_shortwave_flux_in_air": {
                        "name": "SWDOWN",
                        "kind": "instantaneous",
                    },
                },
            },
        }
    )
    assert cfg.forcing.variables["precipitation_amount"].name == ["RAINNC", "RAINC"]
    with pytest.raises(ConfigError, match="did you mean 'rotation'"):
        base["forcing"]["variables"] = {"eastward_wind": {"name": "U", "rotaton": ["a", "b"]}}
        config_from_dict(base)
    with pytest.raises(ConfigError, match="kind"):
        base["forcing"]["variables"] = {"precipitation_amount": {"name": "p", "kind": "avg"}}
        config_from_dict(base)
    with pytest.raises(ConfigError, match="rotated as a pair"):
        open_forcing(
            "unused.nc",
            variables={"eastward_wind": {"name": "U10", "rotation": ["C", "S"]}},
        )

"""Forcing reader: physical conversions, time handling, multi-file, lazy reads.

Outside references: MetPy 1.7 (metpy.calc) for humidity, wind and standard-atmosphere
pressure; CF-1.8 §7.3 for cell methods and bounds.
"""

from __future__ import annotations

import dask.array as da
import numpy as np
import pytest
import xarray as xr
from test_forcing_reader import T0, make_forcing, own_coords, write

from regionmap.constants import GRAVITY_M_S2
from regionmap.io.forcing import open_forcing

metpy_calc = pytest.importorskip("metpy.calc")
from metpy.units import units as mu  # noqa: E402


def test_relative_humidity_from_specific_humidity_matches_metpy(tmp_path):
    ds = make_forcing()
    q = np.linspace(0.001, 0.004, 48)[:, None, None] * np.ones((1, 6, 7))
    ds["q2m"] = (
        ("time", "y", "x"),
        q * 1000.0,
        {"standard_name": "specific_humidity", "units": "g kg-1"},
    )
    ds["ps"] = (
        ("time", "y", "x"),
        np.full(q.shape, 850.0),
        {"standard_name": "surface_air_pressure", "units": "hPa"},
    )
    gf = open_forcing(write(ds.drop_vars("rh"), tmp_path))
    t = ds["t2m"].values
    ref = (
        metpy_calc.relative_humidity_from_specific_humidity(850 * mu.hPa, t * mu.K, q * mu("kg/kg"))
        .to("")
        .m
    )
    # MetPy uses Bolton (1980) saturation pressure, we use Buck (1981): they agree to ~0.1 %
    # of the value between -20 and +10 degC (Buck 1981, Table 2).
    np.testing.assert_allclose(gf.relative_humidity.values, np.minimum(ref, 1.0), rtol=3e-3)
    np.testing.assert_allclose(gf.surface_air_pressure.values, 85000.0, rtol=1e-6)


def test_specific_humidity_without_pressure_uses_standard_atmosphere_at_model_height(tmp_path):
    ds = make_forcing()
    ds["q2m"] = (
        ("time", "y", "x"),
        np.full((48, 6, 7), 0.002),
        {"standard_name": "specific_humidity", "units": "kg/kg"},
    )
    gf = open_forcing(write(ds.drop_vars("rh"), tmp_path))
    # MetPy height_to_pressure_std (ICAO standard atmosphere), within 0.2 hPa
    ref = metpy_calc.height_to_pressure_std(ds["orog"].values * mu.m).to("Pa").m
    np.testing.assert_allclose(gf.surface_air_pressure.values[0], ref, atol=20.0)
    t, p = ds["t2m"].values, np.broadcast_to(ref, (48, 6, 7))
    rh = (
        metpy_calc.relative_humidity_from_specific_humidity(
            p * mu.Pa, t * mu.K, 0.002 * mu("kg/kg")
        )
        .to("")
        .m
    )
    np.testing.assert_allclose(gf.relative_humidity.values, np.minimum(rh, 1), rtol=3e-3)


def test_dew_point_in_degree_c_spelling_matches_metpy(tmp_path):
    ds = make_forcing()
    td = ds["t2m"].values - 273.15 - 4.0
    ds["d2m"] = (
        ("time", "y", "x"),
        td,
        {"standard_name": "dew_point_temperature", "units": "degree_C"},
    )
    ds["t2m"] = ds["t2m"] - 273.15
    ds["t2m"].attrs.update(standard_name="air_temperature", units="degrees_C")
    own_coords(ds, "t2m", "height2")
    gf = open_forcing(write(ds.drop_vars("rh"), tmp_path))
    np.testing.assert_allclose(gf.air_temperature.values, ds["t2m"].values + 273.15, rtol=1e-6)
    ref = (
        metpy_calc.relative_humidity_from_dewpoint(ds["t2m"].values * mu.degC, td * mu.degC)
        .to("")
        .m
    )
    np.testing.assert_allclose(gf.relative_humidity.values, ref, rtol=3e-3)  # Buck vs Bolton


def test_wind_from_components_matches_metpy(tmp_path):
    gf = open_forcing(write(make_forcing(), tmp_path))
    u, v = 3.0 * mu("m/s"), -4.0 * mu("m/s")
    np.testing.assert_allclose(gf.wind_speed.values, metpy_calc.wind_speed(u, v).m, rtol=1e-6)
    np.testing.assert_allclose(
        gf.wind_from_direction.values, metpy_calc.wind_direction(u, v).m, rtol=1e-6
    )


def test_speed_direction_inputs_interpolate_direction_through_north(tmp_path):
    # 3-hourly states: the direction goes 350 -> 10 deg; the hour between is near 0/360,
    # not 180 (interpolating the unit vector, not the angle).
    ds = make_forcing(drop=("u10", "v10")).isel(time=slice(None, None, 3))
    n = ds.sizes["time"]
    ds["time_bnds"][:, 0] = ds["time_bnds"][:, 1] - np.timedelta64(3, "h")
    ds["wspd"] = (
        ("time", "y", "x"),
        np.full((n, 6, 7), 5.0),
        {"standard_name": "wind_speed", "units": "km h-1"},
    )
    ds["wdir"] = (
        ("time", "y", "x"),
        np.where(np.arange(n) % 2 == 0, 350.0, 10.0)[:, None, None] * np.ones((1, 6, 7)),
        {"standard_name": "wind_from_direction", "units": "degree"},
    )
    gf = open_forcing(write(ds, tmp_path))
    d = gf.wind_from_direction.values[:, 0, 0]
    assert np.all((d > 340) | (d < 20))
    np.testing.assert_allclose(gf.wind_speed.values, 5.0 / 3.6, rtol=1e-6)  # km/h -> m/s (pint)


def test_three_hourly_tail_amounts_conserved_states_interpolated(tmp_path):
    ds = make_forcing(precip="amount")
    head = ds.isel(time=slice(0, 24))
    tail = ds.isel(time=slice(26, 48, 3))  # labels every 3 h from hour 26
    tail["pr"] = (
        ds["pr"]
        .isel(time=slice(24, 48))
        .coarsen(time=3, boundary="trim")
        .sum()
        .assign_coords(time=tail.time)
    )
    tail["time_bnds"][:, 0] = tail["time_bnds"][:, 1] - np.timedelta64(3, "h")
    # the 3-hourly means of shortwave: give 300 W m-2 means on the tail
    tail["ssrd"][:] = 300.0
    both = xr.concat(
        [head, tail], dim="time", data_vars="minimal", coords="minimal", compat="override"
    )
    gf = open_forcing(write(both, tmp_path))
    p = gf.precipitation.values
    assert gf.time.size == 48
    # CF-1.8 §7.3: each 3 h sum is spread over its hours, so the total is conserved exactly
    np.testing.assert_allclose(p[24:].reshape(8, 3, 6, 7).sum(axis=1), tail["pr"].values, rtol=1e-6)
    np.testing.assert_allclose(p.sum(axis=0), both["pr"].values.sum(axis=0), rtol=1e-6)
    np.testing.assert_allclose(gf.shortwave_down.values[24:], 300.0, rtol=1e-6)
    t = gf.air_temperature.values[:, 0, 0]
    np.testing.assert_allclose(np.diff(t), 0.1, atol=2e-4)  # linear in time: interpolation exact


def test_integral_shortwave_and_accumulated_mapping_without_bounds(tmp_path):
    ds = make_forcing(precip="accumulated", reset_at=48).drop_vars("time_bnds")
    ds["ssrd"] = ds["ssrd"].cumsum("time") * 3600.0
    ds["ssrd"].attrs = {"units": "J m-2"}
    ds["pr"] = ds["pr"].assign_attrs(units="mm")
    ds["pr"].attrs.pop("standard_name")
    ds["ssrd"].attrs["standard_name"] = (
        "integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air"
    )
    mapping = {
        "precipitation_amount": {"name": "pr", "units": "mm", "accumulated": True},
        # accumulated since the start: without the flag, 100 W m-2 summed for 16 h would be
        # read as one hour of 1600 W m-2 (refused as unphysical)
        "integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air": {
            "name": "ssrd",
            "accumulated": True,
        },
    }
    path = write(ds, tmp_path)
    gf = open_forcing(path, variables=mapping)
    np.testing.assert_allclose(gf.shortwave_down.values, 100.0, rtol=1e-6)
    # without bounds the first accumulated label is the baseline: the hourly axis starts one later
    assert gf.time[0] == T0 + np.timedelta64(1, "h")
    np.testing.assert_allclose(gf.precipitation.values, ds["pr"].diff("time").values, rtol=1e-6)


def test_glob_later_file_wins_and_read_block_counts(tmp_path):
    a = make_forcing().isel(time=slice(0, 30))
    b = make_forcing().isel(time=slice(20, 48))
    b["t2m"] = b["t2m"] + 1.0
    write(a, tmp_path, "run_a.nc")
    write(b, tmp_path, "run_b.nc")
    gf = open_forcing("run_*.nc", base_dir=tmp_path)
    t = gf.air_temperature.values
    assert gf.time.size == 48
    np.testing.assert_allclose(
        t[20:, 1, 1], a["t2m"].values[0, 1, 1] + 1.0 + 0.1 * np.arange(20, 48), rtol=1e-6
    )
    np.testing.assert_allclose(t[:20, 1, 1], a["t2m"].values[:20, 1, 1], rtol=1e-6)
    assert isinstance(gf.air_temperature.data, da.Array)  # lazy until asked
    iy, ix = np.array([0, 2, 5]), np.array([1, 3, 6])
    assert gf.reads == 0
    block = gf.read_block(
        ["air_temperature", "precipitation", "relative_humidity"], iy, ix, slice(10, 34)
    )
    assert gf.reads == 1 and gf.points_read == 9
    assert (
        block["air_temperature"].shape == (24, 3) and block["air_temperature"].dtype == np.float32
    )
    np.testing.assert_array_equal(block["air_temperature"], t[10:34, iy, ix])
    np.testing.assert_array_equal(block["precipitation"], gf.precipitation.values[10:34, iy, ix])


def test_upper_air_temperature_and_static_geopotential(tmp_path):
    ds = make_forcing(drop=("orog",))
    levels = np.array([850.0, 700.0, 500.0])
    ta = 275.0 - 10 * np.arange(3)[None, :, None, None] + np.zeros((48, 3, 6, 7))
    ds["ta"] = (("time", "plev", "y", "x"), ta, {"standard_name": "air_temperature", "units": "K"})
    ds = ds.assign_coords(plev=("plev", levels, {"units": "hPa", "standard_name": "air_pressure"}))
    static = xr.Dataset(
        {
            "z": (
                ("y", "x"),
                np.full((6, 7), 1800.0 * GRAVITY_M_S2),
                {"standard_name": "surface_geopotential", "units": "m2 s-2"},
            )
        }
    )
    static.to_netcdf(tmp_path / "static.nc")
    gf = open_forcing(write(ds, tmp_path), static_path=tmp_path / "static.nc")
    np.testing.assert_allclose(gf.surface_altitude, 1800.0)
    np.testing.assert_allclose(gf.upper_air_pressure_pa, levels * 100.0)
    assert gf.upper_air_temperature.dims == ("time", "level", "y", "x")
    np.testing.assert_allclose(
        gf.upper_air_temperature["level"].values, levels * 100.0
    )  # hPa -> Pa (pint)
    np.testing.assert_allclose(gf.upper_air_temperature.values, ta, rtol=1e-6)
    blk = gf.read_block(["upper_air_temperature"], [1], [2], slice(0, 5))["upper_air_temperature"]
    assert blk.shape == (5, 3, 1)


def test_zarr_store_reads_like_netcdf(tmp_path):
    ds = make_forcing(grid="latlon2d")
    ds.to_zarr(tmp_path / "f.zarr", consolidated=False)
    gz = open_forcing(tmp_path / "f.zarr")
    gn = open_forcing(write(ds, tmp_path))
    np.testing.assert_array_equal(gz.air_temperature.values, gn.air_temperature.values)
    assert gz.crs is None and gz.grid.kind == "latlon2d"


def test_half_hourly_amounts_sum_to_hourly_and_start_end_cut(tmp_path):
    # 30-min data with bounds: two half-hour sums make each hourly amount (CF-1.8 §7.3)
    ds = make_forcing(n_h=24)
    t = T0 - np.timedelta64(30, "m") + np.arange(48) * np.timedelta64(30, "m")
    half = ds.interp(time=t, kwargs={"fill_value": "extrapolate"})
    amounts = np.arange(48 * 6 * 7, dtype=float).reshape(48, 6, 7) % 5 / 8.0
    half["pr"] = (("time", "y", "x"), amounts, ds["pr"].attrs)
    half["time_bnds"] = (("time", "nv"), np.stack([t - np.timedelta64(30, "m"), t], axis=1))
    half["time"].attrs["bounds"] = "time_bnds"
    gf = open_forcing(write(half, tmp_path), start="2026-01-01T03:00", end="2026-01-01T20:00")
    assert str(gf.time[0]) == "2026-01-01T03:00:00" and gf.time.size == 18
    expect = amounts.reshape(24, 2, 6, 7).sum(axis=1)[2:20]  # hour ending 03:00 = halves 2 and 3
    np.testing.assert_allclose(gf.precipitation.values, expect, rtol=1e-6)


def test_settings_object_and_freezing_rain_variable(tmp_path):
    from regionmap.config import ForcingSection

    ds = make_forcing()
    ds["fzra"] = (("time", "y", "x"), np.full((48, 6, 7), 0.25), {"units": "1"})
    write(ds, tmp_path)
    section = ForcingSection(
        path="f.nc", variables={"freezing_rain_frac": {"name": "fzra"}}, end="2026-01-02T00:00"
    )
    gf = open_forcing(section, base_dir=tmp_path)
    assert str(gf.time[-1]) == "2026-01-02T00:00:00"
    np.testing.assert_allclose(gf.freezing_rain_frac.values, 0.25)
    assert gf.upper_air_temperature is None
    assert "freezing_rain_frac" in gf.available


def test_height_stored_as_a_length_one_dimension(tmp_path):
    ds = make_forcing()
    t2 = ds["t2m"].drop_vars("height2", errors="ignore").expand_dims(height=[2.0], axis=1)
    ds = ds.drop_vars("t2m").assign(t2m=t2)
    ds["height"].attrs.update(units="m", standard_name="height")
    gf = open_forcing(write(ds, tmp_path))
    assert gf.heights_m["temperature"] == 2.0 and gf.upper_air_temperature is None
    np.testing.assert_allclose(gf.air_temperature.values, t2.values[:, 0], rtol=1e-6)

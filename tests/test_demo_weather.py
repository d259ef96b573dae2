"""The demo season's weather generator: CF metadata, raw-vs-CF equivalence through the
reader, and the designed events as seen in the written file.

Outside references are named beside each check (CF-1.8, pyproj, pvlib, Hachikubo 2001,
ICAO standard atmosphere). Design values (event windows, the 2200 m freezing level) come
from the events file, which is what the rest of the chain is tested against.
"""

from __future__ import annotations

import json

import affine
import numpy as np
import pytest
import xarray as xr
from pyproj import CRS

from regionmap.demo.weather import (
    demo_events,
    demo_variables_mapping,
    model_grid,
    write_demo_events,
    write_demo_forcing,
)
from regionmap.io.forcing import open_forcing

DEM_CRS = "EPSG:32632"
TRANSFORM = affine.Affine(100.0, 0.0, 600000.0, 0.0, -100.0, 5180000.0)


def synthetic_dem(n=300):
    """An invented 300 x 300 px, 100 m relief between 1200 and 3200 m (test input only)."""
    yy, xx = np.mgrid[0:n, 0:n]
    z = 2200 + 900 * np.sin(xx / 40.0) * np.cos(yy / 55.0) + 300 * np.cos((xx + yy) / 23.0)
    return np.clip(z, 1200.0, 3200.0)


@pytest.fixture(scope="module")
def season(tmp_path_factory):
    d = tmp_path_factory.mktemp("demo")
    dem = synthetic_dem()
    cf = write_demo_forcing(d / "demo.nc", dem, TRANSFORM, DEM_CRS)
    raw = write_demo_forcing(d / "demo_raw.nc", dem, TRANSFORM, DEM_CRS, raw=True)
    events = write_demo_events(d / "events.json")
    return {"cf": cf, "raw": raw, "events": events, "dem": dem, "ds": xr.open_dataset(cf)}


def test_cf18_metadata_throughout(season):
    ds = season["ds"]
    assert ds.attrs["Conventions"] == "CF-1.8"
    # CF-1.8 §7.1: the time coordinate names its bounds; bounds close at the label
    assert ds["time"].attrs["bounds"] == "time_bnds"
    np.testing.assert_array_equal(ds["time_bnds"].values[:, 1], ds["time"].values)
    assert np.all(np.diff(ds["time_bnds"].values, axis=1) == np.timedelta64(3600, "s"))
    for name, var in ds.data_vars.items():
        if "time" in var.dims and name != "time_bnds":
            assert var.attrs.get("standard_name") and var.attrs.get("units"), name
            assert var.attrs.get("grid_mapping") == "crs", name
            assert var.attrs.get("cell_methods", "").startswith("time: "), name
    assert ds["pr"].attrs["cell_methods"] == "time: sum"
    assert ds["rsds"].attrs["cell_methods"] == "time: mean"
    # pyproj: the CF grid mapping round-trips to the DEM's CRS
    assert CRS.from_cf(dict(ds["crs"].attrs)) == CRS.from_user_input(DEM_CRS)
    assert ds["tas"].dtype == np.float32


def test_demo_file_is_small(season):
    # the design asks for a few MB for the full season over a 300 x 300 px DEM
    assert season["cf"].stat().st_size < 4e6
    assert season["raw"].stat().st_size < 8e6


def test_raw_variant_reads_to_the_same_canonical_values(season):
    a = open_forcing(season["cf"])
    b = open_forcing(
        season["raw"],
        variables=demo_variables_mapping(),
        heights_m={"wind": 10.0, "temperature": 2.0},
    )
    assert a.grid.kind == "projected" and b.grid.kind == "latlon2d" and b.crs is None
    np.testing.assert_array_equal(a.time, b.time)
    assert str(a.time[0]) == "2025-11-01T00:00:00" and str(a.time[-1]) == "2026-04-30T23:00:00"
    np.testing.assert_allclose(b.surface_altitude, a.surface_altitude, rtol=1e-6)
    # 2-D lat/lon inversion vs the projected grid's own: same fractional indices
    lon, lat = a.lon[3:5, 3:5].ravel() + 0.001, a.lat[3:5, 3:5].ravel() + 0.001
    np.testing.assert_allclose(
        np.c_[b.grid_index_of(lon, lat)], np.c_[a.grid_index_of(lon, lat)], atol=1e-6
    )
    for name, tol in (
        ("air_temperature", 0),
        ("relative_humidity", 1e-5),
        ("wind_speed", 1e-5),
        ("shortwave_down", 1e-4),
        ("longwave_down", 1e-4),
        ("precipitation", 1e-6),
        ("surface_air_pressure", 0),
        ("upper_air_temperature", 0),
    ):
        np.testing.assert_allclose(
            getattr(b, name).values, getattr(a, name).values, atol=tol, rtol=0, err_msg=name
        )
    d = np.abs(b.wind_from_direction.values - a.wind_from_direction.values)
    assert np.minimum(d, 360 - d).max() < 1e-3


def test_events_file_and_freezing_level_during_rain_on_snow(season):
    doc = json.loads(season["events"].read_text())
    assert doc == json.loads(json.dumps(demo_events()))
    ros = doc["expected"]["rain_crust"]
    ds = season["ds"]
    t0 = np.datetime64(ros["event_time"][0]) + np.timedelta64(6, "h")
    t1 = np.datetime64(ros["event_time"][1]) - np.timedelta64(6, "h")
    sub = ds["tas"].sel(time=slice(t0, t1)).values - 273.15
    z = ds["orog"].values.ravel()
    for field in sub:
        slope, icpt = np.polyfit(z, field.ravel(), 1)
        # freezing level = height of the 0 degC isotherm (WMO definition) on the model terrain
        assert abs(-icpt / slope - ros["freezing_level_m"]) < 25.0
    # the designed amount: a long light rain of 10-20 kg m-2 below the freezing level (the
    # design asks for this range; common practice for a rain crust without melting the pack)
    total = ds["pr"].sel(time=slice(*ros["event_time"])).sum("time").values
    below = ds["orog"].values < ros["freezing_level_m"]
    lo, hi = ros["rain_kg_m2_below_freezing_level"]
    assert below.any() and lo <= total[below].mean() <= hi
    assert total[below].min() > 0.6 * lo and total[below].max() < hi


def test_no_rain_before_spring_outside_the_designed_events(season):
    ds = season["ds"].sel(time=slice(None, "2026-03-31T23:00"))
    ev = demo_events()
    assert ev["expected"]["no_background_rain"]["before"] == "2026-04-01T00:00"
    windows = [
        (np.datetime64(e["start"]), np.datetime64(e["end"]))
        for e in ev["events"]
        if e["id"] in ev["expected"]["no_background_rain"]["rain_only_in"]
    ]
    # Jennings et al. (2018), Nat. Commun. 9, 1148, Table 2: above about +0.9 degC at 97 % RH
    # more than half of the precipitation is rain; anything that warm and wet is rain
    wet_warm = ((ds["pr"].values > 0.05) & (ds["tas"].values > 273.15 + 0.9)).any(axis=(1, 2))
    hours = ds["time"].values[wet_warm]
    inside = np.zeros(hours.size, bool)
    for a, b in windows:
        inside |= (hours >= a - np.timedelta64(6, "h")) & (hours <= b + np.timedelta64(6, "h"))
    assert hours.size > 0 and inside.all(), hours[~inside][:5]


def test_freezing_rain_only_in_its_episode(season):
    ds = season["ds"]
    ev = demo_events()["expected"]["freezing_rain"]
    z_level = 288.15 / 0.0065 * (1 - (ds["plev"].values / 101325.0) ** (1 / 5.25588))  # ICAO
    tas = ds["tas"].values - 273.15
    upper = ds["ta_plev"].values[:, :, 0, 0] - 273.15  # uniform in space by design
    alt = ds["orog"].values
    above = z_level[None, :, None, None] > alt[None, None]
    warm_aloft = ((upper[:, :, None, None] > 0.5) & above).any(axis=1)
    flag = warm_aloft & (tas < 0) & (ds["pr"].values > 0.05)  # melting layer over sub-freezing air
    hours = ds["time"].values[flag.any(axis=(1, 2))]
    assert hours.size >= 6
    assert hours.min() >= np.datetime64(ev["event_time"][0]) and hours.max() <= np.datetime64(
        ev["event_time"][1]
    )
    core = ds.sel(time="2026-02-11T13:00")
    low = core["orog"].values < ev["glaze_below_m"] - 25.0  # values are rounded to 1/64 K
    assert low.any() and np.all(core["tas"].values[low] < 273.15)


def test_surface_hoar_nights_are_calm_clear_and_humid(season):
    ds = season["ds"]
    ev = demo_events()["expected"]["surface_hoar"]
    nights = ds.sel(time=slice(*ev["formed_between"]))
    night = (nights["rsds"] == 0).values
    # Hachikubo (2001), Ann. Glaciol. 32: deposition largest at RH > 90 % and wind 0.5-3.5 m/s
    assert np.median(nights["hurs"].values[night]) > 90.0
    assert nights["wind_speed"].values.max() < 3.5
    # clear: the night longwave stays well below the cloudy-sky sigma T^4 (Crawford & Duchon 1999)
    sigma_t4 = 5.670374419e-8 * nights["tas"].values ** 4
    assert np.all(nights["rlds"].values < 0.85 * sigma_t4)
    burial = ds["pr"].sel(time=slice(ev["buried_at"], None)).isel(time=slice(0, 48)).sum("time")
    assert float(burial.min()) > 20.0  # a real burial: tens of kg m-2 in two days


def test_storm_veers_and_cools_behind_the_front(season):
    ds = season["ds"]
    ev = {e["id"]: e for e in demo_events()["events"]}["early_snow"]
    sub = ds.sel(time=slice(ev["start"], ev["end"]))
    d = sub["wind_dir"].values[:, 0, 0]
    # common practice (synoptic meteorology texts): a cold-front passage veers the wind from
    # SW to NW in the Northern Hemisphere
    assert d[6] < 240.0 and d[-7] > 290.0
    # the design's peak wind is reached (the grid raises wind with model terrain)
    assert sub["wind_speed"].values.max() >= 0.9 * ev["wind_m_s"]


def test_burial_storm_has_ordinary_wind(season):
    ds = season["ds"]
    ev = demo_events()["expected"]["surface_hoar"]
    sub = ds.sel(time=slice(ev["buried_at"], ev["buried_by"]))
    # the design: an ordinary storm, moderate wind (5-8 m/s at 10 m on the grid), not a calm
    # one; whether the hoar survives is left to the terrain's shelter
    assert 5.0 <= ev["burial_wind_m_s"] <= 8.0
    assert 5.0 <= float(sub["wind_speed"].values.max()) <= 1.5 * 8.0
    assert float(sub["pr"].sum("time").min()) > 20.0


@pytest.mark.filterwarnings("ignore:DatetimeIndex.dayofyear")
def test_shortwave_respects_the_sun_pvlib(season):
    pvlib = pytest.importorskip("pvlib")
    ds = season["ds"]
    from pyproj import Transformer

    # the file's first grid point, in lon/lat by pyproj
    lon, lat = Transformer.from_crs(DEM_CRS, "EPSG:4326", always_xy=True).transform(
        float(ds["x"][0]), float(ds["y"][0])
    )
    sub = ds.sel(time=slice("2025-12-01", "2025-12-10"))
    times = sub["time"].values
    import pandas as pd

    start = pvlib.solarposition.get_solarposition(
        pd.DatetimeIndex(times - np.timedelta64(1, "h"), tz="UTC"), lat, lon
    )
    end = pvlib.solarposition.get_solarposition(pd.DatetimeIndex(times, tz="UTC"), lat, lon)
    sw = sub["rsds"].values[:, 0, 0]
    night = (start["elevation"].values < -2) & (end["elevation"].values < -2)
    assert np.all(sw[night] == 0.0)
    # never above the extraterrestrial horizontal irradiance of the brighter interval end (pvlib)
    e0 = pvlib.irradiance.get_extra_radiation(
        pd.DatetimeIndex(times, tz="UTC"), solar_constant=1361.0
    ).values
    top = e0 * np.maximum(
        np.cos(np.radians(start["zenith"].values)), np.cos(np.radians(end["zenith"].values))
    )
    assert np.all(sw <= np.maximum(top, 0) + 1.0)
    assert sw.max() > 200.0


def test_lapse_rate_is_the_standard_atmosphere_outside_the_inversion(season):
    ds = season["ds"].sel(time=slice("2025-12-01", "2025-12-31"))
    z = ds["orog"].values.ravel()
    slopes = [np.polyfit(z, f.ravel(), 1)[0] for f in ds["tas"].values[::24]]
    # ICAO Doc 7488 / ISO 2533: 6.5 K per km (the demo's normal-weather lapse rate)
    np.testing.assert_allclose(slopes, -0.0065, atol=1e-4)


def test_deterministic_from_seed(tmp_path):
    dem = synthetic_dem(60)
    kw = dict(start="2026-01-15", end="2026-01-22T23:00")
    a = write_demo_forcing(tmp_path / "a.nc", dem, TRANSFORM, DEM_CRS, seed=7, **kw)
    b = write_demo_forcing(tmp_path / "b.nc", dem, TRANSFORM, DEM_CRS, seed=7, **kw)
    c = write_demo_forcing(tmp_path / "c.nc", dem, TRANSFORM, DEM_CRS, seed=8, **kw)
    da_, db, dc = (xr.open_dataset(p) for p in (a, b, c))
    np.testing.assert_array_equal(da_["tas"].values, db["tas"].values)
    assert not np.array_equal(da_["tas"].values, dc["tas"].values)
    # the designed rain-on-snow core does not depend on the seed
    core = slice("2026-01-18T06", "2026-01-19T12")
    np.testing.assert_array_equal(da_["tas"].sel(time=core).values, dc["tas"].sel(time=core).values)


def test_model_terrain_is_a_smoothed_block_mean_larger_than_the_dem():
    dem = synthetic_dem()
    x, y, alt = model_grid(dem, TRANSFORM, 3000.0)
    assert x[0] < 600000.0 and x[-1] > 630000.0 and y[0] < 5150000.0 and y[-1] > 5180000.0
    assert alt.min() >= dem.min() and alt.max() <= dem.max()
    assert np.ptp(alt) < np.ptp(dem)  # smoothed: the model does not see the peaks
    assert abs(alt.mean() - dem.mean()) < 150.0

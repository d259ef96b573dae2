"""Solar geometry and irradiance partitioning against pvlib (the package index's oracle)."""

import numpy as np
import pandas as pd
import pvlib
import pytest

from regionmap.downscale import solar

# An invented mid-latitude mountain site (coordinates only).
LAT, LON, ALT = 46.5, 10.3, 2100.0


def test_solar_position_noaa_vs_nrel_spa_pvlib_hourly_year():
    # Oracle: pvlib.solarposition.get_solarposition(method="nrel_numpy"), NREL SPA of
    # Reda & Andreas (2004), Solar Energy 76(5), 577-589. Issue 3 tolerance: 0.3 deg daytime.
    times = pd.date_range("2025-01-01", "2025-12-31 23:00", freq="1h", tz="UTC")
    ref = pvlib.solarposition.get_solarposition(times, LAT, LON, altitude=ALT, method="nrel_numpy")
    zen, az = solar.solar_position_noaa(times.tz_localize(None).to_numpy(), LAT, LON)
    day = ref["elevation"].to_numpy() > 0.0
    assert day.sum() > 4000
    dz = np.abs(zen[day] - ref["zenith"].to_numpy()[day])
    daz = np.abs((az[day] - ref["azimuth"].to_numpy()[day] + 180.0) % 360.0 - 180.0)
    assert dz.max() < 0.3
    assert daz.max() < 0.3


def test_spa_paper_example_reda_andreas2004():
    # Reda & Andreas (2004), Solar Energy 76, Table A5.1 example: 2003-10-17 12:30:30 UTC-7,
    # 39.742476 N, -105.1786 E, 1830.14 m, 820 hPa, 11 degC, Delta T 67 s ->
    # topocentric (refracted) zenith 50.11162 deg, azimuth 194.34024 deg.
    t = pd.DatetimeIndex(["2003-10-17 12:30:30"]).tz_localize("Etc/GMT+7")
    ref = pvlib.solarposition.get_solarposition(
        t,
        39.742476,
        -105.1786,
        altitude=1830.14,
        pressure=82000.0,
        temperature=11.0,
        delta_t=67.0,
        method="nrel_numpy",
    )
    assert ref["apparent_zenith"].iloc[0] == pytest.approx(50.11162, abs=1e-4)
    assert ref["azimuth"].iloc[0] == pytest.approx(194.34024, abs=1e-4)
    zen, az = solar.solar_position_noaa(
        t.tz_convert("UTC").tz_localize(None).to_numpy(), 39.742476, -105.1786
    )
    # NOAA / Spencer (1971) accuracy ~0.3 deg against SPA, geometric zenith
    assert zen[0] == pytest.approx(ref["zenith"].iloc[0], abs=0.3)
    assert az[0] == pytest.approx(194.34024, abs=0.3)


def test_equation_of_time_noaa_vs_nrel_spa_pvlib():
    # Oracle: NREL SPA via pvlib, its equation_of_time column [min] (Reda & Andreas 2004).
    times = pd.date_range("2025-01-01 06:00", periods=365, freq="1D", tz="UTC")
    ref = pvlib.solarposition.get_solarposition(times, LAT, LON, method="nrel_numpy")
    _, eot, _ = solar.sun_terms_noaa(times.tz_localize(None).to_numpy())
    # 0.1 min of time = 0.025 deg of hour angle
    np.testing.assert_allclose(eot, ref["equation_of_time"], atol=0.1)


def test_extraterrestrial_spencer1971_vs_pvlib_same_solar_constant():
    # pvlib.irradiance.get_extra_radiation(method="spencer"), S0 = 1361 (Kopp & Lean 2011)
    doy = np.arange(1, 366).astype(float)
    ref = pvlib.irradiance.get_extra_radiation(doy, solar_constant=1361.0, method="spencer")
    np.testing.assert_allclose(solar.extraterrestrial_irradiance_spencer1971(doy), ref, rtol=1e-12)


def test_erbs1982_diffuse_fraction_values():
    # Erbs, Klein & Duffie (1982), Solar Energy 28(4), Eq. 1 — values computed from the
    # formula [calc]: kd(0.3) = 0.94860, kd(0.5) = 0.65915, kd(0.7) = 0.24398.
    np.testing.assert_allclose(
        solar.diffuse_fraction_erbs1982([0.3, 0.5, 0.7]), [0.94860, 0.65915, 0.24398], atol=5e-6
    )


def test_erbs1982_split_vs_pvlib_erbs():
    # Oracle: pvlib.irradiance.erbs; pvlib uses S0 = 1366.1 internally, so pass that constant.
    rng = np.random.default_rng(1)
    n = 2000
    ghi = rng.uniform(0, 1100, n)
    zen = rng.uniform(0, 95, n)
    doy = rng.integers(1, 366, n).astype(float)
    ref = pvlib.irradiance.erbs(ghi, zen, doy)
    extra = solar.extraterrestrial_irradiance_spencer1971(doy, solar_constant_w_m2=1366.1)
    ours = solar.erbs1982_split(ghi, zen, extra)
    for key in ("dni", "dhi", "kt"):
        np.testing.assert_allclose(ours[key], ref[key], rtol=1e-6, atol=1e-9)


def test_liu_jordan1963_isotropic_vs_pvlib_total_irradiance():
    # Oracle: pvlib.irradiance.get_total_irradiance(model="isotropic"); an open plane has
    # sky view (1 + cos S)/2 (Liu & Jordan 1963).
    rng = np.random.default_rng(2)
    n = 2000
    tilt, surf_az = rng.uniform(0, 60, n), rng.uniform(0, 360, n)
    zen, sun_az = rng.uniform(0, 89, n), rng.uniform(0, 360, n)
    dni, dhi = rng.uniform(0, 900, n), rng.uniform(0, 300, n)
    ghi = dhi + dni * np.cos(np.radians(zen))
    albedo = 0.6
    ref = pvlib.irradiance.get_total_irradiance(
        tilt, surf_az, zen, sun_az, dni, ghi, dhi, albedo=albedo, model="isotropic"
    )
    cos_i = solar.cos_incidence_deg(zen, sun_az, tilt, surf_az)
    svf = (1.0 + np.cos(np.radians(tilt))) / 2.0
    ours = solar.tilted_irradiance_liu_jordan1963(dni, dhi, ghi, cos_i, svf, albedo)
    np.testing.assert_allclose(ours, ref["poa_global"], rtol=1e-6, atol=1e-9)
    np.testing.assert_allclose(
        cos_i, np.cos(np.radians(pvlib.irradiance.aoi(tilt, surf_az, zen, sun_az))), atol=1e-9
    )

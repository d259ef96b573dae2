"""Interval-mean sun geometry with the sunlit-fraction table: 1-minute integration, shading."""

import numpy as np
from scipy.interpolate import RegularGridInterpolator

from regionmap.downscale import solar

LAT, LON = 46.5, 10.3
AZ = np.arange(0.0, 360.0, 5.0)
EL = np.arange(0.0, 91.0, 2.0)


def table(slope_deg, aspect_deg, horizon_fn, spread_deg=2.0):
    """Sunlit table of a planar cell whose pixels' horizons spread +-spread around h(az)."""
    az, el = np.meshgrid(AZ, EL, indexing="ij")
    cosi = solar.cos_incidence_deg(90.0 - el, az, slope_deg, aspect_deg)
    frac = np.clip((el - (horizon_fn(az) - spread_deg)) / (2 * spread_deg), 0.0, 1.0) * (cosi > 0)
    return frac[None].astype(np.float32), np.maximum(cosi, 0)[None].astype(np.float32)


def ridge_east(az):
    return np.where((az > 50) & (az < 200), 14.0, 3.0)


def one_minute_reference(time_end, frac, cosi):
    """Oracle: per-minute NumPy solar position + SciPy bilinear table lookup, averaged."""
    tab = frac[0].astype(float) * cosi[0].astype(float)
    az_ext = np.concatenate([AZ, [360.0]])
    tab_ext = np.concatenate([tab, tab[:1]], axis=0)
    interp = RegularGridInterpolator((az_ext, EL), tab_ext, method="linear")
    minutes = np.arange(60)
    t = (
        time_end.astype("datetime64[s]")[:, None]
        - np.timedelta64(3600, "s")
        + (minutes * 60 + 30).astype("timedelta64[s]")[None, :]
    )
    zen, az = solar.solar_position_noaa(t, LAT, LON)
    cosz = np.cos(np.radians(zen))
    el = np.clip(90.0 - zen, EL[0], EL[-1])
    f = interp(np.stack([np.mod(az, 360.0), el], axis=-1)) * (cosz > 0)
    return np.maximum(cosz, 0).mean(axis=1), f.mean(axis=1)


def test_interval_mean_shortwave_within_1pct_of_1_minute_integration_with_ridge_sunrise():
    # Issue 3 check: interval-mean shortwave matches a 1-minute integration within 1 %,
    # including the hour the sun clears a ridge to the east. Reference: NumPy/SciPy above.
    time_end = np.datetime64("2026-01-20T01:00") + np.arange(24).astype("timedelta64[h]")
    frac, cosi = table(25.0, 120.0, ridge_east)
    terms = solar.substep_sun_terms(time_end, 3600.0, 12)
    cosz, beam = solar.interval_sun_geometry(terms, [LAT], [LON], AZ, EL, frac, cosi)
    cosz_ref, beam_ref = one_minute_reference(time_end, frac, cosi)
    extra = terms["extra_w_m2"][None, :]
    ghi = 0.7 * extra * np.maximum(cosz_ref, 0)[None, :]  # a clear-ish day
    sw, _ = solar.slope_shortwave_interval_mean(ghi, extra, cosz, beam, np.array([[0.9]]), 0.6)
    sw_ref, _ = solar.slope_shortwave_interval_mean(
        ghi, extra, cosz_ref[None], beam_ref[None], np.array([[0.9]]), 0.6
    )
    day = sw_ref[0] > 5.0
    np.testing.assert_allclose(sw[0][day], sw_ref[0][day], rtol=0.01)
    assert abs(sw[0].sum() / sw_ref[0].sum() - 1) < 0.002
    # the ridge hour exists: the sun is up but the cell is only partly lit
    partial = (cosz_ref > 0.05) & (beam_ref > 0) & (beam_ref < 0.5 * np.max(beam_ref))
    assert partial.any()


def test_kernel_horizontal_geometry_equals_numpy_reference():
    time_end = np.datetime64("2026-03-01T01:00") + np.arange(48).astype("timedelta64[h]")
    frac, cosi = table(0.0, 180.0, lambda az: 0 * az - 10)
    terms = solar.substep_sun_terms(time_end, 3600.0, 60)
    cosz, _ = solar.interval_sun_geometry(terms, [LAT], [LON], AZ, EL, frac, cosi)
    cosz_ref, _ = one_minute_reference(time_end, frac, cosi)
    np.testing.assert_allclose(cosz[0], cosz_ref, atol=1e-9)


def test_deep_north_cirque_gets_no_beam_at_december_noon():
    # Shading check: horizon 40 deg over the southern sky; at 46.5 N on 21 December
    # the noon sun stands ~20 deg high (90 - 46.5 - 23.44), so no pixel is in sun.
    # The cirque floor slopes gently (10 deg) to the north, so the sun would reach it
    # (cos i > 0) were it not for the horizon.
    time_end = np.datetime64("2025-12-21T10:00") + np.arange(4).astype("timedelta64[h]")
    frac, cosi = table(10.0, 0.0, lambda az: np.where((az > 90) & (az < 270), 40.0, 10.0))
    open_frac, open_cosi = table(10.0, 0.0, lambda az: 0 * az - 10)
    terms = solar.substep_sun_terms(time_end, 3600.0, 12)
    cosz, beam = solar.interval_sun_geometry(terms, [LAT], [LON], AZ, EL, frac, cosi)
    assert np.all(cosz > 0.2) and np.all(beam == 0.0)
    _, beam_open = solar.interval_sun_geometry(terms, [LAT], [LON], AZ, EL, open_frac, open_cosi)
    assert np.all(beam_open > 0.1)
    ghi = 0.7 * terms["extra_w_m2"][None] * cosz
    sw, kt = solar.slope_shortwave_interval_mean(
        ghi, terms["extra_w_m2"][None], cosz, beam, np.array([[0.6]]), 0.6
    )
    beam_h = (1 - solar.diffuse_fraction_erbs1982(kt)) * ghi
    np.testing.assert_allclose(sw, (ghi - beam_h) * 0.6 + 0.6 * ghi * 0.4, rtol=1e-12)


def test_open_south_slope_gets_more_than_flat_ground_in_winter():
    # Liu & Jordan (1963) geometry: in winter a south slope faces the low sun more squarely.
    time_end = np.datetime64("2026-01-15T01:00") + np.arange(24).astype("timedelta64[h]")
    no_horizon = lambda az: 0 * az - 10  # noqa: E731
    f_s, c_s = table(35.0, 180.0, no_horizon)
    f_f, c_f = table(0.0, 180.0, no_horizon)
    terms = solar.substep_sun_terms(time_end, 3600.0, 12)
    extra = terms["extra_w_m2"][None]
    cz, b_s = solar.interval_sun_geometry(terms, [LAT], [LON], AZ, EL, f_s, c_s)
    _, b_f = solar.interval_sun_geometry(terms, [LAT], [LON], AZ, EL, f_f, c_f)
    ghi = 0.7 * extra * cz
    sw_s, _ = solar.slope_shortwave_interval_mean(
        ghi, extra, cz, b_s, np.array([[(1 + np.cos(np.radians(35))) / 2]]), 0.6
    )
    sw_f, _ = solar.slope_shortwave_interval_mean(ghi, extra, cz, b_f, np.array([[1.0]]), 0.6)
    assert sw_s.sum() > 1.3 * sw_f.sum()
    np.testing.assert_allclose(sw_f, ghi, rtol=2e-2)  # flat, open: back to the global value

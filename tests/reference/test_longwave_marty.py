"""Longwave: Prata (1996) / Brutsaert (1975) emissivities and the change with height."""

import numpy as np
import pytest

from regionmap.downscale import lapse, longwave, thermo


def test_clear_sky_emissivities_formula_values():
    # [calc]: e = 10 hPa, T = 283.15 K -> Brutsaert (1975) 0.7691, Prata (1996) 0.7777
    assert longwave.emissivity_clear_sky_brutsaert1975(1000.0, 283.15) == pytest.approx(
        0.7691, abs=1e-4
    )
    assert longwave.emissivity_clear_sky_prata1996(1000.0, 283.15) == pytest.approx(
        0.7777, abs=1e-4
    )


def test_clear_sky_longwave_falls_about_30_w_m2_per_km_marty2002():
    # Marty, Philipona, Froehlich & Ohmura (2002), Theor. Appl. Climatol. 72: clear-sky
    # longwave falls by roughly 29-33 W m-2 per km of height in the Alps — recalled from
    # memory [mem], not re-verified. Standard case: 10 degC, 70 % RH at the lower level,
    # 6.5 K/km, dew point by the April Kunkel coefficient; open sky, no cloud; the default
    # Prata (1996) emissivity (Brutsaert 1975 gives ~37 W m-2 in this case).
    method = "prata1996"
    t0 = 283.15
    e0 = 0.7 * thermo.saturation_vapour_pressure_water_buck1981(t0)
    td0 = thermo.dew_point_from_vapour_pressure_buck1981(e0)
    _, vp = lapse.monthly_lapse_rates_kunkel1989(4, 46.0)
    t1 = t0 - 6.5
    e1 = thermo.saturation_vapour_pressure_water_buck1981(
        np.minimum(td0 - 1000.0 * lapse.dew_point_lapse_liston_elder2006(vp), t1)
    )
    lw0 = longwave.longwave_at_cell(longwave.clear_sky_emissivity(e0, t0, method), t0, 1.0)
    lw1 = longwave.longwave_at_cell(longwave.clear_sky_emissivity(e1, t1, method), t1, 1.0)
    assert 29.0 <= lw0 - lw1 <= 33.0


def test_cloud_factor_carried_and_terrain_emission():
    # An all-sky model value is reproduced at the grid point (F * eps_clr * sigma T^4), and a
    # cell with sky view V gets V * sky + (1 - V) * eps_t * sigma T^4 (Stefan-Boltzmann).
    t, e = 270.0, 400.0
    f = longwave.cloud_factor(280.0, e, t)
    eps = f * longwave.emissivity_clear_sky_prata1996(e, t)
    assert longwave.longwave_at_cell(eps, t, 1.0) == pytest.approx(280.0, rel=1e-12)
    sb = 5.670374419e-8 * t**4
    assert longwave.longwave_at_cell(eps, t, 0.6, terrain_emissivity=0.98) == pytest.approx(
        0.6 * 280.0 + 0.4 * 0.98 * sb, rel=1e-12
    )


def test_crawford_duchon1999_limits_and_night_fill():
    # Crawford & Duchon (1999) Eq. 20: overcast -> emissivity 1, clear -> clear-sky value.
    assert longwave.emissivity_all_sky_crawford_duchon1999(1.0, 0.7) == 1.0
    assert longwave.emissivity_all_sky_crawford_duchon1999(0.0, 0.7) == 0.7
    vals = np.array([[0.2, 0.9, 0.9, 0.4, 0.9]])
    valid = np.array([[True, False, False, True, False]])
    out = longwave.fill_night_forward(vals, valid, np.array([0.5]))
    np.testing.assert_array_equal(out, [[0.2, 0.2, 0.2, 0.4, 0.4]])

"""Lapse rates: Liston & Elder (2006) worked case, hemispheres, least-squares fit."""

import numpy as np
import pytest

from regionmap.downscale import lapse


def test_liston_elder2006_january_worked_case():
    # [calc] from Liston & Elder (2006), J. Hydrometeor. 7(2), Table 1 / Eq. 6
    # (Kunkel 1989 coefficients): January, 0 degC, 80 % RH, +1 km -> -4.40 degC, RH 72.0 %.
    t_lapse, vp = lapse.monthly_lapse_rates_kunkel1989(1, 45.0)
    t1 = lapse.adjust_temperature_lapse(273.15, 1000.0, t_lapse)
    td0 = lapse.dew_point_from_relative_humidity(273.15, 0.8)
    td1 = lapse.adjust_temperature_lapse(td0, 1000.0, lapse.dew_point_lapse_liston_elder2006(vp))
    assert t1 - 273.15 == pytest.approx(-4.40, abs=1e-9)
    assert lapse.humidity_at_new_temperature(t1, td1) == pytest.approx(0.720, abs=5e-4)


def test_kunkel1989_southern_hemisphere_shifted_six_months():
    # Liston & Elder (2006): the Northern-Hemisphere table shifted by six months in the south.
    months = np.arange(1, 13)
    north = lapse.monthly_lapse_rates_kunkel1989(months, 45.0)
    south = lapse.monthly_lapse_rates_kunkel1989((months + 5) % 12 + 1, -45.0)
    np.testing.assert_array_equal(north[0], south[0])
    np.testing.assert_array_equal(north[1], south[1])
    assert north[0][0] == pytest.approx(4.4e-3) and north[0][6] == pytest.approx(8.1e-3)


def test_grid_lapse_fit_equals_numpy_polyfit_and_falls_back():
    # Oracle: numpy.polyfit least squares (slope of T on z), then the bounds and fallback.
    rng = np.random.default_rng(3)
    z = 800 + 1200 * rng.random(25)
    t = 270 - 0.006 * z[:, None] + 0.3 * rng.standard_normal((25, 10))
    nb = np.vstack([np.arange(25), np.roll(np.arange(25), 3)])
    lapse_k_m, fitted = lapse.grid_lapse_fit(t, z, nb, 0.0044)
    for i in range(10):
        slope = np.polyfit(z, t[:, i], 1)[0]
        assert lapse_k_m[0, i] == pytest.approx(-slope, rel=1e-9)
    assert fitted.all()
    noisy = 270 + 3 * rng.standard_normal((25, 10))  # no height dependence -> poor fit
    lapse_k_m, fitted = lapse.grid_lapse_fit(noisy, z, nb, 0.0044)
    assert np.all(lapse_k_m[~fitted] == 0.0044) and (~fitted).sum() >= 15


def test_grid_lapse_fit_of_a_cell_does_not_depend_on_the_other_points_read():
    # A chunk of cells reads only the grid points it needs: a cell's fit from those points
    # must equal, bit for bit, its fit from every point (chunking must not change results).
    rng = np.random.default_rng(5)
    z = 600 + 2400 * rng.random(400)
    t = 275 - 0.0065 * z[:, None] + 0.5 * rng.standard_normal((400, 48))
    nb = rng.integers(0, 400, (60, 9))
    full, _ = lapse.grid_lapse_fit(t, z, nb, 0.0044, min_r2=0.0)
    cells = np.arange(10, 20)
    points, local = np.unique(nb[cells], return_inverse=True)
    part, _ = lapse.grid_lapse_fit(
        t[points], z[points], local.reshape(nb[cells].shape), 0.0044, min_r2=0.0
    )
    np.testing.assert_array_equal(part, full[cells])

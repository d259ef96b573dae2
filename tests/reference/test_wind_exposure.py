"""Wind exposure factors: Winstral Sx interpolation and the Liston & Sturm (1998) slope term."""

import numpy as np
import pytest

from regionmap.downscale import wind


def test_sx_interpolated_circularly_between_directions():
    # Winstral et al. (2002) Sx is tabulated per direction; between two tabulated directions
    # the value is linear, and 350 deg lies between 315 and 0 (wrap-around).
    sx = np.array([[0.0, 10, 20, 30, 40, 50, 60, 70]])
    dirs = np.arange(0, 360, 45.0)
    got = wind.sx_at_direction(sx, dirs, np.array([[0.0, 22.5, 337.5, 359.999999, 90.0]]))
    np.testing.assert_allclose(got[0, [0, 1, 2, 4]], [0.0, 5.0, 35.0, 20.0], atol=1e-12)
    assert got[0, 3] == pytest.approx(0.0, abs=1e-4)


def test_sx_unknown_upwind_counts_as_neutral():
    # an edge cell with no upwind pixel inside the DEM has NaN Sx in that direction; its wind
    # stays as the grid gives it (Sx 0, factor 1) instead of turning the forcing into NaN
    sx = np.array([[np.nan, 10, 20, 30, 40, 50, 60, 70]])
    got = wind.sx_at_direction(sx, np.arange(0, 360, 45.0), np.array([[0.0, 22.5, 90.0]]))
    np.testing.assert_allclose(got[0], [0.0, 5.0, 20.0], atol=1e-12)
    assert wind.wind_factor_winstral_sx(got[:, :1])[0, 0] == 1.0


def test_liston_sturm1998_slope_term():
    # Liston & Sturm (1998), J. Glaciol. 44(148), Eqs. 15-16 [mem]: Omega_s = beta cos(omega - xi)
    # scaled to +-0.5, factor 1 + gamma_s Omega_s with gamma_s = 0.5 -> 1.25 facing into
    # the wind at the reference slope, 0.75 in its lee, 1 across it.
    f = wind.wind_factor_liston_sturm1998(
        np.array([45.0, 45.0, 45.0]), np.array([270.0, 90.0, 0.0]), np.array([270.0, 270.0, 270.0])
    )
    np.testing.assert_allclose(f, [1.25, 0.75, 1.0], atol=1e-12)


def test_winstral_sx_factor_bounded():
    f = wind.wind_factor_winstral_sx(np.array([-40.0, 0.0, 10.0, 60.0]))
    np.testing.assert_allclose(f, [1.3, 1.0, 0.75, 0.4])

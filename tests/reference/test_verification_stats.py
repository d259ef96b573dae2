"""Verification statistics against reference computations of NumPy/SciPy and a worked case.

References: scipy.stats.pearsonr (Pearson correlation), numpy.corrcoef; the score
definitions of Wilks (2011), Statistical Methods in the Atmospheric Sciences, 3rd ed.,
Sect. 8.3; sklearn-style definitions of MAE/RMSE written out with NumPy.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from regionmap.stations.verify import (
    bias,
    mean_absolute_error,
    r_squared,
    root_mean_square_error,
    snow_depth_agreement,
    total_percent_difference,
    total_ratio,
)


@pytest.mark.parametrize("seed", [0, 1, 2, 3])
def test_scores_equal_scipy_numpy_reference_on_random_data(seed):
    rng = np.random.default_rng(seed)
    obs = rng.normal(270.0, 5.0, 500)
    model = 0.8 * obs + rng.normal(55.0, 3.0, 500)
    # punch NaN holes into both, at different places
    model[rng.choice(500, 40, replace=False)] = np.nan
    obs[rng.choice(500, 30, replace=False)] = np.nan
    ok = ~np.isnan(model) & ~np.isnan(obs)
    m, o = model[ok], obs[ok]
    # SciPy reference: Pearson r squared
    r_ref = stats.pearsonr(m, o).statistic
    assert r_squared(model, obs) == pytest.approx(r_ref**2, rel=1e-12)
    # NumPy reference: corrcoef
    assert r_squared(model, obs) == pytest.approx(np.corrcoef(m, o)[0, 1] ** 2, rel=1e-12)
    # Wilks (2011) Eqs. 8.28-8.33 written with NumPy
    assert bias(model, obs) == pytest.approx(np.nanmean(model - obs), rel=1e-12)
    assert mean_absolute_error(model, obs) == pytest.approx(np.mean(np.abs(m - o)), rel=1e-12)
    assert root_mean_square_error(model, obs) == pytest.approx(
        np.sqrt(np.mean((m - o) ** 2)), rel=1e-12
    )
    # the RMSE is never below |bias| nor the MAE (Wilks 2011, Sect. 8.3.2)
    assert root_mean_square_error(model, obs) >= mean_absolute_error(model, obs)
    assert root_mean_square_error(model, obs) >= abs(bias(model, obs))


def test_r2_equals_scipy_linregress_rvalue_squared():
    # SciPy reference: linregress r-value
    rng = np.random.default_rng(7)
    x = rng.gamma(2.0, 3.0, 300)
    y = 1.3 * x + rng.normal(0, 2, 300)
    assert r_squared(y, x) == pytest.approx(stats.linregress(x, y).rvalue ** 2, rel=1e-12)


def test_percent_overprediction_worked_case_common_practice():
    # common practice: a forecast total of 24 against an observed 21.8 is a ~10 % over-
    # prediction: 100 * (24 / 21.8 - 1) = 10.09 %
    assert total_percent_difference([24.0], [21.8]) == pytest.approx(10.0917, abs=1e-4)
    assert total_ratio([24.0], [21.8]) == pytest.approx(24.0 / 21.8, rel=1e-12)
    # under-prediction is negative: 19.62 against 21.8 is -10 %
    assert total_percent_difference([19.62], [21.8]) == pytest.approx(-10.0, abs=1e-9)


def test_totals_use_common_pairs_only():
    # an interval missing in the observations is left out of both totals
    model = np.array([10.0, 4.0, 10.0])
    obs = np.array([8.0, np.nan, 12.0])
    assert total_ratio(model, obs) == pytest.approx(20.0 / 20.0)


def test_degenerate_cases_are_nan_not_errors():
    assert np.isnan(bias([np.nan], [1.0]))
    assert np.isnan(r_squared([1.0, 1.0, 1.0], [1.0, 2.0, 3.0]))  # constant: r undefined
    assert np.isnan(total_ratio([1.0], [0.0]))


def test_snow_depth_agreement_contingency_proportion_correct_wilks2011():
    # Wilks (2011) Eq. 8.7: proportion correct = (hits + correct negatives) / n
    model = np.array([0.0, 0.5, 0.3, 0.0, 1.2])
    obs = np.array([0.0, 0.4, 0.0, 0.2, 1.0])
    # hits: idx 1, 4; correct negatives: idx 0; false alarm: 2; miss: 3 -> PC = 3/5
    out = snow_depth_agreement(model, obs, tolerance_m=0.1)
    assert out["presence_agreement_frac"] == pytest.approx(0.6)
    # within 10 cm: idx 0 (0), 1 (0.1) -> 2/5; idx 4 differs by 0.2
    assert out["within_tolerance_frac"] == pytest.approx(0.4)
    assert out["n"] == 5

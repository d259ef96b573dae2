"""The vectorisable exponential against the C library's (through NumPy)."""

import numpy as np
from numba import njit

from regionmap.snow.vecmath import exp_vec


@njit(cache=True)
def _exp_all(x):
    out = np.empty_like(x)
    for i in range(x.size):
        out[i] = exp_vec(x[i])
    return out


def test_exp_vec_matches_numpy_over_the_normal_range():
    # reference: numpy.exp (the C library's correctly rounded-to-within-1-ulp exp)
    rng = np.random.default_rng(0)
    x = np.concatenate([np.linspace(-708.0, 709.0, 200_001), rng.uniform(-60.0, 10.0, 200_000),
                        [0.0, 1.0, -1.0, 0.5 * np.log(2.0), -0.5 * np.log(2.0)]])
    rel = np.abs(_exp_all(x) / np.exp(x) - 1.0)
    assert rel.max() < 1e-15
    assert _exp_all(np.array([0.0]))[0] == 1.0


def test_exp_vec_clips_and_propagates_nan():
    out = _exp_all(np.array([np.nan, -1000.0, 1000.0]))
    assert np.isnan(out[0])
    # arguments beyond the normal range are clipped to [-708, 709] (documented)
    assert abs(out[1] / np.exp(-708.0) - 1.0) < 1e-15
    assert abs(out[2] / np.exp(709.0) - 1.0) < 1e-15

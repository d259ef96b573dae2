"""The vectorisable exponential and logarithm against the C library's (through NumPy)."""

import numpy as np
from numba import njit

from regionmap.snow.metamorphism import dry_dendricity_rate_brun1992
from regionmap.snow.vecmath import LANES, exp_vec, log_vec, padded_count


@njit(cache=True)
def _exp_all(x):
    out = np.empty_like(x)
    for i in range(x.size):
        out[i] = exp_vec(x[i])
    return out


@njit(cache=True)
def _log_all(x):
    out = np.empty_like(x)
    for i in range(x.size):
        out[i] = log_vec(x[i])
    return out


def test_exp_vec_matches_numpy_over_the_normal_range():
    # reference: numpy.exp (the C library's correctly rounded-to-within-1-ulp exp)
    rng = np.random.default_rng(0)
    x = np.concatenate(
        [
            np.linspace(-708.0, 709.0, 200_001),
            rng.uniform(-60.0, 10.0, 200_000),
            [0.0, 1.0, -1.0, 0.5 * np.log(2.0), -0.5 * np.log(2.0)],
        ]
    )
    rel = np.abs(_exp_all(x) / np.exp(x) - 1.0)
    assert rel.max() < 1e-15
    assert _exp_all(np.array([0.0]))[0] == 1.0


def test_exp_vec_clips_and_propagates_nan():
    out = _exp_all(np.array([np.nan, -1000.0, 1000.0]))
    assert np.isnan(out[0])
    # arguments beyond the normal range are clipped to [-708, 709] (documented)
    assert abs(out[1] / np.exp(-708.0) - 1.0) < 1e-15
    assert abs(out[2] / np.exp(709.0) - 1.0) < 1e-15


def test_log_vec_matches_numpy_over_the_normal_range():
    # reference: numpy.log (the C library's log, within 1 ulp)
    rng = np.random.default_rng(1)
    x = np.concatenate(
        [
            np.exp(rng.uniform(-700.0, 700.0, 200_000)),
            rng.uniform(0.5, 2.0, 200_000),
            rng.uniform(5.0, 1000.0, 200_000),
            [np.sqrt(0.5), np.sqrt(2.0), 0.5, 2.0, 1e-300, 1e300],
        ]
    )
    ref = np.log(x)
    assert (np.abs(_log_all(x) - ref) <= 2.0 * np.spacing(np.abs(ref))).all()  # <= 2 ulp
    assert _log_all(np.array([1.0]))[0] == 0.0


def test_dry_dendricity_rate_keeps_the_published_power_law():
    # Brun et al. (1992): rate = 2e8 exp(-6000/T) max(|G|, 5)^0.4 [day-1]; the kernel's form
    # through exp_vec/log_vec must stay within 1e-14 of the direct power (NumPy)
    g = np.concatenate([np.linspace(-300.0, 300.0, 6001), [5.0, -5.0, 0.0]])
    t = 260.0
    arr = np.exp(-6000.0 / t + 6000.0 / 273.15)
    got = np.array([dry_dendricity_rate_brun1992(arr, gi) for gi in g])
    ref = 2e8 * np.exp(-6000.0 / t) * np.maximum(np.abs(g), 5.0) ** 0.4
    assert np.abs(got / ref - 1.0).max() < 1e-14


def test_padded_count_rounds_up_to_whole_vectors():
    counts = [padded_count(n) for n in range(0, 60)]
    assert all(c % LANES == 0 and n <= c < n + LANES for n, c in enumerate(counts))

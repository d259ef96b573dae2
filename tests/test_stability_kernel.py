"""Compiled threshold-count kernels equal the plain-NumPy reference; edge cases.

Oracle: ``threshold_count_reference`` / ``worst_interface_reference``, the vectorised NumPy
transcription of the same criteria (Schweizer & Jamieson 2007, Cold Reg. Sci. Technol. 47;
relative sum after Monti et al. 2014, Cold Reg. Sci. Technol. 103, our reading). The worked
values themselves are checked in tests/reference/test_stability_*.py.
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from regionmap.errors import InputError
from regionmap.snow.codes import GRAIN_CODES, PERSISTENT_CODES
from regionmap.snow.stability import (
    N_CRITERIA,
    threshold_count_columns,
    threshold_count_interfaces,
    threshold_count_reference,
    threshold_counts_of_profile,
    worst_interface_column,
    worst_interface_reference,
)

N_CODES = len(GRAIN_CODES)
# Hardness on the 1/3 and 1/2 steps of the notation, so ties between layers occur often.
HARDNESS_STEPS = sorted({k + d for k in range(1, 7) for d in (-1 / 3, 0, 1 / 3, 0.5)})


@st.composite
def columns(draw):
    n_cell = draw(st.integers(1, 6))
    n_layer = draw(st.integers(1, 14))
    shape = (n_cell, n_layer)
    rng = np.random.default_rng(draw(st.integers(0, 2**32 - 1)))
    lc = np.array([draw(st.integers(0, n_layer)) for _ in range(n_cell)], dtype=np.int64)
    th = rng.choice([0.005, 0.01, 0.02, 0.05, 0.1, 0.18, 0.3], size=shape)
    th = np.where(rng.random(shape) < 0.5, th, rng.uniform(0.001, 0.5, shape))
    e = np.where(
        rng.random(shape) < 0.5,
        rng.choice([0.5, 1.0, 1.25, 2.0, 3.0], size=shape),
        rng.uniform(0.1, 5.0, shape),
    )
    h = np.where(
        rng.random(shape) < 0.7,
        rng.choice(HARDNESS_STEPS, size=shape),
        rng.uniform(1.0, 6.0, shape),
    )
    g = rng.integers(1, N_CODES, size=shape).astype(np.int8)
    # Junk in the inactive slots must not matter.
    for c in range(n_cell):
        th[c, lc[c] :] = 9.0
        e[c, lc[c] :] = -1.0
        h[c, lc[c] :] = np.nan
        g[c, lc[c] :] = 0
    return lc, th, e, h, g


@settings(deadline=None, max_examples=150)
@given(data=columns(), relative=st.booleans())
def test_columns_kernel_equals_reference(data, relative):
    lc, th, e, h, g = data
    out_c = np.full(lc.size, -7.0)
    out_d = np.full(lc.size, -7.0)
    threshold_count_columns(lc, th, e, h, g, relative, out_c, out_d)
    scratch = np.full((N_CRITERIA + 1, th.shape[1]), 1e300)  # reused dirty across columns
    for c, n in enumerate(lc):
        ref_c, ref_d = worst_interface_reference(th[c, :n], e[c, :n], h[c, :n], g[c, :n], relative)
        assert out_c[c] == ref_c
        np.testing.assert_array_equal(out_d[c], ref_d)
        one_c, one_d = worst_interface_column(n, th[c], e[c], h[c], g[c], relative, scratch)
        assert one_c == ref_c
        np.testing.assert_array_equal(one_d, ref_d)


@settings(deadline=None, max_examples=150)
@given(data=columns(), relative=st.booleans())
def test_interfaces_kernel_equals_reference(data, relative):
    lc, th, e, h, g = data
    m = th.shape[1] - 1
    for c, n in enumerate(lc):
        out_c = np.full(max(m, 0), -7.0)
        out_d = np.full(max(m, 0), -7.0)
        threshold_count_interfaces(n, th[c], e[c], h[c], g[c], relative, out_c, out_d)
        ref_c, ref_d = threshold_count_reference(th[c, :n], e[c, :n], h[c, :n], g[c, :n], relative)
        k = ref_c.size
        np.testing.assert_array_equal(out_c[:k], ref_c)
        np.testing.assert_array_equal(out_d[:k], ref_d)
        assert np.isnan(out_c[k:]).all() and np.isnan(out_d[k:]).all()
        assert ((ref_c >= 0) & (ref_c <= 6 + 1e-12)).all()
        if not relative:
            np.testing.assert_array_equal(ref_c, np.round(ref_c))  # a count of criteria


@pytest.mark.parametrize("relative", [True, False])
@pytest.mark.parametrize("n", [0, 1])
def test_zero_or_one_layer_gives_zero_and_nan(n, relative):
    th = np.array([[0.3, 0.2]])
    e = np.array([[3.0, 1.0]])
    h = np.array([[1.0, 4.0]])
    g = np.array([[9, 3]], dtype=np.int8)
    out_c, out_d = np.full(1, -1.0), np.full(1, -1.0)
    threshold_count_columns(np.array([n]), th, e, h, g, relative, out_c, out_d)
    assert out_c[0] == 0.0 and np.isnan(out_d[0])
    count, depth = threshold_counts_of_profile(
        th[0, :n], e[0, :n], h[0, :n], g[0, :n], mode="relative" if relative else "absolute"
    )
    assert count.shape == (0,) and depth.shape == (0,)


def test_layer_count_beyond_array_is_clipped():
    # Kernels never index past the layer axis, whatever layer_count says.
    th = np.array([[0.05, 0.4]])
    e = np.array([[3.0, 2.0]])
    h = np.array([[1.0, 3.0]])
    g = np.array([[9, 3]], dtype=np.int8)
    out_c, out_d = np.empty(1), np.empty(1)
    threshold_count_columns(np.array([5]), th, e, h, g, False, out_c, out_d)
    assert out_c[0] == 6.0 and out_d[0] == pytest.approx(0.4)


def test_profile_wrapper_rejects_bad_input():
    with pytest.raises(InputError, match="grain_size_mm.*same length"):
        threshold_counts_of_profile([0.1, 0.2], [1.0], [1.0, 2.0], [3, 3])
    with pytest.raises(InputError, match="grain_code.*GRAIN_CODES"):
        threshold_counts_of_profile([0.1, 0.2], [1.0, 1.0], [1.0, 2.0], [3, 40])
    with pytest.raises(InputError, match="grain_code.*GRAIN_CODES"):
        threshold_counts_of_profile([0.1, 0.2], [1.0, 1.0], [1.0, 2.0], ["RG", "FC"])
    with pytest.raises(InputError, match="mode.*'lemons'"):
        threshold_counts_of_profile([0.1, 0.2], [1.0, 1.0], [1.0, 2.0], [3, 3], mode="lemons")


@pytest.mark.parametrize("code", GRAIN_CODES[1:])
def test_compiled_persistent_table_matches_codes(code):
    # The compiled kernels freeze the persistent-type table at compile time; this guards
    # against a stale numba cache after a change of regionmap.snow.codes. Persistent types
    # (FC, DH, SH and their subclasses) after Schweizer & Jamieson (2007) / codes.PERSISTENT_CODES.
    # Weak layer: F 3 mm of `code` under a 1F 0.5 mm slab at 40 cm: all other five criteria met.
    count, _ = threshold_counts_of_profile(
        [0.05, 0.40],
        [3.0, 0.5],
        [1.0, 3.0],
        [GRAIN_CODES.index(code), GRAIN_CODES.index("RG")],
        mode="absolute",
    )
    assert count[0] == (6.0 if code in PERSISTENT_CODES else 5.0)

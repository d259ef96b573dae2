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


def random_line(n, seed, curvature):
    """A random elevation profile with gaps and a trend, its curvature-lowered copy, the
    spacing and 1/R (exaggerated when ``curvature``)."""
    rng = np.random.default_rng(seed)
    ds = 25.0
    inv_r = (1.0 / 6.371e6) * 1e3 if curvature else 0.0  # exaggerated curvature
    z = rng.normal(size=n) * rng.uniform(0.1, 80) + rng.uniform(-10, 10) * np.arange(n)
    z[rng.random(n) < 0.15] = np.nan
    t = np.arange(n) * ds
    return z, z - 0.5 * inv_r * t * t, ds, inv_r


@settings(deadline=None, max_examples=80)
@given(
    n=st.integers(1, 90),
    window=st.integers(1, 30),
    seed=st.integers(0, 10_000),
    floor0=st.booleans(),
    curvature=st.booleans(),
)
def test_two_way_hull_scan_equals_direct_maximum_dozier_frew1990(
    n, window, seed, floor0, curvature
):
    # Both directions of one line from a single pair of hull passes, against the definition
    # of Dozier & Frew (1990) evaluated point by point.
    z, w, ds, inv_r = random_line(n, seed, curvature)
    out_lo, out_hi = np.empty(n), np.empty(n)
    _scan_line_pair(
        w,
        n,
        window,
        ds,
        inv_r,
        floor0,
        True,
        np.empty(n),
        np.empty(n, np.int64),
        np.empty(n),
        np.empty(n),
        out_lo,
        out_hi,
    )
    for out, step in ((out_lo, -1), (out_hi, 1)):
        ref = _direct(z, ds, window, inv_r, floor0, step)
        np.testing.assert_array_equal(np.isnan(out), np.isnan(ref))
        ok = ~np.isnan(ref)
        np.testing.assert_allclose(out[ok], ref[ok], rtol=1e-9, atol=1e-12)


def _bowl(n, d, a):
    """Paraboloid z = a (x^2 + y^2) on an n x n grid of spacing d, centred; x east, y north."""
    x = (np.arange(n) - n // 2) * d
    east, north = np.meshgrid(x, -x)
    return a * (east**2 + north**2), east, north


@pytest.mark.parametrize("n_az", [16, 36, 10, 7])
def test_bowl_horizon_both_directions_of_each_line_calc(n_az):
    # [calc] On z = a (x^2 + y^2) the tangent toward unit direction u from p at distance t is
    # (z(p + t u) - z(p))/t = a (2 p.u + t), largest at the farthest line point within the
    # search distance, t* = L ds with ds the point spacing along the line (ds = d/max(|sin|,
    # |cos|) of the azimuth) and L = floor(D/ds). Opposite azimuths share their lines in the
    # scan (n_az even); with n_az = 7 none do. Interpolating the quadratic linearly across
    # lines errs by at most a d^2/4 in height. Each line's tangent is floored at 0 before the
    # pixel is interpolated between two lines, so pixels within one line spacing of the zero
    # crossing (|m| < 4 a d) are left out; beyond it on the negative side the horizon is 0.
    from regionmap.terrain.horizon import horizon_sky_view_dozier_frew1990

    n, d, a, dist = 121, 10.0, 2e-4, 200.0
    z, east, north = _bowl(n, d, a)
    az = np.arange(n_az) * (360.0 / n_az)
    flat = np.zeros_like(z)
    h, _ = horizon_sky_view_dozier_frew1990(z, d, d, flat, flat, az, dist, earth_curvature=False)
    inner = (slice(30, -30), slice(30, -30))  # rays of 200 m stay inside the grid
    for k, phi_deg in enumerate(az):
        phi = math.radians(phi_deg)
        ds = d / max(abs(math.sin(phi)), abs(math.cos(phi)))
        t_star = math.floor(dist / ds + 1e-9) * ds
        m = a * (2 * (east * math.sin(phi) + north * math.cos(phi)) + t_star)
        expect = np.degrees(np.arctan(np.maximum(m, 0.0)))
        tol = np.degrees(a * d * d / 4 / t_star) + 1e-5
        up = m[inner] > 4 * a * d
        np.testing.assert_allclose(
            h[k][inner][up], expect[inner][up], atol=tol, err_msg=f"azimuth {phi_deg}"
        )
        assert np.all(h[k][inner][m[inner] < -4 * a * d] == 0.0)
        assert up.sum() > 1000


def test_opposite_azimuth_on_shared_lines_equals_its_own_scan_on_grid_directions():
    # Where the lines of an azimuth and of its opposite coincide (grid directions, square
    # pixels), the shared scan must give exactly what scanning the opposite azimuth on its
    # own gives. The expected values come from the direct maximum (Dozier & Frew 1990)
    # through the single-azimuth call, the shared-line results from the paired call.
    from regionmap.terrain.horizon import horizon_sky_view_dozier_frew1990

    rng = np.random.default_rng(11)
    z = rng.normal(size=(40, 47)).cumsum(0).cumsum(1)
    z[rng.random(z.shape) < 0.05] = np.nan
    flat = np.zeros_like(z)
    az = np.arange(8) * 45.0
    paired, _ = horizon_sky_view_dozier_frew1990(z, 10.0, 10.0, flat, flat, az, 150.0)
    for k in range(8):
        alone, _ = horizon_sky_view_dozier_frew1990(z, 10.0, 10.0, flat, flat, az[k : k + 1], 150.0)
        np.testing.assert_array_equal(paired[k], alone[0])


def test_compiled_arctangent_against_libm():
    # numpy's arctan (the C library's atan) as the reference for the vectorising arctangent
    # of the scan, over the whole tangent range and on both sides of each reduction boundary.
    import numba

    from regionmap.terrain.horizon import _atan, _atan_cos2

    @numba.njit
    def evaluate(x):
        e, e2, c2 = np.empty_like(x), np.empty_like(x), np.empty_like(x)
        for i in range(x.size):
            e[i] = _atan(x[i])
            e2[i], c2[i] = _atan_cos2(abs(x[i]))
        return e, e2, c2

    edges = np.tan(np.arange(1, 8, 2) * np.pi / 16)
    x = np.concatenate(
        [
            np.tan(np.linspace(-1.5707, 1.5707, 200_001)),
            edges,
            np.nextafter(edges, np.inf),
            np.nextafter(edges, 0.0),
            [0.0, 1e300, -1e300],
        ]
    )
    e, e2, c2 = evaluate(x)
    np.testing.assert_allclose(e, np.arctan(x), rtol=0, atol=1e-11)
    np.testing.assert_allclose(e2, np.arctan(np.abs(x)), rtol=0, atol=1e-11)
    with np.errstate(over="ignore"):
        np.testing.assert_allclose(c2, 1.0 / (1.0 + x * x), rtol=1e-15, atol=0)
    assert np.isnan(evaluate(np.array([np.nan]))[0][0])

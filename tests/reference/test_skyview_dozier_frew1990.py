"""Horizon angles and sky-view factor (Dozier & Frew 1990) on analytic and gridded terrain;
maximum upwind slope sign convention (Winstral et al. 2002).

Sources: Dozier, J., & Frew, J. (1990), IEEE TGRS 28(5), 963-969, doi:10.1109/36.58986,
Eq. 7b; the analytic cases are [calc] (derived from that equation):
uniform horizon e on flat ground -> cos^2 e; open slope S -> (1 + cos S)/2; floor of a
V-valley with wall slope a -> cos a. Winstral, Elder & Davis (2002), J. Hydrometeor.
3(5), 524-538, Eq. 1: positive Sx = sheltered, negative = exposed.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from regionmap.constants import EARTH_RADIUS_M
from regionmap.terrain.horizon import (
    horizon_sky_view_dozier_frew1990,
    max_upwind_slope_winstral2002,
    sky_view_dozier_frew1990,
)
from regionmap.terrain.slope import slope_aspect_horn1981

AZ72 = np.arange(72) * 5.0


def test_uniform_horizon_flat_ground_cos2e_dozier_frew1990():
    # [calc]: e = 20 deg -> cos^2(20 deg) = 0.88302
    v = sky_view_dozier_frew1990(np.full(72, 20.0), AZ72, 0.0, np.nan)
    assert v == pytest.approx(0.88302, abs=1e-3)
    assert v == pytest.approx(math.cos(math.radians(20.0)) ** 2, abs=1e-3)


@pytest.mark.parametrize("slope", [10.0, 30.0, 45.0])
def test_open_slope_half_one_plus_cos_dozier_frew1990(slope):
    # [calc] open slope S -> (1 + cos S)/2 (30 deg -> 0.93301); the only horizon is the
    # plane itself, rising atan(tan S cos(phi - A_up)) toward the upslope direction.
    aspect = 200.0
    up = math.radians(aspect + 180.0)
    e = np.degrees(
        np.arctan(np.maximum(0.0, math.tan(math.radians(slope)) * np.cos(np.radians(AZ72) - up)))
    )
    v = sky_view_dozier_frew1990(e, AZ72, slope, aspect)
    assert v == pytest.approx((1 + math.cos(math.radians(slope))) / 2, abs=1e-3)


def test_v_valley_floor_cos_alpha_dozier_frew1990():
    # [calc] floor of a straight V-valley (walls of slope alpha east and west) -> cos alpha
    alpha = 30.0
    e = np.degrees(np.arctan(math.tan(math.radians(alpha)) * np.abs(np.sin(np.radians(AZ72)))))
    v = sky_view_dozier_frew1990(e, AZ72, 0.0, np.nan)
    assert v == pytest.approx(math.cos(math.radians(alpha)), abs=1e-3)


def _grid_terrain(z, d, distance, az=AZ72, curvature=False):
    s, a = slope_aspect_horn1981(z, d, d)
    h, v = horizon_sky_view_dozier_frew1990(z, d, d, s, a, az, distance, earth_curvature=curvature)
    return s, a, h, v


def test_gridded_open_plane_sky_view_dozier_frew1990():
    # [calc] (1 + cos S)/2 on a gridded plane of slope 30 deg facing 200 deg, 1e-2 allowed
    ny = nx = 120
    d = 10.0
    y, x = np.mgrid[0:ny, 0:nx] * d
    east, north = x, -y
    slope, aspect = 30.0, 200.0
    gx = -math.tan(math.radians(slope)) * math.sin(math.radians(aspect))  # dz/d(east)
    gy = -math.tan(math.radians(slope)) * math.cos(math.radians(aspect))  # dz/d(north)
    z = 1000.0 + gx * east + gy * north
    s, a, h, v = _grid_terrain(z, d, 500.0)
    inner = (slice(5, -5), slice(5, -5))
    assert np.allclose(s[inner], slope, atol=1e-9)
    assert np.abs(v[inner] - (1 + math.cos(math.radians(slope))) / 2).max() < 1e-2
    # horizon of the plane: atan(tan S cos(phi - upslope azimuth)) where positive [calc]
    up = math.radians(aspect + 180.0)
    expect = np.degrees(
        np.arctan(np.maximum(0, math.tan(math.radians(slope)) * np.cos(np.radians(AZ72) - up)))
    )
    np.testing.assert_allclose(h[:, 60, 60], expect, atol=1e-3)


def test_gridded_v_valley_floor_sky_view_dozier_frew1990():
    # [calc] floor of a gridded N-S V-valley with 30 deg walls -> cos 30 deg, 1e-2 allowed
    n = 161
    d = 10.0
    alpha = 30.0
    x = (np.arange(n) - n // 2) * d
    z = np.repeat((math.tan(math.radians(alpha)) * np.abs(x))[None, :], n, axis=0)
    _, _, _, v = _grid_terrain(z, d, 5000.0)
    assert v[n // 2, n // 2] == pytest.approx(math.cos(math.radians(alpha)), abs=1e-2)


@pytest.mark.parametrize("azimuth", [90.0, 60.0, 120.0, 75.0])
def test_horizon_toward_synthetic_ridge_with_earth_curvature(azimuth):
    # Geometry [calc]: a straight N-S ridge of height H with 45 deg faces, its crest a
    # distance dc east of the observer on flat ground. Along azimuth phi the crest is
    # dc/sin(phi) away; the near face rises more slowly than the line of sight, so the
    # horizon is the crest: atan((H - d^2/2R)/d), d = dc/sin(phi) (Dozier & Frew 1990, the
    # d^2/2R drop of Dozier & Frew).
    d_px = 100.0
    ny, nx = 400, 400
    crest_col = 300
    height = 2000.0
    xs = (np.arange(nx) - crest_col) * d_px
    z = np.repeat(np.maximum(0.0, height - np.abs(xs))[None, :], ny, axis=0)
    obs_r, obs_c = 200, 50
    dc = (crest_col - obs_c) * d_px
    dist = dc / math.sin(math.radians(azimuth))
    s, a = slope_aspect_horn1981(z, d_px, d_px)
    for curvature, drop in ((True, dist**2 / (2 * EARTH_RADIUS_M)), (False, 0.0)):
        h, _ = horizon_sky_view_dozier_frew1990(
            z, d_px, d_px, s, a, np.array([azimuth]), 40_000.0, earth_curvature=curvature
        )
        expect = math.degrees(math.atan((height - drop) / dist))
        assert h[0, obs_r, obs_c] == pytest.approx(expect, abs=0.02)
    # beyond the search distance the ridge is not seen: flat ground, horizon 0
    h, _ = horizon_sky_view_dozier_frew1990(z, d_px, d_px, s, a, np.array([azimuth]), 10_000.0)
    assert h[0, obs_r, obs_c] == 0.0


def test_horizon_matches_brute_force_on_grid_directions():
    # Dozier & Frew (1990) definition evaluated directly, pixel by pixel, along the eight
    # grid directions (no interpolation needed there) on a random surface.
    rng = np.random.default_rng(7)
    z = rng.normal(size=(30, 36)).cumsum(0).cumsum(1)
    d, dist = 10.0, 120.0
    az = np.arange(8) * 45.0
    s, a = slope_aspect_horn1981(z, d, d)
    h, _ = horizon_sky_view_dozier_frew1990(z, d, d, s, a, az, dist, earth_curvature=False)
    steps = [(-1, 0), (-1, 1), (0, 1), (1, 1), (1, 0), (1, -1), (0, -1), (-1, -1)]
    ny, nx = z.shape
    for k, (dr, dc) in enumerate(steps):
        ref = np.zeros_like(z)
        step = d * math.hypot(dr, dc)
        for r in range(ny):
            for c in range(nx):
                m = 1
                while 0 <= r + m * dr < ny and 0 <= c + m * dc < nx and m * step <= dist + 1e-9:
                    ang = math.degrees(
                        math.atan((z[r + m * dr, c + m * dc] - z[r, c]) / (m * step))
                    )
                    ref[r, c] = max(ref[r, c], ang)
                    m += 1
        np.testing.assert_allclose(h[k], ref, atol=1e-4)


def test_exposure_sign_on_synthetic_ridge_winstral2002():
    # Winstral et al. (2002): wind from the west over a N-S ridge -> the lee (east) flank is
    # sheltered (Sx > 0), the windward (west) flank exposed (Sx < 0).
    d = 30.0
    n = 101
    x = (np.arange(n) - 50) * d
    z = np.repeat(np.maximum(0.0, 600.0 - 0.6 * np.abs(x))[None, :], 60, axis=0)
    sx = max_upwind_slope_winstral2002(z, d, d, np.array([270.0, 90.0]), 300.0)
    west_flank = sx[0, 30, 40]  # 300 m west of the crest, facing the wind
    lee_flank = sx[0, 30, 55]  # 150 m east of the crest
    assert west_flank < 0 and lee_flank > 0
    # windward face of slope 0.6 seen upwind over its own face, along A + delta for the
    # sub-directions delta = -15..15 deg: mean of -atan(0.6 cos delta) [calc]
    delta = np.radians(np.arange(-15.0, 15.1, 5.0))
    assert west_flank == pytest.approx(-np.degrees(np.arctan(0.6 * np.cos(delta))).mean(), abs=0.05)
    # wind from the east swaps the roles
    assert sx[1, 30, 60] < 0 and sx[1, 30, 45] > 0

"""The demo's invented relief looks natural: no regular pattern, real slopes, real drainage.

These check the shipped demo DEM (the generator's output, see test_dem_readers) with
measures that do not depend on how it was made. Thresholds are common practice for what a
mountain range's DEM at 100 m shows, not measured constants; each says what fails it.
"""

from __future__ import annotations

import numpy as np
import pytest

from regionmap.demo.relief import (
    carve_cirques_haynes1968,
    priority_flood_eps_barnes2014,
    thermal_erosion_musgrave1989,
)


def _largest_peak_share_of_slope_variance(z_m: np.ndarray, spacing_m: float) -> float:
    """Share of the slope field's variance in its strongest single wave (2-D spectrum).

    The spectrum of the gradient (dz/dx, dz/dy) weights every wave by the slope it makes,
    which is what hillshaded maps show; a Hann window stops the edges leaking. A wave and its
    mirror frequency are one peak, hence the factor 2.
    """
    ny, nx = z_m.shape
    window = np.outer(np.hanning(ny), np.hanning(nx))
    gy, gx = np.gradient(z_m, spacing_m)
    power = sum(np.abs(np.fft.fft2((g - g.mean()) * window)) ** 2 for g in (gx, gy))
    power[0, 0] = 0.0
    return float(2.0 * power.max() / power.sum())


def test_no_dominant_spatial_frequency(demo_dem):
    share = _largest_peak_share_of_slope_variance(demo_dem.elevation_m, 100.0)
    assert share < 0.02, share
    # negative control: ribs of one wavelength cut into a broad ridge (the kind of regular
    # texture a hand-made DEM shows) put far more than that into one wave
    y, x = np.mgrid[0:300, 0:300] * 0.1  # km
    ridge = 1500.0 * np.exp(-(((y - 15.0) / 6.0) ** 2))
    ribs = ridge + 150.0 * np.sin(2.0 * np.pi * (x / 2.5 + y / 4.0))
    assert _largest_peak_share_of_slope_variance(ribs, 100.0) > 0.1


def test_slopes_are_those_of_a_mountain_range(demo_terrain, demo_cells):
    """A good share of the terrain inside the zones is avalanche terrain of 30-45 deg
    (common practice: most slab avalanches release on slopes of 30-45 deg, e.g. McClung &
    Schaerer (2006), The Avalanche Handbook, 3rd ed.), and hardly any is steeper than rock
    walls hold snow or than the talus angle of the weathering step."""
    inside = demo_cells.index >= 0  # the pixels of the zones
    slope = demo_terrain.slope_deg[inside & np.isfinite(demo_terrain.slope_deg)]
    avalanche_terrain = float(np.mean((slope >= 30.0) & (slope <= 45.0)))
    assert avalanche_terrain > 0.25, avalanche_terrain
    assert float(np.mean(slope > 50.0)) < 0.01
    assert 15.0 < float(np.median(slope)) < 35.0
    # and every aspect is there on those slopes
    steep_aspects = demo_terrain.aspect_deg[inside & (demo_terrain.slope_deg >= 30.0)]
    counts, _ = np.histogram((steep_aspects + 22.5) % 360.0, bins=8, range=(0.0, 360.0))
    assert counts.min() > 0.05 * counts.sum(), counts


def test_valleys_drain(demo_dem):
    """Rivers made the valleys, so they drain: filling every closed depression (Barnes et
    al. 2014, Priority-Flood) raises less than 5 % of the DEM by more than 20 m (cirque
    tarns and hollows only). Relief from noise or ridged noise alone fails this, and so does
    a hand-made range of ridges and bumps (the earlier demo DEM: 14 %): their valleys are
    closed basins."""
    z = demo_dem.elevation_m.astype(np.float64)
    raised = priority_flood_eps_barnes2014(z, 0.0) - z
    assert float(np.mean(raised > 20.0)) < 0.05
    # negative control: a bowl has to be filled up to its rim
    y, x = np.mgrid[0:50, 0:50]
    bowl = np.hypot(x - 24.5, y - 24.5) * 10.0
    assert float(np.mean(priority_flood_eps_barnes2014(bowl, 0.0) - bowl > 20.0)) > 0.5


def test_thermal_erosion_conserves_mass_and_stops_at_the_talus_angle():
    """Analytic: the weathering only moves material (the sum is unchanged to round-off) and
    leaves a slope gentler than the talus angle untouched (Musgrave et al. 1989)."""
    rng = np.random.default_rng(3)
    z = rng.uniform(0.0, 400.0, (40, 40))
    out = thermal_erosion_musgrave1989(z, 100.0, 40.0, 30)
    assert out.sum() == pytest.approx(z.sum(), rel=1e-12)
    assert np.abs(np.diff(out, axis=1)).max() < np.abs(np.diff(z, axis=1)).max()
    gentle = np.add.outer(np.zeros(20), np.arange(20) * 100.0 * np.tan(np.radians(30.0)))
    np.testing.assert_array_equal(thermal_erosion_musgrave1989(gentle, 100.0, 40.0, 5), gentle)


def test_cirque_long_profile_haynes1968():
    """On a plane sloping north, the cirque floor along its axis follows the Haynes (1968)
    long profile z_lip + k (1 - s) exp(-s) (analytic, k = headwall minus lip), and nothing
    outside the cirque changes."""
    n, dx = 60, 100.0
    rows = np.arange(n)[:, None] * np.ones((1, n))
    plane = 3000.0 + 0.5 * rows * dx  # rises to the south (row 0 is the northern edge)
    head = (40, 30)
    out = carve_cirques_haynes1968(plane, dx, [head], 1600.0, 1400.0)
    k = plane[40, 30] - plane[24, 30]
    s = np.arange(0, 13) * dx / 1600.0  # the inner three quarters, where the cut is full
    expected = plane[24, 30] + k * (1.0 - s) * np.exp(-s)
    np.testing.assert_allclose(
        out[40 - np.arange(13), 30], np.minimum(expected, plane[40 - np.arange(13), 30])
    )
    assert (out <= plane).all()
    np.testing.assert_array_equal(out[41:], plane[41:])  # behind the headwall

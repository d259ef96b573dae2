"""compute_terrain on projected and geographic DEMs, the GeoTIFF layers, and the line-scan
kernel against the horizon definition evaluated directly."""

from __future__ import annotations

import shutil
from pathlib import Path

import numpy as np
import pytest
from affine import Affine
from hypothesis import given, settings
from hypothesis import strategies as st
from test_terrain_speed_equivalence import _direct, random_line

from regionmap.config import TerrainSettings
from regionmap.errors import ConfigError
from regionmap.io.dem import read_dem
from regionmap.terrain import compute_terrain, write_terrain_layers
from regionmap.terrain.horizon import _scan_one_line


@settings(deadline=None, max_examples=60)
@given(
    n=st.integers(1, 80),
    window=st.integers(1, 30),
    seed=st.integers(0, 10_000),
    floor0=st.booleans(),
    curvature=st.booleans(),
)
def test_hull_scan_equals_direct_maximum_dozier_frew1990(n, window, seed, floor0, curvature):
    # The horizon definition of Dozier & Frew (1990), max over the window of
    # (z_j - z_i - d^2/2R)/d, evaluated point by point, against the hull scan.
    z, w, ds, inv_r = random_line(n, seed, curvature)
    out = np.empty(n)
    _scan_one_line(
        w, n, window, ds, inv_r, floor0, np.empty(n), np.empty(n, np.int64), np.empty(n), out
    )
    ref = _direct(z, ds, window, inv_r, floor0, -1)  # the window looks back along the line
    np.testing.assert_array_equal(np.isnan(out), np.isnan(ref))
    ok = ~np.isnan(ref)
    np.testing.assert_allclose(out[ok], ref[ok], rtol=1e-9, atol=1e-12)


def test_terrain_settings_reject_bad_values():
    with pytest.raises(ConfigError, match="horizon_azimuths"):
        TerrainSettings(horizon_azimuths=100)
    with pytest.raises(ConfigError, match="exposure_distance_m"):
        TerrainSettings(exposure_distance_m=0)


def test_demo_terrain_shapes_and_ranges(demo_dem, demo_terrain):
    t = demo_terrain
    ny, nx = demo_dem.shape
    assert t.horizon_deg.shape == (16, ny, nx) and t.horizon_deg.dtype == np.float32
    assert t.sx_deg.shape == (8, ny, nx) and t.sx_deg.dtype == np.float32
    np.testing.assert_allclose(t.horizon_azimuths_deg, np.arange(16) * 22.5)
    assert np.nanmin(t.horizon_deg) >= 0 and np.nanmax(t.horizon_deg) < 60
    assert 0.5 < np.nanmin(t.sky_view_frac) and np.nanmax(t.sky_view_frac) <= 1.0
    # the deep north-facing cirque: steep north-facing pixels with a high southern horizon
    south = t.horizon_deg[8]
    north_steep = ((t.aspect_deg > 337.5) | (t.aspect_deg < 22.5)) & (t.slope_deg > 30)
    assert north_steep.sum() > 30 and np.nanmax(south[north_steep]) > 25


def test_geographic_dem_is_analysed_on_its_utm_view(tmp_path):
    # A lon/lat DEM: terrain comes back on the DEM grid; a uniform slope of known true
    # steepness (built in metres, then sampled on lon/lat) gives that slope [calc].
    from regionmap.io.writers import write_geotiff

    lat0, lon0, d = 46.5, 9.0, 0.001
    ny, nx = 60, 80
    lat = lat0 - d * (np.arange(ny) + 0.5)
    north_m = (lat - lat.mean()) * 111_150.0  # metres per degree of latitude near 46.5 N [mem]
    z = np.repeat((1500.0 + 0.25 * north_m)[:, None], nx, axis=1)  # rises to the north: faces south
    p = tmp_path / "geo.tif"
    write_geotiff(
        p,
        z.astype(np.float32),
        transform=Affine(d, 0, lon0, 0, -d, lat0),
        crs="EPSG:4326",
        nodata=-9999.0,
        description="elevation",
        cog=False,
    )
    dem = read_dem(p)
    t = compute_terrain(
        dem, TerrainSettings(horizon_azimuths=8, horizon_distance_m=500.0, exposure_directions=4)
    )
    assert t.slope_deg.shape == dem.shape and t.horizon_deg.shape == (8, ny, nx)
    inner = (slice(10, -10), slice(10, -10))
    assert np.nanmedian(t.slope_deg[inner]) == pytest.approx(np.degrees(np.arctan(0.25)), abs=0.3)
    assert np.nanmedian(t.aspect_deg[inner]) == pytest.approx(
        180.0, abs=3.0
    )  # grid convergence < 3 deg


def test_geographic_dem_aspect_and_horizon_are_relative_to_true_north(tmp_path):
    # A lon/lat DEM 2.5 deg east of its UTM zone's central meridian (zone 32, 9 E) at 60 N:
    # there UTM grid north is turned from true north by the meridian convergence, about
    # dlon sin(lat) = 2.2 deg (Snyder 1987, USGS PP 1395, Transverse Mercator [mem]). The
    # plane is built in true local east/north metres, so its aspect and its horizon toward
    # each true azimuth are known [calc]; without the correction both are off by ~2 deg.
    from regionmap.io.writers import write_geotiff

    lat0, lon0, d = 60.06, 11.47, 0.0004
    ny, nx = 150, 150
    lat = lat0 - d * (np.arange(ny) + 0.5)
    lon = lon0 + d * (np.arange(nx) + 0.5)
    lat_c = np.radians(lat.mean())
    m_lat = 111_132.95 - 559.82 * np.cos(2 * lat_c)  # metres per degree of latitude [mem]
    m_lon = 111_412.84 * np.cos(lat_c)  # metres per degree of longitude [mem]
    north_m = (lat[:, None] - lat.mean()) * m_lat
    east_m = (lon[None, :] - lon.mean()) * m_lon
    slope, aspect = 20.0, 130.0  # true north, clockwise
    grad = np.tan(np.radians(slope))
    z = 1500.0 - grad * (east_m * np.sin(np.radians(aspect)) + north_m * np.cos(np.radians(aspect)))
    p = tmp_path / "geo_east.tif"
    write_geotiff(
        p,
        z.astype(np.float64),
        transform=Affine(d, 0, lon0, 0, -d, lat0),
        crs="EPSG:4326",
        nodata=-9999.0,
        description="elevation",
        cog=False,
    )
    s = TerrainSettings(
        horizon_azimuths=36, horizon_distance_m=300.0, exposure_directions=8, earth_curvature=False
    )
    t = compute_terrain(read_dem(p), s)
    inner = (slice(40, -40), slice(40, -40))
    assert np.nanmedian(t.slope_deg[inner]) == pytest.approx(slope, abs=0.05)
    assert np.nanmedian(t.aspect_deg[inner]) == pytest.approx(aspect, abs=0.3)
    # On the plane tan(horizon) toward azimuth phi is max(0, tan S cos(phi - up)) and the
    # upwind slope tan(Sx) for wind from phi is tan S cos(phi - up), up = aspect - 180 the
    # upslope azimuth [calc]; both are symmetric about up, so the phase of their first
    # azimuthal harmonic is up (a phase is insensitive to the resampling noise of the
    # UTM view, which moves single angles by a few tenths of a degree).
    for bands, phi in ((t.horizon_deg, t.horizon_azimuths_deg), (t.sx_deg, t.sx_directions_deg)):
        tan_b = np.tan(np.radians(bands[:, inner[0], inner[1]].reshape(phi.size, -1)))
        harmonic = (tan_b * np.exp(1j * np.radians(phi))[:, None]).sum(axis=0)
        phase = np.degrees(np.angle(np.exp(-1j * np.radians(aspect + 180.0)) * harmonic))
        assert np.nanmedian(phase) == pytest.approx(0.0, abs=0.5)


def test_write_terrain_layers_writes_each_layer_on_the_dem_grid(tmp_path):
    import rasterio

    from regionmap.demo.scenario import SHIPPED_DEM

    dem_path = Path(shutil.copyfile(SHIPPED_DEM, tmp_path / "dem.tif"))
    s = TerrainSettings(horizon_azimuths=8, horizon_distance_m=2000.0, exposure_directions=4)
    written = write_terrain_layers(dem_path, tmp_path / "out", s, progress=False)
    names = sorted(p.name for p in written)
    assert names == [
        "aspect_deg.tif",
        "curvature.tif",
        "horizon_deg.tif",
        "sky_view_frac.tif",
        "slope_deg.tif",
        "sx_deg.tif",
    ]
    dem = read_dem(dem_path)
    with rasterio.open(tmp_path / "out" / "horizon_deg.tif") as src:
        assert src.count == 8 and src.transform == dem.transform and src.crs == dem.crs
    with rasterio.open(tmp_path / "out" / "sx_deg.tif") as src:
        assert src.count == 4

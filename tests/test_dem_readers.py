"""DEM reader: bad input, nodata, metric view, true pixel areas; demo files reproducible."""

from __future__ import annotations

import numpy as np
import pytest
import rasterio
from affine import Affine
from rasterio.crs import CRS

from regionmap.errors import InputError
from regionmap.io.dem import read_dem


def _write_raw(
    path, z, crs="EPSG:32632", transform=Affine(100, 0, 600000, 0, -100, 5200000), nodata=None
):
    with rasterio.open(
        path,
        "w",
        driver="GTiff",
        height=z.shape[0],
        width=z.shape[1],
        count=1,
        dtype="float32",
        crs=None if crs is None else CRS.from_user_input(crs),
        transform=transform,
        nodata=nodata,
    ) as dst:
        dst.write(z.astype(np.float32), 1)


def test_dem_without_crs_is_an_input_error_naming_the_file(tmp_path):
    p = tmp_path / "nocrs.tif"
    _write_raw(p, np.ones((5, 5)), crs=None)
    with pytest.raises(InputError, match=r"nocrs\.tif.*no coordinate reference system"):
        read_dem(p)


def test_all_nodata_dem_is_an_input_error(tmp_path):
    p = tmp_path / "empty.tif"
    _write_raw(p, np.full((5, 5), -9999.0), nodata=-9999.0)
    with pytest.raises(InputError, match=r"empty\.tif.*every pixel is nodata"):
        read_dem(p)


def test_unreadable_and_missing_dem(tmp_path):
    p = tmp_path / "garbage.tif"
    p.write_text("not a raster")
    with pytest.raises(InputError, match=r"garbage\.tif.*cannot be read"):
        read_dem(p)
    with pytest.raises(InputError, match="file not found"):
        read_dem(tmp_path / "absent.tif")


def test_nodata_becomes_nan(tmp_path):
    z = np.arange(25, dtype=float).reshape(5, 5)
    z[2, 3] = -32768
    p = tmp_path / "nd.tif"
    _write_raw(p, z, nodata=-32768)
    dem = read_dem(p)
    assert np.isnan(dem.elevation_m[2, 3]) and np.isfinite(dem.elevation_m).sum() == 24
    assert dem.crs == CRS.from_epsg(32632) and dem.shape == (5, 5)


def test_geographic_dem_metric_view_is_utm_and_areas_match_pyproj_geod(tmp_path):
    # Outside reference: pyproj.Geod polygon areas on the WGS 84 ellipsoid.
    from pyproj import Geod

    z = np.linspace(1000, 2000, 40 * 50).reshape(40, 50)
    t = Affine(0.01, 0, 10.0, 0, -0.01, 47.0)
    p = tmp_path / "geo.tif"
    _write_raw(p, z, crs="EPSG:4326", transform=t)
    dem = read_dem(p)
    m = dem.metric()
    assert m.crs == CRS.from_epsg(32632)  # 10.25 E lies in UTM zone 32
    assert np.nanmax(m.elevation_m) <= 2000 + 1e-6 and np.nanmin(m.elevation_m) >= 1000 - 1e-6
    area = dem.pixel_area_m2()
    geod = Geod(ellps="WGS84")
    for row in (0, 39):
        lat_top = 47.0 - 0.01 * row
        a, _ = geod.polygon_area_perimeter(
            [10.0, 10.01, 10.01, 10.0], [lat_top, lat_top, lat_top - 0.01, lat_top - 0.01]
        )
        assert area[row, 0] == pytest.approx(abs(a), rel=1e-6)


def test_shipped_demo_files_are_reproduced_by_their_generator(tmp_path):
    # The shipped files are outputs of regionmap.demo.scenario; regenerating them must give the same
    # grid and the same zones (a reproducibility check, not a physical reference).
    import geopandas as gpd

    from regionmap.demo.scenario import (
        DEMO_ZONE_NAMES,
        SHIPPED_DEM,
        SHIPPED_ZONES,
        make_demo_dem,
        make_demo_zones,
    )

    new_dem = read_dem(make_demo_dem(tmp_path / "dem.tif"))
    old_dem = read_dem(SHIPPED_DEM)
    assert new_dem.transform == old_dem.transform and new_dem.crs == old_dem.crs
    np.testing.assert_allclose(new_dem.elevation_m, old_dem.elevation_m, atol=1e-3)
    new_z = gpd.read_file(make_demo_zones(tmp_path / "zones.geojson"))
    old_z = gpd.read_file(SHIPPED_ZONES)
    assert list(new_z["name"]) == list(old_z["name"]) == list(DEMO_ZONE_NAMES)
    for a, b in zip(new_z.geometry, old_z.geometry, strict=True):
        assert a.equals_exact(b, tolerance=1e-9)


def test_demo_dem_has_the_promised_relief_and_every_aspect(demo_dem, demo_terrain):
    z = demo_dem.elevation_m
    assert demo_dem.shape == (300, 300) and demo_dem.spacing_m() == (100.0, 100.0)
    assert 1150 <= np.nanmin(z) <= 1300 and 3100 <= np.nanmax(z) <= 3250
    steep = demo_terrain.slope_deg > 20
    counts, _ = np.histogram(demo_terrain.aspect_deg[steep], bins=16, range=(-11.25, 348.75))
    hist_n = ((demo_terrain.aspect_deg[steep] + 11.25) % 360 < 22.5).sum()
    assert counts[1:].min() > 50 and hist_n > 50

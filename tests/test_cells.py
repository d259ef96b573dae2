"""Band cells on the demo region and on an open plane."""

from __future__ import annotations

import math

import numpy as np
import pytest
from affine import Affine
from rasterio.crs import CRS
from rasterio.features import rasterize

from regionmap.cells import build_cells
from regionmap.config import CellSettings, TerrainSettings
from regionmap.errors import ConfigError
from regionmap.io.dem import Dem
from regionmap.terrain import compute_terrain


def test_every_valid_in_zone_pixel_is_in_exactly_one_cell(demo_dem, demo_zones, demo_cells):
    inside = rasterize(
        [(g, 1) for g in demo_zones.geometry],
        out_shape=demo_dem.shape,
        transform=demo_dem.transform,
        fill=0,
    ).astype(bool)
    valid = inside & np.isfinite(demo_dem.elevation_m)
    assert np.array_equal(demo_cells.index >= 0, valid)
    assert demo_cells.table.pixel_count.sum() == valid.sum()
    counts = np.bincount(demo_cells.index[valid], minlength=len(demo_cells.table))
    np.testing.assert_array_equal(counts, demo_cells.table.pixel_count.to_numpy())


def test_cell_areas_sum_to_rasterised_zone_area(demo_dem, demo_zones, demo_cells):
    area = demo_dem.pixel_area_m2()
    for name, geom in zip(demo_zones.zone, demo_zones.geometry, strict=True):
        mask = rasterize(
            [(geom, 1)], out_shape=demo_dem.shape, transform=demo_dem.transform, fill=0
        ).astype(bool)
        expect_km2 = area[mask].sum() / 1e6
        got = demo_cells.table.loc[demo_cells.table.zone == name, "area_km2"].sum()
        assert got == pytest.approx(expect_km2, rel=1e-12)


def test_band_edges_are_honoured(demo_dem, demo_cells):
    z = demo_dem.elevation_m
    t = demo_cells.table
    idx = demo_cells.index
    ok = idx >= 0
    lower = t.band_lower_m.to_numpy()[idx[ok]]
    upper = t.band_upper_m.to_numpy()[idx[ok]]
    assert np.all(z[ok] >= lower) and np.all(z[ok] < upper)
    assert set(np.unique(t.band_lower_m)) <= {-np.inf, 1500, 1800, 2100, 2400, 2700, 3000}
    assert np.isinf(t.band_lower_m.min()) and np.isinf(t.band_upper_m.max())  # open-ended


def test_north_sector_mean_aspect_stays_in_its_sector(demo_cells):
    # circular mean (not the arithmetic mean of 350 and 10 deg, which would be 180)
    north = demo_cells.table[demo_cells.table.aspect_sector == "N"]
    assert len(north) > 3
    off = (north.aspect_deg + 180.0) % 360.0 - 180.0
    assert np.all(np.abs(off) <= 22.5)


def test_small_cells_are_flagged_not_dropped(demo_cells):
    t = demo_cells.table
    assert (t.small == (t.pixel_count < 25)).all()
    assert list(t.index) == list(range(len(t)))
    # the (zone, band, sector, slope class) combination is unique
    assert not t.duplicated(["zone", "band_lower_m", "aspect_sector", "slope_class"]).any()


def test_polygons_cover_the_cells(demo_cells):
    g = demo_cells.polygons()
    assert len(g) == len(demo_cells.table)
    assert g.geometry.is_valid.all() and (g.geometry.geom_type == "MultiPolygon").all()
    np.testing.assert_allclose(g.geometry.area.to_numpy() / 1e6, g.area_km2.to_numpy(), rtol=1e-9)


def test_slope_classes_split_cells(demo_dem, demo_terrain, demo_zones):
    c = build_cells(
        demo_dem,
        demo_terrain,
        demo_zones,
        CellSettings(band_step_m=500, aspect_sectors=4, slope_classes_deg=(30.0,)),
    )
    t = c.table
    assert set(t.slope_class) == {0, 1}
    idx = c.index
    ok = idx >= 0
    steep = demo_terrain.slope_deg[ok] >= 30
    assert np.array_equal(t.slope_class.to_numpy()[idx[ok]] == 1, steep)
    assert set(t.aspect_sector) <= {"N", "E", "S", "W", "flat"}


def test_bad_cell_settings_name_the_key():
    with pytest.raises(ConfigError, match="aspect_sectors"):
        CellSettings(aspect_sectors=6)
    with pytest.raises(ConfigError, match="band_edges_m"):
        CellSettings(band_edges_m=(2000, 1500))


def test_sunlit_table_on_open_plane_is_one_above_and_zero_behind_the_plane():
    # Liu & Jordan (1963) incidence on a plane: cos i = sin(el) cos S + cos(el) sin S cos(az - A)
    # > 0 exactly where the sun stands above the plane; on an open plane the terrain horizon
    # never exceeds the plane, so the lit fraction is 1 there and 0 behind the plane [calc].
    import geopandas as gpd
    from shapely.geometry import box

    n, d = 80, 30.0
    slope, aspect = 35.0, 135.0
    y, x = np.mgrid[0:n, 0:n] * d
    g = math.tan(math.radians(slope))
    z = 5000.0 - g * (np.sin(math.radians(aspect)) * x - np.cos(math.radians(aspect)) * y)
    t = Affine(d, 0, 500000.0, 0, -d, 5200000.0)
    dem = Dem(z, t, CRS.from_epsg(32632))
    terrain = compute_terrain(dem, TerrainSettings(horizon_azimuths=72, horizon_distance_m=1000.0))
    inner = box(500000 + 10 * d, 5200000 - 70 * d, 500000 + 70 * d, 5200000 - 10 * d)
    zones = gpd.GeoDataFrame({"zone": ["Plane"]}, geometry=[inner], crs=dem.crs)
    c = build_cells(dem, terrain, zones, CellSettings(band_edges_m=(0.0,), flat_below_deg=5.0))
    assert len(c.table) == 1 and c.table.aspect_sector.iloc[0] == "SE"
    s = c.sunlit
    az = np.radians(s.azimuth_deg)[:, None]
    el = np.radians(s.elevation_deg)[None, :]
    cos_i = np.sin(el) * math.cos(math.radians(slope)) + np.cos(el) * math.sin(
        math.radians(slope)
    ) * np.cos(az - math.radians(aspect))
    frac = s.fraction[0]
    # away from the grazing boundary, and the sun above the astronomical horizon (a sun at
    # elevation 0 sits on the horizon floor of 0 deg and counts as not lit)
    clear = (np.abs(cos_i) > 0.02) & (el > 0)
    assert np.all(frac[clear & (cos_i > 0)] == 1.0)
    assert np.all(frac[clear & (cos_i < 0)] == 0.0)
    lit = clear & (cos_i > 0)
    np.testing.assert_allclose(s.cos_incidence[0][lit], cos_i[lit], atol=1e-6)

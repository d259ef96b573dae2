"""Zone reader: reprojection, repair, and each kind of bad input named in the message."""

from __future__ import annotations

import json

import pytest
import shapely
from shapely.geometry import Point, Polygon, box, mapping

from regionmap.errors import InputError, RegionmapWarning
from regionmap.io.zones import read_zones


def _geojson(path, features, crs=None):
    doc = {
        "type": "FeatureCollection",
        "features": [
            {"type": "Feature", "properties": props, "geometry": mapping(g)}
            for props, g in features
        ],
    }
    if crs:
        doc["crs"] = {"type": "name", "properties": {"name": crs}}
    path.write_text(json.dumps(doc))
    return path


def _utm(demo_dem, x0, y0, x1, y1):
    left, bottom, _, _ = demo_dem.bounds
    return box(left + x0, bottom + y0, left + x1, bottom + y1)


def test_shipped_zones_are_reprojected_to_the_dem_crs(demo_zones, demo_dem):
    assert demo_zones.crs == demo_dem.crs
    assert list(demo_zones.columns) == ["zone", "geometry"] and len(demo_zones) == 4
    # shared edges survive the EPSG:4326 round trip: the zones tile their union
    union = shapely.union_all(list(demo_zones.geometry))
    assert union.area == pytest.approx(demo_zones.geometry.area.sum(), rel=1e-9)


def test_zones_that_miss_the_dem_are_named(tmp_path, demo_dem):
    far = _utm(demo_dem, 50_000, 0, 60_000, 10_000)
    p = _geojson(
        tmp_path / "z.geojson",
        [({"name": "Inside"}, _utm(demo_dem, 0, 0, 5000, 5000)), ({"name": "Faraway"}, far)],
        crs=demo_dem.crs.to_string(),
    )
    with pytest.raises(InputError, match=r"\['Faraway'\] lie outside the DEM"):
        read_zones(p, "name", demo_dem)


def test_zones_file_without_polygons(tmp_path, demo_dem):
    left, bottom, _, _ = demo_dem.bounds
    p = _geojson(
        tmp_path / "pts.geojson",
        [({"name": "A"}, Point(left + 10, bottom + 10))],
        crs=demo_dem.crs.to_string(),
    )
    with pytest.raises(InputError, match="no polygons"):
        read_zones(p, "name", demo_dem)


def test_overlapping_zones_name_both(tmp_path, demo_dem):
    p = _geojson(
        tmp_path / "o.geojson",
        [
            ({"name": "Upper"}, _utm(demo_dem, 0, 0, 6000, 6000)),
            ({"name": "Lower"}, _utm(demo_dem, 5000, 5000, 9000, 9000)),
        ],
        crs=demo_dem.crs.to_string(),
    )
    with pytest.raises(InputError, match=r"'Upper' and 'Lower' overlap"):
        read_zones(p, "name", demo_dem)


def test_duplicate_names_and_missing_field(tmp_path, demo_dem):
    a, b = _utm(demo_dem, 0, 0, 5000, 5000), _utm(demo_dem, 5000, 0, 9000, 5000)
    p = _geojson(
        tmp_path / "d.geojson",
        [({"name": "Same"}, a), ({"name": "Same"}, b)],
        crs=demo_dem.crs.to_string(),
    )
    with pytest.raises(InputError, match="duplicate zone names"):
        read_zones(p, "name", demo_dem)
    with pytest.raises(InputError, match=r"no attribute 'label'"):
        read_zones(p, "label", demo_dem)


def test_invalid_bowtie_is_repaired_with_a_warning(tmp_path, demo_dem):
    left, bottom, _, _ = demo_dem.bounds
    x, y = left + 2000, bottom + 2000
    bowtie = Polygon([(x, y), (x + 4000, y + 4000), (x + 4000, y), (x, y + 4000)])
    assert not bowtie.is_valid
    p = _geojson(tmp_path / "b.geojson", [({"name": "Knot"}, bowtie)], crs=demo_dem.crs.to_string())
    with pytest.warns(RegionmapWarning, match="'Knot' had an invalid polygon"):
        z = read_zones(p, "name", demo_dem)
    assert z.geometry.iloc[0].is_valid and z.geometry.iloc[0].area == pytest.approx(8e6, rel=1e-9)


def test_unreadable_zones_file(tmp_path, demo_dem):
    p = tmp_path / "bad.geojson"
    p.write_text("{ not json")
    with pytest.raises(InputError, match=r"bad\.geojson.*cannot be read"):
        read_zones(p, "name", demo_dem)

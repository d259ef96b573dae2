"""The demo's outputs against independent validators of their formats: GDAL's COG driver
output checked by rio-cogeo (``cog_validate(strict=True)``) and by GDAL's own
``validate_cloud_optimized_geotiff.py``; styles read back as XML.

The demo is the session's shared run (``demo_run`` in conftest.py).
"""

from __future__ import annotations

import os
import subprocess
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest
import rasterio

from regionmap.products.gis import MAP_SPECS, NO_WEAK_LAYER

#: GDAL's COG validator, shipped with its Python bindings (Debian python3-gdal)
GDAL_COG_VALIDATOR = Path(
    "/usr/lib/python3/dist-packages/osgeo_utils/samples/validate_cloud_optimized_geotiff.py"
)


def _maps(out: Path) -> list[Path]:
    return sorted((out / "maps").glob("*.tif"))


def test_maps_are_valid_cogs_for_rio_cogeo(demo_run):
    from rio_cogeo.cogeo import cog_validate

    maps = _maps(demo_run[2])
    assert len(maps) >= 6
    for path in maps:
        # rio-cogeo's validator (a port of GDAL's COG checks); strict: warnings fail too
        valid, errors, warnings = cog_validate(path, strict=True, quiet=True)
        assert valid, (path.name, errors, warnings)


def test_maps_are_valid_cogs_for_gdal(demo_run):
    if not GDAL_COG_VALIDATOR.exists():
        if os.environ.get("CI") == "true":
            pytest.fail(f"oracle missing: {GDAL_COG_VALIDATOR} (Debian python3-gdal)")
        pytest.skip("GDAL's COG validator is not installed (Debian python3-gdal)")
    for path in _maps(demo_run[2]):
        # GDAL's own validator, run by the Python that has GDAL's bindings
        proc = subprocess.run(
            ["/usr/bin/python3", str(GDAL_COG_VALIDATOR), "--full-check=yes", str(path)],
            capture_output=True,
            text=True,
        )
        assert proc.returncode == 0, (path.name, proc.stdout, proc.stderr)
        assert "is a valid cloud optimized GeoTIFF" in proc.stdout


def test_maps_carry_unit_description_statistics_and_style(demo_run):
    out = demo_run[2]
    for path in _maps(out):
        name = path.stem
        with rasterio.open(path) as r:
            assert r.units[0], name
            assert r.descriptions[0].startswith(name)
            tags = r.tags(1)
            for key in ("STATISTICS_MINIMUM", "STATISTICS_MAXIMUM", "STATISTICS_MEAN"):
                assert key in tags, (name, key)
            band = r.read(1, masked=True)
            assert float(tags["STATISTICS_MAXIMUM"]) == pytest.approx(float(band.max()))
            assert float(tags["STATISTICS_MINIMUM"]) == pytest.approx(float(band.min()))
        spec = MAP_SPECS.get(name)
        if spec is None:
            continue
        if spec.kind == "classes":
            with rasterio.open(path) as r:
                table = r.colormap(1)
            assert table[int(spec.nodata)][3] == 0  # nodata transparent
            assert len({table[v] for v in range(int(spec.hi) + 1)}) == int(spec.hi) + 1
        else:
            qml = ET.parse(path.with_suffix(".qml")).getroot()
            assert qml.tag == "qgis"
            items = qml.findall(".//colorrampshader/item")
            assert len(items) >= 2
            sld = ET.parse(path.with_suffix(".sld")).getroot()
            assert sld.tag == "{http://www.opengis.net/sld}StyledLayerDescriptor"
            entries = sld.findall(".//{http://www.opengis.net/sld}ColorMapEntry")
            assert [float(e.get("quantity")) for e in entries] == [
                float(i.get("value")) for i in items
            ]


def test_no_weak_layer_is_a_value_of_its_own_not_nodata(demo_run):
    out = demo_run[2]
    with rasterio.open(out / "maps" / "cell_id.tif") as r:
        inside = r.read(1) >= 0
    with rasterio.open(out / "maps" / "pwl_depth_cm.tif") as r:
        depth = r.read(1)
        nodata = r.nodata
        assert r.tags(1)["none_value"] == f"{NO_WEAK_LAYER:g}"
        qml = ET.parse(out / "maps" / "pwl_depth_cm.qml").getroot()
        assert qml.find(".//item").get("value") == repr(NO_WEAK_LAYER)
    assert not (depth[inside] == nodata).any()  # every simulated pixel has a value
    assert (depth[~inside] == nodata).all()
    assert (depth[inside] == NO_WEAK_LAYER).any() and (depth[inside] >= 0).any()
    assert set(np.unique(depth[inside][depth[inside] < 0])) == {NO_WEAK_LAYER}


@pytest.mark.parametrize("name", ["cells.nc", "profiles.nc", "state.nc", "state_end.nc"])
def test_netcdf_outputs_pass_the_cf_checker(demo_run, name, tmp_path):
    import json

    from compliance_checker.runner import CheckSuite, ComplianceChecker

    CheckSuite.load_all_available_checkers()
    report = tmp_path / "cf.json"
    # the IOOS compliance checker's CF 1.8 test: its high priority findings are the report's
    # "Errors", medium priority ones its "Warnings"
    ComplianceChecker.run_checker(
        str(demo_run[2] / name),
        ["cf:1.8"],
        verbose=0,
        criteria="normal",
        output_filename=str(report),
        output_format="json",
    )
    result = json.loads(report.read_text())["cf:1.8"]
    errors = [(item["name"], item["msgs"]) for item in result["high_priorities"] if item["msgs"]]
    assert not errors, errors
    # and no warnings either, but profiles.nc's layer dimension after its time dimension
    # (the contract's cell, day, layer layout)
    allowed = {"§2.4 Dimensions"} if name == "profiles.nc" else set()
    warnings = [
        (item["name"], item["msgs"])
        for item in result["medium_priorities"]
        if item["msgs"] and item["name"] not in allowed
    ]
    assert not warnings, warnings


def test_netcdf_outputs_name_their_conventions_and_describe_every_variable(demo_run):
    import xarray as xr

    for name in ("cells.nc", "profiles.nc", "state.nc", "state_end.nc"):
        with xr.open_dataset(demo_run[2] / name, decode_times=False) as ds:
            assert ds.attrs["Conventions"] == "CF-1.8", name
            bounds = {v.attrs["bounds"] for v in ds.variables.values() if "bounds" in v.attrs}
            for key, var in ds.variables.items():
                assert var.dtype != np.int64, (name, key)
                if key in bounds:  # described by its parent (CF-1.8 §7.1)
                    continue
                assert "long_name" in var.attrs or "standard_name" in var.attrs, (name, key)
                if var.dtype.kind in "fiu" and "flag_values" not in var.attrs:
                    assert "units" in var.attrs, (name, key)


def test_profiles_describe_their_cells(demo_run):
    import xarray as xr

    with (
        xr.open_dataset(demo_run[2] / "profiles.nc") as prof,
        xr.open_dataset(demo_run[2] / "cells.nc") as cells,
    ):
        for v in ("cell_id", "zone", "band_lower_m", "band_upper_m", "aspect_sector", "lat", "lon"):
            np.testing.assert_array_equal(prof[v].values, cells[v].values, err_msg=v)


# ---------------------------------------------------------------- GeoPackage
#: GDAL's GeoPackage validator, shipped with its Python bindings (Debian python3-gdal)
GDAL_GPKG_VALIDATOR = GDAL_COG_VALIDATOR.with_name("validate_gpkg.py")
GPKG_LAYERS = ("zones", "cells", "rain_crust_line", "layers_of_concern", "problems")


def test_geopackage_is_version_1_2_and_valid_for_gdal(demo_run):
    import sqlite3

    path = demo_run[2] / "zones.gpkg"
    with sqlite3.connect(path) as db:
        # GeoPackage 1.2 §1.1.1.1.1: application_id "GPKG", user_version 10200
        assert db.execute("PRAGMA application_id").fetchone()[0] == 0x47504B47
        assert db.execute("PRAGMA user_version").fetchone()[0] == 10200
    db.close()
    if not GDAL_GPKG_VALIDATOR.exists():
        if os.environ.get("CI") == "true":
            pytest.fail(f"oracle missing: {GDAL_GPKG_VALIDATOR} (Debian python3-gdal)")
        pytest.skip("GDAL's GeoPackage validator is not installed (Debian python3-gdal)")
    # GDAL's own GeoPackage validator, and GDAL 3.6 (Debian's) opening it without a warning
    proc = subprocess.run(
        ["/usr/bin/python3", str(GDAL_GPKG_VALIDATOR), str(path)], capture_output=True, text=True
    )
    assert proc.returncode == 0 and not proc.stdout.strip(), (proc.stdout, proc.stderr)
    proc = subprocess.run(["ogrinfo", "-so", "-q", str(path)], capture_output=True, text=True)
    assert proc.returncode == 0 and "Warning" not in proc.stderr + proc.stdout, proc.stderr


def test_geopackage_carries_a_default_style_for_every_layer(demo_run):
    import pandas as pd
    import pyogrio

    path = demo_run[2] / "zones.gpkg"
    styles = pyogrio.read_dataframe(path, layer="layer_styles")
    assert set(styles["f_table_name"]) == set(GPKG_LAYERS)
    assert styles["useAsDefault"].all()
    for row in styles.itertuples():
        assert ET.fromstring(row.styleQML).tag == "qgis", row.f_table_name
        sld = ET.fromstring(row.styleSLD)
        assert sld.tag == "{http://www.opengis.net/sld}StyledLayerDescriptor"
    info = pd.DataFrame(pyogrio.list_layers(path), columns=["name", "geometry"])
    geom_layers = set(info.loc[info["geometry"].notna(), "name"])
    for row in styles.itertuples():
        assert (row.f_geometry_column == "geom") == (row.f_table_name in geom_layers)
    zones_qml = ET.fromstring(styles.set_index("f_table_name").loc["zones", "styleQML"])
    renderer = zones_qml.find("renderer-v2")
    assert renderer.get("attr") in pyogrio.read_info(path, layer="zones")["fields"]


def test_geopackage_times_are_datetime_and_dates_date(demo_run):
    import pyogrio

    path = demo_run[2] / "zones.gpkg"
    for layer in GPKG_LAYERS:
        info = pyogrio.read_info(path, layer=layer)
        types = dict(zip(info["fields"], info["dtypes"], strict=True))
        for name, dtype in types.items():
            if name.endswith("_time") or name == "new_snow_window_end":
                assert dtype.startswith("datetime64"), (layer, name, dtype)
    # the local calendar date of a layer of concern is a Date field (pyogrio hands GDAL's
    # OFTDate back as datetime64[D])
    info = pyogrio.read_info(path, layer="layers_of_concern")
    assert dict(zip(info["fields"], info["dtypes"], strict=True))["date"] == "datetime64[D]"


# ---------------------------------------------------------------- GeoJSON (RFC 7946)
GEOJSON = ("zones.geojson", "cells.geojson", "rain_crust_line.geojson", "problems.geojson")


def _ring_area(ring) -> float:
    """Shoelace sum: positive for counterclockwise rings (lon east, lat north)."""
    xy = np.asarray(ring)
    return 0.5 * float(np.sum(xy[:-1, 0] * xy[1:, 1] - xy[1:, 0] * xy[:-1, 1]))


def _numbers(node):
    if isinstance(node, dict):
        for v in node.values():
            yield from _numbers(v)
    elif isinstance(node, list):
        for v in node:
            yield from _numbers(v)
    elif isinstance(node, float):
        yield node


@pytest.mark.parametrize("name", GEOJSON)
def test_geojson_follows_rfc7946(demo_run, name):
    import json

    doc = json.loads((demo_run[2] / name).read_text())
    # RFC 7946 §3.3: a FeatureCollection with "features"; §4: no "crs" member
    assert doc["type"] == "FeatureCollection" and "crs" not in doc
    assert isinstance(doc["features"], list)
    for feature in doc["features"]:
        # §3.2: a Feature has "geometry" and "properties" members
        assert feature["type"] == "Feature" and {"geometry", "properties"} <= set(feature)
        geom = feature["geometry"]
        polygons = {"Polygon": [geom["coordinates"]], "MultiPolygon": geom["coordinates"]}
        for polygon in polygons.get(geom["type"], []):
            for k, ring in enumerate(polygon):
                # §3.1.6: closed rings of >= 4 positions; exterior counterclockwise, holes
                # clockwise
                assert len(ring) >= 4 and ring[0] == ring[-1]
                assert (_ring_area(ring) > 0) == (k == 0)
        positions = np.asarray(list(_numbers(geom["coordinates"]))).reshape(-1, 2)
        # §4: WGS 84 longitude, latitude in decimal degrees
        assert (np.abs(positions[:, 0]) <= 180).all() and (np.abs(positions[:, 1]) <= 90).all()
        # ~0.1 m: at most 6 decimals (RFC 7946 §11.2 on precision)
        assert (np.round(positions, 6) == positions).all()
        for value in _numbers(feature["properties"]):
            assert round(value, 6) == value, (name, value)


def test_every_layer_with_geometry_has_a_geojson(demo_run):
    import geopandas as gpd

    out = demo_run[2]
    for layer, name in zip(("zones", "cells", "rain_crust_line", "problems"), GEOJSON, strict=True):
        gpkg = gpd.read_file(out / "zones.gpkg", layer=layer)
        gj = gpd.read_file(out / name)
        assert len(gj) == len(gpkg) and gj.crs.to_epsg() == 4326, name


# ---------------------------------------------------------------- CSV
CSV_TABLES = (
    "layers_of_concern.csv",
    "band_aspect.csv",
    "daily.csv",
    "events.csv",
    "snow_line.csv",
    "rain_crust_limits.csv",
    "problems.csv",
)
#: ISO 8601 date and time with a UTC offset
ISO_WITH_OFFSET = r"^\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}[+-]\d{2}:\d{2}$"


@pytest.mark.parametrize("name", CSV_TABLES)
def test_csv_tables_times_precision_booleans_and_rows(demo_run, name):
    import pandas as pd

    from regionmap.io.writers import decimals_for

    text = pd.read_csv(demo_run[2] / name, dtype=str, keep_default_na=False)
    for col in text.columns:
        values = text[col][text[col] != ""]
        if col.endswith("_time") or col == "new_snow_window_end":
            assert values.str.match(ISO_WITH_OFFSET).all(), (name, col, values.iloc[:3].tolist())
        assert not values.isin(["True", "False"]).any(), (name, col)
        numeric = values[pd.to_numeric(values, errors="coerce").notna()]
        decimals = numeric.str.partition(".")[2].str.len() if len(numeric) else numeric
        assert (decimals <= max(decimals_for(col), 1)).all(), (name, col)
    if name in ("band_aspect.csv", "daily.csv"):
        # no rows of groups without terrain of the weighting (their every value was empty)
        assert (pd.to_numeric(text["area_km2"]) > 0).all(), name

"""Atomic writers: outputs open with the reference readers; failures keep the old file."""

from itertools import pairwise

import numpy as np
import pytest
import rasterio
from affine import Affine

from regionmap.io.atomic import atomic_path, atomic_write_text
from regionmap.io.writers import write_geojson, write_geopackage, write_geotiff, write_netcdf

TRANSFORM = Affine(100.0, 0.0, 500_000.0, 0.0, -100.0, 5_100_000.0)


def test_geotiff_keeps_grid_nodata_description_and_tags(tmp_path):
    data = np.arange(300 * 260, dtype=np.float32).reshape(300, 260)
    data[5, 7] = np.nan
    path = write_geotiff(
        tmp_path / "m.tif",
        data,
        transform=TRANSFORM,
        crs="EPSG:32633",
        nodata=-9999.0,
        description="snow depth [cm]",
        tags={"valid_time": "2026-02-15T12:00:00"},
    )
    with rasterio.open(path) as src:  # rasterio (GDAL) as the reader of record
        assert src.transform == TRANSFORM
        assert src.crs.to_epsg() == 32633
        assert src.nodata == -9999.0
        assert src.descriptions == ("snow depth [cm]",)
        assert src.tags()["valid_time"] == "2026-02-15T12:00:00"
        assert src.profile["tiled"] and src.profile["compress"] == "deflate"
        assert src.overviews(1)
        band = src.read(1, masked=True)
        assert band.mask[5, 7] and not band.mask[0, 0]
        assert band[10, 11] == data[10, 11]


def test_interrupted_write_keeps_old_file(tmp_path):
    target = tmp_path / "a.txt"
    atomic_write_text(target, "old")
    with pytest.raises(RuntimeError):
        with atomic_path(target) as tmp:
            tmp.write_text("half")
            raise RuntimeError("killed")
    assert target.read_text() == "old"
    assert [p.name for p in tmp_path.iterdir()] == ["a.txt"]


def test_vector_and_netcdf_writers(tmp_path):
    import geopandas as gpd
    import pandas as pd
    import pyogrio
    import shapely
    import xarray as xr

    gdf = gpd.GeoDataFrame(
        {"zone": ["Alpha"]},
        geometry=[shapely.box(500_000, 5_000_000, 501_000, 5_001_000)],
        crs=32633,
    )
    write_geopackage(tmp_path / "z.gpkg", {"zones": gdf, "table": pd.DataFrame({"x": [1, 2]})})
    layers = dict(pyogrio.list_layers(tmp_path / "z.gpkg"))
    assert layers["zones"] == "Polygon" and layers["table"] is None
    write_geojson(tmp_path / "z.geojson", gdf)
    back = gpd.read_file(tmp_path / "z.geojson")
    assert back.crs.to_epsg() == 4326
    # the collection is named after the file written, not the temporary file of the atomic write
    assert pyogrio.list_layers(tmp_path / "z.geojson")[0][0] == "z"
    # UTM 33N easting 500 km lies on the central meridian 15 E (EPSG:32633 definition)
    assert abs(back.geometry.bounds.minx[0] - 15.0) < 1e-6
    ds = xr.Dataset({"v": ("cell", np.arange(4.0))})
    write_netcdf(tmp_path / "x.nc", ds)
    with xr.open_dataset(tmp_path / "x.nc") as back_ds:
        np.testing.assert_array_equal(back_ds["v"].values, np.arange(4.0))


def test_streamed_blocks_read_back_the_same_through_either_compression_path(tmp_path):
    """Blocks covering whole HDF5 chunks are compressed by regionmap (shuffle + ISA-L deflate,
    written as raw chunks); other blocks by HDF5's own filters. netCDF-C (netCDF4-python), a
    reader independent of the writer's h5py, must decode both files to the same values,
    including the padded edge chunks along cell, time and day."""
    import netCDF4
    import pandas as pd

    from regionmap.io.results import AMOUNTS, DIAGNOSTICS, CellsNcWriter, ProfilesNcWriter

    n_cell, n_time, n_day, n_layer = 300, 800, 33, 5  # 300 = 256 + 44, 800 = 744 + 56, 33 = 31 + 2
    cells = pd.DataFrame(
        {"zone": ["a"] * n_cell}, index=pd.Index(np.arange(n_cell), name="cell_id")
    )
    times = np.datetime64("2026-01-01T01:00") + np.arange(n_time) * np.timedelta64(1, "h")
    days = times[::24][:n_day]
    rng = np.random.default_rng(3)
    diag = {}
    for name, (dtype, _) in {**DIAGNOSTICS, **AMOUNTS}.items():
        v = np.cumsum(rng.normal(0.0, 0.3, (n_cell, n_time)), axis=1)
        v[rng.random(v.shape) < 0.01] = np.nan
        diag[name] = np.round(v) if dtype.startswith("i") else v
    count = rng.integers(0, n_layer + 1, (n_cell, n_day))
    fields = {
        "thickness_m": rng.random((n_cell, n_day, n_layer)).astype(np.float32),
        "grain_code": rng.choice(
            np.array(["DH", "FCxr", "PP"], dtype="S4"), (n_cell, n_day, n_layer)
        ),
    }
    layer_vars = {"thickness_m": ("f4", {"units": "m"}), "grain_code": ("S4", {})}
    for blocks in ("whole", "split"):
        edges = [0, 256, n_cell] if blocks == "whole" else [0, 37, 200, n_cell]
        w = CellsNcWriter(
            tmp_path / f"cells_{blocks}.nc",
            cells,
            times,
            times - np.timedelta64(1, "h"),
            np.zeros(n_time, bool),
        )
        p = ProfilesNcWriter(tmp_path / f"profiles_{blocks}.nc", cells, days, n_layer, layer_vars)
        for lo, hi in pairwise(edges):
            w.write_chunk(np.arange(lo, hi), {k: v[lo:hi] for k, v in diag.items()})
            p.write_chunk(np.arange(lo, hi), count[lo:hi], {k: v[lo:hi] for k, v in fields.items()})
        w.close()
        p.close()
    for stem in ("cells", "profiles"):
        with (
            netCDF4.Dataset(tmp_path / f"{stem}_whole.nc") as a,
            netCDF4.Dataset(tmp_path / f"{stem}_split.nc") as b,
        ):
            for name, var in a.variables.items():
                x, y = var[:], b.variables[name][:]
                assert np.array_equal(np.ma.getmaskarray(x), np.ma.getmaskarray(y)), name
                assert np.array_equal(np.ma.filled(x, 0), np.ma.filled(y, 0)), name
    # and the values are the ones written: floats as float32, NaN as missing in integers
    with (
        netCDF4.Dataset(tmp_path / "cells_whole.nc") as a,
        netCDF4.Dataset(tmp_path / "profiles_whole.nc") as p,
    ):
        got = a.variables["snow_depth_cm"][:].filled(np.nan)
        assert np.array_equal(got, diag["snow_depth_cm"].astype(np.float32), equal_nan=True)
        crusts = a.variables["crust_count"][:]
        assert np.array_equal(np.ma.getmaskarray(crusts), np.isnan(diag["crust_count"]))
        assert np.array_equal(
            crusts.compressed(), diag["crust_count"][np.isfinite(diag["crust_count"])]
        )
        assert np.array_equal(p.variables["layer_count"][:], count)
        assert np.array_equal(p.variables["thickness_m"][:], fields["thickness_m"])
        assert (
            a.variables["snow_depth_cm"].filters()["shuffle"]
            and a.variables["snow_depth_cm"].filters()["zlib"]
        )


def test_csv_text_times_with_offset_booleans_and_rounding(tmp_path):
    import pandas as pd

    from regionmap.io.writers import write_csv

    frame = pd.DataFrame(
        {
            "valid_time": pd.to_datetime(["2026-02-14T00:00", "2026-02-14T23:00"]),
            "event_time": pd.to_datetime(["2026-01-17T02:00+01:00", None], utc=True),
            "is_forecast": [True, False],
            "snow_depth_cm": [81.94999, np.nan],
            "depth_hoar_fraction": [0.123456, 1.0],
            "elevation_m": [1449.6, 2000.0],
        }
    )
    write_csv(tmp_path / "t.csv", frame)
    lines = (tmp_path / "t.csv").read_text().splitlines()
    assert (
        lines[0]
        == "valid_time,event_time,is_forecast,snow_depth_cm,depth_hoar_fraction,elevation_m"
    )
    # ISO 8601 with the UTC offset, midnight keeps its hour; a zoned time converted to UTC
    assert lines[1] == "2026-02-14T00:00:00+00:00,2026-01-17T01:00:00+00:00,true,81.9,0.123,1450.0"
    assert lines[2] == "2026-02-14T23:00:00+00:00,,false,,1.0,2000.0"


def test_geojson_is_rfc7946_with_nulls_for_missing_values(tmp_path):
    import json

    import geopandas as gpd
    import shapely

    gdf = gpd.GeoDataFrame(
        {"band_upper_m": [np.inf, 2400.0], "v": [np.nan, 1.23456789], "ok": [True, False]},
        geometry=[shapely.box(500_000, 5_000_000, 501_000, 5_001_000)] * 2,
        crs=32633,
    )
    write_geojson(tmp_path / "g.geojson", gdf)
    doc = json.loads((tmp_path / "g.geojson").read_text())
    assert "crs" not in doc  # RFC 7946 §4
    props = [f["properties"] for f in doc["features"]]
    assert props == [
        {"band_upper_m": None, "v": None, "ok": True},
        {"band_upper_m": 2400.0, "v": 1.23, "ok": False},
    ]
    ring = np.asarray(doc["features"][0]["geometry"]["coordinates"][0])
    assert (np.round(ring, 6) == ring).all()
    # exterior ring counterclockwise (RFC 7946 §3.1.6): positive shoelace area
    assert np.sum(ring[:-1, 0] * ring[1:, 1] - ring[1:, 0] * ring[:-1, 1]) > 0


def test_geopackage_version_styles_and_date_fields(tmp_path):
    import datetime
    import sqlite3

    import pandas as pd
    import pyogrio

    from regionmap.io.writers import LayerStyle

    table = pd.DataFrame(
        {"date": [datetime.date(2025, 11, 8), None], "t": pd.to_datetime(["2026-01-01", None])}
    )
    path = write_geopackage(
        tmp_path / "s.gpkg",
        {"table": table},
        styles={"table": LayerStyle("<qgis/>", "<StyledLayerDescriptor/>", "a table")},
    )
    with sqlite3.connect(path) as db:
        assert db.execute("PRAGMA user_version").fetchone()[0] == 10200  # GeoPackage 1.2
    db.close()
    info = pyogrio.read_info(path, layer="table")
    types = dict(zip(info["fields"], info["dtypes"], strict=True))
    assert types["date"] == "datetime64[D]" and types["t"].startswith("datetime64")
    back = pyogrio.read_dataframe(path, layer="table")
    assert back["t"].dt.tz is not None  # DateTime written as UTC
    styles = pyogrio.read_dataframe(path, layer="layer_styles")
    assert list(styles["f_table_name"]) == ["table"] and styles["useAsDefault"].all()
    assert styles["styleQML"].iloc[0] == "<qgis/>"

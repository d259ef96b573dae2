"""Atomic writers: outputs open with the reference readers; failures keep the old file."""

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
        tmp_path / "m.tif", data, transform=TRANSFORM, crs="EPSG:32633", nodata=-9999.0,
        description="snow depth [cm]", tags={"valid_time": "2026-02-15T12:00:00"},
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

    gdf = gpd.GeoDataFrame({"zone": ["Alpha"]}, geometry=[shapely.box(500_000, 5_000_000, 501_000, 5_001_000)], crs=32633)
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

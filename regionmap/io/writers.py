"""Writers for regionmap's outputs: GeoTIFF (COG), GeoPackage, GeoJSON, NetCDF.

Every writer goes through :func:`regionmap.io.atomic.atomic_path`, so an interrupted write
never leaves a half file or destroys an older one.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from pathlib import Path

import numpy as np

from regionmap.errors import InputError, OutputError
from regionmap.io.atomic import atomic_path

__all__ = ["write_geotiff", "write_geopackage", "write_geojson", "write_netcdf"]

_BLOCK = 256


def write_geotiff(
    path: str | os.PathLike,
    array: np.ndarray,
    *,
    transform,
    crs,
    nodata: float | int | None,
    description: str | list[str],
    tags: Mapping[str, str] | None = None,
    cog: bool = True,
) -> Path:
    """Write a 2-D (y, x) or 3-D (band, y, x) array as a tiled, compressed GeoTIFF.

    Parameters
    ----------
    array : ndarray (y, x) or (band, y, x)
        Values in their final dtype; NaN (float) or ``nodata`` marks missing pixels.
    transform : affine.Affine
        Exactly the DEM's transform (no rounding).
    crs : rasterio CRS, pyproj CRS or anything ``rasterio.crs.CRS.from_user_input`` takes.
    nodata : value for missing pixels; must lie outside the valid values.
    description : band description(s).
    tags : dataset tags (e.g. ``valid_time``, ``units``).
    cog : bool
        Write internal overviews (a cloud-optimised layout: tiles and overviews).
    """
    import rasterio
    from rasterio.crs import CRS
    from rasterio.enums import Resampling

    data = np.asarray(array)
    if data.ndim == 2:
        data = data[np.newaxis]
    if data.ndim != 3:
        raise InputError(
            f"write_geotiff {path}: expected a (y, x) or (band, y, x) array, got shape {np.shape(array)}"
        )
    descriptions = [description] if isinstance(description, str) else list(description)
    if len(descriptions) != data.shape[0]:
        raise InputError(
            f"write_geotiff {path}: {data.shape[0]} bands but {len(descriptions)} descriptions"
        )
    if nodata is not None and np.issubdtype(data.dtype, np.floating):
        data = np.where(np.isnan(data), nodata, data).astype(data.dtype)
    count, height, width = data.shape
    tiled = height >= _BLOCK and width >= _BLOCK
    profile = dict(
        driver="GTiff",
        height=height,
        width=width,
        count=count,
        dtype=data.dtype.name,
        crs=CRS.from_user_input(crs),
        transform=transform,
        nodata=nodata,
        compress="deflate",
        predictor=3 if np.issubdtype(data.dtype, np.floating) else 2,
        tiled=tiled,
        interleave="band",
    )
    if tiled:
        profile.update(blockxsize=_BLOCK, blockysize=_BLOCK)
    with atomic_path(path) as tmp:
        try:
            with rasterio.open(tmp, "w", **profile) as dst:
                dst.write(data)
                for band, text in enumerate(descriptions, start=1):
                    dst.set_band_description(band, text)
                if tags:
                    dst.update_tags(**{k: str(v) for k, v in tags.items()})
                if cog:
                    factors = [f for f in (2, 4, 8, 16, 32) if min(height, width) // f >= 16]
                    if factors:
                        categorical = np.issubdtype(data.dtype, np.integer)
                        dst.build_overviews(
                            factors, Resampling.nearest if categorical else Resampling.average
                        )
                        dst.update_tags(
                            ns="rio_overview", resampling="nearest" if categorical else "average"
                        )
        except rasterio.errors.RasterioError as exc:
            raise OutputError(f"cannot write GeoTIFF {path}: {exc}") from exc
    return Path(path)


def write_geopackage(path: str | os.PathLike, layers: Mapping[str, object]) -> Path:
    """Write several layers into one GeoPackage atomically.

    Parameters
    ----------
    layers : mapping layer name → GeoDataFrame, or a plain DataFrame for an attribute-only
        table (written without geometry).
    """
    import geopandas as gpd
    import pyogrio

    with atomic_path(path) as tmp:
        tmp.unlink()  # GDAL refuses to open an empty file as a GeoPackage
        for name, frame in layers.items():
            if isinstance(frame, gpd.GeoDataFrame):
                frame.to_file(tmp, layer=name, driver="GPKG", engine="pyogrio")
            else:
                pyogrio.write_dataframe(frame, tmp, layer=name, driver="GPKG")
    return Path(path)


def write_geojson(path: str | os.PathLike, gdf) -> Path:
    """Write a GeoDataFrame as GeoJSON in EPSG:4326 (RFC 7946 axis order lon, lat)."""
    out = gdf.to_crs(4326) if gdf.crs is not None else gdf
    with atomic_path(path) as tmp:
        tmp.unlink()
        # the collection's name is the final file's stem, not the temporary file's
        out.to_file(tmp, driver="GeoJSON", engine="pyogrio", layer=Path(path).stem)
    return Path(path)


def write_netcdf(path: str | os.PathLike, dataset, encoding: Mapping | None = None) -> Path:
    """Write an xarray Dataset to NetCDF-4 atomically (zlib level 4 for numeric variables
    unless ``encoding`` says otherwise)."""
    enc = {}
    for name, var in dataset.variables.items():
        if var.dtype.kind in "fiu" and var.ndim > 0:
            enc[name] = {"zlib": True, "complevel": 4}
    for name, spec in (encoding or {}).items():
        enc.setdefault(name, {}).update(spec)
    with atomic_path(path) as tmp:
        dataset.to_netcdf(tmp, engine="netcdf4", format="NETCDF4", encoding=enc)
    return Path(path)

"""Writers for regionmap's outputs: GeoTIFF (COG), GeoPackage, GeoJSON, NetCDF.

Every writer goes through :func:`regionmap.io.atomic.atomic_path`, so an interrupted write
never leaves a half file or destroys an older one.
"""

from __future__ import annotations

import datetime
import os
import sqlite3
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from regionmap import __version__
from regionmap.errors import InputError, OutputError
from regionmap.io.atomic import atomic_path, is_no_space, no_space_error
from regionmap.io.tables import spreadsheet_safe

__all__ = [
    "GPKG_VERSION",
    "LayerStyle",
    "decimals_for",
    "history_entry",
    "rounded",
    "table_text",
    "write_csv",
    "write_geotiff",
    "write_geopackage",
    "write_geojson",
    "write_netcdf",
]

_BLOCK = 256


def history_entry() -> str:
    """A CF ``history`` line (CF-1.8 §2.6.2): the UTC time and the program that wrote the file."""
    now = datetime.datetime.now(datetime.UTC).strftime("%Y-%m-%dT%H:%M:%SZ")
    return f"{now} written by regionmap {__version__}"


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
    units: str | None = None,
    colour_table: Mapping[int, tuple[int, int, int, int]] | None = None,
    band_tags: Mapping[str, str] | None = None,
    resampling: str | None = None,
) -> Path:
    """Write a 2-D (y, x) or 3-D (band, y, x) array as a tiled, compressed GeoTIFF.

    With ``cog`` (the default) the file is a Cloud Optimized GeoTIFF written by GDAL's COG
    driver (tiles of 256, overviews, header and overviews ahead of the full-resolution
    image) with each band's statistics (``STATISTICS_*`` metadata, valid pixels only).

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
        Cloud Optimized GeoTIFF (else a plain tiled GeoTIFF without overviews).
    units : unit of every band (GDAL's band unit type, e.g. ``cm``).
    colour_table : value → (r, g, b, a) of band 1 (byte rasters whose values are classes).
    band_tags : metadata of every band.
    resampling : overview resampling, ``"nearest"`` or ``"average"`` (default: nearest
        for integers, average for floats).
    """
    import rasterio
    from rasterio.crs import CRS

    data = np.asarray(array)
    if data.ndim == 2:
        data = data[np.newaxis]
    if data.ndim != 3:
        raise InputError(
            f"write_geotiff {path}: expected a (y, x) or (band, y, x) array, got shape "
            f"{np.shape(array)}"
        )
    descriptions = [description] if isinstance(description, str) else list(description)
    if len(descriptions) != data.shape[0]:
        raise InputError(
            f"write_geotiff {path}: {data.shape[0]} bands but {len(descriptions)} descriptions"
        )
    if nodata is not None and np.issubdtype(data.dtype, np.floating):
        data = np.where(np.isnan(data), nodata, data).astype(data.dtype)
    count, height, width = data.shape
    categorical = np.issubdtype(data.dtype, np.integer)
    profile = dict(
        height=height,
        width=width,
        count=count,
        dtype=data.dtype.name,
        crs=CRS.from_user_input(crs),
        transform=transform,
        nodata=nodata,
        compress="deflate",
        predictor=3 if np.issubdtype(data.dtype, np.floating) else 2,
    )
    if cog:
        profile.update(
            driver="COG",
            blocksize=_BLOCK,
            overview_resampling=resampling or ("nearest" if categorical else "average"),
            statistics="yes",
        )
    else:
        tiled = height >= _BLOCK and width >= _BLOCK
        profile.update(driver="GTiff", tiled=tiled, interleave="band")
        if tiled:
            profile.update(blockxsize=_BLOCK, blockysize=_BLOCK)
    with atomic_path(path) as tmp:
        try:
            with rasterio.open(tmp, "w", **profile) as dst:
                dst.write(data)
                for band, text in enumerate(descriptions, start=1):
                    dst.set_band_description(band, text)
                    if units is not None:
                        dst.set_band_unit(band, units)
                    if band_tags:
                        dst.update_tags(band, **{k: str(v) for k, v in band_tags.items()})
                if colour_table is not None:
                    dst.write_colormap(1, dict(colour_table))
                if tags:
                    dst.update_tags(**{k: str(v) for k, v in tags.items()})
        except rasterio.errors.RasterioError as exc:
            if is_no_space(exc):
                raise no_space_error(path) from None
            raise OutputError(f"cannot write GeoTIFF {path}: {exc}") from exc
    return Path(path)


#: GeoPackage version written: 1.2 is read without warnings by GDAL since 2.2 (1.4, GDAL's
#: default since 3.7, makes GDAL 3.6 warn "may only be partially supported")
GPKG_VERSION = "1.2"


@dataclass(frozen=True)
class LayerStyle:
    """A layer's style for the GeoPackage ``layer_styles`` table (the table QGIS reads and
    writes): QGIS style XML, OGC SLD, and a description."""

    qml: str
    sld: str
    description: str


def write_geopackage(
    path: str | os.PathLike,
    layers: Mapping[str, object],
    *,
    styles: Mapping[str, LayerStyle] | None = None,
) -> Path:
    """Write several layers into one GeoPackage (version :data:`GPKG_VERSION`) atomically.

    Datetime columns are written as DateTime in UTC (naive ones are taken as UTC), columns
    of ``datetime.date`` values as Date.

    Parameters
    ----------
    layers : mapping layer name → GeoDataFrame, or a plain DataFrame for an attribute-only
        table (written without geometry).
    styles : layer name → :class:`LayerStyle`, stored as each layer's default style in the
        ``layer_styles`` table.
    """
    import pyogrio

    with atomic_path(path) as tmp:
        tmp.unlink()  # GDAL refuses to open an empty file as a GeoPackage
        date_columns = {}
        for k, (name, frame) in enumerate(layers.items()):
            frame, date_columns[name] = _gpkg_columns(frame)
            options = {"dataset_options": {"VERSION": GPKG_VERSION}} if k == 0 else {}
            pyogrio.write_dataframe(frame, tmp, layer=name, driver="GPKG", **options)
        if styles:
            pyogrio.write_dataframe(
                _layer_styles_table(layers, styles),
                tmp,
                layer="layer_styles",
                driver="GPKG",
                layer_options={"FID": "id"},
            )
        if any(date_columns.values()):
            with sqlite3.connect(tmp) as db:
                _declare_date_columns(db, date_columns)
            db.close()
    return Path(path)


def _gpkg_columns(frame):
    """``frame`` with naive datetimes made UTC, and the names of its ``datetime.date``
    columns (written as text, then declared DATE)."""
    frame = frame.copy()
    dates = []
    for col in frame.columns:
        values = frame[col]
        if isinstance(values.dtype, pd.DatetimeTZDtype):
            frame[col] = values.dt.tz_convert("UTC")
        elif values.dtype.kind == "M":
            frame[col] = values.dt.tz_localize("UTC")
        elif values.dtype == object and pd.api.types.infer_dtype(values, skipna=True) == "date":
            frame[col] = pd.to_datetime(values).dt.strftime("%Y-%m-%d")
            dates.append(col)
    return frame, dates


def _declare_date_columns(db, date_columns: Mapping[str, list[str]]) -> None:
    """Declare text columns of ISO dates as DATE (GeoPackage 1.2 §1.1.1.1.3), so readers
    see Date fields. pyogrio writes ``datetime.date`` as text; SQLite lets the declared
    type of a column change in place (sqlite.org/lang_altertable.html, "writable_schema"),
    the stored values stay as they are."""
    db.execute("PRAGMA writable_schema = ON")
    for table, columns in date_columns.items():
        (sql,) = db.execute("SELECT sql FROM sqlite_master WHERE name = ?", (table,)).fetchone()
        for col in columns:
            sql = sql.replace(f'"{col}" TEXT', f'"{col}" DATE')
        db.execute("UPDATE sqlite_master SET sql = ? WHERE name = ?", (sql, table))
    db.execute("PRAGMA writable_schema = OFF")


def _layer_styles_table(layers: Mapping[str, object], styles: Mapping[str, LayerStyle]):
    """The ``layer_styles`` rows of every styled layer (columns as QGIS creates them)."""
    import geopandas as gpd

    now = datetime.datetime.now(datetime.UTC).replace(microsecond=0)
    rows = []
    for name, style in styles.items():
        frame = layers[name]
        geometry = "geom" if isinstance(frame, gpd.GeoDataFrame) else ""
        rows.append(
            {
                "f_table_catalog": "",
                "f_table_schema": "",
                "f_table_name": name,
                "f_geometry_column": geometry,
                "styleName": name,
                "styleQML": style.qml,
                "styleSLD": style.sld,
                "useAsDefault": True,
                "description": style.description,
                "owner": "regionmap",
                "ui": "",
                "update_time": pd.Timestamp(now),
            }
        )
    return pd.DataFrame(rows)


#: decimals kept for a column by its name's ending (first match wins), in CSV and GeoJSON
#: tables: about a tenth of what a field observer can tell apart
DECIMALS_BY_SUFFIX: tuple[tuple[str, int], ...] = (
    ("lat", 6),
    ("lon", 6),
    ("_frac", 3),
    ("_fraction", 3),
    ("_km2", 3),
    ("_kg_m2", 1),
    ("_cm", 1),
    ("_mm", 2),
    ("_deg", 1),
    ("_k", 2),
    ("_m", 0),
)
#: decimals of float columns no suffix matches
DEFAULT_DECIMALS = 2
#: text of a time in every table: ISO 8601 with its UTC offset
TIME_FORMAT = "%Y-%m-%dT%H:%M:%S+00:00"


def decimals_for(column: str) -> int:
    """Decimals kept for a float column (:data:`DECIMALS_BY_SUFFIX`: endings that start
    with ``_``, whole names otherwise) after any statistic's ending (``_max``, ``_min``,
    ``_mean``)."""
    for stat in ("_max", "_min", "_mean"):
        column = column.removesuffix(stat)
    for suffix, decimals in DECIMALS_BY_SUFFIX:
        if column == suffix or (suffix.startswith("_") and column.endswith(suffix)):
            return decimals
    return DEFAULT_DECIMALS


def rounded(frame):
    """``frame`` with every float column rounded to :func:`decimals_for` its name."""
    frame = frame.copy()
    for col in frame.columns:
        if frame[col].dtype.kind == "f":
            frame[col] = frame[col].round(decimals_for(str(col)))
    return frame


def table_text(frame, *, booleans_as_text: bool = True):
    """``frame`` as the text a table file holds: floats rounded (:func:`rounded`), times in
    UTC as ISO 8601 with offset (:data:`TIME_FORMAT`), booleans ``true`` / ``false`` (or
    kept as booleans)."""
    frame = rounded(frame)
    for col in frame.columns:
        values = frame[col]
        if isinstance(values.dtype, pd.DatetimeTZDtype):
            frame[col] = values.dt.tz_convert("UTC").dt.strftime(TIME_FORMAT)
        elif values.dtype.kind == "M":
            frame[col] = values.dt.strftime(TIME_FORMAT)
        elif values.dtype.kind == "b" and booleans_as_text:
            frame[col] = np.where(values.to_numpy(), "true", "false")
    return frame


def write_csv(path: str | os.PathLike, frame) -> Path:
    """Write a table as CSV (UTF-8, comma separated, header row, no index) atomically, in
    the text of :func:`table_text`; missing values are empty fields; texts a spreadsheet
    would run as formulas neutralised (:func:`regionmap.io.tables.spreadsheet_safe`)."""
    text = table_text(spreadsheet_safe(frame))
    with atomic_path(path) as tmp:
        text.to_csv(tmp, index=False, lineterminator="\n")
    return Path(path)


#: decimals of GeoJSON coordinates in degrees (1e-6 degree is about 0.1 m)
GEOJSON_COORDINATE_DECIMALS = 6


def write_geojson(
    path: str | os.PathLike, gdf, *, coordinate_decimals: int = GEOJSON_COORDINATE_DECIMALS
) -> Path:
    """Write a GeoDataFrame as GeoJSON per RFC 7946: EPSG:4326 longitude, latitude, no
    ``crs`` member, polygons wound by the right-hand rule, coordinates to
    ``coordinate_decimals`` decimals, values as in :func:`table_text` (booleans as JSON
    booleans; NaN and infinite values as null)."""
    import pyogrio

    out = gdf.to_crs(4326) if gdf.crs is not None else gdf
    geometry = out.geometry.name
    props = table_text(out.drop(columns=geometry), booleans_as_text=False)
    for col in props.columns:  # JSON has no NaN or infinity: null instead
        if props[col].dtype.kind == "f":
            props[col] = props[col].where(np.isfinite(props[col])).astype("Float64")
    out = out[[geometry]].join(props)[[*props.columns, geometry]]
    with atomic_path(path) as tmp:
        tmp.unlink()
        # the collection's name is the final file's stem, not the temporary file's
        pyogrio.write_dataframe(
            out,
            tmp,
            driver="GeoJSON",
            layer=Path(path).stem,
            layer_options={
                "RFC7946": "YES",
                "COORDINATE_PRECISION": str(coordinate_decimals),
            },
        )
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

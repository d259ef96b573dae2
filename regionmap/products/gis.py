"""GIS export: ``zones.gpkg``, ``zones.geojson``, ``layers_of_concern.csv`` and
``maps/<metric>.tif`` (DESIGN §3 outputs).

Rasters are on the DEM's grid and CRS; a pixel's value is its cell's value, taken through
the pixel → cell index raster in one NumPy gather. Each raster's nodata value lies outside
the values it can hold (255 for uint8 counts, −1 for cell ids, −9999 for non-negative
floats), its band description says what it is and in which unit, and its tags carry the
valid time. All files go through the atomic writers of :mod:`regionmap.io.writers`.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import pandas as pd

from regionmap import CAUTION, __version__
from regionmap.errors import GridMismatchError, InputError
from regionmap.io.atomic import atomic_path
from regionmap.io.writers import write_geojson, write_geopackage, write_geotiff

__all__ = ["MAP_SPECS", "REQUIRED_ZONE_COLUMNS", "cells_to_raster", "write_gis"]

#: metric → (dtype, nodata, units, description). Other metrics are written as float32.
MAP_SPECS: dict[str, tuple[str, float | int, str, str]] = {
    "depth_hoar_fraction": (
        "float32",
        -9999.0,
        "1",
        "depth hoar present in the cell's column (1) or not (0), as a fraction",
    ),
    "crust_count": ("uint8", 255, "1", "number of crusts and ice layers in the column"),
    "new_snow_24h_cm": ("float32", -9999.0, "cm", "new snow of the last local observation day"),
    "new_snow_72h_cm": (
        "float32",
        -9999.0,
        "cm",
        "new snow of the last three local observation days",
    ),
    "new_snow_72h_kg_m2": (
        "float32",
        -9999.0,
        "kg m-2",
        "snowfall water equivalent of the last three observation days",
    ),
    "snow_depth_cm": ("float32", -9999.0, "cm", "snow depth (vertical)"),
    "pwl_depth_cm": (
        "float32",
        -9999.0,
        "cm",
        "vertical depth of the uppermost persistent weak layer (nodata: none)",
    ),
    "pwl_slab_cm": (
        "float32",
        -9999.0,
        "cm",
        "slab thickness above the uppermost persistent weak layer, perpendicular to the slope",
    ),
    "threshold_count_max": (
        "float32",
        -9999.0,
        "1",
        "largest structural threshold count in the column",
    ),
}
REQUIRED_MAPS = (
    "depth_hoar_fraction",
    "crust_count",
    "new_snow_72h_cm",
    "snow_depth_cm",
    "pwl_depth_cm",
)
REQUIRED_ZONE_COLUMNS = (
    "zone",
    "depth_hoar_fraction",
    "crust_count_mean",
    "new_snow_72h_cm",
    "new_snow_72h_kg_m2",
    "snow_depth_cm",
    "rain_crust_line_m",
    "is_forecast",
    "valid_time",
)


def cells_to_raster(values: np.ndarray, index: np.ndarray, *, dtype: str, nodata) -> np.ndarray:
    """Per-cell values → (y, x) raster through the pixel → cell index (−1 outside).

    NaN values and pixels outside every cell become ``nodata``. For integer dtypes the
    values must be whole numbers inside the dtype's range other than ``nodata``.

    Raises
    ------
    InputError
        When integer values do not fit the dtype (their nodata value included).
    """
    v = np.asarray(values, dtype=np.float64)
    idx = np.asarray(index)
    out_dtype = np.dtype(dtype)
    if np.issubdtype(out_dtype, np.integer):
        info = np.iinfo(out_dtype)
        finite = v[np.isfinite(v)]
        bad = (
            (finite < info.min)
            | (finite > info.max)
            | (finite == nodata)
            | (finite != np.round(finite))
        )
        if bad.any():
            raise InputError(
                f"map values {finite[bad][:3]} do not fit {dtype} with nodata {nodata}; "
                "expected whole numbers inside the type's range"
            )
        table = np.where(np.isfinite(v), v, nodata).astype(out_dtype)
    else:
        if (v == nodata).any():
            raise InputError(
                f"map values equal the nodata value {nodata}; expected values outside it"
            )
        table = np.where(np.isfinite(v), v, nodata).astype(out_dtype)
    lookup = np.append(table, np.asarray(nodata, dtype=out_dtype))  # position −1 → nodata
    return lookup[np.where(idx >= 0, idx, -1)]


def _as_multipolygons(gdf):
    import shapely

    geoms = gdf.geometry.values
    single = shapely.get_type_id(geoms) == 3  # Polygon
    fixed = np.array(geoms, dtype=object)
    fixed[single] = [shapely.MultiPolygon([g]) for g in fixed[single]]
    return gdf.set_geometry(list(fixed), crs=gdf.crs)


def _time_text(t) -> str:
    return pd.Timestamp(t).strftime("%Y-%m-%dT%H:%M:%SZ")


def write_gis(
    out_dir: str | os.PathLike,
    cellset,
    zones_gdf,
    zone_table: pd.DataFrame,
    cell_summary: pd.DataFrame,
    rain_crust_gdf,
    layers_of_concern: pd.DataFrame,
    maps: Mapping[str, np.ndarray],
    *,
    transform,
    crs,
    valid_time,
) -> dict[str, Path]:
    """Write the GIS outputs of a run into ``out_dir``.

    Parameters
    ----------
    out_dir : folder to write into (the run's temporary output folder).
    cellset : :class:`regionmap.cells.CellSet` (``table``, ``index``, ``polygons()``).
    zones_gdf : GeoDataFrame of the zone polygons with a ``zone`` column.
    zone_table : one row per zone (``summaries.SummaryTables.zones`` joined with
        ``rain_crust.zone_rain_crust_columns``); must hold :data:`REQUIRED_ZONE_COLUMNS`.
    cell_summary : per-cell values at the map time indexed by ``cell_id``
        (``SummaryTables.cells``); joined to the cell polygons.
    rain_crust_gdf : ``rain_crust.rain_crust_lines`` result (may be empty).
    layers_of_concern : ``summaries.layers_of_concern`` table.
    maps : metric name → (cell,) values in ``cell_id`` order; must include
        ``depth_hoar_fraction``, ``crust_count``, ``new_snow_72h_cm``, ``snow_depth_cm`` and
        ``pwl_depth_cm``. ``cell_id.tif`` is always written.
    transform, crs : the DEM's affine transform and CRS.
    valid_time : the map time [UTC], written into every raster's tags.

    Returns
    -------
    dict name → path of every file written.

    Raises
    ------
    InputError
        Missing zone columns or maps, values that do not fit a map's dtype.
    GridMismatchError
        Map arrays whose length differs from the number of cells.
    """
    out = Path(out_dir)
    table = cellset.table
    n_cell = len(table)
    missing = [c for c in REQUIRED_ZONE_COLUMNS if c not in zone_table.columns]
    if missing:
        raise InputError(
            f"zones table: missing columns {missing}; expected at least {list(REQUIRED_ZONE_COLUMNS)}"
        )
    missing = [m for m in REQUIRED_MAPS if m not in maps]
    if missing:
        raise InputError(
            f"maps: missing metrics {missing}; expected at least {list(REQUIRED_MAPS)}"
        )
    for name, values in maps.items():
        if np.shape(values) != (n_cell,):
            raise GridMismatchError(
                f"maps[{name!r}]: shape {np.shape(values)}, expected ({n_cell},) values in cell_id order"
            )
    written: dict[str, Path] = {}

    # --- vector layers
    zones = zones_gdf[["zone", zones_gdf.geometry.name]].merge(zone_table, on="zone", how="left")
    zones = _as_multipolygons(zones)
    cells = cellset.polygons()
    cells = _as_multipolygons(cells.set_index("cell_id") if "cell_id" in cells.columns else cells)
    extra = [c for c in table.columns if c not in cells.columns]
    cells = cells.join(table[extra])
    cells = cells.join(cell_summary[[c for c in cell_summary.columns if c not in cells.columns]])
    cells = cells.rename_axis("cell_id").reset_index()
    loc = layers_of_concern.copy()
    written["zones.gpkg"] = write_geopackage(
        out / "zones.gpkg",
        {
            "zones": zones,
            "cells": cells,
            "rain_crust_line": rain_crust_gdf,
            "layers_of_concern": loc,
        },
    )
    written["zones.geojson"] = write_geojson(out / "zones.geojson", zones)
    with atomic_path(out / "layers_of_concern.csv") as tmp:
        loc.to_csv(tmp, index=False, float_format="%.6g")
    written["layers_of_concern.csv"] = out / "layers_of_concern.csv"

    # --- rasters
    when = _time_text(valid_time)
    index = cellset.index
    for name, values in {**maps, "cell_id": table.index.to_numpy()}.items():
        if name == "cell_id":
            dtype, nodata, units, text = "int32", -1, "1", "cell identifier (pixel -> cell index)"
        else:
            dtype, nodata, units, text = MAP_SPECS.get(
                name, ("float32", -9999.0, "", name.replace("_", " "))
            )
        raster = cells_to_raster(values, index, dtype=dtype, nodata=nodata)
        tags = {
            "valid_time": when,
            "units": units,
            "metric": name,
            "source": f"regionmap {__version__}",
            "caution": CAUTION,
        }
        path = out / "maps" / f"{name}.tif"
        written[f"maps/{name}.tif"] = write_geotiff(
            path,
            raster,
            transform=transform,
            crs=crs,
            nodata=nodata,
            description=f"{name} [{units}]: {text}; valid {when}",
            tags=tags,
            cog=True,
        )
    return written

"""GIS export: ``zones.gpkg`` (with each layer's default style), GeoJSON of its layers with
geometry, ``layers_of_concern.csv`` and ``maps/<metric>.tif`` (docs/outputs.md; every
file, layer and field is described in ``docs/outputs.md``).

Rasters are Cloud Optimized GeoTIFFs on the DEM's grid and CRS; a pixel's value is its
cell's value, taken through the pixel → cell index raster in one NumPy gather. Each
raster's nodata value lies outside the values it can hold (255 for uint8 counts, −1 for
cell ids, −9999 for floats), a quantity that does not exist in a simulated cell (no weak
layer) has a value of its own (:data:`NO_WEAK_LAYER`), its band has a unit, a description
and statistics, its tags carry the valid time, and it opens styled: a colour table where
the values are classes, a QGIS ``.qml`` and an OGC ``.sld`` beside continuous maps. All
files go through the atomic writers of :mod:`regionmap.io.writers`.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from regionmap import CAUTION, __version__
from regionmap.errors import GridMismatchError, InputError
from regionmap.io.atomic import atomic_write_text
from regionmap.io.styles import (
    class_colour_table,
    ramp_stops,
    raster_qml,
    raster_sld,
    vector_qml,
    vector_sld,
)
from regionmap.io.writers import (
    LayerStyle,
    write_csv,
    write_geojson,
    write_geopackage,
    write_geotiff,
)

__all__ = [
    "MAP_SPECS",
    "NO_WEAK_LAYER",
    "REQUIRED_ZONE_COLUMNS",
    "MapSpec",
    "cells_to_raster",
    "write_gis",
]


@dataclass(frozen=True)
class MapSpec:
    """How a metric is written as a raster and styled.

    ``kind`` is ``"classes"`` (whole numbers that are classes: a byte raster with a colour
    table) or ``"continuous"`` (float32 with a ``.qml`` and ``.sld`` beside it, ramp from
    ``lo`` to ``hi``). ``none_value`` is the value of simulated pixels where the quantity
    does not exist (e.g. no weak layer), distinct from ``nodata`` (outside every cell).
    """

    dtype: str
    nodata: float | int
    units: str
    description: str
    kind: str = "continuous"
    lo: float = 0.0
    hi: float = 1.0
    none_value: float | None = None
    none_label: str = ""
    ramp: str = "viridis"


#: value of "no weak layer" in the weak-layer depth maps (depths are >= 0)
NO_WEAK_LAYER = -1.0
#: largest crust count with a colour of its own (more crusts share its colour)
CRUST_CLASSES = 9

#: metric → raster and style. Other metrics are written as float32 without a ramp range.
MAP_SPECS: dict[str, MapSpec] = {
    "depth_hoar_fraction": MapSpec(
        "float32",
        -9999.0,
        "1",
        "depth hoar present in the cell's column (1) or not (0), as a fraction",
        hi=1.0,
        ramp="cividis",
    ),
    "crust_count": MapSpec(
        "uint8",
        255,
        "1",
        "number of crusts and ice layers in the column",
        kind="classes",
        hi=CRUST_CLASSES - 1,
        ramp="cividis",
    ),
    "new_snow_24h_cm": MapSpec(
        "float32", -9999.0, "cm", "new snow of the last local observation day", hi=60.0
    ),
    "new_snow_72h_cm": MapSpec(
        "float32", -9999.0, "cm", "new snow of the last three local observation days", hi=120.0
    ),
    "new_snow_72h_kg_m2": MapSpec(
        "float32",
        -9999.0,
        "kg m-2",
        "snowfall water equivalent of the last three observation days",
        hi=120.0,
    ),
    "snow_depth_cm": MapSpec("float32", -9999.0, "cm", "snow depth (vertical)", hi=400.0),
    "pwl_depth_cm": MapSpec(
        "float32",
        -9999.0,
        "cm",
        "vertical depth of the uppermost persistent weak layer of concern "
        f"({NO_WEAK_LAYER:g}: none)",
        hi=200.0,
        none_value=NO_WEAK_LAYER,
        none_label="no persistent weak layer of concern",
    ),
    "pwl_slab_cm": MapSpec(
        "float32",
        -9999.0,
        "cm",
        "slab thickness above the uppermost persistent weak layer of concern, perpendicular "
        f"to the slope ({NO_WEAK_LAYER:g}: no weak layer of concern)",
        hi=200.0,
        none_value=NO_WEAK_LAYER,
        none_label="no persistent weak layer of concern",
    ),
    "threshold_count_max": MapSpec(
        "float32",
        -9999.0,
        "1",
        "largest structural threshold count in the column",
        hi=6.0,
        ramp="cividis",
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


_GROUP_KEYS = ["zone", "band_lower_m", "band_upper_m", "aspect_sector"]


def _problem_polygons(problems: pd.DataFrame, cells, zones):
    """The problems table with geometry: the union of the cells of each zone × band × aspect
    (slope classes merged), the zone's polygon for the zone-wide rows."""
    import geopandas as gpd

    geometry = cells.geometry.name
    groups = cells[[*_GROUP_KEYS, geometry]]
    if groups.duplicated(_GROUP_KEYS).any():  # slope classes: one polygon per group
        groups = groups.dissolve(by=_GROUP_KEYS, as_index=False)
    groups = groups.rename(columns={geometry: "_group_geometry"})
    zone_geometry = zones[["zone", zones.geometry.name]].rename(
        columns={zones.geometry.name: "_zone_geometry"}
    )
    lookup = problems.copy()
    edges = ["band_lower_m", "band_upper_m"]
    lookup[edges] = lookup[edges].astype(np.float64)
    joined = lookup.merge(groups, on=_GROUP_KEYS, how="left").merge(
        zone_geometry, on="zone", how="left"
    )
    zone_wide = joined["aspect_sector"].to_numpy() == "all"
    geoms = np.where(zone_wide, joined["_zone_geometry"].values, joined["_group_geometry"].values)
    frame = joined.drop(columns=["_group_geometry", "_zone_geometry"])
    return _as_multipolygons(gpd.GeoDataFrame(frame, geometry=list(geoms), crs=cells.crs))


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
    problems: pd.DataFrame | None = None,
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
    problems : ``problems.problem_table`` rows: written as the ``problems`` layer (each row
        with the polygons of its zone × band × aspect, zone-wide rows with the zone's) and
        ``problems.geojson``; None writes neither.

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
    _check_gis_inputs(zone_table, maps, len(table))
    written: dict[str, Path] = {}

    # --- vector layers
    zones = zones_gdf[["zone", zones_gdf.geometry.name]].merge(zone_table, on="zone", how="left")
    zones = _as_multipolygons(zones)
    cells = _cell_polygons(cellset, cell_summary)
    loc = layers_of_concern.copy()
    loc_gpkg = loc.copy()
    if "date" in loc_gpkg.columns:  # local calendar dates: a Date field
        loc_gpkg["date"] = pd.to_datetime(loc_gpkg["date"]).dt.date.astype(object)
    layers = {
        "zones": zones,
        "cells": cells,
        "rain_crust_line": rain_crust_gdf,
        "layers_of_concern": loc_gpkg,
    }
    if problems is not None:
        layers["problems"] = _problem_polygons(problems, cells, zones)
    written["zones.gpkg"] = write_geopackage(
        out / "zones.gpkg", layers, styles=vector_styles(layers)
    )
    # RFC 7946 GeoJSON of every layer with geometry (the table is layers_of_concern.csv)
    written["zones.geojson"] = write_geojson(out / "zones.geojson", zones)
    written["cells.geojson"] = write_geojson(out / "cells.geojson", cells)
    written["rain_crust_line.geojson"] = write_geojson(
        out / "rain_crust_line.geojson", rain_crust_gdf
    )
    written["layers_of_concern.csv"] = write_csv(out / "layers_of_concern.csv", loc)
    if problems is not None:
        written["problems.geojson"] = write_geojson(out / "problems.geojson", layers["problems"])

    written.update(_write_rasters(out, cellset, maps, transform, crs, _time_text(valid_time)))
    return written


def _check_gis_inputs(zone_table: pd.DataFrame, maps: Mapping[str, np.ndarray], n_cell: int):
    """Refuse a zone table or maps that lack what the GIS outputs need.

    Raises
    ------
    InputError
        Missing zone columns or maps.
    GridMismatchError
        Map arrays whose length differs from the number of cells.
    """
    missing = [c for c in REQUIRED_ZONE_COLUMNS if c not in zone_table.columns]
    if missing:
        raise InputError(
            f"zones table: missing columns {missing}; expected at least "
            f"{list(REQUIRED_ZONE_COLUMNS)}"
        )
    missing = [m for m in REQUIRED_MAPS if m not in maps]
    if missing:
        raise InputError(
            f"maps: missing metrics {missing}; expected at least {list(REQUIRED_MAPS)}"
        )
    for name, values in maps.items():
        if np.shape(values) != (n_cell,):
            raise GridMismatchError(
                f"maps[{name!r}]: shape {np.shape(values)}, expected ({n_cell},) values in cell_id "
                "order"
            )


def _cell_polygons(cellset, cell_summary: pd.DataFrame):
    """The cell polygons with the cell table's columns and the map-time values joined."""
    table = cellset.table
    cells = cellset.polygons()
    cells = _as_multipolygons(cells.set_index("cell_id") if "cell_id" in cells.columns else cells)
    extra = [c for c in table.columns if c not in cells.columns]
    cells = cells.join(table[extra])
    cells = cells.join(cell_summary[[c for c in cell_summary.columns if c not in cells.columns]])
    return cells.rename_axis("cell_id").reset_index()


def _write_rasters(
    out: Path, cellset, maps: Mapping[str, np.ndarray], transform, crs, when: str
) -> dict[str, Path]:
    """Write one GeoTIFF per map and ``maps/cell_id.tif``; return name → path."""
    index = cellset.index
    written: dict[str, Path] = {}
    for name, values in maps.items():
        spec = MAP_SPECS.get(name) or MapSpec("float32", -9999.0, "", name.replace("_", " "))
        written.update(_write_map(out, name, values, index, spec, transform, crs, when))
    written["maps/cell_id.tif"] = write_geotiff(
        out / "maps" / "cell_id.tif",
        cells_to_raster(cellset.table.index.to_numpy(), index, dtype="int32", nodata=-1),
        transform=transform,
        crs=crs,
        nodata=-1,
        units="1",
        description="cell_id: cell identifier (pixel -> cell index); -1 outside every cell",
        tags=_map_tags("cell_id", "1", when),
    )
    return written


def _map_tags(name: str, units: str, when: str) -> dict[str, str]:
    return {
        "valid_time": when,
        "units": units,
        "metric": name,
        "source": f"regionmap {__version__}",
        "caution": CAUTION,
    }


def _write_map(out: Path, name, values, index, spec: MapSpec, transform, crs, when) -> dict:
    """One metric's COG and, for continuous maps with a ramp, its ``.qml`` and ``.sld``."""
    values = np.asarray(values, dtype=np.float64)
    if spec.none_value is not None:
        values = np.where(np.isnan(values), spec.none_value, values)
    raster = cells_to_raster(values, index, dtype=spec.dtype, nodata=spec.nodata)
    path = out / "maps" / f"{name}.tif"
    band_tags = {}
    if spec.none_value is not None:
        band_tags = {"none_value": f"{spec.none_value:g}", "none_meaning": spec.none_label}
    colour_table = None
    if spec.kind == "classes":
        colour_table = class_colour_table(int(spec.hi) + 1, ramp=spec.ramp, nodata=spec.nodata)
    written = {
        f"maps/{name}.tif": write_geotiff(
            path,
            raster,
            transform=transform,
            crs=crs,
            nodata=spec.nodata,
            units=spec.units,
            description=f"{name} [{spec.units}]: {spec.description}; valid {when}",
            tags=_map_tags(name, spec.units, when),
            band_tags=band_tags,
            colour_table=colour_table,
            resampling="nearest" if spec.none_value is not None else None,
        )
    }
    if spec.kind == "continuous" and name in MAP_SPECS:
        stops = ramp_stops(
            spec.lo,
            spec.hi,
            ramp=spec.ramp,
            units=spec.units,
            none_value=spec.none_value,
            none_label=spec.none_label,
        )
        title = f"{name} [{spec.units}], valid {when}"
        written[f"maps/{name}.qml"] = atomic_write_text(path.with_suffix(".qml"), raster_qml(stops))
        written[f"maps/{name}.sld"] = atomic_write_text(
            path.with_suffix(".sld"), raster_sld(stops, name=name, title=title)
        )
    return written


#: layer → (geometry kind, attribute its colours follow, its units, ramp range, ramp, label)
_VECTOR_STYLES = {
    "zones": ("fill", "depth_hoar_fraction", "1", (0.0, 1.0), "cividis", "zone"),
    "cells": ("fill", "snow_depth_cm", "cm", (0.0, 400.0), "viridis", None),
    "rain_crust_line": ("line", None, "", None, None, "zone"),
    "layers_of_concern": (None, None, "", None, None, None),
    "problems": ("fill", "likelihood", "1", (0.0, 1.0), "cividis", "problem"),
}


def vector_styles(layers: Mapping[str, object]) -> dict[str, LayerStyle]:
    """Default styles of the GeoPackage's layers: zones and cells coloured by a summary
    (colour-vision-friendly ramps, :mod:`regionmap.io.styles`), the rain-crust line as a
    line labelled with its zone, the layers-of-concern table without symbols."""
    styles = {}
    for name in layers:
        geometry, attribute, units, span, ramp, label = _VECTOR_STYLES[name]
        stops = None
        if attribute is not None:
            stops = ramp_stops(*span, ramp=ramp, n=6, units=units)
        what = f"coloured by {attribute}" if attribute else "default symbols"
        styles[name] = LayerStyle(
            qml=vector_qml(geometry, attribute=attribute, stops=stops, label_field=label),
            sld=vector_sld(name, geometry or "fill", attribute=attribute, stops=stops),
            description=f"regionmap {name}: {what}",
        )
    return styles

"""Forecast-zone polygons: read, validate, repair and bring onto the DEM's CRS."""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

from regionmap.errors import InputError, warn

__all__ = ["read_zones"]


def _polygonal_part(geom):
    """The polygonal part of a geometry as a (Multi)Polygon, or None."""
    import shapely
    from shapely.geometry import MultiPolygon, Polygon

    if geom is None or geom.is_empty:
        return None
    if isinstance(geom, (Polygon, MultiPolygon)):
        return geom
    parts = [
        g
        for g in shapely.get_parts(geom)
        if isinstance(g, (Polygon, MultiPolygon)) and not g.is_empty
    ]
    if not parts:
        return None
    merged = shapely.union_all(parts)
    return merged if isinstance(merged, (Polygon, MultiPolygon)) else None


def _check_coordinates(names, geoms, crs, where: str) -> None:
    """Refuse coordinates that are not finite or lie beyond any place on Earth: longitudes
    and latitudes outside +-360 / +-90 degrees, projected coordinates beyond 1e8 m.

    Raises
    ------
    InputError
        Naming the first such zone and one of its coordinates.
    """
    import shapely

    limits = np.array([360.0, 90.0, 360.0, 90.0]) if crs.is_geographic else np.full(4, 1e8)
    bounds = shapely.bounds(np.asarray(list(geoms), dtype=object))
    with np.errstate(invalid="ignore"):
        bad = ~(np.abs(bounds) <= limits).all(axis=1)
    if bad.any():
        k = int(np.argmax(bad))
        value = bounds[k][~(np.abs(bounds[k]) <= limits)][0]
        unit = "degrees" if crs.is_geographic else "m"
        raise InputError(
            f"{where}: zone {list(names)[k]!r} has a coordinate of {value:g} {unit}, beyond any "
            f"place on Earth in {crs.to_string()}; expected coordinates within +-{limits[0]:g} "
            f"{unit}: check the file's CRS and values"
        )


def read_zones(path: str | os.PathLike, zone_field: str, dem, layer: str | None = None):
    """Read forecast zones as polygons in the DEM's CRS.

    Parameters
    ----------
    path : vector file pyogrio opens (GeoJSON, GeoPackage, Shapefile, …), any CRS.
    zone_field : attribute holding each zone's name.
    dem : regionmap.io.dem.Dem
        Target CRS and extent.
    layer : layer name for multi-layer files (None: the first layer).

    Returns
    -------
    geopandas.GeoDataFrame
        Columns ``zone`` (str) and ``geometry`` ((Multi)Polygon in the DEM CRS), in file order,
        index 0..n-1. Invalid geometries are repaired with ``shapely.make_valid`` (a
        RegionmapWarning names each repaired zone).

    Raises
    ------
    InputError
        Unreadable file or layer; missing field; no CRS; a zone without polygon geometry
        (or one that cannot be repaired); duplicate or empty names; overlapping zones (both
        named); zones that miss the DEM (named).
    """
    import geopandas as gpd
    import shapely
    from shapely.geometry import box

    p = Path(path)
    if not p.exists():
        raise InputError(
            f"zones {p}: file not found; check the [region] zones path (relative to the config "
            "file)"
        )
    try:
        gdf = gpd.read_file(p, layer=layer, engine="pyogrio")
    except Exception as exc:  # pyogrio raises DataSourceError, DataLayerError, …
        hint = " (set [region] zone_layer)" if layer is None else ""
        raise InputError(f"zones {p}: cannot be read as a vector file{hint}: {exc}") from exc
    where = f"zones {p}" + (f" layer {layer!r}" if layer else "")
    if len(gdf) == 0:
        raise InputError(f"{where}: no features; expected polygons of forecast zones")
    if zone_field not in gdf.columns:
        fields = [c for c in gdf.columns if c != "geometry"]
        raise InputError(
            f"{where}: no attribute {zone_field!r} for zone names; fields are {fields} ([region] "
            "zone_field)"
        )
    if gdf.crs is None:
        raise InputError(
            f"{where}: no coordinate reference system; expected a georeferenced file (e.g. "
            "EPSG:4326 GeoJSON)"
        )
    names = gdf[zone_field]
    if names.isna().any() or (names.astype(str).str.strip() == "").any():
        raise InputError(
            f"{where}: {int(names.isna().sum() + (names.astype(str).str.strip() == '').sum())} "
            f"zone(s) without a name in {zone_field!r}"
        )
    names = names.astype(str).str.strip()
    dup = names[names.duplicated()].unique().tolist()
    if dup:
        raise InputError(
            f"{where}: duplicate zone names {dup} in {zone_field!r}; each zone needs its own name"
        )
    geoms = list(gdf.geometry)
    polygonal = [_polygonal_part(g) for g in geoms]
    if all(g is None for g in polygonal):
        kinds = sorted({(g.geom_type if g is not None else "empty") for g in geoms})
        raise InputError(
            f"{where}: no polygons (geometry types {kinds}); expected Polygon or MultiPolygon zones"
        )
    _check_coordinates(names, polygonal, gdf.crs, where)
    out_geoms = []
    for name, g in zip(names, polygonal, strict=True):
        if g is None:
            raise InputError(
                f"{where}: zone {name!r} has no polygon geometry; expected a Polygon or "
                "MultiPolygon"
            )
        if not g.is_valid:
            fixed = _polygonal_part(shapely.make_valid(g))
            if fixed is None or fixed.area <= 0:
                raise InputError(
                    f"{where}: zone {name!r} has an invalid polygon that cannot be repaired "
                    f"({shapely.is_valid_reason(g)})"
                )
            warn(
                f"{where}: zone {name!r} had an invalid polygon ({shapely.is_valid_reason(g)}); "
                "repaired with make_valid"
            )
            g = fixed
        out_geoms.append(g)
    zones = gpd.GeoDataFrame({"zone": names.to_numpy()}, geometry=out_geoms, crs=gdf.crs)
    zones = zones.to_crs(dem.crs).reset_index(drop=True)
    _check_coordinates(zones.zone, zones.geometry, dem.crs, f"{where} (in the DEM's CRS)")
    zones["geometry"] = [
        g if g.is_valid else _polygonal_part(shapely.make_valid(g)) for g in zones.geometry
    ]
    # overlapping zones
    left, right = zones.sindex.query(zones.geometry, predicate="intersects")
    pairs = [(i, j) for i, j in zip(left, right, strict=True) if i < j]
    areas = zones.geometry.area.to_numpy()
    for i, j in pairs:
        inter = zones.geometry.iloc[i].intersection(zones.geometry.iloc[j]).area
        if inter > 1e-6 * min(areas[i], areas[j]):
            raise InputError(
                f"{where}: zones {zones.zone.iloc[i]!r} and {zones.zone.iloc[j]!r} overlap "
                f"({inter / min(areas[i], areas[j]):.1%} of the smaller); zones must not overlap "
                "(shared edges are fine)"
            )
    frame = box(*dem.bounds)
    missing = [
        n
        for n, g in zip(zones.zone, zones.geometry, strict=True)
        if not g.intersects(frame) or g.intersection(frame).area <= 0
    ]
    if missing:
        raise InputError(
            f"{where}: zone(s) {missing} lie outside the DEM {dem.path} (DEM bounds "
            f"{tuple(np.round(dem.bounds, 3))} "
            f"in {dem.crs}); check the CRS of both files"
        )
    return zones

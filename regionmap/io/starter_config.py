"""``regionmap init``: a commented starting config written from the user's own files.

The DEM gives the elevation bands (edges at round heights inside its elevation range), the
zones file the zone attribute (one that names every zone once) and layer, the forcing its
period and the variables regionmap will find by CF standard name — or, when some are missing,
a ``[forcing.variables]`` block that lists the file's variables to map by hand. Every file
is read as a run would read it, so a file a run could not use is refused here, by name.
"""

from __future__ import annotations

import os
import re
from pathlib import Path

import numpy as np

from regionmap.errors import ForcingReadError, InputError
from regionmap.io import forcing as _f
from regionmap.io.atomic import atomic_write_text
from regionmap.io.dem import read_dem
from regionmap.io.zones import read_zones

__all__ = ["band_edges_for", "write_starter_config", "zone_field_of"]

CONFIG_NAME = "regionmap.toml"
_NAME_HINT = re.compile(r"name|zone|region|area|sector", re.IGNORECASE)


def band_edges_for(low_m: float, high_m: float) -> list[float]:
    """Band edges at round heights strictly inside ``(low_m, high_m)``: every 100 m for up to
    800 m of relief, 200 m up to 1600 m, else 300 m (6-10 bands; common practice for
    elevation bands in regional avalanche forecasts). At least one edge (the middle, rounded
    to 10 m) so that a run has two bands."""
    relief = high_m - low_m
    step = 100.0 if relief <= 800.0 else 200.0 if relief <= 1600.0 else 300.0
    first = np.floor(low_m / step) * step + step
    edges = [float(e) for e in np.arange(first, high_m, step) if low_m < e < high_m]
    return edges or [float(np.round((low_m + high_m) / 20.0) * 10.0)]


def zone_field_of(frame, path) -> tuple[str, list[str]]:
    """The attribute that names each zone once: text before numbers, a name-like column
    (``name``, ``zone``, ...) first. Returns it and the other columns.

    Raises
    ------
    InputError
        No attribute has a distinct, non-empty value for every zone.
    """
    columns = [c for c in frame.columns if c != frame.geometry.name]
    unique = [c for c in columns if frame[c].notna().all() and frame[c].is_unique]
    if not unique:
        raise InputError(
            f"{path}: no attribute names every zone once (attributes: {columns or 'none'}); "
            "add one with a distinct name per zone"
        )

    def rank(c):
        return (frame[c].dtype.kind not in "OUS", not _NAME_HINT.search(str(c)), columns.index(c))

    best = min(unique, key=rank)
    return best, [c for c in columns if c != best]


def _zones(path: Path, dem):
    """(field, layer, other layers, other attributes, zone count) of a zones file."""
    import geopandas as gpd
    import pyogrio

    try:
        layers = [str(name) for name, kind in pyogrio.list_layers(path) if "Polygon" in str(kind)]
        all_layers = [str(name) for name, _ in pyogrio.list_layers(path)]
    except Exception as exc:
        raise InputError(f"{path}: cannot be read as a vector file ({exc})") from None
    if not all_layers:
        raise InputError(f"{path}: holds no layer")
    layer = (layers or all_layers)[0]
    frame = gpd.read_file(path, layer=layer)
    field, others = zone_field_of(frame, path)
    zones = read_zones(path, field, dem, layer=layer if len(all_layers) > 1 else None)
    return (
        field,
        layer if len(all_layers) > 1 else None,
        [x for x in all_layers if x != layer],
        others,
        len(zones),
    )


def _forcing(pattern: str, base: Path) -> dict:
    """Period and variables of the forcing files (metadata only; the values are not read)."""
    paths = _f._expand(pattern, base)
    first, last, variables = None, None, {}
    for p in paths:
        ds = _f._open_one(p)
        try:
            t = ds[_f._time_coord(ds, p)].values.astype("datetime64[m]")
            first = t[0] if first is None else min(first, t[0])
            last = t[-1] if last is None else max(last, t[-1])
            for name, var in ds.data_vars.items():
                if var.ndim >= 2:  # fields, not bounds or scalars
                    variables.setdefault(
                        str(name),
                        (
                            var.attrs.get("standard_name", ""),
                            var.attrs.get("units", ""),
                            var.attrs.get("long_name", ""),
                        ),
                    )
        finally:
            ds.close()
    by_standard: dict[str, list[str]] = {}
    for name, (sn, _, _) in variables.items():
        if sn:
            by_standard.setdefault(sn, []).append(name)
    roles = {}
    for role, options in _f._ROLES.items():
        for option in options:
            if all(sn in by_standard for sn in option):
                roles[role] = [n for sn in option for n in by_standard[sn]]
                break
    missing = [r for r in _f._ROLES if r not in roles and r not in _f._OPTIONAL]
    return {
        "paths": paths,
        "start": first,
        "end": last,
        "variables": variables,
        "roles": roles,
        "missing": missing,
    }


def _relative(path: Path, folder: Path) -> str:
    """The path relative to the config's folder when it is inside it or beside it, else
    absolute."""
    try:
        rel = Path(os.path.relpath(path.resolve(), folder.resolve()))
    except ValueError:  # another drive
        return path.resolve().as_posix()
    return path.resolve().as_posix() if rel.parts[:2] == ("..", "..") else rel.as_posix()


def _toml_list(values) -> str:
    return "[" + ", ".join(f"{v:g}" for v in values) + "]"


def write_starter_config(
    folder: str | os.PathLike, *, dem, zones, forcing, force: bool = False
) -> Path:
    """Write ``<folder>/regionmap.toml`` from the user's DEM, zones and forcing.

    Parameters
    ----------
    folder : where the config goes (created when missing); paths in it are relative to it.
    dem : any GDAL raster with a CRS.
    zones : polygons (GeoJSON, GeoPackage, ...).
    forcing : CF NetCDF/Zarr file or glob.
    force : replace an existing config.

    Returns
    -------
    The config's path (written atomically) and the forcing roles not found by standard name
    (``[forcing.variables]`` must map them before a run).

    Raises
    ------
    InputError
        A file that cannot be read or used (named in the message), or an existing config
        without ``force``.
    """
    folder = Path(folder)
    target = folder / CONFIG_NAME
    if target.exists() and not force:
        raise InputError(f"{target} exists; give --force to replace it")
    dem_path, zones_path = Path(dem), Path(zones)
    grid = read_dem(dem_path)
    low, high = float(np.nanmin(grid.elevation_m)), float(np.nanmax(grid.elevation_m))
    field, layer, other_layers, other_fields, n_zones = _zones(zones_path, grid)
    try:
        f = _forcing(str(forcing), Path.cwd())
    except ForcingReadError as exc:
        raise InputError(str(exc)) from None
    edges = band_edges_for(low, high)

    lines = [
        "# regionmap configuration, written by `regionmap init` from your files.",
        "# Paths are relative to this file. Check every value before the first run.",
        "# regionmap output is model guidance for trained avalanche professionals, never a",
        "# substitute for field observations, the local avalanche service or professional",
        "# standards.",
        "",
        "[region]",
        f"# DEM: {grid.shape[1]} x {grid.shape[0]} pixels, {grid.crs.to_string()}, "
        f"elevations {low:.0f}-{high:.0f} m",
        f'dem = "{_relative(dem_path, folder)}"',
        f"# zones: {n_zones} polygons",
        f'zones = "{_relative(zones_path, folder)}"',
        f'zone_field = "{field}"'
        + (f"   # other attributes: {', '.join(map(str, other_fields))}" if other_fields else ""),
    ]
    if layer is not None:
        lines.append(
            f'zone_layer = "{layer}"'
            + (f"   # other layers: {', '.join(other_layers)}" if other_layers else "")
        )
    lines += [
        "",
        "[cells]",
        f"# bands every {edges[1] - edges[0] if len(edges) > 1 else 0:g} m inside the DEM's "
        f"{low:.0f}-{high:.0f} m; open-ended below the first edge and above the last",
        f"band_edges_m = {_toml_list(edges)}",
        "aspect_sectors = 8            # 4, 8 or 16, plus a flat sector",
        "flat_below_deg = 10           # slopes below this are 'flat'",
        "avalanche_terrain_deg = [30, 50]   # the slopes the summaries weight by default",
        "",
        "[forcing]",
        f"# {len(f['paths'])} file(s), hourly labels {f['start']} to {f['end']} UTC "
        "(a label is the end of its interval)",
        f'path = "{_relative(Path(str(forcing)), folder)}"',
        f'start = "{f["start"]}"',
        f'end = "{f["end"]}"',
        '# analysis_time = "YYYY-MM-DDTHH:MM"   # later forcing is forecast',
    ]
    if f["roles"]:
        lines.append("# found by CF standard name (several: the height coordinate picks):")
        for role, names in f["roles"].items():
            lines.append(f"#   {role}: {', '.join(names)}")
    if f["missing"]:
        lines += [
            f"# NOT found by standard name: {', '.join(f['missing'])}. Map them below",
            "# (uncomment and name the file's variable; units as in the file):",
            "# [forcing.variables]",
        ]
        for name, (sn, units, long_name) in f["variables"].items():
            about = ", ".join(x for x in (sn, long_name) if x)
            lines.append(
                f'# <standard_name> = {{ name = "{name}", units = "{units}" }}'
                + (f"   # {about}" if about else "")
            )
    lines += [
        "",
        "[output]",
        'dir = "out"',
        '# local_timezone = "Europe/Zurich"   # IANA name: the observation day for new-snow sums',
        "# observation_hour = 7",
        "",
    ]
    return atomic_write_text(target, "\n".join(lines)), f["missing"]

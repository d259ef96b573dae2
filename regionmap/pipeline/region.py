"""The static part of a run, prepared once in the client: DEM, zones, terrain, cells, the
forcing opened lazily, each cell's interpolation weights and the region's event windows."""

from __future__ import annotations

import time as _time
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from regionmap.cells import CellSet, build_cells
from regionmap.config import Config
from regionmap.downscale.events import read_region_precipitation_max, region_event_hours
from regionmap.downscale.pipeline import CellBatch, prepare_cells
from regionmap.downscale.quantile_mapping import read_qm_table
from regionmap.errors import InputError
from regionmap.io.dem import Dem, read_dem
from regionmap.io.forcing import open_forcing
from regionmap.io.zones import read_zones
from regionmap.pipeline.cache import PreparationCache
from regionmap.terrain import Terrain, compute_terrain

__all__ = [
    "Region",
    "prepare_region",
    "open_grid_forcing",
    "prepare_batch",
    "quantile_tables",
    "cells_frame",
]


@dataclass
class Region:
    """Static inputs of a run: DEM, zones, terrain and cells.

    ``cache_key`` is the region's key in the preparation cache (None without a cache).
    """

    dem: Dem
    zones: pd.DataFrame  # a GeoDataFrame (read_zones)
    terrain: Terrain
    cells: CellSet
    timings_s: dict = field(default_factory=dict)
    cache_key: str | None = None


def prepare_region(
    cfg: Config, *, progress: bool = False, cache: PreparationCache | None = None
) -> Region:
    """Read the DEM and zones, compute terrain and cells, or load them from ``cache``
    (:mod:`regionmap.pipeline.cache`), where a new preparation is stored."""
    timings = {}
    key = None
    if cache is not None:
        t0 = _time.perf_counter()
        key = cache.region_key(cfg)
        region = cache.load("region", key)
        if region is not None:
            region.dem.path = cfg.region.dem  # the same bytes, wherever they are now
            region.timings_s = {"region_from_cache": _time.perf_counter() - t0}
            return region
        timings["region_cache_key"] = _time.perf_counter() - t0
    t0 = _time.perf_counter()
    dem = read_dem(cfg.region.dem)
    zones = read_zones(cfg.region.zones, cfg.region.zone_field, dem, layer=cfg.region.zone_layer)
    timings["read_region"] = _time.perf_counter() - t0
    t0 = _time.perf_counter()
    terrain = compute_terrain(dem, cfg.terrain, progress=progress or None)
    timings["terrain"] = _time.perf_counter() - t0
    t0 = _time.perf_counter()
    cells = build_cells(dem, terrain, zones, cfg.cells)
    timings["cells"] = _time.perf_counter() - t0
    region = Region(dem, zones, terrain, cells, cache_key=key)
    if cache is not None and key is not None:
        t0 = _time.perf_counter()
        cache.save("region", key, region)
        timings["region_cache_save"] = _time.perf_counter() - t0
    region.timings_s = timings
    return region


def open_grid_forcing(cfg: Config):
    """Open the ``[forcing]`` files lazily."""
    if cfg.forcing is None:
        raise InputError(
            f"{cfg.source or 'config'}: a [forcing] section with path = ... is required for a run"
        )
    return open_forcing(cfg.forcing, base_dir=cfg.source.parent if cfg.source else None)


def prepare_batch(
    region: Region, gf, cfg: Config, *, cache: PreparationCache | None = None
) -> CellBatch:
    """Interpolation weights of every cell (built once, in the client), or loaded from
    ``cache`` for a region prepared with it, where new weights are stored."""
    settings = cfg.downscale
    table = region.cells.table
    gf.check_covers(table["lon"].to_numpy(float), table["lat"].to_numpy(float))
    if cache is None or region.cache_key is None:
        batch = prepare_cells(region.cells, gf, settings)
    else:
        key = cache.weights_key(region.cache_key, gf, settings)
        weights = cache.load("weights", key)
        batch = prepare_cells(region.cells, gf, settings, weights=weights)
        if weights is None:
            cache.save("weights", key, batch.weights)
    # region-wide event windows from the grid precipitation over the region: an hour is wet
    # where a grid point has at least the event amount over the largest precipitation
    # factor, so every cell's wet hour lies in a window
    points = np.unique(batch.weights.matrix.indices).astype(np.int64)
    precip_max = read_region_precipitation_max(gf, points, batch.weights.grid_shape)
    batch.region_event_hour = region_event_hours(
        precip_max,
        np.asarray(gf.time, dtype="datetime64[s]"),
        min_kg_m2=cfg.snow.event_min_kg_m2 / settings.precip_factor_bounds[1],
        gap_h=cfg.snow.event_gap_h,
    )
    return batch


def quantile_tables(cfg: Config) -> tuple:
    """The quantile-mapping tables of ``[bias] quantile_mapping`` (none without it)."""
    path = cfg.bias.quantile_mapping
    return tuple(read_qm_table(path)) if path is not None else ()


def cells_frame(region: Region) -> pd.DataFrame:
    """The cell table with the ``slope_class`` column the outputs need."""
    t = region.cells.table.copy()
    if "slope_class" not in t.columns:
        t["slope_class"] = 0
    return t

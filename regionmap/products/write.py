"""From a run's ``cells.nc`` and ``profiles.nc`` to its products: summaries, layers of
concern, the rain-crust line, GIS layers and tables.

Everything here couples cells (zones, bands, region-wide layers), so it runs once after all
chunks have finished, in ``cell_id`` order. The products read only the run's result files,
the region and, for the rain-crust line's likely range, the members' crust presence of the
perturbation ensemble (:mod:`regionmap.pipeline.ensemble`).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from regionmap.config import Config
from regionmap.io.times import event_date_label
from regionmap.io.writers import write_csv
from regionmap.products.concern import ConcernCriteria
from regionmap.products.gis import write_gis
from regionmap.products.problems import problem_flags, problems_at
from regionmap.products.rain_crust import (
    NO_CRUST_CLAUSE,
    RainEvent,
    event_rain_share,
    line_events,
    rain_crust_limits,
    rain_crust_lines,
    rain_crust_presence,
    rain_crust_sentence,
    rain_event_windows,
    zone_rain_crust_columns,
)
from regionmap.products.summaries import layers_of_concern, summary_tables, terrain_weights_km2

__all__ = ["Products", "write_products"]


@dataclass
class Products:
    zones: pd.DataFrame
    sentences: list[str]


def _weights(region, cfg: Config) -> pd.DataFrame:
    return terrain_weights_km2(
        region.cells.index,
        region.terrain.slope_deg,
        region.dem.pixel_area_m2(),
        len(region.cells.table),
        avalanche_terrain_deg=tuple(cfg.cells.avalanche_terrain_deg),
    )


def _rain_crust(
    out: Path,
    region,
    diag: xr.Dataset,
    prof: xr.Dataset,
    table: pd.DataFrame,
    weights: pd.DataFrame,
    map_time,
    ensemble_members: dict[int, np.ndarray],
    ensemble_rain_share: dict[int, np.ndarray],
    local_timezone: str,
) -> tuple[pd.DataFrame, object, list[str]]:
    """Limits, lines and sentences of every rain-on-snow event up to the map time."""
    import geopandas as gpd

    events, _ = line_events(prof, day=map_time, n_cells_total=len(table))
    windows = rain_event_windows(out / "events.csv")
    w_all = weights["all_km2"].to_numpy()
    by_aspect, by_zone = [], []
    for ev in events.itertuples():
        event_id = int(ev.event_id)
        control = rain_crust_presence(prof, day=map_time, event_id=event_id)
        # the event's rain hours; without a log entry, from its start to its crusts' time
        first, last = windows.get(
            event_id, (np.datetime64(event_id * 3600, "s"), np.datetime64(ev.event_time, "s"))
        )
        event = RainEvent(
            event_id,
            np.datetime64(ev.event_time, "s"),
            control,
            event_rain_share(diag, first, last),
            ensemble_members.get(event_id),
            ensemble_rain_share.get(event_id),
        )
        by_aspect.append(rain_crust_limits(table, w_all, event, by=("zone", "aspect_sector")))
        by_zone.append(rain_crust_limits(table, w_all, event, by=("zone",)))
    if by_aspect:
        limits = pd.concat(by_aspect, ignore_index=True)
        zone_limits = pd.concat(by_zone, ignore_index=True)
        sentences = rain_crust_sentence(limits)
        regions = region.cells.polygons()[["zone", "aspect_sector", "geometry"]]
        lines = rain_crust_lines(
            limits, region.dem.elevation_m, region.dem.transform, region.dem.crs, regions
        )
    else:
        limits = pd.DataFrame()
        zone_limits = pd.DataFrame()
        sentences = pd.Series(dtype=object)
        lines = gpd.GeoDataFrame(
            {"event_id": [], "zone": [], "elevation_m": []}, geometry=[], crs=region.dem.crs
        )
    cols = zone_rain_crust_columns(zone_limits, sentences)
    if not limits.empty:
        write_csv(out / "rain_crust_limits.csv", limits)
    # the printed summary names the event and leaves out the zones it left no crust in
    words = [
        f"{zone}, rain of {event_date_label(event_id, local_timezone)}: {text}"
        for (zone, event_id), text in sentences.items()
        if text and not text.startswith(NO_CRUST_CLAUSE)
    ]
    return cols, lines, words


def write_products(
    out: Path,
    cfg: Config,
    region,
    *,
    map_time,
    is_forecast: bool,
    ensemble_members: dict[int, np.ndarray] | None = None,
    ensemble_rain_share: dict[int, np.ndarray] | None = None,
) -> Products:
    """Summaries, layers of concern, rain-crust line and GIS layers of a finished run.

    ``ensemble_members`` ({event_id: (member, cell) bool}) and ``ensemble_rain_share``
    ({event_id: (member, cell) float}), from
    :func:`regionmap.pipeline.ensemble.rain_crust_ensemble`, give the rain-crust line its
    likely range; without them the range is the control run's line.
    """
    criteria = ConcernCriteria.from_snow_params(cfg.snow)
    table = region.cells.table.copy()
    if "slope_class" not in table.columns:
        table["slope_class"] = 0
    weights = _weights(region, cfg)
    # opened lazily: the summaries read the output times and snapshot days they need, so
    # memory follows those, not the whole season of every cell
    with (
        xr.open_dataset(out / "cells.nc", engine="netcdf4") as diag,
        xr.open_dataset(out / "profiles.nc", engine="netcdf4") as prof,
    ):
        tz, hour = cfg.output.local_timezone, cfg.output.observation_hour
        tables = summary_tables(
            diag,
            prof,
            table,
            weights,
            map_time=map_time,
            local_timezone=tz,
            observation_hour=hour,
            avalanche_terrain_deg=tuple(cfg.cells.avalanche_terrain_deg),
            criteria=criteria,
        )
        loc = layers_of_concern(
            diag,
            prof,
            table,
            weights["avalanche_km2"].to_numpy(),
            time=map_time,
            local_timezone=tz,
            observation_hour=hour,
            criteria=criteria,
        )
        problems, cell_problems = problems_at(
            diag, prof, table, weights["avalanche_km2"].to_numpy(), time=map_time, criteria=criteria
        )
        rc_cols, lines, words = _rain_crust(
            out,
            region,
            diag,
            prof,
            table,
            weights,
            map_time,
            ensemble_members or {},
            ensemble_rain_share or {},
            tz,
        )
    zones = tables.zones.merge(rc_cols, left_on="zone", right_index=True, how="left")
    zones["valid_time"] = pd.Timestamp(map_time)
    zones["is_forecast"] = bool(is_forecast)
    cells = tables.cells.join(weights[["avalanche_km2", "all_km2"]], how="left")
    cells = cells.join(problem_flags(cell_problems), how="left")
    # a cell is one simulated column, so its depth-hoar fraction is its presence flag (0 or 1)
    sources = {
        "depth_hoar_fraction": "depth_hoar_present",
        "crust_count": "crust_count",
        "new_snow_72h_cm": "new_snow_72h_cm",
        "new_snow_24h_cm": "new_snow_24h_cm",
        "snow_depth_cm": "snow_depth_cm",
        "pwl_depth_cm": "pwl_depth_cm",
        "pwl_slab_cm": "pwl_slab_cm",
        "new_snow_72h_kg_m2": "new_snow_72h_kg_m2",
        "threshold_count_max": "threshold_count_max",
    }
    maps = {
        name: cells[src].reindex(table.index).to_numpy(np.float64)
        for name, src in sources.items()
        if src in cells.columns
    }
    write_gis(
        out,
        region.cells,
        region.zones,
        zones,
        cells,
        lines,
        loc,
        maps,
        transform=region.dem.transform,
        crs=region.dem.crs,
        valid_time=map_time,
        problems=problems,
    )
    write_csv(out / "problems.csv", problems)
    # band x aspect groups without terrain of the weighting have no values: left out
    band_aspect = tables.band_aspect
    write_csv(out / "band_aspect.csv", band_aspect[band_aspect["area_km2"] > 0])
    write_csv(out / "daily.csv", tables.daily)
    write_csv(out / "snow_line.csv", tables.snow_line)
    return Products(zones, words)

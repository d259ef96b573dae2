"""From a run's ``cells.nc`` and ``profiles.nc`` to its products: summaries, layers of
concern, the rain-crust line (with its perturbation ensemble), GIS layers and tables.

Everything here couples cells (zones, bands, region-wide layers), so it runs once after all
chunks have finished, in ``cell_id`` order.
"""

from __future__ import annotations

import os
import time as _time
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from regionmap.config import Config
from regionmap.io.times import event_date_label
from regionmap.io.writers import write_csv

__all__ = ["Products", "write_products", "ENSEMBLE_MEMBERS"]

#: Rain-crust ensemble: (air temperature offset at all heights [K], phase threshold offset [K]).
ENSEMBLE_MEMBERS = ((1.0, 0.0), (-1.0, 0.0), (0.0, 0.5), (0.0, -0.5))
#: Days simulated before and after an event by the ensemble members.
_SPIN_BEFORE_H = 24
_AFTER_H = 48
#: An event draws a rain-crust line when its crust is in at least this many cells and this
#: share of all cells (ours).
_MIN_EVENT_CELLS = 3
_MIN_EVENT_CELL_FRAC = 0.02
#: Cells within this height of the control crust's elevation range join the ensemble [m].
_ENSEMBLE_MARGIN_M = 400.0
#: Cells re-simulated together by the ensemble, at most (bounds the memory of each of its threads).
_ENSEMBLE_BLOCK_CELLS = 2048


@dataclass
class Products:
    zones: pd.DataFrame
    sentences: list[str]
    ensemble_cost: dict = field(default_factory=dict)


def _weights(region, cfg: Config) -> pd.DataFrame:
    from regionmap.products.summaries import terrain_weights_km2

    return terrain_weights_km2(
        region.cells.index,
        region.terrain.slope_deg,
        region.dem.pixel_area_m2(),
        len(region.cells.table),
        avalanche_terrain_deg=tuple(cfg.cells.avalanche_terrain_deg),
    )


def _member_presence(
    ctx, state0, event: pd.Series, control: np.ndarray, table: pd.DataFrame
) -> tuple[np.ndarray, dict]:
    """Crust presence of each ensemble member for one event: only cells near the control
    crust's elevation range are re-simulated, only from a day before the event to two days
    after it (the control state there comes from the run's checkpoints, see
    :mod:`regionmap.pipeline.checkpoints`); elsewhere members keep the control's presence."""
    from regionmap.pipeline.run import chunk_ranges

    t0 = _time.perf_counter()
    z = table["elevation_m"].to_numpy(float)
    if not control.any():
        return np.repeat(control[None, :], len(ENSEMBLE_MEMBERS), axis=0), {
            "cells": 0,
            "steps": 0,
            "seconds": 0.0,
        }
    lo_z, hi_z = z[control].min() - _ENSEMBLE_MARGIN_M, z[control].max() + _ENSEMBLE_MARGIN_M
    cells = np.nonzero((z >= lo_z) & (z <= hi_z))[0]
    if ctx.downscale.drift:  # drift is normalised per zone: re-simulate whole zones
        zone = ctx.batch.zone_code
        cells = np.nonzero(np.isin(zone, zone[cells]))[0]
    p = ctx.period
    times = p.times
    first_ev = np.datetime64(event["first_time"], "s")
    last_ev = np.datetime64(event["last_time"], "s")
    start = max(
        p.first, int(np.searchsorted(times, first_ev - np.timedelta64(_SPIN_BEFORE_H * 3600, "s")))
    )
    stop = min(
        p.stop,
        int(np.searchsorted(times, last_ev + np.timedelta64(_AFTER_H * 3600, "s"), side="right")),
    )
    members = np.repeat(control[None, :], len(ENSEMBLE_MEMBERS), axis=0)
    formed = (first_ev - np.timedelta64(3600, "s"), last_ev + np.timedelta64(_AFTER_H * 3600, "s"))
    resume = start
    groups = (
        ctx.batch.zone_code[cells] if ctx.downscale.drift else None
    )  # drift: whole zones per block
    # blocks side by side, one per core (the kernel and most of the downscaling release the GIL)
    n_threads = os.cpu_count() or 1
    blocks = chunk_ranges(
        cells.size, min(_ENSEMBLE_BLOCK_CELLS, -(-cells.size // n_threads)), groups
    )
    with ThreadPoolExecutor(min(n_threads, len(blocks))) as pool:
        done = list(
            pool.map(
                lambda b: _block_presence(ctx, state0, cells[b[0] : b[1]], start, stop, formed),
                blocks,
            )
        )
    for (lo, hi), (presence, _resume) in zip(blocks, done):
        members[:, cells[lo:hi]] = presence
    cost = {
        "cells": int(cells.size),
        "steps": int(stop - resume),
        "member_steps": int(stop - start),
        "seconds": round(_time.perf_counter() - t0, 3),
    }
    return members, cost


def _block_presence(
    ctx, state0, cells: np.ndarray, start: int, stop: int, formed: tuple
) -> tuple[np.ndarray, int]:
    """(member, cell) crust presence of the ensemble for some cells (positions) over the
    forcing steps ``start:stop``, and the step their control state was resumed from."""
    from regionmap.downscale.pipeline import downscale_cells
    from regionmap.pipeline.run import _forcing_for, _perturbed
    from regionmap.products.rain_crust import rain_crust_presence
    from regionmap.snow.column import run_columns, snapshots_to_dataset

    p = ctx.period
    gf = _forcing_for(ctx)
    batch = ctx.batch.subset(cells)
    # the control state at the start of the window, for these cells only: stepped on from
    # the latest state the run saved before it (or from the run's start state)
    if ctx.checkpoints is None:
        state = state0.take(cells)
    else:
        state = ctx.checkpoints.latest(p.times[start] - np.timedelta64(3600, "s"), cells, state0)
    resume = max(
        p.first, int(np.searchsorted(p.times, np.datetime64(state.time, "s"), side="right"))
    )
    if start > resume:  # one diagnostics interval: only the state is wanted
        spin = downscale_cells(gf, batch, ctx.downscale, slice(resume, start))
        state, _, _ = run_columns(
            state, spin, ctx.snow, start - resume, with_snapshots=False, threads=1
        )
    window = downscale_cells(gf, batch, ctx.downscale, slice(start, stop))
    presence = np.zeros((len(ENSEMBLE_MEMBERS), cells.size), bool)
    for m, (dt_k, dphase_k) in enumerate(ENSEMBLE_MEMBERS):
        f = _perturbed(window, dt_k, dphase_k, ctx.downscale)
        _, _, snaps = run_columns(state, f, ctx.snow, stop - start, None, threads=1)
        ds = (
            snapshots_to_dataset(snaps, batch.cell_id)
            .swap_dims({"day": "time"})
            .rename({"time": "day"})
        )
        presence[m] = rain_crust_presence(ds, formed_between=formed)
    return presence, resume


def _rain_crust(
    out: Path,
    cfg: Config,
    region,
    ctx,
    state0,
    prof: xr.Dataset,
    table: pd.DataFrame,
    weights: pd.DataFrame,
    map_time,
) -> tuple[pd.DataFrame, object, list[str], dict]:
    """Limits, lines and sentences of every rain-on-snow event up to the map time."""
    import geopandas as gpd

    from regionmap.products.rain_crust import (
        NO_CRUST_CLAUSE,
        RainEvent,
        rain_crust_limits,
        rain_crust_lines,
        rain_crust_presence,
        rain_crust_sentence,
        rain_events,
        zone_rain_crust_columns,
    )

    events = rain_events(prof, day=map_time)
    # a rain-crust line needs an event that left crusts over some terrain; single cells with a
    # crust of their own (e.g. a shallow pack soaked by a shower) do not make a line
    min_cells = max(_MIN_EVENT_CELLS, int(np.ceil(_MIN_EVENT_CELL_FRAC * len(table))))
    minor = events[events["n_cells"] < min_cells]
    events = events[events["n_cells"] >= min_cells]
    log = _event_windows(out)
    w_all = weights["all_km2"].to_numpy()
    by_aspect, by_zone, costs = [], [], []
    for ev in events.itertuples():
        control = rain_crust_presence(prof, day=map_time, event_id=int(ev.event_id))
        window = log.get(int(ev.event_id))
        members = None
        if window is not None:
            members, cost = _member_presence(ctx, state0, window, control, table)
            costs.append({"event_id": int(ev.event_id), **cost})
        event = RainEvent(int(ev.event_id), np.datetime64(ev.event_time, "s"), control, members)
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
        f"{zone}, rain of {event_date_label(event_id, cfg.output.local_timezone)}: {text}"
        for (zone, event_id), text in sentences.items()
        if text and not text.startswith(NO_CRUST_CLAUSE)
    ]
    cost = {
        "members": [list(m) for m in ENSEMBLE_MEMBERS],
        "events": costs,
        "minor_events_without_line": [int(e) for e in minor["event_id"]],
        "seconds": round(sum(c["seconds"] for c in costs), 3),
    }
    return cols, lines, words, cost


def _event_windows(out: Path) -> dict:
    """Rain-on-snow windows per event id from the run's event log (``events.csv``)."""
    path = out / "events.csv"
    if not path.exists():
        return {}
    frame = pd.read_csv(path)
    for col in ("first_time", "last_time"):  # ISO 8601 with offset -> naive UTC
        frame[col] = pd.to_datetime(frame[col], utc=True).dt.tz_localize(None)
    frame = frame[frame["kind"] == "rain-on-snow"]
    g = frame.groupby("event_id").agg(
        first_time=("first_time", "min"), last_time=("last_time", "max")
    )
    return {int(k): row for k, row in g.iterrows()}


def write_products(
    out: Path,
    cfg: Config,
    region,
    ctx,
    *,
    map_time,
    state0,
    is_forecast: bool,
    progress: bool = False,
) -> Products:
    """Summaries, layers of concern, rain-crust line and GIS layers of a finished run."""
    from regionmap.products.gis import write_gis
    from regionmap.products.summaries import layers_of_concern, summary_tables

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
        )
        loc = layers_of_concern(
            diag,
            prof,
            table,
            weights["avalanche_km2"].to_numpy(),
            time=map_time,
            local_timezone=tz,
            observation_hour=hour,
        )
        rc_cols, lines, words, cost = _rain_crust(
            out, cfg, region, ctx, state0, prof, table, weights, map_time
        )
    zones = tables.zones.merge(rc_cols, left_on="zone", right_index=True, how="left")
    zones["valid_time"] = pd.Timestamp(map_time)
    zones["is_forecast"] = bool(is_forecast)
    cells = tables.cells.join(weights[["avalanche_km2", "all_km2"]], how="left")
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
    )
    # band x aspect groups without terrain of the weighting have no values: left out
    band_aspect = tables.band_aspect
    write_csv(out / "band_aspect.csv", band_aspect[band_aspect["area_km2"] > 0])
    write_csv(out / "daily.csv", tables.daily)
    write_csv(out / "snow_line.csv", tables.snow_line)
    return Products(zones, words, cost)

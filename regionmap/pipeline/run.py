"""Orchestration of a regional run: chunks of cells through downscaling and the snow column.

The static part (terrain, cells, interpolation weights) is prepared once in the client. Cells
are then split into contiguous chunks in ``cell_id`` order; each chunk is one dask task that
reads only the forcing grid points it needs, downscales, steps the column kernel through the
analysis part and the forecast part of the period, and returns its diagnostics, daily layer
snapshots, event log and the two states. The client writes each chunk into ``cells.nc`` and
``profiles.nc`` as it arrives, so memory holds a few chunks at a time, not the region.

Every cell is simulated independently of the others, so the results do not depend on the
chunk size, on where a cell falls in a chunk, or on the scheduler.
"""

from __future__ import annotations

import time as _time
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from regionmap.cells import build_cells
from regionmap.config import Config
from regionmap.downscale.events import read_region_precipitation_max, region_event_hours
from regionmap.downscale.pipeline import CellBatch, downscale_cells, prepare_cells
from regionmap.downscale.quantile_mapping import read_qm_table
from regionmap.downscale.types import CellForcing
from regionmap.errors import GridMismatchError, InputError
from regionmap.io.dem import read_dem
from regionmap.io.forcing import open_forcing
from regionmap.io.zones import read_zones
from regionmap.pipeline.cache import PreparationCache
from regionmap.pipeline.checkpoints import Checkpoints
from regionmap.pipeline.restart import restarts_in_chunk, run_columns_with_restarts
from regionmap.snow.params import SnowParams
from regionmap.snow.state import SnowState
from regionmap.terrain import compute_terrain

__all__ = [
    "Region",
    "RunContext",
    "prepare_region",
    "open_grid_forcing",
    "simulate_chunk",
    "chunk_ranges",
    "plan_period",
]


# --------------------------------------------------------------------------- region
@dataclass
class Region:
    """Static inputs of a run: DEM, zones, terrain and cells.

    ``cache_key`` is the region's key in the preparation cache (None without a cache).
    """

    dem: object
    zones: object
    terrain: object
    cells: object
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
    if cache is not None:
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


# --------------------------------------------------------------------------- period
@dataclass(frozen=True)
class Period:
    """The hours a run simulates, as indices into the forcing's hourly axis.

    ``first`` is the first simulated step; ``split`` the first forecast step (== ``stop`` when
    there is no forecast part); ``stop`` one past the last step.
    """

    first: int
    split: int
    stop: int
    times: np.ndarray

    @property
    def analysis_end(self) -> np.datetime64:
        return self.times[self.split - 1]

    @property
    def has_forecast(self) -> bool:
        return self.split < self.stop


def plan_period(
    forcing_time: np.ndarray,
    *,
    state_time=None,
    analysis_time=None,
    diag_every_h: int = 1,
    where: str = "forcing",
) -> Period:
    """Which forcing hours to simulate, from the state's time and the analysis time.

    Parameters
    ----------
    forcing_time : (time,) datetime64 hourly interval ends.
    state_time : datetime64 or None — the valid time of a state to continue from; its next
        hour must be in the forcing (earlier steps are skipped), otherwise a gap is an error.
    analysis_time : datetime64 or None — later forcing is forecast.
    diag_every_h : diagnostics interval; both parts must hold whole intervals.

    Raises
    ------
    InputError
        A gap between the state and the forcing, a state past the forcing's end, or parts
        that are not whole diagnostics intervals.
    """
    t = np.asarray(forcing_time, dtype="datetime64[s]")
    first = 0
    if state_time is not None:
        next_hour = np.datetime64(state_time, "s") + np.timedelta64(3600, "s")
        if next_hour < t[0]:
            raise InputError(
                f"{where}: the state is valid at {np.datetime64(state_time, 's')} but the forcing "
                f"starts at {t[0]}: a gap of {(t[0] - next_hour).astype(int) // 3600} h. "
                "Hint: give forcing that starts at or before the state's next hour."
            )
        found = np.nonzero(t == next_hour)[0]
        if found.size == 0:
            raise InputError(
                f"{where}: the state is valid at {np.datetime64(state_time, 's')}, but the forcing "
                f"({t[0]} to {t[-1]}) has no step ending at {next_hour}"
            )
        first = int(found[0])
    stop = t.size
    split = stop
    if analysis_time is not None:
        a = np.datetime64(analysis_time, "s")
        split = int(np.searchsorted(t, a, side="right"))
        split = min(max(split, first), stop)
    for name, n in (("analysis", split - first), ("forecast", stop - split)):
        if n % diag_every_h:
            raise InputError(
                f"{where}: the {name} part has {n} hourly steps, not a whole number of "
                f"[output] diagnostics_every = {diag_every_h} h intervals. Hint: align the "
                "start, end and analysis_time with the diagnostics interval."
            )
    if split - first <= 0 and stop - split <= 0:
        raise InputError(f"{where}: no forcing steps to simulate after the state's time")
    return Period(first, split, stop, t)


def chunk_ranges(
    n_cells: int, chunk_size: int, groups: np.ndarray | None = None
) -> list[tuple[int, int]]:
    """Contiguous [lo, hi) cell-position ranges of at most ``chunk_size`` cells.

    With ``groups`` (cell,) — e.g. the zone of each cell, each group one contiguous run — a
    range never splits a group: whole groups are packed up to ``chunk_size`` cells (a larger
    group is a range of its own). Zone-conserving drift needs this, so that its per-zone
    normalisation, and with it every result, does not depend on the chunk size.
    """
    size = max(int(chunk_size), 1)
    if groups is None:
        edges = list(range(0, n_cells, size)) + [n_cells]
        return list(zip(edges[:-1], edges[1:]))
    groups = np.asarray(groups)
    if n_cells == 0:
        return []
    starts = np.concatenate([[0], np.nonzero(groups[1:] != groups[:-1])[0] + 1])
    if np.unique(groups[starts]).size != starts.size:
        raise RuntimeError(
            "chunk_ranges: the cells of a group must be contiguous"
        )  # a bug, not bad input
    edges, prev = [0], 0
    for end in [*starts[1:].tolist(), n_cells]:  # the end of each group
        if end - edges[-1] > size and prev > edges[-1]:
            edges.append(prev)
        prev = end
    edges.append(n_cells)
    return list(zip(edges[:-1], edges[1:]))


# --------------------------------------------------------------------------- chunk task
@dataclass
class RunContext:
    """Everything a chunk task needs (picklable; the forcing is reopened in remote workers).

    Attributes
    ----------
    cfg : the validated config (its sections are the stages' settings; it reopens the
        forcing in worker processes).
    batch : CellBatch of all cells with their interpolation weights.
    quantile_tables : the ``[bias]`` quantile-mapping tables.
    period : Period.
    diag_every_h : diagnostics interval [h].
    snapshot_hour_utc : hour (UTC) of the daily layer snapshots.
    kernel_threads : threads the column kernel uses inside one task.
    restarts : observed-profile restarts (:func:`regionmap.pipeline.restart.resolve_restarts`).
    checkpoints : where each chunk saves its control states for the ensemble (None: nowhere).
    """

    cfg: Config
    batch: CellBatch
    quantile_tables: tuple
    period: Period
    diag_every_h: int
    snapshot_hour_utc: int
    kernel_threads: int = 1
    restarts: list = field(default_factory=list)
    checkpoints: Checkpoints | None = None


_FORCING_CACHE: dict = {}


def forcing_for(ctx: RunContext):
    """The grid forcing, opened once per process."""
    key = (str(ctx.cfg.source), repr(ctx.cfg.forcing))
    gf = _FORCING_CACHE.get(key)
    if gf is None:
        gf = open_grid_forcing(ctx.cfg)
        _FORCING_CACHE.clear()
        _FORCING_CACHE[key] = gf
    return gf


def register_forcing(ctx: RunContext, gf) -> None:
    """Let tasks in this process use an already opened forcing."""
    _FORCING_CACHE.clear()
    _FORCING_CACHE[(str(ctx.cfg.source), repr(ctx.cfg.forcing))] = gf


def downscale_forcing(ctx: RunContext, gf, batch: CellBatch, steps: slice) -> CellForcing:
    """Per-cell forcing of some cells over forcing steps ``steps``, corrected by ``[bias]``."""
    return downscale_cells(
        gf,
        batch,
        ctx.cfg.downscale,
        steps,
        bias=ctx.cfg.bias,
        quantile_tables=ctx.quantile_tables,
    )


def _concat_parts(parts: list[dict]) -> dict:
    if len(parts) == 1:
        return parts[0]
    out = {}
    for key in parts[0]:
        a = parts[0][key]
        if isinstance(a, np.ndarray) and a.ndim >= 2:
            out[key] = np.concatenate([p[key] for p in parts], axis=1)
        elif isinstance(a, np.ndarray) and key in ("time",):
            out[key] = np.concatenate([p[key] for p in parts])
        elif isinstance(a, np.ndarray) and key.startswith("event_"):
            out[key] = np.concatenate([p[key] for p in parts])
        elif key == "status":
            out[key] = np.bitwise_or.reduce([p[key] for p in parts])
        else:
            out[key] = a
    return out


def simulate_chunk(
    ctx: RunContext, lo: int, hi: int, state: SnowState, *, with_snapshots: bool = True
) -> dict:
    """Downscale and simulate cells ``lo:hi`` (positions) over the run's period.

    Returns
    -------
    dict with ``lo``, ``hi``, ``diagnostics`` and ``snapshots`` (both parts joined along
    time), ``state_analysis`` and ``state_end`` (SnowState), ``forcing_summary`` (sums for
    run.json) and ``seconds`` (downscale, column).
    """
    gf = forcing_for(ctx)
    batch = ctx.batch.subset(np.arange(lo, hi))
    p = ctx.period
    t0 = _time.perf_counter()
    forcing = downscale_forcing(ctx, gf, batch, slice(p.first, p.stop))
    t_down = _time.perf_counter() - t0
    n_an = p.split - p.first
    t0 = _time.perf_counter()
    mine = restarts_in_chunk(ctx.restarts, lo, hi)
    diags, snaps, records = [], [], []
    state_an = state
    parts = [("analysis", slice(0, n_an))] if n_an > 0 else []
    if p.has_forecast:
        parts.append(("forecast", slice(n_an, None)))
    state_now = state
    kept = None if ctx.checkpoints is None else dict.fromkeys(ctx.checkpoints.times)
    for name, steps in parts:
        state_now, d, s, recs = run_columns_with_restarts(
            state_now,
            forcing.subset(steps=steps),
            mine,
            ctx.cfg.snow,
            ctx.diag_every_h,
            ctx.snapshot_hour_utc,
            with_snapshots=with_snapshots,
            threads=ctx.kernel_threads,
            kept=kept,
        )
        diags.append(d)
        snaps.append(s)
        records += recs
        if name == "analysis":
            state_an = state_now
    state_end = state_now
    if kept is not None:
        ctx.checkpoints.save(lo, hi, kept)
    t_col = _time.perf_counter() - t0
    summary = {
        "precip_kg_m2": float(forcing.precip_kg_m2.sum()),
        "snowfall_kg_m2": float((forcing.precip_kg_m2 * forcing.snow_frac).sum()),
        "freezing_rain_kg_m2": float((forcing.precip_kg_m2 * forcing.freezing_rain_frac).sum()),
    }
    return {
        "lo": lo,
        "hi": hi,
        "diagnostics": _concat_parts(diags),
        "snapshots": _concat_parts(snaps) if with_snapshots else None,
        "state_analysis": state_an,
        "state_end": state_end,
        "forcing_summary": summary,
        "restart_records": records,
        "seconds": {"downscale": t_down, "column": t_col},
    }


def align_state(
    state: SnowState,
    saved_cells,
    saved_region: dict | None,
    cells: pd.DataFrame,
    region: dict,
    params: SnowParams,
    where: str,
) -> SnowState:
    """A continuation state with its cells in this run's order, matched by identity.

    Parameters
    ----------
    state : the loaded state.
    saved_cells, saved_region : the identity of its cells and its region fingerprints
        (:func:`regionmap.snow.state.load_state_with_identity`).
    cells : this run's cell table (cell_id order).
    region : this run's :func:`regionmap.cells.region_fingerprints`.
    params : this run's snow settings.
    where : the state's file, for messages.

    Raises
    ------
    GridMismatchError
        No cell identities in the state, another DEM, an edited zone, or different cells
        (the first one named).
    InputError
        Different snow settings fingerprint.
    """
    from regionmap.cells import match_cells

    if saved_cells is None or saved_region is None:
        raise GridMismatchError(
            f"{where}: the state holds no cell identities or region fingerprints, so its cells "
            "cannot be matched to this run's; hint: continue from a state.nc written by this "
            "version of regionmap, or start a new season"
        )
    if saved_region["dem"] != region["dem"]:
        raise GridMismatchError(
            f"{where}: the state was made on another DEM (fingerprint {saved_region['dem']}, "
            f"this run {region['dem']}); continue with the DEM of the run that wrote it"
        )
    edited = [
        name
        for name, print_ in region["zones"].items()
        if name in saved_region["zones"] and saved_region["zones"][name] != print_
    ]
    if edited:
        raise GridMismatchError(
            f"{where}: zone {edited[0]!r} has another polygon than in the run that wrote the "
            "state; its cells would hold another zone's snowpack. Hint: continue with the "
            "zones of that run, or start a new season"
        )
    positions = match_cells(saved_cells, cells, where)
    if state.fingerprint and state.fingerprint != params.fingerprint():
        raise InputError(
            f"{where}: the state was made with other [snow] settings (fingerprint "
            f"{state.fingerprint}, this run {params.fingerprint()}); continue with the same settings"
        )
    if positions.size and not np.array_equal(positions, np.arange(positions.size)):
        state = state.take(positions)
    state.cell_id = cells.index.to_numpy(np.int64)
    return state


def initial_state(batch: CellBatch, params: SnowParams, period: Period) -> SnowState:
    """Snow-free cells valid one hour before the first simulated step."""
    t0 = period.times[period.first] - np.timedelta64(3600, "s")
    state = SnowState.empty(batch.n_cells, params.max_layers, time=t0, cell_id=batch.cell_id)
    state.fingerprint = params.fingerprint()
    return state


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

"""The chunk task: cells ``lo:hi`` through downscaling and the snow column.

Each chunk is one dask task that reads only the forcing grid points it needs, downscales,
steps the column kernel through the analysis part and the forecast part of the period, and
returns its diagnostics, daily layer snapshots, event log and the two states. The client
writes each chunk into ``cells.nc`` and ``profiles.nc`` as it arrives
(:mod:`regionmap.pipeline.execute`), so memory holds a few chunks at a time, not the region.
"""

from __future__ import annotations

import time as _time
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from regionmap.cells import match_cells
from regionmap.config import Config
from regionmap.downscale.pipeline import CellBatch, downscale_cells
from regionmap.downscale.types import CellForcing
from regionmap.errors import GridMismatchError, InputError
from regionmap.pipeline.checkpoints import Checkpoints
from regionmap.pipeline.plan import Period
from regionmap.pipeline.region import open_grid_forcing
from regionmap.pipeline.restart import restarts_in_chunk, run_columns_with_restarts
from regionmap.snow.params import SnowParams
from regionmap.snow.state import SnowState

__all__ = [
    "RunContext",
    "forcing_for",
    "register_forcing",
    "downscale_forcing",
    "simulate_chunk",
    "align_state",
    "initial_state",
]


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
            zones=(batch.zone_code, batch.area_m2),
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
    diagnostics = _concat_parts(diags)
    return {
        "lo": lo,
        "hi": hi,
        "diagnostics": diagnostics,
        "snapshots": _concat_parts(snaps) if with_snapshots else None,
        "state_analysis": state_an,
        "state_end": state_end,
        "forcing_summary": summary,
        "wind_transport_kg": _wind_transport_kg(diagnostics, batch),
        "restart_records": records,
        "seconds": {"downscale": t_down, "column": t_col},
    }


#: cells.nc amounts of the wind-transport budget, by the budget's names
_TRANSPORT_AMOUNTS = {
    "eroded": "wind_eroded_kg_m2",
    "deposited": "wind_deposited_kg_m2",
    "shortfall": "wind_erosion_shortfall_kg_m2",
}


def _wind_transport_kg(diagnostics: dict, batch) -> dict:
    """{zone code: {eroded, deposited, shortfall}} of a chunk's cells over its hours [kg]."""
    out = {}
    for code in np.unique(batch.zone_code):
        mine = batch.zone_code == code
        out[int(code)] = {
            key: float(diagnostics[name][mine].sum(axis=1) @ batch.area_m2[mine])
            for key, name in _TRANSPORT_AMOUNTS.items()
        }
    return out


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
            f"{state.fingerprint}, this run {params.fingerprint()}); continue with the same "
            "settings"
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

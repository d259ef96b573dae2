"""The rain-crust perturbation ensemble: a few days around each rain-on-snow event again,
with perturbed forcing, so the rain-crust line can show its likely range.

Members shift the air temperature by ±1 K at all heights or the phase threshold by ±0.5 K
(:data:`ENSEMBLE_MEMBERS`). Only cells near the control crust's elevation range are
re-simulated, only from a day before the event to two days after it; each block of cells
starts from the control state the run saved shortly before
(:mod:`regionmap.pipeline.checkpoints`). Elsewhere members keep the control's presence. The
result is each member's crust presence and rain share of the event per event, which the
products turn into limits (:mod:`regionmap.products.rain_crust`).
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

from regionmap.downscale.phase import snow_fraction
from regionmap.downscale.settings import DownscaleSettings
from regionmap.downscale.types import CellForcing
from regionmap.pipeline.chunk import RunContext, downscale_forcing, forcing_for
from regionmap.pipeline.plan import chunk_ranges
from regionmap.products.rain_crust import (
    forcing_rain_share,
    line_events,
    rain_crust_presence,
    rain_event_windows,
)
from regionmap.snow.column import run_columns, snapshots_to_dataset
from regionmap.snow.state import SnowState

__all__ = ["ENSEMBLE_MEMBERS", "RainCrustEnsemble", "rain_crust_ensemble", "perturbed_forcing"]

#: Rain-crust ensemble: (air temperature offset at all heights [K], phase threshold offset [K]).
ENSEMBLE_MEMBERS = ((1.0, 0.0), (-1.0, 0.0), (0.0, 0.5), (0.0, -0.5))
#: Hours simulated before and after an event by the ensemble members.
_SPIN_BEFORE_H = 24
_AFTER_H = 48
#: Cells within this height of the control crust's elevation range join the ensemble [m].
_ENSEMBLE_MARGIN_M = 400.0
#: Cells re-simulated together by the ensemble, at most (bounds the memory of each of its threads).
_ENSEMBLE_BLOCK_CELLS = 2048


@dataclass
class RainCrustEnsemble:
    """Each member's rain-crust presence and rain share per event, and what it cost.

    Attributes
    ----------
    members : {event_id: ndarray (member, cell) bool} in :data:`ENSEMBLE_MEMBERS` order; events
        without a rain-on-snow window in the event log are missing.
    rain_share : {event_id: ndarray (member, cell) float}: the liquid share of each member's
        precipitation over the event's rain hours [1]
        (:func:`regionmap.products.rain_crust.forcing_rain_share`); NaN in the cells that
        were not re-simulated.
    cost : the ``rain_crust_ensemble`` record of ``run.json``.
    """

    members: dict[int, np.ndarray] = field(default_factory=dict)
    rain_share: dict[int, np.ndarray] = field(default_factory=dict)
    cost: dict = field(default_factory=dict)


def perturbed_forcing(
    forcing: CellForcing, dt_k: float, dphase_k: float, settings: DownscaleSettings
) -> CellForcing:
    """Forcing of an ensemble member: air temperature shifted by ``dt_k`` at all heights and
    the snow fraction recomputed with the phase threshold raised by ``dphase_k`` (the phase
    curve evaluated at ``T - dphase_k``). Freezing-rain hours keep their phase."""
    if dt_k == 0.0 and dphase_k == 0.0:
        return forcing
    t = forcing.t_air_k + dt_k
    sf = snow_fraction(
        settings.phase,
        t - dphase_k,
        forcing.rh_frac,
        forcing.pressure_pa,
        threshold_c=settings.phase_threshold_c,
        half_width_k=settings.phase_half_width_k,
    )
    fz = forcing.freezing_rain_frac
    out = forcing.subset()
    out.t_air_k = t
    out.snow_frac = np.ascontiguousarray(np.where(fz > 0, forcing.snow_frac, sf))
    return out


def rain_crust_ensemble(
    out: Path, ctx: RunContext, state0: SnowState, table: pd.DataFrame, map_time
) -> RainCrustEnsemble:
    """The ensemble of every event that draws a rain-crust line at the map time.

    Parameters
    ----------
    out : the run's output folder (``profiles.nc`` and ``events.csv`` written).
    ctx : the run's chunk-task context (forcing, settings, period, checkpoints).
    state0 : the run's start state (all cells).
    table : the cell table (``elevation_m``).
    map_time : the products' valid time.
    """
    ensemble = RainCrustEnsemble()
    costs = []
    with xr.open_dataset(out / "profiles.nc", engine="netcdf4") as prof:
        events, minor = line_events(prof, day=map_time, n_cells_total=len(table))
        log = rain_event_windows(out / "events.csv")
        for ev in events.itertuples():
            window = log.get(int(ev.event_id))
            if window is None:
                continue
            control = rain_crust_presence(prof, day=map_time, event_id=int(ev.event_id))
            members, shares, cost = _member_presence(ctx, state0, window, control, table)
            ensemble.members[int(ev.event_id)] = members
            ensemble.rain_share[int(ev.event_id)] = shares
            costs.append({"event_id": int(ev.event_id), **cost})
    ensemble.cost = {
        "members": [list(m) for m in ENSEMBLE_MEMBERS],
        "events": costs,
        "minor_events_without_line": [int(e) for e in minor["event_id"]],
        "seconds": round(sum(c["seconds"] for c in costs), 3),
    }
    return ensemble


def _member_presence(
    ctx: RunContext,
    state0: SnowState,
    window: tuple[np.datetime64, np.datetime64],
    control: np.ndarray,
    table: pd.DataFrame,
) -> tuple[np.ndarray, np.ndarray, dict]:
    """(member, cell) crust presence and rain share of the ensemble for one event whose rain
    fell in ``window`` (first, last hour), and its cost."""
    t0 = _time.perf_counter()
    z = table["elevation_m"].to_numpy(float)
    shares = np.full((len(ENSEMBLE_MEMBERS), control.size), np.nan)
    if not control.any():
        return (
            np.repeat(control[None, :], len(ENSEMBLE_MEMBERS), axis=0),
            shares,
            {"cells": 0, "steps": 0, "seconds": 0.0},
        )
    lo_z, hi_z = z[control].min() - _ENSEMBLE_MARGIN_M, z[control].max() + _ENSEMBLE_MARGIN_M
    cells = np.nonzero((z >= lo_z) & (z <= hi_z))[0]
    if ctx.cfg.snow.wind_transport:  # transport moves snow within zones: re-simulate whole zones
        zone = ctx.batch.zone_code
        cells = np.nonzero(np.isin(zone, zone[cells]))[0]
    p = ctx.period
    times = p.times
    first_ev, last_ev = (np.datetime64(t, "s") for t in window)
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
    groups = ctx.batch.zone_code[cells] if ctx.cfg.snow.wind_transport else None
    # blocks side by side, one per core (the kernel and most of the downscaling release the GIL)
    n_threads = os.cpu_count() or 1
    blocks = chunk_ranges(
        cells.size, min(_ENSEMBLE_BLOCK_CELLS, -(-cells.size // n_threads)), groups
    )
    with ThreadPoolExecutor(min(n_threads, len(blocks))) as pool:
        done = list(
            pool.map(
                lambda b: _block_presence(
                    ctx, state0, cells[b[0] : b[1]], start, stop, formed, (first_ev, last_ev)
                ),
                blocks,
            )
        )
    for (lo, hi), (presence, share, _resume) in zip(blocks, done, strict=True):
        members[:, cells[lo:hi]] = presence
        shares[:, cells[lo:hi]] = share
    cost = {
        "cells": int(cells.size),
        "steps": int(stop - resume),
        "member_steps": int(stop - start),
        "seconds": round(_time.perf_counter() - t0, 3),
    }
    return members, shares, cost


def _block_presence(
    ctx: RunContext,
    state0: SnowState,
    cells: np.ndarray,
    start: int,
    stop: int,
    formed: tuple,
    rain_window: tuple,
) -> tuple[np.ndarray, np.ndarray, int]:
    """(member, cell) crust presence and rain share over ``rain_window`` (first, last
    interval end) of the ensemble for some cells (positions) over the forcing steps
    ``start:stop``, and the step their control state was resumed from."""
    p = ctx.period
    gf = forcing_for(ctx)
    batch = ctx.batch.subset(cells)
    zones = (batch.zone_code, batch.area_m2)
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
        spin = downscale_forcing(ctx, gf, batch, slice(resume, start))
        state, _, _ = run_columns(
            state,
            spin,
            ctx.cfg.snow,
            start - resume,
            with_snapshots=False,
            threads=1,
            zones=zones,
        )
    window = downscale_forcing(ctx, gf, batch, slice(start, stop))
    presence = np.zeros((len(ENSEMBLE_MEMBERS), cells.size), bool)
    share = np.zeros((len(ENSEMBLE_MEMBERS), cells.size))
    t = p.times[start:stop]
    in_event = (t >= rain_window[0]) & (t <= rain_window[1])
    for m, (dt_k, dphase_k) in enumerate(ENSEMBLE_MEMBERS):
        f = perturbed_forcing(window, dt_k, dphase_k, ctx.cfg.downscale)
        share[m] = forcing_rain_share(f.precip_kg_m2[:, in_event], f.snow_frac[:, in_event])
        _, _, snaps = run_columns(
            state, f, ctx.cfg.snow, stop - start, None, threads=1, zones=zones
        )
        ds = (
            snapshots_to_dataset(snaps, batch.cell_id)
            .swap_dims({"day": "time"})
            .rename({"time": "day"})
        )
        presence[m] = rain_crust_presence(ds, formed_between=formed)
    return presence, share, resume

"""The whole chain for one config: region, forcing, chunks through dask, outputs, run record.

``execute`` is what ``regionmap run`` and ``regionmap demo`` call. Outputs go into a
temporary folder beside the target that replaces the old output folder only when complete
(:class:`regionmap.io.outdir.OutputFolder`).
"""

from __future__ import annotations

import contextlib
import glob
import json
import os
import shutil
import time as _time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from regionmap.cells import region_fingerprints
from regionmap.config import Config
from regionmap.downscale.types import CellForcing
from regionmap.errors import InputError, OutputError
from regionmap.io.atomic import atomic_write_text
from regionmap.io.outdir import OutputFolder, check_inputs_outside
from regionmap.io.results import PROFILES_CHUNK_CELLS, CellsNcWriter, ProfilesNcWriter
from regionmap.pipeline.cache import preparation_cache
from regionmap.pipeline.checkpoints import Checkpoints, checkpoint_times
from regionmap.pipeline.chunk import (
    RunContext,
    align_state,
    initial_state,
    register_forcing,
    simulate_chunk,
)
from regionmap.pipeline.cluster import cluster_errors, dask_client
from regionmap.pipeline.ensemble import rain_crust_ensemble
from regionmap.pipeline.plan import Period, chunk_ranges, plan_period
from regionmap.pipeline.record import RunTotals, run_record, write_event_log
from regionmap.pipeline.region import (
    Region,
    cells_frame,
    open_grid_forcing,
    prepare_batch,
    prepare_region,
    quantile_tables,
)
from regionmap.pipeline.restart import resolve_restarts
from regionmap.products.summaries import observation_times
from regionmap.products.write import write_products
from regionmap.snow.codes import CRUST_KINDS, GRAIN_CODES
from regionmap.snow.column import WIND_PACKED_ATTRS, run_columns
from regionmap.snow.state import SnowState, load_state_with_identity
from regionmap.stations.chain import run_verification_last_day

__all__ = ["RunOutcome", "execute", "LAYER_VARS", "default_map_time", "run_inputs"]

#: profiles.nc layer variables (the state.nc layer names plus formation_time).
LAYER_VARS = {
    "thickness_m": ("f4", {"units": "m", "long_name": "layer thickness (vertical)"}),
    "ice_kg_m2": ("f4", {"units": "kg m-2", "long_name": "ice mass of the layer"}),
    "liquid_kg_m2": ("f4", {"units": "kg m-2", "long_name": "liquid water in the layer"}),
    "temperature_k": ("f4", {"units": "K", "long_name": "layer temperature"}),
    "grain_size_mm": ("f4", {"units": "mm", "long_name": "grain size"}),
    "hardness_index": (
        "f4",
        {"units": "1", "long_name": "hand hardness index (F=1, 4F=2, 1F=3, P=4, K=5, I=6)"},
    ),
    "grain_class": (
        f"S{max(map(len, GRAIN_CODES))}",
        {
            "long_name": "grain class (International Classification for Seasonal Snow on the "
            "Ground codes)"
        },
    ),
    "crust_kind": (
        f"S{max(map(len, CRUST_KINDS))}",
        {"long_name": "crust kind: none, melt-freeze, sun, rain, glaze"},
    ),
    "deposition_time": (
        "f8",
        {"units": "seconds since 1970-01-01", "long_name": "deposition time of the layer's snow"},
    ),
    "formation_time": (
        "f8",
        {
            "units": "seconds since 1970-01-01",
            "long_name": "when the layer became what it is (burial of SH, the start of the "
            "refreeze that made a crust, else deposition)",
        },
    ),
    "event_id": (
        "i4",
        {
            "units": "1",
            "long_name": "id of the precipitation event that made the layer or its crust: its "
            "start as whole hours since 1970-01-01 UTC",
        },
    ),
    "wind_packed": ("i1", WIND_PACKED_ATTRS),
}

#: The chunk tasks' saved control states, inside the run's temporary output folder.
CHECKPOINT_FOLDER = ".checkpoints"


@dataclass
class RunOutcome:
    """What a finished run reports back to the CLI."""

    out_dir: Path
    zones: object  # DataFrame: the zones table at the map time
    sentences: list[str]
    map_time: np.datetime64
    is_forecast: bool
    n_cells: int
    seconds: float
    local_timezone: str = "UTC"  # of the times shown to users
    invented_data: bool = False


def expected_output_bytes(
    n_cells: int, n_out_times: int, n_days: int, n_checkpoints: int, state_bytes_per_cell: float
) -> int:
    """A generous estimate of a run's output folder at its largest [bytes].

    Per cell, as measured on the demo (657 cells, 2615 hours, 109 days: 86 MB): cells.nc
    about 14 B per output time, profiles.nc about 400 B per day, state.nc and state_end.nc
    about 3 times the state in memory each, GIS layers and tables about 15 kB; figures and
    the report about 20 MB in all; plus the checkpoints (the state in memory, each time).
    The sum is taken 1.5 times.
    """
    per_cell = (
        14 * n_out_times
        + 400 * n_days
        + 6 * state_bytes_per_cell
        + 15_000
        + n_checkpoints * state_bytes_per_cell
    )
    return int(1.5 * (n_cells * per_cell + 20e6))


def check_free_space(target: Path, needed_bytes: int) -> None:
    """Refuse to start when the output's file system has less free space than needed.

    Raises
    ------
    OutputError
        Naming the folder, the space needed and the space free.
    """
    folder = Path(target).absolute()
    while not folder.exists() and folder != folder.parent:
        folder = folder.parent
    free = shutil.disk_usage(folder).free
    if free < needed_bytes:
        raise OutputError(
            f"output folder {target}: not enough free space in {folder} for this run's "
            f"output: about {needed_bytes / 1e6:.0f} MB needed, {free / 1e6:.0f} MB free; free "
            "some space or choose another --out"
        )


def run_inputs(cfg: Config, continue_from=None, restarts=()) -> list[tuple[str, Path]]:
    """Every file a run reads as (what, path), for
    :func:`regionmap.io.outdir.check_inputs_outside`."""
    inputs = [
        ("config", cfg.source),
        ("DEM", cfg.region.dem),
        ("zones", cfg.region.zones),
        ("quantile-mapping table", cfg.bias.quantile_mapping),
        ("state (--continue-from)", continue_from),
    ]
    if cfg.forcing is not None:
        found = sorted(glob.glob(str(cfg.forcing.path))) or [cfg.forcing.path]
        inputs += [("forcing", p) for p in found] + [("forcing static file", cfg.forcing.static)]
    if cfg.stations is not None:
        inputs.append(("stations", cfg.stations.stations))
        inputs += [("observations", p) for p in cfg.stations.observations]
    inputs += [("restart profile", r.profile) for r in restarts]
    return inputs


def _context(ctx: RunContext) -> RunContext:
    """The run's context, handed to the chunk tasks through the scheduler."""
    return ctx


def _map_time(cfg: Config, out_times: np.ndarray, period) -> np.datetime64:
    """The map time: ``[output] map_time``, else the morning observation of the analysis day
    (:func:`default_map_time`)."""
    if cfg.output.map_time is not None:
        want = np.datetime64(cfg.output.map_time.replace(tzinfo=None), "s")
        if want not in out_times:
            raise InputError(
                f"{cfg.source or 'config'}: [output] map_time {want} is not an output time of this "
                "run "
                f"({out_times[0]} to {out_times[-1]}, every {cfg.output.diagnostics_every})"
            )
        return want
    analysis_end = period.analysis_end if period.has_forecast else out_times[-1]
    return default_map_time(
        out_times,
        analysis_end,
        local_timezone=cfg.output.local_timezone,
        observation_hour=cfg.output.observation_hour,
    )


def default_map_time(
    out_times: np.ndarray, analysis_end, *, local_timezone: str, observation_hour: int
) -> np.datetime64:
    """The local observation hour of the analysis day: the hour ``observation_hour`` (local
    clock) on the local calendar day of ``analysis_end`` — the picture a forecaster wants on
    that morning, even when the analysis ran to midnight and the hours after it are forecast.
    When the run ends before that hour, the run's last output time (the nearest to it).
    Rounded down to an output time.

    Parameters
    ----------
    out_times : (time,) datetime64[s] output times [UTC], increasing.
    analysis_end : the last analysis time [UTC] (the run's end without a forecast part).
    local_timezone, observation_hour : the local observation day (``[output]``).
    """
    end = np.datetime64(analysis_end, "s")
    obs = observation_times(
        out_times[0],
        out_times[-1],
        local_timezone=local_timezone,
        observation_hour=observation_hour,
    )
    local_day = pd.Timestamp(end).tz_localize("UTC").tz_convert(local_timezone).date()
    days = pd.DatetimeIndex(obs).tz_localize("UTC").tz_convert(local_timezone).date
    same = obs[days == local_day]
    want = same[0] if same.size else out_times[-1]
    return out_times[max(0, np.searchsorted(out_times, want, side="right") - 1)]


def _effective_chunk_size(n_cells: int, chunk_size: int, n_parallel: int) -> int:
    """``[run] chunk_size``, smaller for small regions so that every worker gets at least two
    chunks and writing the results overlaps the simulation (results do not depend on it).
    The smaller size is a multiple of the cell chunk of profiles.nc, so that its blocks are
    compressed outside the HDF5 lock (:mod:`regionmap.io.results`)."""
    balanced = -(-n_cells // (2 * n_parallel))
    balanced = -(-balanced // PROFILES_CHUNK_CELLS) * PROFILES_CHUNK_CELLS
    return max(1, min(chunk_size, balanced))


def _warm_kernels(params) -> None:
    """Compile (or load from the numba cache) the column kernel and the zone's wind transport
    once in the client."""
    n = 2
    t = np.datetime64("2000-01-01T01:00", "s") + np.arange(n) * np.timedelta64(3600, "s")
    z = np.zeros((1, n))
    f = CellForcing(
        time=t,
        t_air_k=z + 268.0,
        rh_frac=z + 0.8,
        pressure_pa=z + 8e4,
        wind_m_s=z + 2,
        sw_in_w_m2=z,
        lw_in_w_m2=z + 250,
        precip_kg_m2=z + 1,
        snow_frac=z + 1,
        freezing_rain_frac=z,
        sx_deg=z,
    )
    run_columns(
        SnowState.empty(1, params.max_layers, time=t[0] - np.timedelta64(3600, "s")),
        f,
        params,
        1,
        threads=1,
        zones=(np.zeros(1, dtype=np.int64), np.ones(1)),
    )


@dataclass
class _RunPlan:
    """What a run prepares before it writes anything: the region, the forcing, the cells'
    start state, the simulated hours and the chunks, and the chunk tasks' context."""

    region: Region
    grid_forcing: object
    table: pd.DataFrame  # the cell table of the outputs (cells_frame)
    fingerprints: dict  # the DEM's and zones' fingerprints, stored with the states
    state0: SnowState
    period: Period
    out_times: np.ndarray  # (time,) datetime64[s] output times
    map_time: np.datetime64
    chunks: list
    kept_times: np.ndarray | None  # checkpoint times (None: no checkpoints)
    ctx: RunContext

    @property
    def map_is_forecast(self) -> bool:
        """The map time lies in the forecast part of the period."""
        return bool(self.period.has_forecast and self.map_time > self.period.analysis_end)


def execute(
    cfg: Config,
    *,
    out_dir: Path | None = None,
    continue_from: Path | None = None,
    workers: int | None = None,
    scheduler: str | None = None,
    dashboard: bool = False,
    scheduler_security: Path | None = None,
    force: bool = False,
    progress: bool = True,
    restarts=(),
    extra_files: dict | None = None,
    report: bool = True,
    use_cache: bool = True,
) -> RunOutcome:
    """Run the chain for ``cfg`` and write every output listed in docs/outputs.md.

    Parameters
    ----------
    cfg : validated config.
    out_dir : overrides ``[output] dir``.
    continue_from : a ``state.nc`` of an earlier run of the same region and settings.
    workers, scheduler, dashboard, scheduler_security : dask set-up (see
        :func:`regionmap.pipeline.cluster.dask_client`).
    force : allow replacing a non-empty folder that is not a regionmap output.
    progress : show a progress bar.
    restarts : observed-profile restarts (see :mod:`regionmap.pipeline.restart`).
    extra_files : relative name → file copied into the output folder (the demo's inputs).
    report : write the figures and ``report.html`` (tests of the numbers skip them).
    use_cache : load the prepared region from the preparation cache and store it there
        (:mod:`regionmap.pipeline.cache`); False prepares it afresh and stores nothing.
    """
    t_all = _time.perf_counter()
    timings: dict = {}
    target = Path(out_dir or cfg.output.dir)
    check_inputs_outside(target, run_inputs(cfg, continue_from, restarts))
    cache = preparation_cache(cfg) if use_cache else None
    plan = _plan_run(cfg, continue_from, restarts, workers, scheduler, cache, timings)
    check_free_space(target, _expected_bytes(plan))
    register_forcing(plan.ctx, plan.grid_forcing)
    t0 = _time.perf_counter()
    _warm_kernels(cfg.snow)
    timings["kernel_warm"] = _time.perf_counter() - t0
    cluster = {
        "workers": workers,
        "scheduler": scheduler,
        "dashboard": dashboard,
        "scheduler_security": scheduler_security,
    }
    with OutputFolder(target, force=force) as folder:
        out = folder.path
        totals = _simulate_into(out, plan, cluster, progress, timings)
        t0 = _time.perf_counter()
        ensemble = rain_crust_ensemble(out, plan.ctx, plan.state0, plan.table, plan.map_time)
        products = write_products(
            out,
            cfg,
            plan.region,
            map_time=plan.map_time,
            is_forecast=plan.map_is_forecast,
            ensemble_members=ensemble.members,
            ensemble_rain_share=ensemble.rain_share,
        )
        timings["products"] = _time.perf_counter() - t0
        shutil.rmtree(out / CHECKPOINT_FOLDER, ignore_errors=True)
        timings["total"] = _time.perf_counter() - t_all
        record = run_record(
            cfg,
            region=plan.region,
            grid_forcing=plan.grid_forcing,
            period=plan.period,
            map_time=plan.map_time,
            totals=totals,
            timings=timings,
            continue_from=continue_from,
            ensemble_cost=ensemble.cost,
            scheduler={
                "kind": "cluster" if scheduler else ("processes" if workers else "threads"),
                "workers": workers,
                "address": scheduler,
                "chunks": len(plan.chunks),
                "chunk_size": cfg.run.chunk_size,
            },
        )
        record["preparation_cache"] = {
            "dir": str(cache.folder) if cache else None,
            "region": "loaded" if "region_from_cache" in plan.region.timings_s else "prepared",
        }
        _finish_folder(out, cfg, plan, record, extra_files, report)
    return RunOutcome(
        target,
        products.zones,
        products.sentences,
        plan.map_time,
        plan.map_is_forecast,
        plan.ctx.batch.n_cells,
        _time.perf_counter() - t_all,
        cfg.output.local_timezone,
        cfg.region.invented_data,
    )


def _plan_run(
    cfg: Config, continue_from, restarts, workers, scheduler, cache, timings: dict
) -> _RunPlan:
    """Everything before the first output: the region, the forcing and the weights, the
    start state (a continuation aligned to this run's cells, else snow-free), the simulated
    hours and the map time, the restarts, the chunks and their checkpoint times."""
    state0 = None
    if continue_from is not None:  # read and checked before the long work
        state0, saved_cells, saved_region = load_state_with_identity(continue_from)
    region = prepare_region(cfg, progress=False, cache=cache)
    timings.update(region.timings_s)
    t0 = _time.perf_counter()
    gf = open_grid_forcing(cfg)
    batch = prepare_batch(region, gf, cfg, cache=cache)
    qm_tables = quantile_tables(cfg)
    timings["forcing_open_and_weights"] = _time.perf_counter() - t0
    diag_every = cfg.output.diagnostics_every_h
    fingerprints = region_fingerprints(region.dem, region.zones)
    table = cells_frame(region)
    if state0 is not None:
        where = str(continue_from)
        state0 = align_state(
            state0, saved_cells, saved_region, table, fingerprints, cfg.snow, where
        )
    analysis_time = cfg.forcing.analysis_time
    period = plan_period(
        gf.time,
        state_time=None if state0 is None else state0.time,
        analysis_time=analysis_time.replace(tzinfo=None) if analysis_time else None,
        diag_every_h=diag_every,
        where=str(cfg.forcing.path),
    )
    if state0 is None:
        state0 = initial_state(batch, cfg.snow, period)
    sim_times = period.times[period.first : period.stop]
    resolved = (
        resolve_restarts(
            restarts,
            table,
            sim_times,
            diag_every_h=diag_every,
            max_layers=cfg.snow.max_layers,
        )
        if restarts
        else []
    )
    out_times = sim_times[diag_every - 1 :: diag_every]
    map_time = _map_time(cfg, out_times, period)
    n_par = max(1, workers or (os.cpu_count() or 1))
    chunks = chunk_ranges(
        batch.n_cells,
        _effective_chunk_size(batch.n_cells, cfg.run.chunk_size, n_par),
        batch.zone_code if cfg.snow.wind_transport else None,  # transport: whole zones
    )
    # workers of a remote cluster cannot write into this machine's folders: there the
    # ensemble steps its cells from the run's start state instead
    kept_times = (
        None
        if scheduler
        else checkpoint_times(
            state0.time, period.stop - period.first, diag_every, [r.time for r in resolved]
        )
    )
    ctx = RunContext(
        cfg=cfg,
        batch=batch,
        quantile_tables=qm_tables,
        period=period,
        diag_every_h=diag_every,
        snapshot_hour_utc=int((map_time.astype("datetime64[h]").astype(np.int64)) % 24),
        kernel_threads=1
        if (workers or scheduler)
        else max(1, n_par // max(1, min(len(chunks), n_par))),
        restarts=resolved,
    )
    return _RunPlan(
        region,
        gf,
        table,
        fingerprints,
        state0,
        period,
        out_times,
        map_time,
        chunks,
        kept_times,
        ctx,
    )


def _expected_bytes(plan: _RunPlan) -> int:
    """:func:`expected_output_bytes` of a planned run."""
    n_sim_hours = plan.period.stop - plan.period.first
    return expected_output_bytes(
        plan.ctx.batch.n_cells,
        plan.out_times.size,
        n_sim_hours // 24 + 1,
        0 if plan.kept_times is None else plan.kept_times.size,
        plan.state0.nbytes_per_cell(),
    )


def _simulate_into(out: Path, plan: _RunPlan, cluster: dict, progress: bool, timings: dict):
    """Send the chunk tasks through dask and stream each finished chunk into ``cells.nc``
    and ``profiles.nc``; then write ``events.csv``, ``state.nc`` and ``state_end.nc``.
    Returns the chunks' :class:`regionmap.pipeline.record.RunTotals`."""
    if plan.kept_times is not None:
        # inside the run's temporary output folder: an interrupted run leaves none behind
        (out / CHECKPOINT_FOLDER).mkdir()
        plan.ctx.checkpoints = Checkpoints(str(out / CHECKPOINT_FOLDER), plan.kept_times)
    t0 = _time.perf_counter()
    states = {"state.nc": plan.state0.copy(), "state_end.nc": plan.state0.copy()}
    totals = RunTotals()
    period = plan.period
    is_fc = (
        plan.out_times > period.analysis_end
        if period.has_forecast
        else np.zeros(plan.out_times.size, bool)
    )
    interval_start = plan.out_times - np.timedelta64(3600 * plan.ctx.diag_every_h, "s")
    cells_w = CellsNcWriter(
        out / "cells.nc",
        plan.table,
        plan.out_times,
        interval_start,
        is_fc,
        global_attrs={"map_time": str(plan.map_time)},
    )
    prof_w = None
    write_s = 0.0  # cells.nc and profiles.nc, in this thread while chunks run
    try:
        with contextlib.closing(_finished_chunks(plan, cluster, progress)) as finished:
            for res in finished:
                t_w = _time.perf_counter()
                cells = np.arange(res["lo"], res["hi"])
                cells_w.write_chunk(cells, res["diagnostics"])
                snaps = res["snapshots"]
                if prof_w is None:
                    max_layers = plan.ctx.cfg.snow.max_layers
                    prof_w = ProfilesNcWriter(
                        out / "profiles.nc", plan.table, snaps["time"], max_layers, LAYER_VARS
                    )
                prof_w.write_chunk(cells, snaps["layer_count"], _profile_fields(snaps))
                write_s += _time.perf_counter() - t_w
                states["state.nc"].put(res["lo"], res["hi"], res["state_analysis"])
                states["state_end.nc"].put(res["lo"], res["hi"], res["state_end"])
                totals.add(res)
        cells_w.close()
        prof_w.close()
    except BaseException:
        cells_w.abort()
        if prof_w is not None:
            prof_w.abort()
        raise
    timings["simulate"] = _time.perf_counter() - t0
    write_event_log(out / "events.csv", totals.events, plan.table)
    for name, state in states.items():
        state.save(out / name, cells=plan.table, region=plan.fingerprints)
    # summed over chunk tasks (wall time inside each task; tasks run side by side)
    timings["task_downscale_s"] = totals.task_seconds["downscale"]
    timings["task_column_s"] = totals.task_seconds["column"]
    timings["write_s"] = write_s
    return totals


def _finished_chunks(plan: _RunPlan, cluster: dict, progress: bool):
    """The chunk tasks' results as they finish (a dask client made for the run)."""
    from distributed import as_completed
    from tqdm.auto import tqdm

    with dask_client(
        cluster["workers"],
        cluster["scheduler"],
        dashboard=cluster["dashboard"],
        scheduler_security=cluster["scheduler_security"],
    ) as client:
        # the context as a task, not scattered data: when a worker dies, the scheduler can
        # make it again for the worker that takes over its chunks
        ctx_f = client.submit(_context, plan.ctx, pure=False, key="run-context")
        futures = [
            client.submit(
                simulate_chunk,
                ctx_f,
                lo,
                hi,
                plan.state0.take(slice(lo, hi)),
                pure=False,
                key=f"chunk-{lo}-{hi}",
            )
            for lo, hi in plan.chunks
        ]
        with tqdm(
            total=len(futures), desc="cell chunks", unit="chunk", disable=not progress
        ) as bar:
            for fut in as_completed(futures):
                with cluster_errors(f"cell chunk {fut.key}"):
                    res = fut.result()
                yield res
                bar.update(1)
                fut.release()


def _finish_folder(out: Path, cfg: Config, plan: _RunPlan, record: dict, extra_files, report):
    """The last files of a run: the extra files (the demo's inputs), ``run.json``, the
    verification of the last day at the stations and the report (its time added to
    ``run.json``)."""
    for name, src in (extra_files or {}).items():
        dst = out / name
        dst.parent.mkdir(parents=True, exist_ok=True)
        shutil.copy2(src, dst)
    atomic_write_text(out / "run.json", json.dumps(record, indent=2, default=str))
    if cfg.stations is not None:
        run_verification_last_day(
            cfg, plan.region, out, plan.map_time, grid_forcing=plan.grid_forcing
        )
    if report:
        from regionmap.report.briefing import write_report

        t0 = _time.perf_counter()
        write_report(out)
        record["timings_s"]["report"] = round(_time.perf_counter() - t0, 3)
        atomic_write_text(out / "run.json", json.dumps(record, indent=2, default=str))


def _profile_fields(snaps: dict) -> dict:
    """Snapshot arrays in profiles.nc form (codes as fixed-width byte strings, unused slots
    empty; looked up from the code tables, so no per-element string conversion)."""
    used = (
        np.arange(snaps["thickness_m"].shape[2])[None, None, :] < snaps["layer_count"][:, :, None]
    )
    out = {
        k: snaps[k]
        for k in (
            "thickness_m",
            "ice_kg_m2",
            "liquid_kg_m2",
            "temperature_k",
            "grain_size_mm",
            "hardness_index",
            "deposition_time",
            "formation_time",
            "event_id",
            "wind_packed",
        )
    }
    for name, table, codes in (
        ("grain_class", GRAIN_CODES, snaps["grain_code"]),
        ("crust_kind", CRUST_KINDS, snaps["crust_code"]),
    ):
        text = np.array(table, dtype=LAYER_VARS[name][0])[np.asarray(codes, dtype=np.intp)]
        out[name] = np.where(used, text, b"")
    return out

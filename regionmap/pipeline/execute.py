"""The whole chain for one config: region, forcing, chunks through dask, outputs, run record.

``execute`` is what ``regionmap run`` and ``regionmap demo`` call. Outputs go into a
temporary folder beside the target that replaces the old output folder only when complete
(:class:`regionmap.io.outdir.OutputFolder`).
"""

from __future__ import annotations

import contextlib
import datetime as dt
import glob
import hashlib
import json
import os
import platform
import shutil
import time as _time
from dataclasses import dataclass
from importlib import metadata
from pathlib import Path

import numpy as np
import pandas as pd

from regionmap import CAUTION, __version__
from regionmap.cells import region_fingerprints
from regionmap.config import Config
from regionmap.downscale.pipeline import downscale_cells, downscale_record
from regionmap.downscale.types import CellForcing
from regionmap.errors import InputError, OutputError
from regionmap.io.atomic import atomic_write_text
from regionmap.io.outdir import OutputFolder, check_inputs_outside
from regionmap.io.results import PROFILES_CHUNK_CELLS, CellsNcWriter, ProfilesNcWriter
from regionmap.io.writers import write_csv
from regionmap.pipeline.cache import file_sha256, preparation_cache
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
from regionmap.pipeline.plan import chunk_ranges, plan_period
from regionmap.pipeline.region import (
    cells_frame,
    open_grid_forcing,
    prepare_batch,
    prepare_region,
    quantile_tables,
)
from regionmap.pipeline.restart import merge_restart_records, resolve_restarts
from regionmap.products.summaries import observation_times
from regionmap.products.write import write_products
from regionmap.snow.codes import CRUST_KINDS, GRAIN_CODES
from regionmap.snow.column import run_columns
from regionmap.snow.state import SnowState, load_state_with_identity
from regionmap.stations.chain import run_verification_last_day

__all__ = ["RunOutcome", "execute", "dask_client", "LAYER_VARS"]

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
            "long_name": "grain class (International Classification for Seasonal Snow on the Ground codes)"
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
            "long_name": "when the layer became what it is (burial of SH, refreeze of a crust, else deposition)",
        },
    ),
    "event_id": (
        "i4",
        {
            "units": "1",
            "long_name": "id of the precipitation event that made the layer or its crust: its start as whole hours since 1970-01-01 UTC",
        },
    ),
}

#: The chunk tasks' saved control states, inside the run's temporary output folder.
CHECKPOINT_FOLDER = ".checkpoints"

_VERSIONS = (
    "numpy",
    "numba",
    "xarray",
    "dask",
    "distributed",
    "netCDF4",
    "rasterio",
    "geopandas",
    "pyproj",
    "shapely",
    "pandas",
    "scipy",
    "matplotlib",
)


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
    """Every file a run reads as (what, path), for :func:`regionmap.io.outdir.check_inputs_outside`."""
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


def _versions() -> dict:
    out = {"regionmap": __version__, "python": platform.python_version()}
    for name in _VERSIONS:
        with contextlib.suppress(metadata.PackageNotFoundError):
            out[name] = metadata.version(name)
    return out


def _map_time(cfg: Config, out_times: np.ndarray, period) -> np.datetime64:
    """The map time: ``[output] map_time``, else the morning observation of the analysis day
    (:func:`default_map_time`)."""
    if cfg.output.map_time is not None:
        want = np.datetime64(cfg.output.map_time.replace(tzinfo=None), "s")
        if want not in out_times:
            raise InputError(
                f"{cfg.source or 'config'}: [output] map_time {want} is not an output time of this run "
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
    """Compile (or load from the numba cache) the column kernel once in the client."""
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
    )
    run_columns(
        SnowState.empty(1, params.max_layers, time=t[0] - np.timedelta64(3600, "s")),
        f,
        params,
        1,
        threads=1,
    )


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
    from tqdm.auto import tqdm

    t_all = _time.perf_counter()
    timings: dict = {}
    target = Path(out_dir or cfg.output.dir)
    check_inputs_outside(target, run_inputs(cfg, continue_from, restarts))
    state0 = None
    if continue_from is not None:  # read and checked before the long work
        state0, saved_cells, saved_region = load_state_with_identity(continue_from)
    cache = preparation_cache(cfg) if use_cache else None
    region = prepare_region(cfg, progress=False, cache=cache)
    timings.update(region.timings_s)
    t0 = _time.perf_counter()
    gf = open_grid_forcing(cfg)
    batch = prepare_batch(region, gf, cfg, cache=cache)
    qm_tables = quantile_tables(cfg)
    timings["forcing_open_and_weights"] = _time.perf_counter() - t0
    params = cfg.snow
    diag_every = cfg.output.diagnostics_every_h

    fingerprints = region_fingerprints(region.dem, region.zones)
    table = cells_frame(region)
    if continue_from is not None:
        state0 = align_state(
            state0, saved_cells, saved_region, table, fingerprints, params, str(continue_from)
        )
    period = plan_period(
        gf.time,
        state_time=None if state0 is None else state0.time,
        analysis_time=cfg.forcing.analysis_time.replace(tzinfo=None)
        if cfg.forcing.analysis_time
        else None,
        diag_every_h=diag_every,
        where=str(cfg.forcing.path),
    )
    if state0 is None:
        state0 = initial_state(batch, params, period)
    resolved = []
    if restarts:
        resolved = resolve_restarts(
            restarts,
            cells_frame(region),
            period.times[period.first : period.stop],
            diag_every_h=diag_every,
            max_layers=params.max_layers,
        )

    sim_times = period.times[period.first : period.stop]
    out_times = sim_times[diag_every - 1 :: diag_every]
    map_time = _map_time(cfg, out_times, period)
    snapshot_hour = int((map_time.astype("datetime64[h]").astype(np.int64)) % 24)
    n_par = max(1, workers or (os.cpu_count() or 1))
    chunks = chunk_ranges(
        batch.n_cells,
        _effective_chunk_size(batch.n_cells, cfg.run.chunk_size, n_par),
        batch.zone_code if cfg.downscale.drift else None,
    )  # drift: whole zones per chunk
    # workers of a remote cluster cannot write into this machine's folders: there the
    # ensemble steps its cells from the run's start state instead
    kept_times = (
        None
        if scheduler
        else checkpoint_times(
            state0.time, period.stop - period.first, diag_every, [r.time for r in resolved]
        )
    )
    check_free_space(
        target,
        expected_output_bytes(
            batch.n_cells,
            out_times.size,
            sim_times.size // 24 + 1,
            0 if kept_times is None else kept_times.size,
            state0.nbytes_per_cell(),
        ),
    )
    ctx = RunContext(
        cfg=cfg,
        batch=batch,
        quantile_tables=qm_tables,
        period=period,
        diag_every_h=diag_every,
        snapshot_hour_utc=snapshot_hour,
        kernel_threads=max(1, n_par // max(1, min(len(chunks), n_par)))
        if not (workers or scheduler)
        else 1,
        restarts=resolved,
    )
    register_forcing(ctx, gf)
    t0 = _time.perf_counter()
    _warm_kernels(params)
    timings["kernel_warm"] = _time.perf_counter() - t0

    is_fc = (
        out_times > period.analysis_end if period.has_forecast else np.zeros(out_times.size, bool)
    )
    interval_start = out_times - np.timedelta64(3600 * diag_every, "s")
    state_an = state0.copy()
    state_end = state0.copy()
    events: list[dict] = []
    forcing_sums = {"precip_kg_m2": 0.0, "snowfall_kg_m2": 0.0, "freezing_rain_kg_m2": 0.0}
    task_seconds = {"downscale": 0.0, "column": 0.0}
    write_seconds = 0.0  # cells.nc and profiles.nc, in this thread while chunks run
    status_bits = 0
    restart_records: list = []

    with OutputFolder(target, force=force) as folder:
        out = folder.path
        if kept_times is not None:
            # inside the run's temporary output folder: an interrupted run leaves none behind
            (out / CHECKPOINT_FOLDER).mkdir()
            ctx.checkpoints = Checkpoints(str(out / CHECKPOINT_FOLDER), kept_times)
        cells_w = CellsNcWriter(
            out / "cells.nc",
            table,
            out_times,
            interval_start,
            is_fc,
            global_attrs={"map_time": str(map_time)},
        )
        prof_w = None
        try:
            t0 = _time.perf_counter()
            with dask_client(
                workers, scheduler, dashboard=dashboard, scheduler_security=scheduler_security
            ) as client:
                # the context as a task, not scattered data: when a worker dies, the
                # scheduler can make it again for the worker that takes over its chunks
                ctx_f = client.submit(_context, ctx, pure=False, key="run-context")
                futures = [
                    client.submit(
                        simulate_chunk,
                        ctx_f,
                        lo,
                        hi,
                        state0.take(slice(lo, hi)),
                        pure=False,
                        key=f"chunk-{lo}-{hi}",
                    )
                    for lo, hi in chunks
                ]
                from distributed import as_completed

                bar = tqdm(
                    total=len(futures), desc="cell chunks", unit="chunk", disable=not progress
                )
                for fut in as_completed(futures):
                    with cluster_errors(f"cell chunk {fut.key}"):
                        res = fut.result()
                    lo, hi = res["lo"], res["hi"]
                    t_w = _time.perf_counter()
                    cells_w.write_chunk(np.arange(lo, hi), res["diagnostics"])
                    snaps = res["snapshots"]
                    if prof_w is None:
                        prof_w = ProfilesNcWriter(
                            out / "profiles.nc",
                            table,
                            snaps["time"],
                            params.max_layers,
                            LAYER_VARS,
                        )
                    prof_w.write_chunk(
                        np.arange(lo, hi), snaps["layer_count"], _profile_fields(snaps)
                    )
                    write_seconds += _time.perf_counter() - t_w
                    state_an.put(lo, hi, res["state_analysis"])
                    state_end.put(lo, hi, res["state_end"])
                    events.append(_events_of(res["diagnostics"], lo))
                    for k in forcing_sums:
                        forcing_sums[k] += res["forcing_summary"][k]
                    for k in task_seconds:
                        task_seconds[k] += res["seconds"][k]
                    status_bits |= int(np.bitwise_or.reduce(res["diagnostics"]["status"]))
                    restart_records += res["restart_records"]
                    bar.update(1)
                    fut.release()
                bar.close()
            timings["simulate"] = _time.perf_counter() - t0
            cells_w.close()
            prof_w.close()
        except BaseException:
            cells_w.abort()
            if prof_w is not None:
                prof_w.abort()
            raise
        _write_event_log(out / "events.csv", events, table)
        state_an.save(out / "state.nc", cells=table, region=fingerprints)
        state_end.save(out / "state_end.nc", cells=table, region=fingerprints)
        t0 = _time.perf_counter()
        ensemble = rain_crust_ensemble(out, ctx, state0, table, map_time)
        products = write_products(
            out,
            cfg,
            region,
            map_time=map_time,
            is_forecast=bool(map_time > period.analysis_end) if period.has_forecast else False,
            ensemble_members=ensemble.members,
        )
        timings["products"] = _time.perf_counter() - t0
        shutil.rmtree(out / CHECKPOINT_FOLDER, ignore_errors=True)
        # summed over chunk tasks (wall time inside each task; tasks run side by side)
        timings["task_downscale_s"] = task_seconds["downscale"]
        timings["task_column_s"] = task_seconds["column"]
        timings["write_s"] = write_seconds
        timings["total"] = _time.perf_counter() - t_all

        record = _run_record(
            cfg,
            region,
            gf,
            params,
            period,
            map_time,
            timings,
            forcing_sums,
            events,
            status_bits,
            continue_from,
            merge_restart_records(restart_records),
            ensemble.cost,
            workers=workers,
            scheduler=scheduler,
            chunks=len(chunks),
        )
        record["preparation_cache"] = {
            "dir": str(cache.folder) if cache else None,
            "region": "loaded" if "region_from_cache" in region.timings_s else "prepared",
        }
        for name, src in (extra_files or {}).items():
            dst = out / name
            dst.parent.mkdir(parents=True, exist_ok=True)
            shutil.copy2(src, dst)
        atomic_write_text(out / "run.json", json.dumps(record, indent=2, default=str))
        if cfg.stations is not None:
            run_verification_last_day(cfg, region, out, map_time, grid_forcing=gf)
        if report:
            from regionmap.report.briefing import write_report

            t0 = _time.perf_counter()
            write_report(out)
            record["timings_s"]["report"] = round(_time.perf_counter() - t0, 3)
            atomic_write_text(out / "run.json", json.dumps(record, indent=2, default=str))
    return RunOutcome(
        target,
        products.zones,
        products.sentences,
        map_time,
        bool(period.has_forecast and map_time > period.analysis_end),
        batch.n_cells,
        _time.perf_counter() - t_all,
        cfg.output.local_timezone,
        cfg.region.invented_data,
    )


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
        )
    }
    for name, table, codes in (
        ("grain_class", GRAIN_CODES, snaps["grain_code"]),
        ("crust_kind", CRUST_KINDS, snaps["crust_code"]),
    ):
        text = np.array(table, dtype=LAYER_VARS[name][0])[np.asarray(codes, dtype=np.intp)]
        out[name] = np.where(used, text, b"")
    return out


def _events_of(diag: dict, lo: int) -> dict:
    return {
        "kind": diag["event_kind"],
        "event_id": diag["event_id"],
        "cell": diag["event_cell"] + lo,
        "first_time": diag["event_first_time"],
        "last_time": diag["event_last_time"],
        "amount_kg_m2": diag["event_amount_kg_m2"],
    }


def _event_frame(events: list[dict], table=None):
    cols = ["kind", "event_id", "cell", "first_time", "last_time", "amount_kg_m2"]
    if not events:
        return pd.DataFrame(columns=cols)
    frame = pd.DataFrame({k: np.concatenate([e[k] for e in events]) for k in cols})
    if table is not None and not frame.empty:
        frame["cell_id"] = table.index.to_numpy()[frame["cell"].to_numpy(int)]
        for col in ("zone", "band_lower_m", "band_upper_m", "aspect_sector"):
            frame[col] = table[col].to_numpy()[frame["cell"].to_numpy(int)]
    return frame


def _write_event_log(path: Path, events: list[dict], table) -> None:
    """``events.csv``: one row per rain-on-snow or freezing-rain event and cell."""
    frame = _event_frame(events, table).sort_values(["first_time", "cell"], kind="stable")
    write_csv(path, frame.drop(columns="cell"))


def _event_log(events: list[dict]) -> list[dict]:
    """Region-wide event list: one row per (kind, event id) with cells and amounts."""
    frame = _event_frame(events)
    if frame.empty:
        return []
    g = frame.groupby(["kind", "event_id"])
    out = g.agg(
        first_time=("first_time", "min"),
        last_time=("last_time", "max"),
        cells=("cell", "nunique"),
        mean_amount_kg_m2=("amount_kg_m2", "mean"),
        max_amount_kg_m2=("amount_kg_m2", "max"),
    ).reset_index()
    return json.loads(out.to_json(orient="records", date_format="iso"))


def _run_record(
    cfg,
    region,
    gf,
    params,
    period,
    map_time,
    timings,
    forcing_sums,
    events,
    status_bits,
    continue_from,
    restart_record,
    ensemble_cost,
    *,
    workers,
    scheduler,
    chunks,
) -> dict:
    inputs = {
        "dem": cfg.region.dem,
        "zones": cfg.region.zones,
        **{f"forcing[{i}]": p for i, p in enumerate(gf.paths)},
    }
    if continue_from is not None:
        inputs["continue_from"] = continue_from
    checksums = {
        k: {"path": str(p), "sha256": file_sha256(p)}
        for k, p in inputs.items()
        if Path(p).is_file()
    }
    settings_text = json.dumps(cfg.model_dump(mode="json", exclude={"output"}), sort_keys=True)
    return {
        "regionmap": __version__,
        "caution": CAUTION,
        "invented_data": cfg.region.invented_data,
        "created_utc": dt.datetime.now(dt.UTC).isoformat(timespec="seconds"),
        "config_file": str(cfg.source) if cfg.source else None,
        "config": cfg.model_dump(mode="json"),
        "versions": _versions(),
        "inputs": checksums,
        "cell_count": int(len(region.cells.table)),
        "small_cells": int(region.cells.table["small"].sum())
        if "small" in region.cells.table
        else 0,
        "period": {
            "first_step": str(period.times[period.first]),
            "last_step": str(period.times[period.stop - 1]),
            "analysis_end": str(period.analysis_end),
            "has_forecast": bool(period.has_forecast),
            "map_time": str(map_time),
            "continued_from": str(continue_from) if continue_from else None,
        },
        "forcing": {
            "counts": {
                k: (int(v) if isinstance(v, (int, np.integer)) else v) for k, v in gf.counts.items()
            },
            "heights_m": gf.heights_m,
            "heights_source": gf.heights_source,
            "downscaling": downscale_record(gf, cfg.downscale),
            "cell_totals_kg_m2": forcing_sums,
        },
        "snow": {
            "params": {
                k: (v if not isinstance(v, float) else float(v))
                for k, v in params.model_dump().items()
            },
            "kernel_status_bits": status_bits,
        },
        "events": _event_log(events),
        "restarts": restart_record,
        "rain_crust_ensemble": ensemble_cost,
        "settings_fingerprint": hashlib.sha256(settings_text.encode()).hexdigest()[:16],
        "snow_fingerprint": params.fingerprint(),
        "scheduler": {
            "kind": "cluster" if scheduler else ("processes" if workers else "threads"),
            "workers": workers,
            "address": scheduler,
            "chunks": chunks,
            "chunk_size": cfg.run.chunk_size,
        },
        "timings_s": {k: round(float(v), 3) for k, v in timings.items()},
    }


#: ``regionmap forcing`` variables: CellForcing field → (dtype, CF attributes).
FORCING_VARS = {
    "t_air_k": ("f4", {"standard_name": "air_temperature", "units": "K"}),
    "rh_frac": ("f4", {"standard_name": "relative_humidity", "units": "1"}),
    "pressure_pa": ("f4", {"standard_name": "surface_air_pressure", "units": "Pa"}),
    "wind_m_s": ("f4", {"standard_name": "wind_speed", "units": "m s-1"}),
    "sw_in_w_m2": (
        "f4",
        {
            "standard_name": "surface_downwelling_shortwave_flux_in_air",
            "units": "W m-2",
            "long_name": "incoming shortwave on the sloping cell, shaded, interval mean",
            "cell_methods": "time: mean",
        },
    ),
    "lw_in_w_m2": (
        "f4",
        {
            "standard_name": "surface_downwelling_longwave_flux_in_air",
            "units": "W m-2",
            "cell_methods": "time: mean",
        },
    ),
    "precip_kg_m2": (
        "f4",
        {"standard_name": "precipitation_amount", "units": "kg m-2", "cell_methods": "time: sum"},
    ),
    "snow_frac": ("f4", {"units": "1", "long_name": "solid fraction of the precipitation"}),
    "freezing_rain_frac": (
        "f4",
        {"units": "1", "long_name": "fraction of the precipitation falling as freezing rain"},
    ),
}


def write_cell_forcing(
    cfg: Config, out_dir: Path, *, force: bool = False, progress: bool = True
) -> Path:
    """``regionmap forcing``: the downscaled hourly forcing of every cell as CF NetCDF
    (``forcing.nc``, dims cell × time), written chunk by chunk into an atomic output folder."""
    from tqdm.auto import tqdm

    check_inputs_outside(out_dir, run_inputs(cfg))
    cache = preparation_cache(cfg)
    region = prepare_region(cfg, cache=cache)
    gf = open_grid_forcing(cfg)
    batch = prepare_batch(region, gf, cfg, cache=cache)
    qm_tables = quantile_tables(cfg)
    times = np.asarray(gf.time, dtype="datetime64[s]")
    analysis = (
        np.datetime64(cfg.forcing.analysis_time.replace(tzinfo=None), "s")
        if cfg.forcing.analysis_time
        else None
    )
    is_fc = times > analysis if analysis is not None else np.zeros(times.size, bool)
    table = cells_frame(region)
    with OutputFolder(out_dir, force=force) as folder:
        writer = CellsNcWriter(
            folder.path / "forcing.nc",
            table,
            times,
            times - np.timedelta64(3600, "s"),
            is_fc,
            variables=FORCING_VARS,
            title="regionmap downscaled per-cell forcing",
            global_attrs={
                "downscaling": json.dumps(downscale_record(gf, cfg.downscale), default=str),
                "wind_height_m": float(gf.heights_m["wind"]),
                "temperature_height_m": float(gf.heights_m["temperature"]),
            },
        )
        try:
            groups = (
                batch.zone_code if cfg.downscale.drift else None
            )  # drift: whole zones per chunk
            for lo, hi in tqdm(
                chunk_ranges(batch.n_cells, cfg.run.chunk_size, groups),
                desc="cell chunks",
                unit="chunk",
                disable=not progress,
            ):
                f = downscale_cells(
                    gf,
                    batch.subset(np.arange(lo, hi)),
                    cfg.downscale,
                    bias=cfg.bias,
                    quantile_tables=qm_tables,
                )
                writer.write_chunk(
                    np.arange(lo, hi), {name: getattr(f, name) for name in FORCING_VARS}
                )
            writer.close()
        except BaseException:
            writer.abort()
            raise
    return Path(out_dir) / "forcing.nc"

"""A run's record: the event log (``events.csv`` and its region-wide summary) and ``run.json``
(settings, versions, input checksums, counts, timings)."""

from __future__ import annotations

import contextlib
import datetime as dt
import hashlib
import json
import platform
from dataclasses import dataclass, field
from importlib import metadata
from pathlib import Path

import numpy as np
import pandas as pd

from regionmap import CAUTION, __version__
from regionmap.config import Config
from regionmap.downscale.pipeline import downscale_record
from regionmap.io.writers import write_csv
from regionmap.pipeline.cache import file_sha256
from regionmap.pipeline.restart import merge_restart_records

__all__ = ["RunTotals", "write_event_log", "event_log", "run_record", "wind_transport_record"]

#: Libraries whose versions the run record names.
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
_EVENT_COLUMNS = ["kind", "event_id", "cell", "first_time", "last_time", "amount_kg_m2"]


@dataclass
class RunTotals:
    """What the finished chunk tasks add up to, for the run record: the event log, the cells'
    forcing sums, the tasks' timings, the kernel's status bits and the restarts applied."""

    events: list = field(default_factory=list)
    forcing_sums: dict = field(
        default_factory=lambda: dict.fromkeys(
            ("precip_kg_m2", "snowfall_kg_m2", "freezing_rain_kg_m2"), 0.0
        )
    )
    task_seconds: dict = field(default_factory=lambda: {"downscale": 0.0, "column": 0.0})
    status_bits: int = 0
    restart_records: list = field(default_factory=list)
    #: {zone code: {eroded, deposited, shortfall}} wind transport [kg]
    wind_transport_kg: dict = field(default_factory=dict)

    def add(self, result: dict) -> None:
        """Add one chunk task's result (:func:`regionmap.pipeline.chunk.simulate_chunk`)."""
        self.events.append(_chunk_events(result["diagnostics"], result["lo"]))
        for k in self.forcing_sums:
            self.forcing_sums[k] += result["forcing_summary"][k]
        for k in self.task_seconds:
            self.task_seconds[k] += result["seconds"][k]
        self.status_bits |= int(np.bitwise_or.reduce(result["diagnostics"]["status"]))
        self.restart_records += result["restart_records"]
        for code, amounts in result["wind_transport_kg"].items():
            mine = self.wind_transport_kg.setdefault(code, dict.fromkeys(amounts, 0.0))
            for key, kg in amounts.items():
                mine[key] += kg


def _chunk_events(diag: dict, lo: int) -> dict:
    """The event log of a chunk task's diagnostics, its cells counted from ``lo``."""
    return {
        "kind": diag["event_kind"],
        "event_id": diag["event_id"],
        "cell": diag["event_cell"] + lo,
        "first_time": diag["event_first_time"],
        "last_time": diag["event_last_time"],
        "amount_kg_m2": diag["event_amount_kg_m2"],
    }


def _event_frame(events: list[dict], table=None) -> pd.DataFrame:
    if not events:
        return pd.DataFrame(columns=_EVENT_COLUMNS)
    frame = pd.DataFrame({k: np.concatenate([e[k] for e in events]) for k in _EVENT_COLUMNS})
    if table is not None and not frame.empty:
        frame["cell_id"] = table.index.to_numpy()[frame["cell"].to_numpy(int)]
        for col in ("zone", "band_lower_m", "band_upper_m", "aspect_sector"):
            frame[col] = table[col].to_numpy()[frame["cell"].to_numpy(int)]
    return frame


def write_event_log(path: Path, events: list[dict], table) -> None:
    """``events.csv``: one row per rain-on-snow or freezing-rain event and cell."""
    frame = _event_frame(events, table).sort_values(["first_time", "cell"], kind="stable")
    write_csv(path, frame.drop(columns="cell"))


def event_log(events: list[dict]) -> list[dict]:
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


def _versions() -> dict:
    out = {"regionmap": __version__, "python": platform.python_version()}
    for name in _VERSIONS:
        with contextlib.suppress(metadata.PackageNotFoundError):
            out[name] = metadata.version(name)
    return out


def wind_transport_record(kg_by_zone: dict, zone_names, on: bool) -> dict:
    """run.json's ``wind_transport``: per zone (``kg_by_zone`` keyed by the zone's position in
    ``zone_names``) eroded, deposited, residual (deposited - eroded: the mass the zone
    gained) and the shortfall that explains it [t]."""
    zones = {}
    for code, kg in sorted(kg_by_zone.items()):
        zones[str(zone_names[code])] = {
            "eroded_t": round(kg["eroded"] / 1000.0, 3),
            "deposited_t": round(kg["deposited"] / 1000.0, 3),
            "residual_t": round((kg["deposited"] - kg["eroded"]) / 1000.0, 3),
            "shortfall_t": round(kg["shortfall"] / 1000.0, 3),
        }
    return {
        "on": bool(on),
        "model": "saltation (Pomeroy & Gray 1990) above the dry-snow threshold of Li & "
        "Pomeroy (1997), from the exposed to the sheltered cells of each zone by the maximum "
        "upwind slope at the hour's wind; no suspension, no blowing-snow sublimation, no "
        "transport between zones",
        "residual": "each hour a zone deposits what its exposed cells are asked to give; "
        "residual_t is the mass the zone gained where a cell's surface (wet, crusted or "
        "bonded snow) gave less than asked (shortfall_t)",
        "zones": zones,
    }


def run_record(
    cfg: Config,
    *,
    region,
    grid_forcing,
    period,
    map_time: np.datetime64,
    totals: RunTotals,
    timings: dict,
    continue_from: Path | None,
    ensemble_cost: dict,
    scheduler: dict,
) -> dict:
    """``run.json``: the settings, versions, input checksums, the period, the forcing's
    counts and sums, the snow settings, events, restarts, the ensemble's cost, the scheduler
    (``scheduler``: kind, workers, address, chunks, chunk size) and the timings [s]."""
    inputs = {
        "dem": cfg.region.dem,
        "zones": cfg.region.zones,
        **{f"forcing[{i}]": p for i, p in enumerate(grid_forcing.paths)},
    }
    if continue_from is not None:
        inputs["continue_from"] = continue_from
    checksums = {
        k: {"path": str(p), "sha256": file_sha256(p)}
        for k, p in inputs.items()
        if Path(p).is_file()
    }
    settings_text = json.dumps(cfg.model_dump(mode="json", exclude={"output"}), sort_keys=True)
    params = cfg.snow
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
                k: (int(v) if isinstance(v, (int, np.integer)) else v)
                for k, v in grid_forcing.counts.items()
            },
            "heights_m": grid_forcing.heights_m,
            "heights_source": grid_forcing.heights_source,
            "downscaling": downscale_record(grid_forcing, cfg.downscale),
            "cell_totals_kg_m2": totals.forcing_sums,
        },
        "snow": {
            "params": {
                k: (v if not isinstance(v, float) else float(v))
                for k, v in params.model_dump().items()
            },
            "kernel_status_bits": totals.status_bits,
        },
        "events": event_log(totals.events),
        "restarts": merge_restart_records(totals.restart_records),
        "rain_crust_ensemble": ensemble_cost,
        "wind_transport": wind_transport_record(
            totals.wind_transport_kg, pd.unique(region.cells.table["zone"]), params.wind_transport
        ),
        "settings_fingerprint": hashlib.sha256(settings_text.encode()).hexdigest()[:16],
        "snow_fingerprint": params.fingerprint(),
        "scheduler": scheduler,
        "timings_s": {k: round(float(v), 3) for k, v in timings.items()},
    }

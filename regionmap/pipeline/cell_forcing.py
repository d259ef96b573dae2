"""``regionmap forcing``: the downscaled hourly forcing of every cell as CF NetCDF, for
inspection (the same chain of weights, downscaling and bias corrections as a run)."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from regionmap.config import Config
from regionmap.downscale.pipeline import downscale_cells, downscale_record
from regionmap.io.outdir import OutputFolder, check_inputs_outside
from regionmap.io.results import CellsNcWriter
from regionmap.pipeline.cache import preparation_cache
from regionmap.pipeline.execute import run_inputs
from regionmap.pipeline.plan import chunk_ranges
from regionmap.pipeline.region import (
    cells_frame,
    open_grid_forcing,
    prepare_batch,
    prepare_region,
    quantile_tables,
)

__all__ = ["FORCING_VARS", "write_cell_forcing"]

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
            for lo, hi in tqdm(
                chunk_ranges(batch.n_cells, cfg.run.chunk_size),
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

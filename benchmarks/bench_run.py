"""Speed of the regional run: the demo end to end, and synthetic regions of
1 000 / 10 000 / 30 000 cells over a full season, with the dask overhead against one direct
call of the chunk function.

    python benchmarks/bench_run.py demo            # regionmap demo, warm numba cache (<= 30 s)
    python benchmarks/bench_run.py region --cells 10000 [--days 181]   # (<= 60 s, <= 3 GB)
    python benchmarks/bench_run.py scaling         # 1 000 / 10 000 / 30 000 cells
    python benchmarks/bench_run.py overhead        # dask vs one direct simulate_chunk call
    python benchmarks/bench_run.py morning         # 10 598 cells: the morning run
                                                   # (report <= simulate + products)

The synthetic regions reuse the invented demo range and its season; the zones are a grid of
boxes over the range and slope classes multiply the cells (see SIZES for the counts; the
30 000-cell case runs on two copies of the demo DEM side by side, the second mirrored).
The morning run continues the 10 598-cell region from yesterday's state (a season run to 24 h
before the analysis time, not measured) over 24 h of analysis and 72 h of forecast, and
prints its phases from ``run.json``. Prints the figures, exits 1 when a target is missed
(unless --no-assert).
"""

from __future__ import annotations

import argparse
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

TARGETS = {
    "demo_s": 30.0,
    "region_10k_s": 60.0,
    "region_10k_peak_gb": 3.0,
    "dask_overhead_frac": 0.10,
    "morning_report_over_simulate_products": 1.0,
}

#: analysis time of the benchmark's morning run [UTC]; yesterday's run ends 24 h earlier and
#: the forecast runs 72 h beyond it.
MORNING_ANALYSIS = np.datetime64("2026-02-14T06:00")


def _write_dem(path: Path, copies: int) -> None:
    """The demo DEM, or ``copies`` of it side by side west to east, every second one mirrored
    east-west so the range continues without a step at the seams (a larger invented range)."""
    from regionmap.demo.scenario import DEMO_CRS, demo_elevation_m, demo_transform, make_demo_dem
    from regionmap.io.writers import write_geotiff

    if copies == 1:
        make_demo_dem(path)
        return
    z = demo_elevation_m().astype(np.float32)
    tiles = [z if k % 2 == 0 else z[:, ::-1] for k in range(copies)]
    write_geotiff(
        path,
        np.concatenate(tiles, axis=1),
        transform=demo_transform(),
        crs=DEMO_CRS,
        nodata=-9999.0,
        description="elevation [m] of an invented mountain range (benchmark data)",
    )


def _scenario(
    folder: Path, n_zones: tuple[int, int], slope_classes: list[float], days: int, copies: int
) -> Path:
    import geopandas as gpd
    import shapely

    from regionmap.demo.scenario import DEMO_CRS
    from regionmap.demo.weather import write_demo_forcing
    from regionmap.io.dem import read_dem
    from regionmap.io.writers import write_geojson

    folder.mkdir(parents=True, exist_ok=True)
    _write_dem(folder / "dem.tif", copies)
    dem = read_dem(folder / "dem.tif")
    x0, y0, x1, y1 = dem.bounds
    xs = np.linspace(x0, x1, n_zones[0] + 1)
    ys = np.linspace(y0, y1, n_zones[1] + 1)
    boxes = [
        shapely.box(xs[i], ys[j], xs[i + 1], ys[j + 1])
        for i in range(n_zones[0])
        for j in range(n_zones[1])
    ]
    zones = gpd.GeoDataFrame(
        {"name": [f"Sector {k + 1:03d}" for k in range(len(boxes))]}, geometry=boxes, crs=DEMO_CRS
    )
    write_geojson(folder / "zones.geojson", zones)
    end = (np.datetime64("2025-11-01T00:00") + np.timedelta64(days * 24, "h")).astype(str)
    if not (folder / "forcing.nc").exists():
        write_demo_forcing(folder / "forcing.nc", dem.elevation_m, dem.transform, dem.crs, end=end)
    classes = ", ".join(f"{s:g}" for s in slope_classes)
    (folder / "run.toml").write_text(f"""
[region]
dem = "dem.tif"
zones = "zones.geojson"
[cells]
band_step_m = 100
slope_classes_deg = [{classes}]
[forcing]
path = "forcing.nc"
end = "{end}"
[output]
dir = "out"
""")
    return folder / "run.toml"


def _peak_gb_of_children() -> float:
    return resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024**2


def bench_demo(args) -> dict:
    with tempfile.TemporaryDirectory() as tmp:
        cmd = [sys.executable, "-m", "regionmap", "demo", "--quiet", "--out", f"{tmp}/demo"]
        subprocess.run(cmd, check=True, capture_output=True)  # warm the numba cache
        t0 = time.perf_counter()
        subprocess.run(cmd, check=True, capture_output=True)
        seconds = time.perf_counter() - t0
    print(f"regionmap demo (warm cache): {seconds:.1f} s (target <= {TARGETS['demo_s']:.0f} s)")
    return {"demo_s": seconds}


#: nominal size -> (zones west-east and south-north, slope classes, copies of the demo DEM);
#: the cells they give: 1 072, 10 598 and 30 478 (the demo DEM's 300 x 300 pixels hold no more
#: than ~24 000 band cells, so the largest case runs on two copies side by side)
SIZES = {
    1000: ((2, 2), [30], 1),
    10000: ((13, 13), [20, 30, 40, 50], 1),
    30000: ((24, 13), [15, 20, 25, 30, 35, 40, 45, 50], 2),
}


def bench_region(n_cells: int, days: int, folder: Path) -> dict:
    cfg_path = _scenario(folder / f"r{n_cells}", *SIZES[n_cells][:2], days, SIZES[n_cells][2])
    cmd = [sys.executable, "-m", "regionmap", "run", str(cfg_path), "--quiet", "--force"]
    t0 = time.perf_counter()
    proc = subprocess.run(cmd, capture_output=True, text=True)
    seconds = time.perf_counter() - t0
    if proc.returncode:
        print(proc.stderr)
        raise SystemExit(1)
    import json

    record = json.loads((cfg_path.parent / "out" / "run.json").read_text())
    peak = _peak_gb_of_children()
    print(
        f"{record['cell_count']:6d} cells, {days} days: {seconds:6.1f} s end to end, peak RSS "
        f"{peak:.2f} GB; "
        f"timings {record['timings_s']}"
    )
    return {"cells": record["cell_count"], "seconds": seconds, "peak_gb": peak}


def bench_morning(folder: Path) -> dict:
    """Yesterday's season run of the 10 598-cell region (set-up), then the measured morning
    run: ``--continue-from`` yesterday's ``state.nc``, 24 h analysis + 72 h forecast."""
    import json

    end = MORNING_ANALYSIS + np.timedelta64(72, "h")
    days = int(np.ceil((end - np.datetime64("2025-11-01T00:00")) / np.timedelta64(24, "h")))
    cfg_path = _scenario(folder / "morning10000", *SIZES[10000][:2], days, SIZES[10000][2])
    base = cfg_path.read_text().split("[forcing]")[0]
    yesterday = MORNING_ANALYSIS - np.timedelta64(24, "h")
    runs = {
        "yesterday": f'[forcing]\npath = "forcing.nc"\nend = "{yesterday}"\n',
        "morning": f'[forcing]\npath = "forcing.nc"\nend = "{end}"\n'
        f'analysis_time = "{MORNING_ANALYSIS}"\n',
    }
    for name, forcing in runs.items():
        (cfg_path.parent / f"{name}.toml").write_text(
            base + forcing + f'[output]\ndir = "{name}"\n'
        )
    run = [sys.executable, "-m", "regionmap", "run", "--quiet", "--force"]
    setup = subprocess.run(
        run[:4] + [str(cfg_path.parent / "yesterday.toml")] + run[4:],
        capture_output=True,
        text=True,
    )
    if setup.returncode:
        print(setup.stderr)
        raise SystemExit(1)
    state = cfg_path.parent / "yesterday" / "state.nc"
    cmd = run[:4] + [str(cfg_path.parent / "morning.toml"), "--continue-from", str(state)] + run[4:]
    t0 = time.perf_counter()
    proc = subprocess.run(cmd, capture_output=True, text=True)
    seconds = time.perf_counter() - t0
    if proc.returncode:
        print(proc.stderr)
        raise SystemExit(1)
    timings = json.loads((cfg_path.parent / "morning" / "run.json").read_text())["timings_s"]
    report = float(timings.get("report", np.nan))
    sim_products = float(timings.get("simulate", np.nan)) + float(timings.get("products", np.nan))
    size_mb = (cfg_path.parent / "morning" / "report.html").stat().st_size / 2**20
    print(
        f"morning run of the 10 598-cell region (24 h analysis + 72 h forecast, continued): "
        f"{seconds:.1f} s end to end; report {report:.1f} s against simulate + products "
        f"{sim_products:.1f} s; report.html {size_mb:.1f} MB; phases {timings}"
    )
    return {"seconds": seconds, "report_ratio": report / sim_products}


def bench_overhead(args, folder: Path) -> dict:
    """The same chunks through dask (threads) and through direct calls in a loop."""
    from regionmap.config import load_config
    from regionmap.pipeline.chunk import RunContext, initial_state, register_forcing, simulate_chunk
    from regionmap.pipeline.cluster import dask_client
    from regionmap.pipeline.plan import chunk_ranges, plan_period
    from regionmap.pipeline.region import (
        open_grid_forcing,
        prepare_batch,
        prepare_region,
        quantile_tables,
    )

    cfg = load_config(_scenario(folder / "r1000", *SIZES[1000][:2], args.days, SIZES[1000][2]))
    region = prepare_region(cfg)
    gf = open_grid_forcing(cfg)
    batch = prepare_batch(region, gf, cfg)
    params = cfg.snow
    period = plan_period(gf.time)
    state = initial_state(batch, params, period)
    chunks = chunk_ranges(batch.n_cells, 250)
    ctx = RunContext(cfg, batch, quantile_tables(cfg), period, 1, 12, kernel_threads=1)
    register_forcing(ctx, gf)
    simulate_chunk(ctx, 0, 1, state.take(slice(0, 1)))  # warm
    t0 = time.perf_counter()
    from concurrent.futures import ThreadPoolExecutor

    with ThreadPoolExecutor(2) as pool:
        list(pool.map(lambda c: simulate_chunk(ctx, c[0], c[1], state.take(slice(*c))), chunks))
    direct = time.perf_counter() - t0
    with dask_client() as client:
        t0 = time.perf_counter()
        ctx_f = client.scatter(ctx, broadcast=True)  # as the runner does: once, not per task
        futures = [
            client.submit(simulate_chunk, ctx_f, lo, hi, state.take(slice(lo, hi)), pure=False)
            for lo, hi in chunks
        ]
        client.gather(futures)
        via_dask = time.perf_counter() - t0
    frac = via_dask / direct - 1.0
    print(
        f"{batch.n_cells} cells: direct {direct:.2f} s, dask {via_dask:.2f} s, overhead "
        f"{100 * frac:+.1f} % "
        f"(target <= {100 * TARGETS['dask_overhead_frac']:.0f} %)"
    )
    return {"dask_overhead_frac": frac}


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("what", choices=["demo", "region", "scaling", "overhead", "morning"])
    ap.add_argument("--cells", type=int, default=10000, choices=sorted(SIZES))
    ap.add_argument("--days", type=int, default=181)
    ap.add_argument("--keep", type=Path, help="folder for the synthetic scenarios (kept)")
    ap.add_argument("--no-assert", action="store_true")
    args = ap.parse_args()
    print(f"load average {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")
    folder = args.keep or Path(tempfile.mkdtemp(prefix="regionmap-bench-"))
    ok = True
    if args.what == "demo":
        r = bench_demo(args)
        ok = r["demo_s"] <= TARGETS["demo_s"]
    elif args.what == "region":
        r = bench_region(args.cells, args.days, folder)
        if args.cells == 10000:
            ok = (
                r["seconds"] <= TARGETS["region_10k_s"]
                and r["peak_gb"] <= TARGETS["region_10k_peak_gb"]
            )
    elif args.what == "scaling":
        for n in sorted(SIZES):
            bench_region(n, args.days, folder)
    elif args.what == "morning":
        r = bench_morning(folder)
        ok = r["report_ratio"] <= TARGETS["morning_report_over_simulate_products"]
    else:
        r = bench_overhead(args, folder)
        ok = r["dask_overhead_frac"] <= TARGETS["dask_overhead_frac"]
    if not ok and not args.no_assert:
        print("FAILED: target missed")
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())

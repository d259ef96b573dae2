"""Speed of the snow column: 10 000 cells x ~3600 hourly steps, full physics.

Runs an invented season (``regionmap.snow.synthetic.season_forcing``: storms, cold clear
spells, rain, freezing rain, a spring thaw) through :func:`regionmap.snow.run_columns` in
chunks of cells, as the pipeline does, with hourly diagnostics and daily snapshots, on two
threads. The layering rules are those of the validation scenarios (no coarser layers).
Prints the figures and asserts the issue's target (<= 30 s, i.e. >= 50 M layer-steps/s on
2 cores, with a mean of >= 25 active layers).

    python benchmarks/bench_snow.py [--cells N] [--days D] [--chunk C] [--transport] [--no-assert]

``--transport`` adds wind transport between the cells of zones of 100 cells, each cell with a
fixed invented maximum upwind slope (-15..15 deg); the zone pre-pass is timed apart.
"""

from __future__ import annotations

import argparse
import os
import time

import numpy as np

from regionmap.snow.column import run_columns, wind_transport_of
from regionmap.snow.params import SnowParams
from regionmap.snow.state import SnowState
from regionmap.snow.synthetic import season_forcing

TARGET_S_PER_10K_CELLS = 30.0
TARGET_MEAN_LAYERS = 25.0


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--cells", type=int, default=10_000)
    ap.add_argument("--days", type=int, default=150)
    ap.add_argument("--chunk", type=int, default=1000)
    ap.add_argument("--threads", type=int, default=2)
    ap.add_argument("--transport", action="store_true")
    ap.add_argument("--no-assert", action="store_true")
    args = ap.parse_args()
    params = SnowParams()

    t0 = time.perf_counter()
    warm = season_forcing(2, days=2, seed=0)
    run_columns(SnowState.empty(2, time="2025-11-01T00:00"), warm, params)
    t_warm = time.perf_counter() - t0

    total = 0.0
    pre_pass = 0.0
    cpu = 0.0
    layer_steps = 0.0
    cell_steps = 0
    occupied = []
    state_bytes = 0.0
    for c0 in range(0, args.cells, args.chunk):
        n = min(args.chunk, args.cells - c0)
        forcing = season_forcing(n, days=args.days, seed=1000 + c0)
        state = SnowState.empty(n, params.max_layers, time="2025-11-01T00:00")
        if args.transport:
            rng = np.random.default_rng(c0)
            forcing.sx_deg = rng.uniform(-15.0, 15.0, (n, 1)) * np.ones((1, forcing.n_steps))
            zones = (np.arange(n) // 100, np.full(n, 1.0e6))
            t1 = time.perf_counter()
            forcing.wind_transport_kg_m2 = wind_transport_of(state, forcing, params, zones)[0]
            pre_pass += time.perf_counter() - t1
        t1 = time.perf_counter()
        c1 = time.process_time()
        state, diag, snap = run_columns(
            state, forcing, params, diag_every_h=1, threads=args.threads
        )
        total += time.perf_counter() - t1
        cpu += time.process_time() - c1
        layers = diag["layer_count"].astype(np.float64)
        layer_steps += layers.sum()
        cell_steps += n * forcing.n_steps
        occupied.append(layers[layers > 0])
        state_bytes = state.nbytes_per_cell()
    occ = np.concatenate(occupied)
    mean_layers = float(occ.mean())
    per_10k = total * 10_000 / args.cells * 3600 / (args.days * 24)
    print(f"warm-up (compile or cache load): {t_warm:.2f} s")
    print(f"cells {args.cells}, steps {args.days * 24}, chunk {args.chunk}, threads {args.threads}")
    print(
        f"column time {total:.2f} s -> {per_10k:.1f} s per 10 000 cells x 3600 steps "
        f"(target <= {TARGET_S_PER_10K_CELLS:.0f} s)"
    )
    cpu_10k = cpu * 10_000 / args.cells * 3600 / (args.days * 24)
    print(
        f"CPU time {cpu:.1f} s over {args.threads} threads ({cpu_10k:.0f} CPU-s per 10 000 "
        f"cells x 3600 steps, {layer_steps / max(cpu, 1e-9) / 1e6:.1f} M layer-steps per "
        f"CPU-second); machine load average {os.getloadavg()[0]:.2f} (other work on the "
        "machine slows the wall-clock figure)"
    )
    print(
        f"{cell_steps / total / 1e6:.2f} M cell-steps/s, {layer_steps / total / 1e6:.1f} M "
        f"layer-steps/s (target >= 50)"
    )
    print(
        f"mean active layers of snow-covered cell-steps {mean_layers:.1f} (target >= "
        f"{TARGET_MEAN_LAYERS:.0f}), max {occ.max():.0f}"
    )
    print(f"state {state_bytes:.0f} bytes per cell (target <= 2048)")
    if args.transport:
        print(f"wind-transport zone pre-pass {pre_pass:.2f} s (not in the column time)")
    if not args.no_assert:
        assert mean_layers >= TARGET_MEAN_LAYERS, "too few active layers for a fair figure"
        assert per_10k <= TARGET_S_PER_10K_CELLS, f"{per_10k:.1f} s > {TARGET_S_PER_10K_CELLS} s"
    return 0


if __name__ == "__main__":
    raise SystemExit(main())

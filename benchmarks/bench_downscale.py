"""Benchmark: downscaling 10 000 cells x 3600 h on 2 cores (target <= 20 s), and peak
memory independent of the number of cells at a fixed chunk size.

Synthetic grid (40 x 40 points, 3 km-like spacing in lat/lon) and cells. Chunks of cells go
through `downscale_cells` one at a time on two worker threads (numba kernels release the
GIL; NumPy/SciPy mostly do), as the run orchestration does. Run:

    python benchmarks/bench_downscale.py            # asserts the targets
"""

from __future__ import annotations

import json
import resource
import subprocess
import sys
import time
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field

import numpy as np

from regionmap.downscale import solar
from regionmap.downscale.pipeline import CellBatch, downscale_cells
from regionmap.downscale.settings import DownscaleSettings
from regionmap.downscale.weights import build_cell_weights

NY = NX = 40
LON0, LAT0, D = 10.0, 46.0, 0.03
N_T = 3600
TARGET_S = 20.0


@dataclass
class SyntheticGrid:
    time: np.ndarray
    fields: dict
    surface_altitude: np.ndarray
    heights_m: dict = field(default_factory=lambda: {"wind": 10.0, "temperature": 2.0})
    longwave_down: object = None
    freezing_rain_frac: object = None
    upper_air_temperature: object = None
    reads: int = 0

    def grid_index_of(self, lon, lat):
        return (np.asarray(lat) - LAT0) / D, (np.asarray(lon) - LON0) / D

    def extent_lonlat(self):
        return (LON0, LON0 + D * (NX - 1), LAT0, LAT0 + D * (NY - 1))

    def read_block(self, names, iy, ix, time_slice):
        self.reads += 1
        return {n: self.fields[n][time_slice][:, iy, ix] for n in names}


def make_grid(with_lw: bool) -> SyntheticGrid:
    rng = np.random.default_rng(0)
    time = np.datetime64("2025-11-01T01:00") + np.arange(N_T).astype("timedelta64[h]")
    z = (1000 + 1500 * rng.random((NY, NX))).astype(np.float64)
    shape = (N_T, NY, NX)
    h = np.arange(N_T)[:, None, None]
    zen, _ = solar.solar_position_noaa(time, LAT0 + 0.6, LON0 + 0.6)
    f = lambda a: np.ascontiguousarray(a, dtype=np.float32)  # noqa: E731
    fields = {
        "air_temperature": f(
            275 - 0.0065 * z + 4 * np.sin(2 * np.pi * h / 24) + rng.standard_normal(shape)
        ),
        "relative_humidity": f(0.6 + 0.35 * rng.random(shape)),
        "surface_air_pressure": f(
            np.broadcast_to(101325 * (1 - 0.0065 * z / 288.15) ** 5.25588, shape)
        ),
        "wind_speed": f(8 * rng.random(shape)),
        "wind_from_direction": f(360 * rng.random(shape)),
        "shortwave_down": f(
            np.broadcast_to(np.maximum(np.cos(np.radians(zen)), 0)[:, None, None] * 500, shape)
        ),
        "precipitation": f(rng.gamma(0.3, 1.0, shape)),
    }
    if with_lw:
        fields["longwave_down"] = f(250 + 60 * rng.random(shape))
    g = SyntheticGrid(time=time, fields=fields, surface_altitude=z)
    g.longwave_down = True if with_lw else None
    return g


def make_batch(grid, n_cell, settings, seed):
    rng = np.random.default_rng(seed)
    lon = LON0 + D * (1 + (NX - 3) * rng.random(n_cell))
    lat = LAT0 + D * (1 + (NY - 3) * rng.random(n_cell))
    px = 4
    pc = np.repeat(np.arange(n_cell), px)
    w = build_cell_weights(
        grid.grid_index_of,
        grid.extent_lonlat,
        (NY, NX),
        pc,
        lon[pc] + 0.005 * rng.standard_normal(pc.size),
        lat[pc] + 0.005 * rng.standard_normal(pc.size),
        n_cell,
        lon,
        lat,
    )
    az, el = np.arange(0, 360, 5.0), np.arange(0, 91, 3.0)
    frac = rng.random((n_cell, az.size, el.size)).astype(np.float32)
    cosi = rng.random((n_cell, az.size, el.size)).astype(np.float32)
    return CellBatch(
        cell_id=np.arange(n_cell),
        elevation_m=1000 + 2000 * rng.random(n_cell),
        slope_deg=40 * rng.random(n_cell),
        aspect_deg=360 * rng.random(n_cell),
        sky_view_frac=0.7 + 0.3 * rng.random(n_cell),
        lon_deg=lon,
        lat_deg=lat,
        area_m2=np.full(n_cell, 1e5),
        zone_code=np.zeros(n_cell, dtype=np.int64),
        sx_deg=10 * rng.standard_normal((n_cell, 8)),
        sx_directions_deg=np.arange(0, 360, 45.0),
        sun_azimuth_deg=az,
        sun_elevation_deg=el,
        sunlit_fraction=frac,
        sunlit_cos_incidence=cosi,
        weights=w,
    )


def run(n_cells: int, chunk: int, with_lw: bool) -> dict:
    settings = DownscaleSettings(chunk_cells=chunk)
    grid = make_grid(with_lw)
    warm = make_batch(grid, 8, settings, 99)
    downscale_cells(grid, warm, settings, slice(0, 48))  # compile / load the numba cache
    batches = [make_batch(grid, chunk, settings, k) for k in range(n_cells // chunk)]
    rss0 = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss

    def one(b):
        cf = downscale_cells(grid, b, settings)
        return float(cf.sw_in_w_m2.mean())

    cpu0 = time.process_time()
    t0 = time.perf_counter()
    with ThreadPoolExecutor(max_workers=2) as pool:
        list(pool.map(one, batches))
    wall = time.perf_counter() - t0
    cpu = time.process_time() - cpu0
    rss1 = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    return {
        "n_cells": n_cells,
        "chunk": chunk,
        "hours": N_T,
        "longwave_in_forcing": with_lw,
        "wall_s": round(wall, 2),
        "cpu_s": round(cpu, 2),
        "peak_rss_mb": round(rss1 / 1024, 1),
        "rss_before_run_mb": round(rss0 / 1024, 1),
    }


def main() -> int:
    if len(sys.argv) > 1:
        n, chunk, lw = int(sys.argv[1]), int(sys.argv[2]), sys.argv[3] == "1"
        print(json.dumps(run(n, chunk, lw)))
        return 0
    results = []
    for n, lw in ((10000, False), (10000, True), (2000, False)):
        out = subprocess.run(
            [sys.executable, __file__, str(n), "1000", "1" if lw else "0"],
            capture_output=True,
            text=True,
            check=True,
        )
        results.append(json.loads(out.stdout.strip().splitlines()[-1]))
        print(results[-1])
    big, small = results[0], results[2]
    ok_time = all(r["wall_s"] <= TARGET_S for r in results)
    # peak memory must not grow with the number of cells at a fixed chunk size
    ok_mem = (big["peak_rss_mb"] - big["rss_before_run_mb"]) <= 1.25 * (
        small["peak_rss_mb"] - small["rss_before_run_mb"]
    ) + 50
    print(
        f"time target {TARGET_S} s: {'ok' if ok_time else 'FAILED'}; "
        f"memory independent of cell count: {'ok' if ok_mem else 'FAILED'}"
    )
    return 0 if ok_time and ok_mem else 1


if __name__ == "__main__":
    sys.exit(main())

"""Speed of the horizon scan (and fused sky view). Prints figures and asserts the targets.

Targets: 2000 x 2000, 16 azimuths, 3 km: <= 1 s; 4000 x 4000, 36 azimuths plus
sky view: <= 6 s and <= 4 GB peak memory, on a 2-core machine.
Run: python benchmarks/bench_terrain.py [--no-assert]

The machine may be shared: the load average and the process CPU time (both threads) are
printed beside each wall time, so a slow figure under load can be told from a slow kernel.
"""

from __future__ import annotations

import os
import resource
import sys
import time

import numpy as np

from regionmap.terrain.horizon import horizon_sky_view_dozier_frew1990
from regionmap.terrain.slope import slope_aspect_horn1981


def fractal_dem(n: int, pixel_m: float, seed: int = 1) -> np.ndarray:
    """Spectral-synthesis terrain (power-law spectrum, beta = 2.2), ~2000 m of relief."""
    rng = np.random.default_rng(seed)
    k = np.fft.fftfreq(n)
    kk = np.hypot(*np.meshgrid(k, k))
    kk[0, 0] = 1.0
    spec = (rng.normal(size=(n, n)) + 1j * rng.normal(size=(n, n))) * kk ** (-2.2 / 2 - 1)
    spec[0, 0] = 0
    z = np.fft.ifft2(spec).real
    return 1200.0 + 2000.0 * (z - z.min()) / (z.max() - z.min())


def bench(n: int, n_az: int, distance_m: float, pixel_m: float = 10.0) -> tuple[float, float]:
    """Wall and CPU time [s] of one horizon + sky-view call."""
    z = fractal_dem(n, pixel_m)
    s, a = slope_aspect_horn1981(z, pixel_m, pixel_m)
    az = np.arange(n_az) * (360.0 / n_az)
    c0 = time.process_time()
    t0 = time.perf_counter()
    h, v = horizon_sky_view_dozier_frew1990(z, pixel_m, pixel_m, s, a, az, distance_m)
    return time.perf_counter() - t0, time.process_time() - c0


def per_pixel_ns(cpu_s: float, n: int, n_az: int) -> str:
    """CPU time per pixel and azimuth, comparable between runs at different machine loads."""
    return f"{cpu_s / (n * n * n_az) * 1e9:.1f} ns per pixel and azimuth"


def load() -> str:
    return "load average " + " ".join(f"{x:.1f}" for x in os.getloadavg())


def main(check: bool = True) -> None:
    z = fractal_dem(64, 10.0)
    s, a = slope_aspect_horn1981(z, 10.0, 10.0)
    horizon_sky_view_dozier_frew1990(
        z, 10.0, 10.0, s, a, np.arange(4) * 90.0, 300.0
    )  # compile / load cache
    t1, c1 = min(bench(2000, 16, 3000.0) for _ in range(2))
    print(
        f"horizon + sky view, 2000x2000, 16 azimuths, 3 km at 10 m: {t1:.2f} s (target <= 1 s); "
        f"CPU {c1:.2f} s ({per_pixel_ns(c1, 2000, 16)}); {load()}"
    )
    t2, c2 = bench(4000, 36, 3000.0)
    peak_gb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024**2
    print(
        f"horizon + sky view, 4000x4000, 36 azimuths, 3 km at 10 m: {t2:.2f} s (target <= 6 s); "
        f"CPU {c2:.2f} s ({per_pixel_ns(c2, 4000, 36)}); peak RSS {peak_gb:.2f} GB (target <= 4 "
        f"GB); {load()}"
    )
    if check:
        assert t1 <= 1.0, f"2000x2000 horizon took {t1:.2f} s > 1 s"
        assert t2 <= 6.0, f"4000x4000 horizon took {t2:.2f} s > 6 s"
        assert peak_gb <= 4.0, f"peak memory {peak_gb:.2f} GB > 4 GB"


if __name__ == "__main__":
    main(check="--no-assert" not in sys.argv)

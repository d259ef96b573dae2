"""Benchmark: all figures and the report for the demo output folder in <= 15 s.

Usage: python benchmarks/bench_figures.py [OUTDIR] [--no-assert]
Without OUTDIR the demo is run first (``regionmap demo --out <tmp>``); the figure and report
time of ``write_report`` is what is measured and asserted. Printed beside it: the CPU time of
this process and of the forked drawing workers, the number of figures, the report's size and
the machine's load average before and after (the target assumes a machine that is not busy
with other work; on 2 cores a load of 2 or more slows the figures down accordingly).
"""

from __future__ import annotations

import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

TARGET_S = 15.0


def _cpu_s() -> float:
    own, children = (
        resource.getrusage(resource.RUSAGE_SELF),
        resource.getrusage(resource.RUSAGE_CHILDREN),
    )
    return own.ru_utime + own.ru_stime + children.ru_utime + children.ru_stime


def main(argv: list[str]) -> int:
    check = "--no-assert" not in argv
    args = [a for a in argv if a != "--no-assert"]
    if args:
        out = Path(args[0])
    else:
        out = Path(tempfile.mkdtemp(prefix="bench-figures-")) / "demo"
        subprocess.run(
            [sys.executable, "-m", "regionmap", "--quiet", "demo", "--out", str(out)], check=True
        )
    import warnings

    from regionmap.report.briefing import write_report

    load_before = os.getloadavg()
    cpu0 = _cpu_s()
    t0 = time.perf_counter()
    with warnings.catch_warnings():
        warnings.simplefilter(
            "ignore"
        )  # e.g. a missing DEM for the hillshade: measured all the same
        report = write_report(out)
    elapsed = time.perf_counter() - t0
    cpu = _cpu_s() - cpu0
    load_after = os.getloadavg()
    n_png = len(list((out / "figures").glob("*.png")))
    size_mb = report.stat().st_size / 2**20
    print(
        f"figures + report: {elapsed:.1f} s wall, {cpu:.1f} s CPU (process + drawing workers) for "
        f"{n_png} PNGs, "
        f"report.html {size_mb:.2f} MB (target <= {TARGET_S:g} s)"
    )
    print(
        "load average (1/5/15 min) before "
        f"{load_before[0]:.2f}/{load_before[1]:.2f}/{load_before[2]:.2f}, "
        f"after {load_after[0]:.2f}/{load_after[1]:.2f}/{load_after[2]:.2f} on {os.cpu_count()} "
        "CPUs"
    )
    if check and elapsed > TARGET_S:
        print("FAIL: slower than the target", file=sys.stderr)
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))

"""Benchmark: all figures and the report for the demo output folder in <= 15 s (issue 6).

Usage: python benchmarks/bench_figures.py [OUTDIR]
Without OUTDIR the demo is run first (``regionmap demo --out <tmp>``); the figure and report
time is what is measured and asserted.
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
import time
from pathlib import Path

TARGET_S = 15.0


def main(argv: list[str]) -> int:
    if argv:
        out = Path(argv[0])
    else:
        out = Path(tempfile.mkdtemp(prefix="bench-figures-")) / "demo"
        subprocess.run([sys.executable, "-m", "regionmap", "--quiet", "demo", "--out", str(out)], check=True)
    from regionmap.report import write_report

    t0 = time.perf_counter()
    report = write_report(out)
    elapsed = time.perf_counter() - t0
    n_png = len(list((out / "figures").glob("*.png")))
    size_mb = report.stat().st_size / 2**20
    print(f"figures + report: {elapsed:.1f} s for {n_png} PNGs, report.html {size_mb:.2f} MB (target <= {TARGET_S:g} s)")
    if elapsed > TARGET_S:
        print("FAIL: slower than the target", file=sys.stderr)
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))

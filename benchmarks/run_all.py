"""Run every benchmark script and report which targets were met.

python benchmarks/run_all.py [--no-assert]
"""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
RUNS = [
    ["bench_terrain.py"],
    ["bench_downscale.py"],
    ["bench_snow.py"],
    ["bench_run.py", "demo"],
    ["bench_run.py", "region", "--cells", "10000"],
    ["bench_run.py", "overhead"],
    ["bench_run.py", "morning"],
    ["bench_figures.py"],
]


def main() -> int:
    extra = [a for a in sys.argv[1:] if a == "--no-assert"]
    failed = []
    for run in RUNS:
        print(f"== {' '.join(run)}", flush=True)
        if subprocess.run([sys.executable, str(HERE / run[0]), *run[1:], *extra]).returncode:
            failed.append(" ".join(run))
    print("all targets met" if not failed else f"targets missed: {failed}")
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())

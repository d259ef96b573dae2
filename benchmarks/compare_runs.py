"""Compare the data of two run folders: are the results of a refactor bit-identical?

    python benchmarks/compare_runs.py OUT_A OUT_B [--tolerance REL]

Compares ``cells.nc``, ``profiles.nc``, ``state.nc``, ``state_end.nc`` and every CSV table of
the two folders: the same variables with the same dimensions, coordinates, attributes and
values (NaN equal to NaN). Run records and provenance (``run.json``, the ``history`` and
``date_created``-style attributes that carry times and paths) are ignored. Exits 0 when the
data are identical, 1 naming the first differing file and variable (and how many values
differ, the largest difference), 2 when a folder or file is missing or unreadable.

``--tolerance`` accepts relative differences up to REL in floating-point values (for
comparing runs on other machines); the default 0 asks for identical bits.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

NETCDF_FILES = ("cells.nc", "profiles.nc", "state.nc", "state_end.nc")
#: attributes that record when, where or by which version a file was written
PROVENANCE_ATTRS = {"history", "date_created", "created", "source_path", "regionmap_version"}


class Difference(Exception):
    """The first difference found: its message names the file and the variable."""


def _values_differ(a: np.ndarray, b: np.ndarray, tolerance: float) -> str | None:
    if a.shape != b.shape:
        return f"shape {a.shape} != {b.shape}"
    if a.dtype != b.dtype:
        return f"dtype {a.dtype} != {b.dtype}"
    if a.dtype.kind in "fc":
        both_nan = np.isnan(a) & np.isnan(b)
        if tolerance > 0:
            close = np.isclose(a, b, rtol=tolerance, atol=0.0) | both_nan
        else:
            close = (a == b) | both_nan
        if close.all():
            return None
        diff = np.abs(a[~close] - b[~close])
        return f"{int((~close).sum())} values differ, largest by {np.nanmax(diff):.6g}"
    same = a == b
    if np.all(same):
        return None
    return f"{int(np.size(same) - np.count_nonzero(same))} values differ"


def _attrs(attrs: dict) -> dict:
    return {k: v for k, v in attrs.items() if k not in PROVENANCE_ATTRS}


def _same_attrs(a: dict, b: dict) -> bool:
    a, b = _attrs(a), _attrs(b)
    if a.keys() != b.keys():
        return False
    return all(np.array_equal(np.asarray(a[k]), np.asarray(b[k])) for k in a)


def compare_netcdf(path_a: Path, path_b: Path, tolerance: float = 0.0) -> None:
    """Raise :class:`Difference` at the first variable (or attribute) that differs."""
    name = path_a.name
    with (
        xr.open_dataset(path_a, decode_times=False) as a,
        xr.open_dataset(path_b, decode_times=False) as b,
    ):
        if not _same_attrs(a.attrs, b.attrs):
            raise Difference(f"{name}: global attributes differ")
        if set(a.variables) != set(b.variables):
            only = sorted(set(a.variables) ^ set(b.variables))
            raise Difference(f"{name}: variables differ: {only}")
        for var in sorted(a.variables):
            va, vb = a[var], b[var]
            if va.dims != vb.dims:
                raise Difference(f"{name}: {var}: dimensions {va.dims} != {vb.dims}")
            if not _same_attrs(va.attrs, vb.attrs):
                raise Difference(f"{name}: {var}: attributes differ")
            why = _values_differ(va.values, vb.values, tolerance)
            if why:
                raise Difference(f"{name}: {var}: {why}")


def compare_csv(path_a: Path, path_b: Path, tolerance: float = 0.0) -> None:
    """Raise :class:`Difference` at the first column that differs."""
    name = path_a.name
    a = pd.read_csv(path_a, keep_default_na=False)
    b = pd.read_csv(path_b, keep_default_na=False)
    if list(a.columns) != list(b.columns):
        raise Difference(f"{name}: columns {list(a.columns)} != {list(b.columns)}")
    if len(a) != len(b):
        raise Difference(f"{name}: {len(a)} rows != {len(b)} rows")
    for column in a.columns:
        why = _values_differ(a[column].to_numpy(), b[column].to_numpy(), tolerance)
        if why:
            raise Difference(f"{name}: column {column}: {why}")


def compare_runs(out_a: Path, out_b: Path, tolerance: float = 0.0) -> list[str]:
    """Compare two run folders; returns the files compared, raises :class:`Difference`."""
    tables = sorted({p.name for p in out_a.glob("*.csv")} | {p.name for p in out_b.glob("*.csv")})
    compared = []
    for name in (*NETCDF_FILES, *tables):
        pa, pb = out_a / name, out_b / name
        if not pa.exists() and not pb.exists():
            continue
        missing = [str(p) for p in (pa, pb) if not p.exists()]
        if missing:
            raise FileNotFoundError(f"{missing[0]}: missing (the other run has it)")
        if name.endswith(".nc"):
            compare_netcdf(pa, pb, tolerance)
        else:
            compare_csv(pa, pb, tolerance)
        compared.append(name)
    return compared


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("out_a", type=Path)
    parser.add_argument("out_b", type=Path)
    parser.add_argument("--tolerance", type=float, default=0.0, metavar="REL")
    args = parser.parse_args(argv)
    for folder in (args.out_a, args.out_b):
        if not folder.is_dir():
            print(f"{folder}: not a run folder", file=sys.stderr)
            return 2
    try:
        compared = compare_runs(args.out_a, args.out_b, args.tolerance)
    except Difference as diff:
        print(f"differ: {diff}")
        return 1
    except (OSError, ValueError) as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    print(f"identical data in {len(compared)} files: {', '.join(compared)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())

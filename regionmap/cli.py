"""The ``regionmap`` command line.

Exit status: 0 on success, 2 on bad input (one line on stderr, no traceback), 1 on an internal
fault. ``--debug`` shows tracebacks.
"""

from __future__ import annotations

import argparse
import sys
import traceback
from pathlib import Path

from regionmap import CAUTION, __version__
from regionmap.errors import RegionmapError

__all__ = ["main", "build_parser"]


def _cmd_terrain(args: argparse.Namespace) -> int:
    from regionmap.terrain import TerrainSettings, write_terrain_layers

    settings = TerrainSettings(
        n_azimuths=args.azimuths,
        horizon_distance_m=args.horizon_distance,
    )
    written = write_terrain_layers(args.dem, args.out, settings, progress=not args.quiet)
    print(f"terrain layers written to {args.out}: {', '.join(Path(p).name for p in written)}")
    return 0


def _cmd_demo(args: argparse.Namespace) -> int:
    from regionmap.demo import run_demo

    return run_demo(args.out, progress=not args.quiet)


def build_parser() -> argparse.ArgumentParser:
    """The argument parser with every sub-command (also used to document the CLI)."""
    parser = argparse.ArgumentParser(
        prog="regionmap",
        description="Regional snowpack-structure guidance for avalanche forecasters: downscale NWP "
        "forcing to elevation-band x aspect cells, run a snow column per cell, and map weak "
        "layers, crusts and new-snow loads per forecast zone.",
        epilog=f"Caution: {CAUTION}",
    )
    parser.add_argument("--version", action="version", version=f"regionmap {__version__}")
    parser.add_argument("--debug", action="store_true", help="show tracebacks on errors")
    parser.add_argument("--quiet", action="store_true", help="no progress bars")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)

    p = sub.add_parser(
        "demo",
        help="build the invented demo region and run the chain on it",
        description="Build the invented demo scenario (DEM, zones, a season of NWP-like forcing) and "
        "run the whole chain on it.",
        epilog=f"Caution: {CAUTION}",
    )
    p.add_argument("--out", type=Path, default=Path("regionmap-demo"), help="output folder (default: %(default)s)")
    p.set_defaults(func=_cmd_demo)

    p = sub.add_parser(
        "terrain",
        help="write terrain layers of a DEM as GeoTIFF",
        description="Slope, aspect (Horn 1981), curvature, sky-view factor (Dozier & Frew 1990) and "
        "maximum-upwind-slope wind exposure (Winstral et al. 2002) of a DEM, written as GeoTIFFs on "
        "the DEM's grid.",
    )
    p.add_argument("dem", type=Path, help="any GDAL raster with a CRS")
    p.add_argument("--out", type=Path, default=Path("terrain"), help="output folder (default: %(default)s)")
    p.add_argument("--azimuths", type=int, default=16, help="horizon azimuths (4-72, default %(default)s)")
    p.add_argument(
        "--horizon-distance", type=float, default=5000.0, help="horizon search distance in m (default %(default)s)"
    )
    p.set_defaults(func=_cmd_terrain)
    return parser


def main(argv: list[str] | None = None) -> int:
    """Run the CLI; returns the exit status."""
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return int(args.func(args) or 0)
    except RegionmapError as exc:
        if args.debug:
            traceback.print_exc()
        print(f"regionmap: error: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("regionmap: interrupted; earlier outputs are unchanged", file=sys.stderr)
        return 130
    except Exception as exc:  # an internal fault: say so, keep the traceback for --debug
        if args.debug:
            traceback.print_exc()
        print(
            f"regionmap: internal error: {type(exc).__name__}: {exc} (run with --debug for the traceback)",
            file=sys.stderr,
        )
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())

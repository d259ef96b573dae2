"""The ``regionmap`` command line.

Exit status: 0 on success, 2 on bad input (one line on stderr, no traceback), 1 on an internal
fault. ``--debug`` shows tracebacks.
"""

from __future__ import annotations

import argparse
import contextlib
import ctypes
import json
import logging
import math
import platform
import sys
import traceback
import warnings
from pathlib import Path

import numpy as np

from regionmap import CAUTION, INVENTED_DATA, __version__
from regionmap.config import RestartEntry, TerrainSettings, load_config, parse_band
from regionmap.errors import InputError, RegionmapError, RegionmapWarning
from regionmap.io.atomic import is_no_space
from regionmap.io.times import local_time_label

__all__ = ["main", "build_parser"]


def _cmd_terrain(args: argparse.Namespace) -> int:
    from regionmap.terrain import write_terrain_layers

    settings = TerrainSettings(
        horizon_azimuths=args.azimuths,
        horizon_distance_m=args.horizon_distance,
    )
    written = write_terrain_layers(args.dem, args.out, settings, progress=not args.quiet)
    print(f"terrain layers written to {args.out}: {', '.join(Path(p).name for p in written)}")
    return 0


_TABLE_COLUMNS = {
    "zone": "zone",
    "snow_depth_cm": "HS cm",
    "new_snow_72h_cm": "HN72 cm",
    "new_snow_72h_kg_m2": "HN72 kg/m2",
    "depth_hoar_fraction": "DH frac",
    "pwl_fraction": "PWL frac",
    "crust_count_mean": "crusts",
    "rain_crust_line_m": "rain crust m",
}


def print_outcome(outcome) -> None:
    """The per-zone table, the rain-crust sentences, where the outputs are, the caution."""
    zones = outcome.zones
    cols = [c for c in _TABLE_COLUMNS if c in zones.columns]
    view = zones[cols].rename(columns=_TABLE_COLUMNS)
    kind = "forecast" if outcome.is_forecast else "analysis"
    if outcome.invented_data:
        print(f"*** {INVENTED_DATA} ***")
    when = local_time_label(outcome.map_time, outcome.local_timezone, year=True)
    print(f"Snowpack structure at {when} ({kind}), avalanche terrain, {outcome.n_cells} cells:")
    print(view.to_string(index=False, float_format=lambda v: f"{v:.2f}", na_rep="-"))
    if outcome.sentences:
        print()
        for line in outcome.sentences:
            print(f"  {line}")
    print(f"\nOutputs in {outcome.out_dir} ({outcome.seconds:.1f} s).")
    print(f"Caution: {CAUTION}")


def outcome_summary(outcome) -> dict:
    """A finished run as plain JSON types: where, when, how many cells, the per-zone table,
    the rain-crust sentences, the output files and the caution (``--json``)."""
    zones = outcome.zones
    zones = zones.drop(columns=[zones.geometry.name]) if hasattr(zones, "geometry") else zones

    def plain(v):
        if hasattr(v, "item"):  # numpy scalars
            v = v.item()
        if isinstance(v, float) and not math.isfinite(v):
            return None
        return v if isinstance(v, (str, int, float, bool, type(None))) else str(v)

    out = Path(outcome.out_dir)
    files = ["run.json", "cells.nc", "profiles.nc", "state.nc", "zones.gpkg", "report.html"]
    return {
        "regionmap": __version__,
        "invented_data": bool(outcome.invented_data),
        "out_dir": str(out),
        "map_time_utc": str(np.datetime64(outcome.map_time, "s")) + "Z",
        "map_time_kind": "forecast" if outcome.is_forecast else "analysis",
        "cells": int(outcome.n_cells),
        "seconds": round(float(outcome.seconds), 3),
        "zones": [{k: plain(v) for k, v in row.items()} for row in zones.to_dict("records")],
        "rain_crust": list(outcome.sentences),
        "files": {name: str(out / name) for name in files if (out / name).exists()},
        "caution": CAUTION,
    }


def _finish(outcome, as_json: bool) -> int:
    """Print a finished run's summary; with ``--json`` on stderr, and JSON alone on stdout."""
    with _human_text_to_stderr(as_json):
        print_outcome(outcome)
    if as_json:
        print(json.dumps(outcome_summary(outcome), indent=2))
    return 0


def _cmd_run(args: argparse.Namespace) -> int:
    from regionmap.pipeline.execute import execute

    cfg = load_config(args.config)
    restarts = _restarts_from_args(args, cfg)
    with _human_text_to_stderr(args.json):
        outcome = execute(
            cfg,
            out_dir=args.out,
            continue_from=args.continue_from,
            workers=args.workers,
            scheduler=args.scheduler,
            dashboard=args.dashboard,
            scheduler_security=args.scheduler_security,
            force=args.force,
            progress=not args.quiet,
            restarts=restarts,
            use_cache=not args.no_cache,
        )
    return _finish(outcome, args.json)


def _human_text_to_stderr(as_json: bool):
    """With ``--json`` stdout carries the JSON summary only: anything else printed goes to
    stderr."""
    return contextlib.redirect_stdout(sys.stderr) if as_json else contextlib.nullcontext()


def _restarts_from_args(args: argparse.Namespace, cfg) -> list:
    """``[[restart]]`` entries of the config plus the one given on the command line."""
    given = [args.restart, args.zone, args.band, args.aspect]
    if any(v is not None for v in given) and not all(v is not None for v in given):
        raise InputError("--restart needs --zone, --band and --aspect (and they need --restart)")
    entries = list(cfg.restart)
    if args.restart is not None:
        parse_band(args.band)
        entries.append(
            RestartEntry(
                profile=args.restart.resolve(),
                zone=args.zone,
                bands=[args.band],
                aspects=[args.aspect],
            )
        )
    return entries


def _cmd_forcing(args: argparse.Namespace) -> int:
    from regionmap.pipeline.cell_forcing import write_cell_forcing

    cfg = load_config(args.config)
    path = write_cell_forcing(cfg, args.out, force=args.force, progress=not args.quiet)
    print(f"per-cell forcing written to {path}")
    return 0


def _cmd_report(args: argparse.Namespace) -> int:
    from regionmap.report.briefing import write_all_figures, write_report

    path = write_report(args.outdir)
    print(f"briefing report written to {path}")
    if args.all_figures:
        written = write_all_figures(args.outdir)
        print(f"{len(written)} figures and tables written to {Path(args.outdir) / 'figures'}")
    print(f"Caution: {CAUTION}")
    return 0


def _cmd_profile(args: argparse.Namespace) -> int:
    from regionmap.plots.profile import profile_command

    if args.cell is None and (args.zone is None or args.band is None or args.aspect is None):
        raise InputError("profile: give --cell ID, or --zone, --band LOW-HIGH and --aspect")
    drawn = profile_command(
        args.outdir,
        cell=args.cell,
        zone=args.zone,
        band=args.band,
        aspect=args.aspect,
        slope_class=args.slope_class,
        time=args.time,
    )
    snapshot = f"{drawn.snapshot_utc.astype('datetime64[m]')} UTC"
    if drawn.asked_utc is None:
        print(f"the map time's daily snapshot, {snapshot}, is drawn")
    elif drawn.asked_utc != drawn.snapshot_utc:
        print(
            f"no snapshot at {drawn.asked_utc.astype('datetime64[m]')} UTC (profiles are kept "
            f"once a day): the last one before it, {snapshot}, is drawn"
        )
    print(f"profile of cell {drawn.cell_id} at {snapshot} written to {drawn.path}")
    return 0


def _station_args(args: argparse.Namespace, cfg) -> tuple[Path, list[Path]]:
    """Station and observation files from the command line, else from ``[stations]``."""
    stations = args.stations or (cfg.stations.stations if cfg.stations else None)
    if args.observations:
        observations = [Path(p) for p in args.observations.split(",") if p]
    else:
        observations = list(cfg.stations.observations) if cfg.stations else []
    if stations is None or not observations:
        raise InputError(
            "give --stations FILE and --observations FILE[,FILE...] (or a [stations] section in "
            "the config)"
        )
    return stations, observations


def _cmd_verify(args: argparse.Namespace) -> int:
    from regionmap.stations.chain import verify_command

    cfg = load_config(args.config)
    stations, observations = _station_args(args, cfg)
    verify_command(cfg, stations, observations, args.out, undercatch=args.undercatch)
    print(f"Caution: {CAUTION}")
    return 0


def _cmd_calibrate(args: argparse.Namespace) -> int:
    from regionmap.stations.chain import calibrate_command

    cfg = load_config(args.config)
    stations, observations = _station_args(args, cfg)
    calibrate_command(
        cfg,
        stations,
        observations,
        args.out,
        method=args.method,
        per_month=args.per_month,
        undercatch=args.undercatch,
    )
    print(f"Caution: {CAUTION}")
    return 0


def _cmd_init(args: argparse.Namespace) -> int:
    from regionmap.io.starter_config import write_starter_config

    path, missing = write_starter_config(
        args.folder, dem=args.dem, zones=args.zones, forcing=args.forcing, force=args.force
    )
    print(f"config written to {path}; check it, then: regionmap run {path}")
    if missing:
        print(
            f"note: the forcing has no variable with the standard name for {', '.join(missing)}; "
            f"map them in [forcing.variables] of {path} before running",
            file=sys.stderr,
        )
    return 0


def _cmd_demo(args: argparse.Namespace) -> int:
    from regionmap.demo.scenario import run_demo

    with _human_text_to_stderr(args.json):
        outcome = run_demo(args.out, progress=not args.quiet, use_cache=not args.no_cache)
    return _finish(outcome, args.json)


def _add_run_options(p: argparse.ArgumentParser) -> None:
    """``--json`` and ``--no-cache`` of ``run`` and ``demo``."""
    p.add_argument(
        "--json",
        action="store_true",
        help="print a machine-readable summary (JSON) on stdout; everything else goes to stderr",
    )
    p.add_argument(
        "--no-cache",
        action="store_true",
        help="prepare the region (terrain, cells, weights) afresh instead of loading it from the "
        "cache ([run] cache_dir, $REGIONMAP_CACHE_DIR or ~/.cache/regionmap), and store nothing",
    )


def _positive_int(text: str) -> int:
    """An argparse type: a whole number of at least 1."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number >= 1, got {text!r}") from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"expected a whole number >= 1, got {value}")
    return value


class _Parser(argparse.ArgumentParser):
    """argparse with its usage errors as one line (the usage stays in ``--help``)."""

    def error(self, message: str):
        self.exit(2, f"regionmap: error: {self.prog}: {message}; see {self.prog} --help\n")


def _add_demo_command(sub, common: argparse.ArgumentParser) -> None:
    """``regionmap demo``: the invented scenario, run end to end."""
    p = sub.add_parser(
        "demo",
        parents=[common],
        help="build the invented demo region and run the chain on it",
        description="Build the invented demo scenario (DEM, zones, a season of NWP-like forcing) "
        "and run the whole chain on it.",
        epilog=f"Caution: {CAUTION}",
    )
    p.add_argument(
        "--out",
        type=Path,
        default=Path("regionmap-demo"),
        help="output folder (default: %(default)s)",
    )
    _add_run_options(p)
    p.set_defaults(func=_cmd_demo)


def _add_init_command(sub, common: argparse.ArgumentParser) -> None:
    """``regionmap init``: a commented config from the user's files."""
    p = sub.add_parser(
        "init",
        parents=[common],
        help="write a commented config from your DEM, zones and forcing",
        description="Read your DEM (elevation range -> band edges), zones (the attribute that "
        "names each zone, the layer) and forcing (period, variables found by CF standard name) and "
        "write FOLDER/regionmap.toml with comments. A file that cannot be read is refused.",
        epilog=f"Caution: {CAUTION}",
    )
    p.add_argument("folder", type=Path, help="folder for regionmap.toml (created when missing)")
    p.add_argument("--dem", type=Path, required=True, help="DEM: any GDAL raster with a CRS")
    p.add_argument("--zones", type=Path, required=True, help="zone polygons (GeoJSON, GPKG, ...)")
    p.add_argument(
        "--forcing", required=True, metavar="PATH", help="CF NetCDF/Zarr forcing (file or glob)"
    )
    p.add_argument("--force", action="store_true", help="replace an existing regionmap.toml")
    p.set_defaults(func=_cmd_init)


def _add_run_command(sub, common: argparse.ArgumentParser) -> None:
    """``regionmap run``: the whole chain for a config."""
    p = sub.add_parser(
        "run",
        parents=[common],
        help="run the whole chain for a config",
        description="Downscale the forcing to every cell, run the snow column per cell in "
        "parallel, and write cells.nc, profiles.nc, state.nc, zones.gpkg, maps/ and the report.",
        epilog=f"Caution: {CAUTION}",
    )
    p.add_argument("config", type=Path, help="the run's TOML config")
    p.add_argument("--out", type=Path, help="output folder (overrides [output] dir)")
    p.add_argument(
        "--continue-from",
        type=Path,
        metavar="STATE.nc",
        help="continue from an earlier run's state.nc",
    )
    p.add_argument(
        "--restart",
        type=Path,
        metavar="PROFILE",
        help="observed profile (CAAML v6 XML or CSV) to restart cells from",
    )
    p.add_argument("--zone", help="zone of the restarted cells")
    p.add_argument(
        "--band",
        metavar="LOW-HIGH",
        help="elevation band of the restarted cells, in m (e.g. 2100-2400)",
    )
    p.add_argument("--aspect", help="aspect sector of the restarted cells (N, NE, ... or flat)")
    group = p.add_mutually_exclusive_group()
    group.add_argument(
        "--workers", type=_positive_int, metavar="N", help="a local dask cluster of N processes"
    )
    group.add_argument(
        "--scheduler", metavar="ADDRESS", help="an existing dask.distributed scheduler"
    )
    p.add_argument(
        "--scheduler-security",
        type=Path,
        metavar="FILE",
        help="TLS settings for --scheduler: a dask config file (YAML) with distributed: comm: "
        "tls: (default: the dask config)",
    )
    p.add_argument(
        "--dashboard",
        action="store_true",
        help="serve dask's dashboard on 127.0.0.1 while the run lasts (needs bokeh)",
    )
    p.add_argument(
        "--force",
        action="store_true",
        help="replace a non-empty folder that is not a regionmap output (it is kept aside, never "
        "deleted)",
    )
    _add_run_options(p)
    p.set_defaults(func=_cmd_run)


def _add_forcing_command(sub, common: argparse.ArgumentParser) -> None:
    """``regionmap forcing``: the downscaled per-cell forcing."""
    p = sub.add_parser(
        "forcing",
        parents=[common],
        help="write the downscaled per-cell forcing, for inspection",
        description="Downscale the NWP forcing to every cell and write it as CF NetCDF "
        "(cell x time).",
    )
    p.add_argument("config", type=Path, help="the run's TOML config")
    p.add_argument("--out", type=Path, required=True, help="output folder")
    p.add_argument(
        "--force",
        action="store_true",
        help="replace a non-empty folder that is not a regionmap output",
    )
    p.set_defaults(func=_cmd_forcing)


def _add_stations_command(sub, common: argparse.ArgumentParser) -> None:
    """``regionmap verify`` and ``regionmap calibrate``: the chain at station points."""
    for name, helptext in (
        ("verify", "compare the downscaled forcing with station observations"),
        ("calibrate", "fit [bias] settings from station observations"),
    ):
        p = sub.add_parser(
            name,
            parents=[common],
            help=helptext,
            description=helptext[0].upper() + helptext[1:] + ": the forcing "
            "is downscaled to each station point by the same chain as the cells.",
            epilog=f"Caution: {CAUTION}",
        )
        p.add_argument("config", type=Path, help="the run's TOML config")
        p.add_argument(
            "--stations",
            type=Path,
            metavar="STATIONS.csv",
            help="station metadata (docs/station_csv.md)",
        )
        p.add_argument(
            "--observations", metavar="OBS.csv[,...]", help="observation files, comma-separated"
        )
        p.add_argument(
            "--out",
            type=Path,
            default=Path(name if name == "calibrate" else "verification"),
            help="folder for the tables and figures (default: %(default)s)",
        )
        p.add_argument(
            "--undercatch",
            choices=["single_alter", "unshielded"],
            help="correct gauge snowfall under-catch (Kochendorfer et al. 2017) before comparing",
        )
        if name == "calibrate":
            p.add_argument(
                "--method",
                choices=["scaling", "quantile_mapping"],
                default="scaling",
                help="offsets/factors or quantile mapping (default: %(default)s)",
            )
            p.add_argument(
                "--per-month", action="store_true", help="fit one value per calendar month"
            )
            p.set_defaults(func=_cmd_calibrate)
        else:
            p.set_defaults(func=_cmd_verify)


def _add_profile_command(sub, common: argparse.ArgumentParser) -> None:
    """``regionmap profile``: one cell's simulated profile."""
    p = sub.add_parser(
        "profile",
        parents=[common],
        help="draw one cell's simulated profile",
        description="Draw one cell's layers (grain class, size, hand hardness, temperature, "
        "density, liquid water) with crusts, weak layers and the worst interface marked.",
        epilog=f"Caution: {CAUTION}",
    )
    p.add_argument("outdir", type=Path, help="a run's output folder")
    p.add_argument("--cell", type=int, metavar="ID", help="cell_id")
    p.add_argument("--zone", help="zone name")
    p.add_argument("--band", metavar="LOW-HIGH", help="elevation band in m, e.g. 2100-2400")
    p.add_argument("--aspect", help="aspect sector (N, NE, ... or flat)")
    p.add_argument(
        "--slope-class", type=int, metavar="K", help="slope class index, when slopes are split"
    )
    p.add_argument(
        "--time",
        metavar="T",
        help="time (UTC, ISO 8601); the last daily snapshot at or before it is drawn and names "
        "the file (default: the map time)",
    )
    p.set_defaults(func=_cmd_profile)


def _add_report_command(sub, common: argparse.ArgumentParser) -> None:
    """``regionmap report``: the briefing of a finished run."""
    p = sub.add_parser(
        "report",
        parents=[common],
        help="write the HTML briefing report of a run",
        description="Write report.html (self-contained) and its maps under figures/ for a run's "
        "output folder; with --all-figures also every zone's overviews, profile, layer trackers "
        "and elevation chart at print resolution.",
        epilog=f"Caution: {CAUTION}",
    )
    p.add_argument("outdir", type=Path, help="a run's output folder")
    p.add_argument(
        "--all-figures",
        action="store_true",
        help="also draw the per-zone figures (PNG) and overview tables (CSV) into figures/",
    )
    p.set_defaults(func=_cmd_report)


def _add_terrain_command(sub, common: argparse.ArgumentParser) -> None:
    """``regionmap terrain``: terrain layers of a DEM."""
    p = sub.add_parser(
        "terrain",
        parents=[common],
        help="write terrain layers of a DEM as GeoTIFF",
        description="Slope, aspect (Horn 1981), curvature, sky-view factor (Dozier & Frew 1990) "
        "and "
        "maximum-upwind-slope wind exposure (Winstral et al. 2002) of a DEM, written as GeoTIFFs "
        "on "
        "the DEM's grid.",
    )
    p.add_argument("dem", type=Path, help="any GDAL raster with a CRS")
    p.add_argument(
        "--out", type=Path, default=Path("terrain"), help="output folder (default: %(default)s)"
    )
    p.add_argument(
        "--azimuths",
        type=int,
        default=TerrainSettings.model_fields["horizon_azimuths"].default,
        help="horizon azimuths (4-72, default %(default)s)",
    )
    p.add_argument(
        "--horizon-distance",
        type=float,
        default=TerrainSettings.model_fields["horizon_distance_m"].default,
        help="horizon search distance in m (default %(default)s)",
    )
    p.set_defaults(func=_cmd_terrain)


#: The sub-commands in the order ``regionmap --help`` lists them.
_COMMANDS = (
    _add_demo_command,
    _add_init_command,
    _add_run_command,
    _add_forcing_command,
    _add_stations_command,
    _add_profile_command,
    _add_report_command,
    _add_terrain_command,
)


def build_parser() -> argparse.ArgumentParser:
    """The argument parser with every sub-command (also used to document the CLI)."""
    parser = _Parser(
        prog="regionmap",
        description="Regional snowpack-structure guidance for avalanche forecasters: downscale NWP "
        "forcing to elevation-band x aspect cells, run a snow column per cell, and map weak "
        "layers, crusts and new-snow loads per forecast zone.",
        epilog=f"Caution: {CAUTION}",
    )
    parser.add_argument("--version", action="version", version=f"regionmap {__version__}")
    parser.add_argument("--debug", action="store_true", help="show tracebacks on errors")
    parser.add_argument(
        "-q", "--quiet", action="store_true", help="no progress bars; errors only in the log"
    )
    parser.add_argument(
        "-v",
        "--verbose",
        action="count",
        default=0,
        help="more log messages (-v: progress of the stages and library warnings, -vv: debug)",
    )
    # the same options after the sub-command, too
    common = _Parser(add_help=False)
    common.add_argument(
        "--debug", action="store_true", default=argparse.SUPPRESS, help="show tracebacks on errors"
    )
    common.add_argument(
        "-q",
        "--quiet",
        action="store_true",
        default=argparse.SUPPRESS,
        help="no progress bars; errors only in the log",
    )
    common.add_argument(
        "-v",
        "--verbose",
        action="count",
        default=argparse.SUPPRESS,
        help="more log messages (-v, -vv)",
    )
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    for add_command in _COMMANDS:
        add_command(sub, common)
    return parser


def _return_freed_memory_to_the_os() -> None:
    """glibc only: serve allocations of 1 MB and more by their own memory maps and trim the
    heap above 1 MB (``mallopt``), so arrays of finished chunks go back to the system.

    By default glibc raises its map threshold after each large free, and the chunk tasks'
    many-megabyte arrays then fragment the heaps of the threads, which never shrink: the
    largest benchmark's peak memory falls by about a sixth with these settings
    (``benchmarks/NOTES.md``), at the price of more page mapping.
    """
    if platform.libc_ver()[0] != "glibc":
        return
    m_trim_threshold, m_mmap_threshold = -1, -3  # <malloc.h>
    try:
        libc = ctypes.CDLL("libc.so.6")
    except OSError:  # an unusual glibc install: keep its defaults
        return
    libc.mallopt(m_mmap_threshold, 1 << 20)
    libc.mallopt(m_trim_threshold, 1 << 20)


def _small_netcdf_chunk_caches() -> None:
    """Files opened for reading get a 4 MB chunk cache per variable instead of netCDF-C's
    64 MB: the summaries and figures read ``cells.nc`` and ``profiles.nc`` a block at a time,
    and 30-odd variables each filling 64 MB grew the process with the size of the region."""
    import netCDF4

    netCDF4.set_chunk_cache(4 * 2**20)


#: Libraries with log handlers of their own (dask.distributed prints its workers' errors
#: and tracebacks): silent by default, their warnings shown with -v, more with -vv.
_LIBRARY_LOGGERS = ("distributed", "dask", "tornado", "asyncio", "bokeh", "numba", "rasterio")


def _show_warning(message, category, filename, lineno, file=None, line=None) -> None:
    """Warnings as log records: regionmap's own as one warning line, libraries' at INFO
    (seen with -v), so that library noise never reaches the terminal by default."""
    if issubclass(category, RegionmapWarning):
        logging.getLogger("regionmap").warning("%s", message)
    else:
        logging.getLogger("py.warnings").info(
            "%s: %s (%s:%s)", category.__name__, message, filename, lineno
        )


class _StderrHandler(logging.StreamHandler):
    """A handler that writes to the ``sys.stderr`` of the moment (tests swap it)."""

    @property
    def stream(self):
        return sys.stderr

    @stream.setter
    def stream(self, value) -> None:
        pass


def configure_logging(verbosity: int = 0, quiet: bool = False) -> int:
    """Standard-library logging for a command: regionmap's messages from WARNING (default),
    INFO (-v), DEBUG (-vv) or ERROR (-q) on; other libraries' messages and warnings only
    with -v. Returns the level set."""
    level = logging.ERROR if quiet else max(logging.DEBUG, logging.WARNING - 10 * verbosity)
    root = logging.getLogger()
    for handler in list(root.handlers):
        if getattr(handler, "_regionmap", False):
            root.removeHandler(handler)
    handler = _StderrHandler()
    handler.setFormatter(logging.Formatter("regionmap: %(levelname)s: %(message)s"))
    handler.addFilter(lambda record: verbosity >= 1 or record.name.startswith("regionmap"))
    handler._regionmap = True
    root.addHandler(handler)
    root.setLevel(level)
    library_level = {0: logging.CRITICAL + 1, 1: logging.WARNING}.get(verbosity, logging.INFO)
    for name in _LIBRARY_LOGGERS:
        logging.getLogger(name).setLevel(max(level, library_level))
    warnings.showwarning = _show_warning
    return level


def main(argv: list[str] | None = None) -> int:
    """Run the CLI; returns the exit status."""
    _return_freed_memory_to_the_os()
    _small_netcdf_chunk_caches()
    parser = build_parser()
    args = parser.parse_args(argv)
    configure_logging(args.verbose, args.quiet)
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
        if is_no_space(exc):  # a full disk inside a library's writer
            where = getattr(exc, "filename", None) or "the output"
            print(
                f"regionmap: error: no space left on device while writing {where}", file=sys.stderr
            )
            return 2
        print(
            f"regionmap: internal error: {type(exc).__name__}: {exc} (run with --debug for the "
            "traceback)",
            file=sys.stderr,
        )
        return 1


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())

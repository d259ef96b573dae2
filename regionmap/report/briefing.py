"""The morning briefing: every figure of a run and a one-page ``report.html``.

:func:`write_all_figures` draws the figures of an output folder into ``figures/`` (PNG at
print resolution, plus the overview CSV tables; figures are drawn in forked worker processes
while the data of the next ones are read). :func:`write_report` draws them too and
writes ``report.html``, the morning briefing: self-contained (images embedded as data URIs at
a reduced resolution, one inline script, no external scripts, fonts or style sheets, no web
addresses), built from the jinja2 template ``regionmap/report/templates/report.html.j2``. At the
top, a headline per zone (what changed since the previous run, the layers of concern in one
line each, new load, wet-snow onset), then the maps, every layer of concern of every zone
with its elevation-aspect rose, the zones' elevation-aspect roses of the main quantities,
the per-zone table, the rain-crust line in words, where the forcing became forecast, the
station verification when ``verification.csv`` is in the folder, the cautions and the run's
metadata. Times are shown in the run's local time zone with UTC beside them.

The report draws only the maps with matplotlib (in forked workers); the roses are drawn by
the page itself from one character per band × aspect (:mod:`regionmap.plots.roses`), so
its cost hardly grows with the number of zones and layers. The per-zone profiles, layer
trackers, elevation charts and overview PNGs are drawn by :func:`write_all_figures`.

Model output is guidance for trained people: field observations, the local avalanche
service and professional standards come first.
"""

from __future__ import annotations

import base64
import datetime as dt
import gc
import io
import json
import multiprocessing as mp
import os
import re
import struct
import zlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from regionmap import CAUTION, INVENTED_DATA, __version__
from regionmap.errors import OutputError
from regionmap.io.atomic import atomic_path, atomic_write_text
from regionmap.io.times import event_date_label, local_time_label
from regionmap.plots.maps import (
    _metres_per_unit,
    _shaded_relief,
    available_maps,
    plot_metric_map,
    plot_rain_crust_map,
    rain_crust_events,
)
from regionmap.plots.outputs import METRICS, RunOutputs
from regionmap.plots.overview import plot_overview, sector_layout, write_overview_csv
from regionmap.plots.profile import plot_profile, read_profile
from regionmap.plots.roses import (
    encode_classes,
    grid_values,
    metric_scales,
    presence_scale,
    zone_grid,
)
from regionmap.plots.style import PRINT_DPI, REPORT_DPI, render_png, slug, zone_slug
from regionmap.plots.tracker import (
    layer_tracks,
    new_snow_days,
    plot_elevation_chart,
    plot_layer_tracker,
)
from regionmap.products.problems import PROBLEM_LABELS, PROBLEMS, problem_sentences
from regionmap.products.summaries import band_label
from regionmap.report.headline import (
    HEADLINE_MIN_PRESENCE_FRAC,
    headline_items,
    layer_lines,
    zone_changes,
)

__all__ = ["write_all_figures", "write_report", "OVERVIEW_METRICS", "REPORT_MAX_BYTES", "CAUTIONS"]

#: metrics drawn as elevation-aspect overviews for every zone.
OVERVIEW_METRICS: tuple[str, ...] = ("depth_hoar_fraction", "pwl_depth_cm", "new_snow_72h_cm")
#: metrics drawn as maps, in this order, when the run has their raster (the other rasters stay
#: under maps/ for GIS use).
MAP_METRICS: tuple[str, ...] = (
    "snow_depth_cm",
    "new_snow_72h_cm",
    "depth_hoar_fraction",
    "pwl_depth_cm",
    "pwl_slab_cm",
    "crust_count",
    "threshold_count_max",
)
#: at most this many rain-crust maps (the events with the longest lines).
MAX_RAIN_CRUST_MAPS = 2
#: metric of the per-zone elevation chart.
ELEVATION_METRIC = "snow_depth_cm"
#: layers shown in the report: present on at least this share of a zone's weighted area.
MIN_PRESENCE_FRAC = 0.1
#: at most this many tracked layers per zone (the most widespread weak layer and crust first).
MAX_TRACKED_LAYERS = 2
#: rows of the layers-of-concern table per zone: weak layers, crusts (the most widespread).
TABLE_WEAK_LAYERS, TABLE_CRUSTS = 5, 3
#: size limit of report.html [bytes].
REPORT_MAX_BYTES = 10 * 2**20
#: embedded images stop at this many bytes; later figures (regions of many zones) are listed
#: by file name only, so the report stays under REPORT_MAX_BYTES with its tables.
FIGURE_BUDGET_BYTES = 8 * 2**20
#: widest embedded image [px].
_THUMB_MAX_PX = int(round(1000 * REPORT_DPI / 72))

CAUTIONS: tuple[str, ...] = (
    "This is model guidance. Field observations, the local avalanche service's bulletins and "
    "professional standards of practice come first.",
    "Simulated layers, depths and threshold counts are estimates of a light snow column driven by "
    "downscaled weather-model forcing; they carry the forcing's errors (precipitation, freezing "
    "level, wind).",
    "Wind transport is averaged over each elevation band and aspect of a zone: the loading of "
    "single lee slopes below ridges, cornices, local avalanche activity and slope-scale "
    "variability are not resolved.",
    "Forecast parts of the run use forecast forcing and are less certain than the analysis.",
)


#: the caution beside the avalanche-problem indicators
PROBLEM_CAUTION = (
    "Model indicators for trained people, not a hazard rating and not an avalanche forecast: "
    "they show where the simulated snowpack has the structure of each avalanche problem. "
    "Field observations, the local avalanche service's bulletins and professional standards "
    "of practice come first."
)


@dataclass
class _Figure:
    section: str
    caption: str
    path: Path
    thumb_png: bytes
    size: tuple[int, int]


def _map_specs(out: RunOutputs) -> list[tuple[str, str, str, callable]]:
    """(section, file name, caption, draw function) of the maps. What they read from the
    NetCDF files (cell table, times) and the zones, the rain-crust lines and the hillshade are
    read here, so forked workers only read GeoTIFFs."""
    specs = []
    maps = set(available_maps(out))
    for name in [m for m in MAP_METRICS if m in maps]:
        m = METRICS[name]
        specs.append(
            (
                "maps",
                f"map_{name}.png",
                f"Map: {m.label} [{m.units}]",
                lambda name=name: plot_metric_map(out, name),
            )
        )
    for event_id, when in rain_crust_events(out, limit=MAX_RAIN_CRUST_MAPS):
        stamp = pd.Timestamp(when).strftime("%Y%m%dT%H%M")
        specs.append(
            (
                "maps",
                f"map_rain_crust_{stamp}.png",
                "Map: rain-crust line of the rain of "
                f"{event_date_label(event_id, out.local_timezone)}",
                lambda event_id=event_id: plot_rain_crust_map(out, event_id),
            )
        )
    if specs:
        import rasterio

        lat = float(np.nanmean(out.table["lat"])) if "lat" in out.table else 45.0
        with rasterio.open(out.path("maps/cell_id.tif")) as src:
            _shaded_relief(out, *_metres_per_unit(src.crs, lat))
        out.zones, out.times, out.is_forecast, out.map_time  # noqa: B018  (read once, inherited by the workers)
    return specs


def _summary_specs(out: RunOutputs) -> list[tuple[str, str, str, callable]]:
    """Overviews, elevation charts and profiles of every zone. What they read (the summaries
    at the map time, the profiles of the chosen cells: one snapshot day of profiles.nc) is
    read here, so the draw functions only draw and forked workers never touch NetCDF files."""
    specs = []
    out.band_aspect()
    for zone in out.zone_names:
        for m in OVERVIEW_METRICS:
            specs.append(
                (
                    "overviews",
                    f"overview_{zone_slug(zone)}_{m}.png",
                    f"{zone}: elevation-aspect overview of {METRICS[m].label}",
                    lambda zone=zone, m=m: plot_overview(out, zone, m),
                )
            )
        specs.append(
            (
                "elevation",
                f"elevation_{zone_slug(zone)}_{ELEVATION_METRIC}.png",
                f"{zone}: {METRICS[ELEVATION_METRIC].label} against elevation",
                lambda zone=zone: plot_elevation_chart(out, zone, ELEVATION_METRIC),
            )
        )
        cid = _profile_cell(out, zone)
        if cid is not None:
            row = out.table.loc[cid]
            prof = read_profile(out, cid)
            specs.append(
                (
                    "profiles",
                    f"profile_{zone_slug(zone)}_cell{cid}.png",
                    f"{zone}: simulated profile of cell {cid} ({row['band']} m, "
                    f"{row['aspect_sector']}), "
                    "the cell with the highest threshold count at the map time",
                    lambda cid=cid, prof=prof: plot_profile(out, cid, profile=prof),
                )
            )
    return specs


def _layer_specs(out: RunOutputs) -> list[tuple[str, str, str, callable]]:
    """Layer trackers of every zone; their tracks (all snapshot days of profiles.nc, the
    slowest read) and new-snow days are computed here."""
    specs = []
    for zone in out.zone_names:
        layers = _tracked_layers(out, zone)
        if layers:
            tracks = layer_tracks(out, zone, layer_ids=layers)
            snow_days = new_snow_days(out, zone)
            for lid in layers:
                if (tracks["layer_id"] == lid).any():
                    specs.append(
                        (
                            "layers",
                            f"layer_{zone_slug(zone)}_{slug(lid)}.png",
                            f"{zone}: layer {lid} over the season",
                            lambda zone=zone, lid=lid, tracks=tracks, snow_days=snow_days: (
                                plot_layer_tracker(
                                    out, zone, lid, tracks=tracks, new_snow=snow_days
                                )
                            ),
                        )
                    )
    return specs


def _profile_cell(out: RunOutputs, zone: str) -> int | None:
    """The zone's cell with the highest worst threshold count at the map time (ties: the
    larger weighted area), or None when the zone has no snow anywhere."""
    vals = out.cell_values_at(out.map_time).set_index("cell_id")
    cells = out.table.index[out.table["zone"] == zone]
    v = vals.loc[cells]
    v = v[v["snow_depth_cm"] > 0]
    if v.empty:
        return None
    w, _ = out.weights
    frame = pd.DataFrame(
        {"tc": v["threshold_count_max"].fillna(-1.0), "w": w.reindex(v.index).to_numpy()},
        index=v.index,
    )
    return int(frame.sort_values(["tc", "w"], ascending=False).index[0])


def _tracked_layers(out: RunOutputs, zone: str) -> list[str]:
    """The zone's most widespread weak layer and crust, then the next most widespread layers,
    up to :data:`MAX_TRACKED_LAYERS` (present on at least :data:`MIN_PRESENCE_FRAC`)."""
    loc = out.layers_of_concern
    rows = loc[
        (loc["zone"] == zone)
        & (loc["aspect_sector"] == "all")
        & (loc["presence_frac"] >= MIN_PRESENCE_FRAC)
    ]
    rows = rows.sort_values("presence_frac", ascending=False).drop_duplicates("layer_id")
    firsts = rows.drop_duplicates("category")
    ordered = pd.concat(
        [firsts.sort_values("category", ascending=False), rows.drop(firsts.index)]
    )  # weak layer first
    return list(ordered["layer_id"][:MAX_TRACKED_LAYERS])


def _thumbnail(rgb: np.ndarray) -> tuple[bytes, tuple[int, int]]:
    """Reduced copy for the report: scaled by REPORT_DPI / PRINT_DPI (at most
    ``_THUMB_MAX_PX`` wide), 256 colours, PNG."""
    from PIL import Image

    im = Image.fromarray(rgb, mode="RGB")
    scale = REPORT_DPI / PRINT_DPI
    size = (max(1, round(im.width * scale)), max(1, round(im.height * scale)))
    if size[0] > _THUMB_MAX_PX:
        size = (_THUMB_MAX_PX, max(1, round(size[1] * _THUMB_MAX_PX / size[0])))
    small = im.resize(size, Image.Resampling.LANCZOS, reducing_gap=2.0)
    small = small.quantize(colors=256, method=Image.Quantize.FASTOCTREE)
    buf = io.BytesIO()
    small.save(buf, format="PNG", compress_level=6)
    return buf.getvalue(), size


_JOB: tuple | None = None  # (specs, thumbnails) handed to forked workers


def _draw_one(i: int) -> tuple[bytes, bytes, tuple[int, int]]:
    specs, thumbnails = _JOB
    fig = specs[i][3]()
    png, rgb = render_png(fig, dpi=PRINT_DPI)
    thumb, size = _thumbnail(rgb) if thumbnails else (b"", (0, 0))
    return png, thumb, size


class _Drawing:
    """Figures being drawn: in ``workers`` processes forked now (they inherit the specs and
    the data they hold), or here, in order, when forking is not possible or not worth it.
    Matplotlib's Agg rendering is CPU-bound and holds the GIL, hence processes."""

    def __init__(self, specs, thumbnails: bool, workers: int):
        global _JOB

        self.specs, self.pool = specs, None
        _JOB = (specs, thumbnails)
        if workers >= 1 and len(specs) >= 2 and "fork" in mp.get_all_start_methods():
            # the workers' garbage collector leaves the inherited objects (and their pages) alone
            gc.freeze()
            try:
                self.pool = mp.get_context("fork").Pool(workers)
            finally:
                gc.unfreeze()
            self.async_result = self.pool.map_async(_draw_one, range(len(specs)), chunksize=1)
        else:
            self.result = [_draw_one(i) for i in range(len(specs))]
        _JOB = None

    def get(self) -> list:
        if self.pool is not None:
            try:
                self.result = self.async_result.get()
            finally:
                self.pool.close()
                self.pool.join()
                self.pool = None
        return self.result


def _render(
    out: RunOutputs, *, thumbnails: bool, workers: int | None = None, maps_only: bool = False
) -> tuple[list[_Figure], list[Path]]:
    """Draw every figure and write them under figures/.

    Reading and drawing overlap: the maps start drawing in one forked worker while the
    summaries at the map time are computed here; the overviews, elevation charts and profiles
    then draw in ``workers`` more (default up to 2) while the layer tracks are read from all
    snapshot days of profiles.nc (the slowest read); the trackers last, while the overviews'
    CSV tables are written here. Each fork inherits the data it draws; the NetCDF files are
    closed before the last one."""
    workers = min(2, os.cpu_count() or 1) if workers is None else workers
    parallel = workers > 1
    map_specs = _map_specs(out)
    if maps_only:
        out.close()
        drawn = _Drawing(map_specs, thumbnails, workers if parallel else 0).get()
        return _written(out, map_specs, drawn), []
    maps = _Drawing(map_specs, thumbnails, 1 if parallel else 0)
    summary_specs = _summary_specs(out)
    summaries = _Drawing(summary_specs, thumbnails, workers if parallel else 0)
    layer_specs = _layer_specs(out)
    out.close()
    layers = _Drawing(layer_specs, thumbnails, workers if parallel else 0)
    figdir = out.out_dir / "figures"
    # the overviews' numbers while the last figures draw (forked workers already hold their data)
    tables = [
        write_overview_csv(out, zone, m, figdir / f"overview_{zone_slug(zone)}_{m}.csv")
        for zone in out.zone_names
        for m in OVERVIEW_METRICS
    ]
    specs = map_specs + summary_specs + layer_specs
    figures = _written(out, specs, maps.get() + summaries.get() + layers.get())
    return figures, [f.path for f in figures] + tables


def _written(out: RunOutputs, specs, drawn) -> list[_Figure]:
    """Write the drawn PNGs under figures/ (atomically) and describe them."""
    figdir = out.out_dir / "figures"
    figures = []
    for (section, name, caption, _), (png, thumb, size) in zip(specs, drawn, strict=True):
        path = figdir / name
        with atomic_path(path) as tmp:
            tmp.write_bytes(png)
        figures.append(_Figure(section, caption, path, thumb, size))
    return figures


def write_all_figures(out_dir) -> list[Path]:
    """Draw every figure of a run into ``OUT/figures/`` and return the files written.

    Figures (a chosen set, not every combination): a map of each of :data:`MAP_METRICS` the
    run has a raster for, a rain-crust map of each of the (up to
    :data:`MAX_RAIN_CRUST_MAPS`) most widespread rain-on-snow events; per zone the
    elevation-aspect overviews of :data:`OVERVIEW_METRICS` (PNG and CSV), the elevation chart
    of ``snow_depth_cm``, the profile of the cell with the highest threshold count, and a
    layer tracker for the zone's most widespread weak layer and crust (up to
    :data:`MAX_TRACKED_LAYERS` layers). PNGs at :data:`~regionmap.plots.style.PRINT_DPI`.

    Raises
    ------
    InputError
        When the output folder lacks a file the figures need.
    """
    out = RunOutputs(out_dir)
    try:
        return _render(out, thumbnails=False)[1]
    finally:
        out.close()


# --------------------------------------------------------------------------- HTML
_NO_WEB = re.compile("http", re.IGNORECASE)


def _png_with_text(png: bytes, text: str) -> bytes:
    """Insert a tEXt chunk (keyword ``Comment``) after the PNG's IHDR (ISO/IEC 15948 §11.3.4.3)."""
    data = b"Comment\x00" + text.encode("latin-1")
    chunk = (
        struct.pack(">I", len(data))
        + b"tEXt"
        + data
        + struct.pack(">I", zlib.crc32(b"tEXt" + data) & 0xFFFFFFFF)
    )
    end_ihdr = 8 + 8 + 13 + 4
    return png[:end_ihdr] + chunk + png[end_ihdr:]


def _data_uri(png: bytes) -> str:
    """``data:image/png;base64,…`` whose payload never spells "http" (by chance it can; then
    a short comment chunk shifts the encoding)."""
    for k in range(64):
        body = png if k == 0 else _png_with_text(png, "n" * k)
        b64 = base64.b64encode(body).decode("ascii")
        if not _NO_WEB.search(b64):
            return "data:image/png;base64," + b64
    raise OutputError(
        "report.html: could not embed an image without the letters 'http' in its encoding"
    )


def _no_web_text(html: str) -> str:
    """Write every "http" of the text as a character reference (h&#116;tp), so the page holds
    no web address and renders the same words."""
    return _NO_WEB.sub(lambda m: m.group(0)[0] + f"&#{ord(m.group(0)[1])};" + m.group(0)[2:], html)


def _fmt(v, decimals: int = 0) -> str:
    if v is None or (isinstance(v, float) and not np.isfinite(v)):
        return "–"
    if isinstance(v, (bool, np.bool_)):
        return "yes" if v else "no"
    if isinstance(v, (int, np.integer)):
        return str(int(v))
    if isinstance(v, (float, np.floating)):
        return f"{float(v):.{decimals}f}"
    return str(v)


_ZONE_COLUMNS = [  # column, header, scale, decimals
    ("zone", "zone", 1, 0),
    ("depth_hoar_fraction", "depth hoar [% area]", 100, 0),
    ("pwl_fraction", "weak layer of concern [% area]", 100, 0),
    ("pwl_depth_cm", "weak-layer depth [cm]", 1, 0),
    ("crust_count_mean", "crusts (mean)", 1, 1),
    ("crust_count_max", "crusts (max)", 1, 0),
    ("new_snow_24h_cm", "new snow 24 h [cm]", 1, 0),
    ("new_snow_72h_cm", "new snow 72 h [cm]", 1, 0),
    ("new_snow_72h_kg_m2", "new snow 72 h [kg m-2]", 1, 0),
    ("snow_depth_cm", "snow depth [cm]", 1, 0),
    ("threshold_count_max_max", "worst threshold count", 1, 1),
    ("rain_crust_line_m", "rain-crust line [m]", 1, 0),
]
_LAYER_COLUMNS = [
    ("zone", "zone", 1, 0),
    ("layer_name", "layer", 1, 0),
    ("presence_frac", "present [% area]", 100, 0),
    ("depth_cm", "depth [cm]", 1, 0),
    ("slab_cm", "slab [cm, slope-normal]", 1, 0),
    ("load_above_kg_m2", "load above [kg m-2]", 1, 0),
    ("load_since_burial_kg_m2", "added since burial [kg m-2]", 1, 0),
    ("load_72h_kg_m2", "added 72 h [kg m-2]", 1, 0),
]
_VERIFICATION_COLUMNS = [
    ("station_id", "station", 1, 0),
    ("variable", "variable", 1, 0),
    ("units", "units", 1, 0),
    ("n", "pairs", 1, 0),
    ("bias", "bias", 1, 2),
    ("mae", "MAE", 1, 2),
    ("rmse", "RMSE", 1, 2),
    ("r2", "R²", 1, 2),
    ("total_percent_difference", "total difference [%]", 1, 0),
]
_SECTIONS = [
    ("maps", "Maps", ""),
    (
        "overviews",
        "Elevation-aspect overviews",
        "Aspect sectors around (north at the top), elevation bands as rings with the highest band "
        "in the centre.",
    ),
    (
        "profiles",
        "Simulated profiles",
        "A simulated profile is no substitute for a profile dug on the slope.",
    ),
    ("layers", "Layers of concern over the season", ""),
    ("elevation", "Elevation charts", ""),
]


def _table(frame: pd.DataFrame, spec) -> tuple[list[str], list[list[str]]]:
    cols = [(c, h, s, d) for c, h, s, d in spec if c in frame.columns]
    rows = []
    for _, r in frame.iterrows():
        rows.append(
            [_fmt(r[c] * s if s != 1 and pd.notna(r[c]) else r[c], d) for c, _, s, d in cols]
        )
    return [h for _, h, _, _ in cols], rows


def _forecast_text(out: RunOutputs) -> str:
    fc = out.is_forecast
    times = out.times
    start, end = (pd.Timestamp(t).strftime("%Y-%m-%d %H:%M UTC") for t in (times[0], times[-1]))
    if not fc.any():
        return (
            f"The whole run ({start} to {end}) is driven by analysis forcing; there is no "
            "forecast part."
        )
    first = pd.Timestamp(times[np.argmax(fc)]).strftime("%Y-%m-%d %H:%M UTC")
    if fc.all():
        return f"The whole run ({start} to {end}) is driven by forecast forcing."
    ana = pd.Timestamp(out.analysis_time).strftime("%Y-%m-%d %H:%M UTC")
    return (
        f"Forcing is analysis from {start} to {ana}; from {first} to {end} it is forecast. "
        "The saved state for continuation (state.nc) is the one at the analysis time."
    )


def _verification(out: RunOutputs) -> tuple[str, list[str], list[list[str]]]:
    path = out.out_dir / "verification.csv"
    if not path.is_file():
        return (
            "No station verification results in this output folder (verification.csv); this "
            "section "
            "appears when station data are configured.",
            [],
            [],
        )
    frame = pd.read_csv(path)
    if "period_start" in frame.columns and "period_end" in frame.columns and len(frame):
        start, end = frame["period_start"].iloc[0], frame["period_end"].iloc[0]
        text = f"Downscaled model against station observations, {start} to {end}."
    else:
        text = "Downscaled model against station observations over the period in verification.csv."
    cols, rows = _table(frame, _VERIFICATION_COLUMNS)
    return text + " Bias = model minus observation.", cols, rows


def _run_items(run: dict) -> list[tuple[str, str]]:
    items = []
    for key, value in run.items():
        if key == "config":
            continue
        if isinstance(value, dict):
            flat = ", ".join(
                f"{k}: {_fmt(v, 2) if isinstance(v, float) else v}"
                for k, v in value.items()
                if not isinstance(v, (dict, list))
            )
            if flat:
                items.append((key, flat))
        elif isinstance(value, list):
            items.append((key, f"{len(value)} entries"))
        else:
            items.append((key, _fmt(value, 2)))
    return items


def _rose_payload(out: RunOutputs, lines: pd.DataFrame) -> tuple[dict, dict, list, dict, dict]:
    """What the page needs to draw the roses: the zones' grids, the colour scales, the
    metric roses per zone, the layer roses per (zone, layer_id) and the avalanche-problem
    roses per (zone, problem), as class strings."""
    ba = out.band_aspect_table
    sectors, _ = sector_layout(out.table["aspect_sector"].unique())
    grids = zone_grid(ba, out.table, sectors)
    scales = metric_scales(ba)
    presence = presence_scale()
    terrain = {
        z: grid_values(ba[ba["zone"] == z], g, "area_km2", fill=0.0) > 0 for z, g in grids.items()
    }
    metric_roses = []
    for zone, g in grids.items():
        rows = ba[ba["zone"] == zone]
        for col, (scale, factor) in scales.items():
            v = grid_values(rows, g, col) * factor
            metric_roses.append(
                {"zone": zone, "scale": col, "v": encode_classes(scale.classes(v), terrain[zone])}
            )
    loc = out.layers_of_concern
    parts = loc[(loc["aspect_sector"] != "all") & (loc["presence_frac"] > 0)]
    layer_roses = {}
    for (zone, lid), rows in parts.groupby(["zone", "layer_id"], sort=False):
        if zone in grids:
            v = grid_values(rows, grids[zone], "presence_frac", fill=0.0) * 100.0
            k = np.where(v > 0, presence.classes(v), -1)
            layer_roses[(zone, lid)] = encode_classes(k, terrain[zone])
    problems = out.problems
    problem_scale = presence_scale("problem", "share of the terrain with the problem")
    problem_roses = {}
    parts = problems[(problems["aspect_sector"] != "all") & (problems["present_frac"] > 0)]
    for (zone, problem), rows in parts.groupby(["zone", "problem"], sort=False):
        if zone in grids:
            v = grid_values(rows, grids[zone], "present_frac", fill=0.0) * 100.0
            k = np.where(v > 0, problem_scale.classes(v), -1)
            problem_roses[(zone, problem)] = encode_classes(k, terrain[zone])
    page = {
        "zones": {
            z: {
                "bands": [
                    band_label(np.array([lo]), np.array([hi]))[0]
                    for lo, hi in zip(g["band_lower_m"], g["band_upper_m"], strict=True)
                ],
                "sectors": g["sectors"],
                "flat": g["sectors"][-1] == "flat",
            }
            for z, g in grids.items()
        },
        "scales": {
            "presence": presence.as_dict(),
            "problem": problem_scale.as_dict(),
            **{k: sc.as_dict() for k, (sc, _) in scales.items()},
        },
    }
    legends = {
        "presence": presence,
        "problem": problem_scale,
        **{k: sc for k, (sc, _) in scales.items()},
    }
    return page, legends, metric_roses, layer_roses, problem_roses


def _problem_matrix(problems: pd.DataFrame, zones: list[str]) -> list[dict]:
    """Zone × problem matrix of the zone-wide rows: per zone, one cell per problem with its
    likelihood class and the share of the zone's terrain with it."""
    zone_rows = problems[problems["aspect_sector"] == "all"].set_index(["zone", "problem"])
    matrix = []
    for zone in zones:
        cells = []
        for problem in PROBLEMS:
            if (zone, problem) not in zone_rows.index:
                cells.append({"text": "", "cls": "none"})
                continue
            r = zone_rows.loc[(zone, problem)]
            if not bool(r["assessed"]):
                cells.append({"text": "not assessed", "cls": "na"})
            elif not r["present_frac"] > 0:
                cells.append({"text": "none", "cls": "none"})
            else:
                text = f"{r['likelihood_class']} ({100 * r['present_frac']:.0f} %)"
                cells.append({"text": text, "cls": "present"})
        matrix.append({"zone": zone, "cells": cells})
    return matrix


def _problem_zones(problems: pd.DataFrame, roses: dict, page: dict) -> list[dict]:
    """Per zone: its one line of text and a rose per problem present in it."""
    lines = problem_sentences(problems)
    zone_rows = problems[(problems["aspect_sector"] == "all") & (problems["present_frac"] > 0)]
    out = []
    for zone, text in lines.items():
        rows = zone_rows[zone_rows["zone"] == zone].sort_values("likelihood", ascending=False)
        items = [
            {
                "text": f"{PROBLEM_LABELS[r.problem]}: {r.likelihood_class}, "
                f"{100 * r.present_frac:.0f} % of the terrain",
                "v": roses.get((zone, r.problem), ""),
            }
            for r in rows.itertuples()
        ]
        out.append({"zone": zone, "text": text, "rings": _rings_note(page, zone), "roses": items})
    return out


def _rings_note(page: dict, zone: str) -> str:
    bands = page["zones"].get(zone, {}).get("bands", [])
    return f"rings {bands[-1]} m (outside) to {bands[0]} m (centre)" if bands else ""


def _without_minor_roses(zone: dict) -> dict:
    """A zone's layers with the roses of its minor (not headline) layers left out."""
    layers = [dict(layer, v="") if not layer["headline"] else layer for layer in zone["layers"]]
    dropped = sum(1 for a, b in zip(zone["layers"], layers, strict=True) if a["v"] and not b["v"])
    return {**zone, "layers": layers, "without_roses": dropped}


def _headlines(out, changes, zones, lines, window_end, terrain: str, tz: str) -> list[dict]:
    """One headline block per zone, in the run's zone order."""
    zone_rows_by_name = zones.set_index("zone")
    headlines = []
    for zone in out.zone_names:
        row = (
            zone_rows_by_name.loc[zone]
            if zone in zone_rows_by_name.index
            else pd.Series(dtype=float)
        )
        headlines.append(
            {
                "zone": zone,
                **headline_items(
                    zone,
                    changes,
                    row,
                    lines,
                    local_timezone=tz,
                    window_end=window_end,
                    terrain=terrain,
                ),
            }
        )
    return headlines


def _layer_zones(lines: pd.DataFrame, page: dict, layer_roses: dict) -> list[dict]:
    """Per zone, its layers of concern: sentence, headline flag and rose."""
    layer_zones = []
    for zone, zl in lines.groupby("zone", sort=True):
        layer_zones.append(
            {
                "zone": zone,
                "rings": _rings_note(page, zone),
                "without_roses": 0,
                "layers": [
                    {
                        "text": r.text,
                        "headline": bool(r.headline),
                        "v": layer_roses.get((zone, r.layer_id), ""),
                        "id": r.layer_id,
                    }
                    for r in zl.itertuples()
                ],
            }
        )
    return layer_zones


def _rain_crust_lines(zones: pd.DataFrame) -> list[tuple[str, str]]:
    """(zone, sentence) for the zones with a rain-crust line sentence."""
    if "rain_crust_text" not in zones.columns:
        return []
    return [
        (z, t)
        for z, t in zip(zones["zone"], zones["rain_crust_text"], strict=True)
        if isinstance(t, str) and t.strip()
    ]


def _figure_sections(figures: list[_Figure]) -> list[dict]:
    """The map sections with their figures; thumbnails embedded while the byte budget lasts."""
    sections, embedded = [], 0
    for sid, title, note in _SECTIONS:
        figs = []
        for f in (f for f in figures if f.section == sid):
            uri = _data_uri(f.thumb_png)
            fits = embedded + len(uri) <= FIGURE_BUDGET_BYTES
            embedded += len(uri) if fits else 0
            figs.append(
                {
                    "uri": uri if fits else None,
                    "caption": f.caption,
                    "name": f.path.name,
                    "width": f.size[0],
                    "height": f.size[1],
                }
            )
        if figs:
            sections.append({"id": sid, "title": title, "note": note, "figures": figs})
    return sections


def _render_html(context: dict) -> str:
    """Render the report template; drop the minor layers' roses if the page would be too big.

    Raises
    ------
    OutputError
        When the page would still exceed the size limit.
    """
    from jinja2 import Environment, FileSystemLoader, StrictUndefined, select_autoescape

    env = Environment(
        loader=FileSystemLoader(Path(__file__).parent / "templates"),
        autoescape=select_autoescape(["html", "j2"]),
        undefined=StrictUndefined,
        trim_blocks=False,
        lstrip_blocks=False,
    )
    template = env.get_template("report.html.j2")
    html = _no_web_text(template.render(**context))
    size = len(html.encode("utf-8"))
    if size >= REPORT_MAX_BYTES:
        # a region of very many zones and layers: the minor layers keep their sentence
        context["layer_zones"] = [_without_minor_roses(z) for z in context["layer_zones"]]
        html = _no_web_text(template.render(**context))
        size = len(html.encode("utf-8"))
    if size >= REPORT_MAX_BYTES:
        raise OutputError(
            f"report.html would be {size / 2**20:.1f} MB, over the 10 MB limit; "
            "hint: fewer maps or a lower REPORT_DPI"
        )
    return html


def write_report(out_dir) -> Path:
    """Draw the briefing's maps and write the self-contained ``OUT/report.html``; return its path.

    Raises
    ------
    InputError
        When the output folder lacks a file the report needs.
    OutputError
        When the report would exceed 10 MB or cannot be written.
    """
    out = RunOutputs(out_dir)
    try:
        tz = out.local_timezone
        map_t = out.map_time
        weights_label = out.weights[1]
        terrain = "avalanche terrain" if weights_label.startswith("avalanche") else "all terrain"
        changes = zone_changes(out)
        lines = layer_lines(out.layers_of_concern, terrain=terrain)
        page, legends, metric_roses, layer_roses, problem_roses = _rose_payload(out, lines)
        problems = out.problems
        window_end = out.new_snow_window_end
        zones = pd.DataFrame(out.zones.drop(columns=out.zones.geometry.name)).sort_values("zone")
        figures, _ = _render(out, thumbnails=True, maps_only=True)
        headlines = _headlines(out, changes, zones, lines, window_end, terrain, tz)
        layer_zones = _layer_zones(lines, page, layer_roses)
        metric_zones = {}
        for r in metric_roses:
            metric_zones.setdefault(r["zone"], []).append(r)
        zone_cols, zone_rows = _table(zones, _ZONE_COLUMNS)
        rain = _rain_crust_lines(zones)
        sections = _figure_sections(figures)
        v_text, v_cols, v_rows = _verification(out)
        context = dict(
            title="regionmap snowpack briefing",
            map_time=local_time_label(map_t, tz, year=True),
            map_status="forecast" if out.forecast_at(map_t) else "analysis",
            timezone=tz,
            weights_label=weights_label,
            generated=dt.datetime.now(dt.UTC).strftime("%Y-%m-%d %H:%M UTC"),
            version=__version__,
            caution=CAUTION,
            cautions=CAUTIONS,
            since=local_time_label(changes.since, tz),
            since_label=changes.since_label,
            headlines=headlines,
            invented_data=INVENTED_DATA if out.run.get("invented_data") else None,
            forecast_text=_forecast_text(out),
            zone_columns=zone_cols,
            zone_rows=zone_rows,
            window_end=local_time_label(window_end, tz),
            rain_crust=rain,
            layer_zones=layer_zones,
            problem_names=[PROBLEM_LABELS[p] for p in PROBLEMS],
            problem_matrix=_problem_matrix(problems, out.zone_names),
            problem_zones=_problem_zones(problems, problem_roses, page),
            problem_caution=PROBLEM_CAUTION,
            headline_min_pct=round(100 * HEADLINE_MIN_PRESENCE_FRAC),
            metric_zones=[
                {"zone": z, "rings": _rings_note(page, z), "roses": metric_zones[z]}
                for z in sorted(metric_zones)
            ],
            legends={
                k: list(zip(sc.colours, sc.labels(), strict=True)) for k, sc in legends.items()
            },
            legend_titles={k: f"{sc.label} [{sc.units}]" for k, sc in legends.items()},
            rose_data=json.dumps(page, separators=(",", ":")).replace("</", "<\\/"),
            sections=sections,
            verification_text=v_text,
            verification_columns=v_cols,
            verification_rows=v_rows,
            run_items=_run_items(out.run),
            run_json=json.dumps(out.run, indent=2, default=str),
        )
        html = _render_html(context)
        return atomic_write_text(out.out_dir / "report.html", html)
    finally:
        out.close()

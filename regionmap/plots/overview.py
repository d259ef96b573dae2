"""Elevation-aspect overview: one zone, one metric, one time, as a polar chart.

Aspect sectors run around the chart clockwise with north at the top; elevation bands are
rings with the **highest band in the centre** and the lowest outside. Each sector-ring is
coloured by the metric on regionmap's sequential ramp (:data:`regionmap.plots.style.METRIC_CMAP`)
with its value written in it; the flat sector is a column of boxes beside the chart, highest
band at the top. A sector-ring with no terrain is left white and hatched; bands above and
below the zone's terrain are left out, and so is the flat column when the zone has no
weighted flat terrain. The same numbers are written as a CSV table (band × aspect, all bands).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from matplotlib import patheffects
from matplotlib.cm import ScalarMappable
from matplotlib.collections import PolyCollection
from matplotlib.colors import Normalize
from matplotlib.patches import Rectangle

from regionmap.io.times import local_time_label
from regionmap.io.writers import write_csv
from regionmap.plots.outputs import SECTOR_ORDER, Metric, RunOutputs, metric
from regionmap.plots.style import METRIC_CMAP, new_figure, save_png, text_colour_on, zone_slug

__all__ = [
    "overview_table",
    "plot_overview",
    "write_overview",
    "sector_layout",
    "sector_ring_polygons",
    "HOLE_RINGS",
]

#: radius of the empty centre, in rings (keeps the innermost values readable).
HOLE_RINGS = 0.6
#: at most this many elevation-band labels along the rings (every k-th band is labelled).
_MAX_RING_LABELS = 8


def _outputs(out) -> RunOutputs:
    return out if isinstance(out, RunOutputs) else RunOutputs(out)


def sector_layout(sectors) -> tuple[list[str], float]:
    """Compass sectors of a run in clockwise order and their width [deg]: 16, 8 or 4 sectors
    depending on the names present (``NNE`` … → 16; ``NE`` … → 8; else 4)."""
    names = set(sectors) - {"flat"}
    if names & {"NNE", "ENE", "ESE", "SSE", "SSW", "WSW", "WNW", "NNW"}:
        order = list(SECTOR_ORDER[:16])
    elif names & {"NE", "SE", "SW", "NW"}:
        order = list(SECTOR_ORDER[0:16:2])
    else:
        order = list(SECTOR_ORDER[0:16:4])
    return order, 360.0 / len(order)


def overview_table(out, zone: str, metric_name: str, *, time=None) -> pd.DataFrame:
    """Band × aspect table of a metric for one zone (printed units, e.g. % for fractions).

    Returns
    -------
    DataFrame indexed by band label, highest band first, with ``band_lower_m``,
    ``band_upper_m`` and one column per aspect sector (clockwise from N, then ``flat`` when
    the zone has flat cells); NaN where the zone has no terrain.
    """
    out = _outputs(out)
    m = metric(metric_name)
    out.check_zone(zone)
    ba = out.band_aspect(time)
    z = ba[ba["zone"] == zone]
    table = out.table[out.table["zone"] == zone]
    order, _ = sector_layout(out.table["aspect_sector"].unique())
    if (table["aspect_sector"] == "flat").any():
        order = [*order, "flat"]
    bands = (
        table[["band_lower_m", "band_upper_m", "band"]]
        .drop_duplicates()
        .sort_values("band_lower_m", ascending=False)
    )
    wide = z.pivot_table(
        index="band",
        columns="aspect_sector",
        values=m.summary_column,
        aggfunc="first",
        dropna=False,
    )
    wide = wide.reindex(index=bands["band"], columns=order) * m.scale
    wide.insert(0, "band_upper_m", bands["band_upper_m"].to_numpy())
    wide.insert(0, "band_lower_m", bands["band_lower_m"].to_numpy())
    wide.columns.name = None
    return wide


def _vmax(out: RunOutputs, m: Metric, time) -> float:
    if m.vmax is not None:
        return m.vmax
    vals = out.band_aspect(time)[m.summary_column].to_numpy(np.float64) * m.scale
    top = np.nanmax(vals) if np.isfinite(vals).any() else 0.0
    if top <= 0:
        return 1.0
    step = 10 ** np.floor(np.log10(top))
    return float(np.ceil(top / step) * step)


def _fmt(v: float, decimals: int) -> str:
    return f"{v:.{decimals}f}"


def plot_overview(out, zone: str, metric_name: str, *, time=None):
    """Draw the elevation-aspect overview of ``metric_name`` in ``zone``.

    Parameters
    ----------
    out : output folder (path) or :class:`RunOutputs`.
    zone : zone name.
    metric_name : a key of :data:`regionmap.plots.outputs.METRICS`.
    time : valid time (UTC, ISO text or datetime); default the run's map time.

    Returns
    -------
    matplotlib Figure. Its polar axes carry the sector-rings as two polygon collections
    (gid ``sector-rings`` with a value, ``no-terrain`` hatched), in (theta, r) data
    coordinates (:func:`sector_ring_polygons`), each polygon labelled ``"<band>|<sector>"``
    through the collection's ``get_urls()``; the flat boxes are patches (gid
    ``"<band>|flat"``) in a second axes titled ``flat``.

    Raises
    ------
    InputError
        Unknown zone or metric, or a time outside the run.
    """
    out = _outputs(out)
    m = metric(metric_name)
    t = out.map_time if time is None else out.time_in_run(time)
    wide = _trim(overview_table(out, zone, metric_name, time=t))
    compass, width_deg = sector_layout(out.table["aspect_sector"].unique())
    has_flat = "flat" in wide.columns
    norm = Normalize(0.0, _vmax(out, m, t))
    n_band = len(wide)
    fig = new_figure(7.2, 6.4)
    grid = fig.add_gridspec(1, 2, width_ratios=[5.2, 1.0] if has_flat else [5.2, 0.01])
    ax = fig.add_subplot(grid[0, 0], projection="polar")
    ax.set_theta_zero_location("N")
    ax.set_theta_direction(-1)
    size = max(5.0, 10.0 - 0.35 * n_band - 0.15 * len(compass))
    # all sector-rings as two polygon collections (with a value / hatched without terrain):
    # ring 0 = highest band, innermost
    values = wide[compass].to_numpy(np.float64)  # (band, sector)
    verts, ring, sector = sector_ring_polygons(n_band, len(compass), width_deg)
    v = values.ravel()
    ok = np.isfinite(v)
    colours = METRIC_CMAP(norm(np.where(ok, v, 0.0)))
    labels = np.array(
        [f"{wide.index[r]}|{compass[k]}" for r, k in zip(ring, sector, strict=True)], dtype=object
    )
    filled = PolyCollection(
        list(verts[ok]),
        facecolors=colours[ok],
        edgecolors="#444444",
        linewidths=0.6,
        gid="sector-rings",
    )
    filled.set_urls(list(labels[ok]))
    empty = PolyCollection(
        list(verts[~ok]),
        facecolors="white",
        edgecolors="#444444",
        linewidths=0.6,
        hatch="///",
        gid="no-terrain",
    )
    empty.set_urls(list(labels[~ok]))
    ax.add_collection(filled)
    ax.add_collection(empty)
    theta = np.deg2rad(sector * width_deg)
    for th, r, val, c in zip(theta[ok], ring[ok], v[ok], colours[ok], strict=True):
        ax.text(
            th,
            HOLE_RINGS + r + 0.5,
            _fmt(val, m.decimals),
            ha="center",
            va="center",
            fontsize=size,
            color=text_colour_on(c),
        )
    ax.set_ylim(0, HOLE_RINGS + n_band)
    ax.set_xticks(np.deg2rad(np.arange(len(compass)) * width_deg), compass)
    step = max(1, int(np.ceil(n_band / _MAX_RING_LABELS)))
    shown = np.arange(0, n_band, step)
    ax.set_yticks(
        HOLE_RINGS + shown + 0.5, [f"{wide.index[i]} m" for i in shown], fontsize=max(5.0, size - 1)
    )
    for label in ax.get_yticklabels():
        label.set_path_effects([patheffects.withStroke(linewidth=2.0, foreground="white")])
    ax.set_rlabel_position(width_deg / 2.0)
    ax.grid(False)
    ax.spines["polar"].set_visible(False)
    terrain = "avalanche terrain" if out.weights[1].startswith("avalanche") else "terrain"
    ax.set_xlabel(
        f"aspect (slope facing); rings: elevation band, highest in the centre\n"
        f"hatched: no {terrain} in that band and aspect",
        fontsize=8,
    )
    status = "forecast" if out.forecast_at(t) else "analysis"
    when = local_time_label(t, out.local_timezone, year=True)
    fig.suptitle(
        f"{zone}: {m.label}\nvalid {when} ({status}), weighted over {out.weights[1]}", fontsize=10
    )
    sm = ScalarMappable(norm=norm, cmap=METRIC_CMAP)
    cbar = fig.colorbar(sm, ax=ax, orientation="horizontal", shrink=0.6, pad=0.08)
    cbar.set_label(f"{m.label} [{m.units}]", fontsize=8)
    side = fig.add_subplot(grid[0, 1])
    side.set_xlim(0, 1)
    side.set_ylim(0, n_band)
    side.set_xticks([])
    if has_flat:
        for ring_k, (band, row) in enumerate(wide.iterrows()):
            val = float(row["flat"])
            y = n_band - 1 - ring_k  # highest band at the top
            colour = METRIC_CMAP(norm(val)) if np.isfinite(val) else "white"
            side.add_patch(
                Rectangle(
                    (0, y),
                    1,
                    1,
                    facecolor=colour,
                    edgecolor="#444444",
                    linewidth=0.6,
                    hatch=None if np.isfinite(val) else "///",
                    gid=f"{band}|flat",
                )
            )
            if np.isfinite(val):
                side.text(
                    0.5,
                    y + 0.5,
                    _fmt(val, m.decimals),
                    ha="center",
                    va="center",
                    fontsize=size,
                    color=text_colour_on(colour),
                )
        rows = np.arange(n_band)[::-1]  # position y holds wide row n_band-1-y
        side.set_yticks(
            rows[shown] + 0.5, [f"{wide.index[i]} m" for i in shown], fontsize=max(5.0, size - 1)
        )
        side.set_title("flat", fontsize=9)
    else:
        side.set_axis_off()
    return fig


def sector_ring_polygons(
    n_band: int, n_sector: int, width_deg: float
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Polygons of the overview's sector-rings in polar data coordinates (theta [rad], r).

    Ring ``b`` (0 = highest band) spans r from ``HOLE_RINGS + b`` to ``HOLE_RINGS + b + 1``;
    sector ``k`` is centred on theta = k × width (0 = north; the axes turn clockwise from the
    top). Arcs are sampled every ~2°, so they stay round after the polar transform.

    Returns
    -------
    verts : ndarray (band × sector, vertex, 2) float64, band-major (highest band first), then
        clockwise from north.
    ring, sector : ndarray (band × sector,) int, the band and sector of each polygon.
    """
    n_arc = max(4, int(np.ceil(width_deg / 2.0)) + 1)
    half = np.deg2rad(width_deg) / 2.0
    ring = np.repeat(np.arange(n_band), n_sector)
    sector = np.tile(np.arange(n_sector), n_band)
    centre = np.deg2rad(sector * width_deg)[:, None]
    arc = np.linspace(-half, half, n_arc)[None, :]
    inner = (HOLE_RINGS + ring)[:, None] * np.ones_like(arc)
    theta = np.concatenate([centre + arc, centre + arc[:, ::-1]], axis=1)
    radius = np.concatenate([inner + 1.0, inner], axis=1)
    return np.stack([theta, radius], axis=-1), ring, sector


def _trim(wide: pd.DataFrame) -> pd.DataFrame:
    """Drop the bands above the highest and below the lowest with a value, and the flat
    column when it holds none (the zone has no weighted flat terrain)."""
    sectors = [c for c in wide.columns if c not in ("band_lower_m", "band_upper_m")]
    if "flat" in sectors and not np.isfinite(wide["flat"].to_numpy(np.float64)).any():
        wide = wide.drop(columns="flat")
        sectors.remove("flat")
    has = np.isfinite(wide[sectors].to_numpy(np.float64)).any(axis=1)
    if has.any():
        idx = np.nonzero(has)[0]
        wide = wide.iloc[idx[0] : idx[-1] + 1]
    return wide


def write_overview(out, zone: str, metric_name: str, *, time=None) -> tuple[Path, Path]:
    """Write ``figures/overview_<zone>_<metric>.png`` and the matching ``.csv``."""
    out = _outputs(out)
    stem = out.out_dir / "figures" / f"overview_{zone_slug(zone)}_{metric_name}"
    fig = plot_overview(out, zone, metric_name, time=time)
    png = save_png(fig, stem.with_suffix(".png"))
    csv = write_overview_csv(out, zone, metric_name, stem.with_suffix(".csv"), time=time)
    return png, csv


def write_overview_csv(out, zone: str, metric_name: str, path: Path, *, time=None) -> Path:
    """The overview's numbers as CSV: one row per band (highest first), one column per aspect,
    plus ``zone``, ``metric``, ``units``, ``valid_time`` and ``status`` columns."""
    out = _outputs(out)
    m = metric(metric_name)
    t = out.map_time if time is None else out.time_in_run(time)
    wide = overview_table(out, zone, metric_name, time=t).reset_index()
    wide.insert(0, "status", "forecast" if out.forecast_at(t) else "analysis")
    wide.insert(0, "valid_time", pd.Timestamp(t))
    wide.insert(0, "units", m.units)
    wide.insert(0, "metric", m.name)
    wide.insert(0, "zone", zone)
    return write_csv(path, wide)

"""Zone maps: one metric raster over a hillshade of the DEM.

Each map shows ``maps/<metric>.tif`` on regionmap's sequential ramp over a hillshade of the
run's DEM, the zone outlines with their names, the rain-crust lines of ``zones.gpkg`` with
their elevations written on them, a colour bar with units, a north arrow and a scale bar.

The hillshade is matplotlib's :class:`matplotlib.colors.LightSource` (illumination from
azimuth 315°, 45° above the horizon — the usual cartographic convention, light from the
upper left; common practice). The DEM is the one recorded in ``run.json``
(``config.region.dem``); when that path is gone (the demo builds its inputs in a temporary
folder), a copy inside the output folder whose SHA-256 equals the checksum ``run.json``
recorded for the DEM (``inputs.dem.sha256``) is used. When neither exists the map is drawn on
a plain background, with a warning and a note on the figure. The hillshade is computed once
per output folder and shared by all its maps.

Metric maps leave the rain-crust lines out by default (:func:`plot_rain_crust_map` draws them
per event, one label per zone and limit), so that the metric stays readable.
"""

from __future__ import annotations

import hashlib
from pathlib import Path

import numpy as np
import pandas as pd
from matplotlib import patheffects
from matplotlib.colors import BoundaryNorm, LightSource, Normalize
from matplotlib.lines import Line2D

from regionmap.errors import InputError, warn
from regionmap.io.dem import read_dem
from regionmap.io.times import event_date_label, local_time_label, utc_datetime64
from regionmap.plots.outputs import METRICS, Metric, RunOutputs
from regionmap.plots.style import OKABE_ITO, metric_cmap, new_figure, robust_top, save_png

__all__ = [
    "available_maps",
    "find_dem",
    "hillshade",
    "plot_metric_map",
    "plot_rain_crust_map",
    "rain_crust_events",
    "write_metric_map",
]

_HALO = [patheffects.withStroke(linewidth=2.5, foreground="white")]


def _outputs(out) -> RunOutputs:
    return out if isinstance(out, RunOutputs) else RunOutputs(out)


def available_maps(out) -> list[str]:
    """Metric names with a raster under ``maps/`` (``cell_id`` excluded), sorted."""
    out = _outputs(out)
    return sorted(p.stem for p in (out.out_dir / "maps").glob("*.tif") if p.stem != "cell_id")


def find_dem(out) -> Path | None:
    """The run's DEM file: ``run.json`` ``config.region.dem`` (relative paths against the
    output folder) when it is on disk, else a ``.tif`` inside the output folder with the same
    name whose SHA-256 matches ``run.json`` ``inputs.dem.sha256``; None when neither exists."""
    out = _outputs(out)
    region = (
        out.run.get("config", {}).get("region", {})
        if isinstance(out.run.get("config"), dict)
        else {}
    )
    value = region.get("dem") if isinstance(region, dict) else None
    if not value:
        return None
    p = Path(value)
    if not p.is_absolute():
        p = out.out_dir / p
    if p.is_file():
        return p
    inputs = out.run.get("inputs", {})
    want = (
        inputs.get("dem", {}).get("sha256")
        if isinstance(inputs, dict) and isinstance(inputs.get("dem"), dict)
        else None
    )
    if not want:
        return None
    for cand in sorted(out.out_dir.rglob(p.name)):
        with open(cand, "rb") as fh:
            if hashlib.file_digest(fh, "sha256").hexdigest() == want:
                return cand
    return None


def _shaded_relief(out: RunOutputs, kx: float, ky: float):
    """(hillshade, extent) of the run's DEM, computed once per output folder; None without DEM."""
    cache = out.__dict__.setdefault("_hillshade", {})
    if "value" not in cache:
        dem_path = find_dem(out)
        if dem_path is None:
            cache["value"] = None
        else:
            dem = read_dem(dem_path)
            shade = hillshade(dem.elevation_m, abs(dem.transform.a) * kx, abs(dem.transform.e) * ky)
            cache["value"] = (
                np.ma.masked_invalid(shade).astype(np.float32),
                _extent(dem.transform, shade.shape),
            )
    return cache["value"]


def hillshade(elevation_m: np.ndarray, dx_m: float, dy_m: float) -> np.ndarray:
    """Hillshade (0 dark … 1 lit) of a DEM with matplotlib's LightSource, light from 315°
    at 45° (common cartographic practice); NaN where the DEM has no data.

    Parameters
    ----------
    elevation_m : ndarray (y, x) float64 [m], NaN for nodata.
    dx_m, dy_m : pixel size [m].
    """
    z = np.asarray(elevation_m, dtype=np.float64)
    bad = ~np.isfinite(z)
    filled = np.where(bad, np.nanmean(z) if (~bad).any() else 0.0, z)
    shade = LightSource(azdeg=315, altdeg=45).hillshade(filled, vert_exag=1.0, dx=dx_m, dy=dy_m)
    return np.where(bad, np.nan, shade)


def _extent(transform, shape) -> tuple[float, float, float, float]:
    left, top = transform.c, transform.f
    right = left + transform.a * shape[1]
    bottom = top + transform.e * shape[0]
    return left, right, bottom, top


def _metres_per_unit(crs, lat_deg: float) -> tuple[float, float]:
    if crs is not None and crs.is_geographic:
        return 111_320.0 * np.cos(np.deg2rad(lat_deg)), 110_540.0
    return 1.0, 1.0


def _nice_length_m(width_m: float) -> float:
    target = width_m / 5.0
    p = 10 ** np.floor(np.log10(target))
    return float(max(s * p for s in (1, 2, 5) if s * p <= target))


def _metric_of(name: str, units: str, description: str) -> Metric:
    if name in METRICS:
        return METRICS[name]
    return Metric(name, description.split(":")[0] or name.replace("_", " "), units or "1", name)


def _read_map(out: RunOutputs, name: str):
    import rasterio

    path = out.out_dir / "maps" / f"{name}.tif"
    if not path.is_file():
        raise InputError(f"{path} is missing; this run has maps for {available_maps(out)}")
    with rasterio.open(path) as src:
        data = src.read(1, masked=True)
        tags = src.tags()
        info = (src.transform, src.crs, (src.descriptions or ("",))[0] or "", src.dtypes[0])
    return data, tags, info


def plot_metric_map(out, metric: str, *, show_rain_crust: bool = False):
    """Draw the zone map of one metric.

    Parameters
    ----------
    out : output folder (path) or :class:`RunOutputs`.
    metric : name of a raster under ``maps/`` (e.g. ``snow_depth_cm``).
    show_rain_crust : draw the rain-crust lines of ``zones.gpkg``.

    Returns
    -------
    matplotlib Figure with one map axes (images: hillshade and metric; the zone outlines and
    rain-crust lines as line collections; legend entries for both; a colour bar labelled
    with the metric and its units; artists with gid ``north-arrow`` and ``scale-bar``).

    Raises
    ------
    InputError
        When the raster is missing.
    """
    out = _outputs(out)
    data, tags, (transform, crs, description, dtype) = _read_map(out, metric)
    m = _metric_of(metric, tags.get("units", ""), description)
    # every mapped quantity is >= 0; below it a raster marks "none" (e.g. no weak layer),
    # which is left unshaded over the relief
    values = np.ma.masked_invalid(data.astype(np.float64) * m.scale)
    none = values < 0
    values = np.ma.masked_where(none.filled(False), values)
    extent = _extent(transform, data.shape)
    lat = float(np.nanmean(out.table["lat"])) if "lat" in out.table else 45.0
    kx, ky = _metres_per_unit(crs, lat)
    fig, ax, note = _base_map(out, 7.5, 6.6, kx, ky, quiet=False)
    cmap = metric_cmap(metric)
    extend = "neither"
    if np.issubdtype(np.dtype(dtype), np.integer):
        top = int(max(1, values.max() if values.count() else 1))
        norm = BoundaryNorm(np.arange(-0.5, top + 1.5), cmap.N)
    else:
        # fixed physical scale when the quantity has one, else robust (a high percentile)
        top = robust_top(values.compressed(), m.vmax)
        norm = Normalize(0.0, top)
        extend = "max" if values.count() and float(values.max()) > top else "neither"
    im = ax.imshow(
        values,
        cmap=cmap,
        norm=norm,
        extent=extent,
        interpolation="nearest",
        alpha=0.88,
        zorder=1,
        gid="metric",
    )
    cbar = fig.colorbar(im, ax=ax, shrink=0.8, pad=0.02, extend=extend)
    if isinstance(norm, BoundaryNorm):
        cbar.set_ticks(np.arange(0, top + 1))
    cbar.set_label(f"{m.label} [{m.units}]")
    handles = _zone_outlines(out, ax, crs)
    if show_rain_crust:
        handles += _rain_crust_lines(out, ax, crs, out.rain_crust_lines, extent)
    _finish_map(ax, handles, extent, crs, kx, ky)
    when = tags.get("valid_time", pd.Timestamp(out.map_time).strftime("%Y-%m-%dT%H:%M:%SZ"))
    status = (
        "forecast"
        if out.forecast_at(out.time_in_run(when, what=f"maps/{metric}.tif valid_time"))
        else "analysis"
    )
    when = local_time_label(
        utc_datetime64(when, f"maps/{metric}.tif valid_time"), out.local_timezone, year=True
    )
    if none.any():
        note = "unshaded: none" + (f"; {note}" if note else "")
    ax.set_title(f"{m.label}\nvalid {when} ({status})" + (f"; {note}" if note else ""), fontsize=10)
    return fig


def _base_map(
    out: RunOutputs, width_in: float, height_in: float, kx: float, ky: float, *, quiet: bool
):
    """Figure, map axes with the hillshade, and the note for the title."""
    fig = new_figure(width_in, height_in)
    ax = fig.add_subplot(1, 1, 1)
    relief = _shaded_relief(out, kx, ky)
    if relief is not None:
        shade, extent = relief
        # vmin well below 0 keeps the relief light, so the metric and the lines stay readable
        # over it
        ax.imshow(
            shade,
            cmap="gray",
            vmin=-1.0,
            vmax=1.0,
            extent=extent,
            interpolation="nearest",
            zorder=0,
            gid="hillshade",
        )
        return fig, ax, ""
    if not quiet:
        warn(
            f"{out.out_dir / 'run.json'}: config.region.dem is not recorded or not on disk; map "
            "drawn without hillshade"
        )
    return fig, ax, "DEM not found: no hillshade"


def _zone_outlines(out: RunOutputs, ax, crs) -> list:
    zones = out.zones
    if crs is not None and zones.crs is not None and zones.crs != crs:
        zones = zones.to_crs(crs)
    zones.boundary.plot(ax=ax, color="#111111", linewidth=1.2, zorder=3)
    for name, geom in zip(zones["zone"], zones.geometry, strict=True):
        p = geom.representative_point()
        ax.text(
            p.x,
            p.y,
            str(name),
            ha="center",
            va="center",
            fontsize=9,
            weight="bold",
            zorder=5,
            path_effects=_HALO,
            gid="zone-name",
        )
    return [Line2D([], [], color="#111111", linewidth=1.2, label="zone boundary")]


#: colour of the rain-crust lines (Okabe & Ito 2008 "blue"; apart from the grey zone outlines).
_RAIN_CRUST_COLOUR = OKABE_ITO["blue"]
#: label spacing of the rain-crust elevations, as a share of the map width.
_LABEL_SPACING_FRAC = 0.08


def _rain_crust_lines(out: RunOutputs, ax, crs, lines, extent) -> list:
    """Draw rain-crust lines (solid: upper limit, dashed: lower limit) and label each zone's
    limit once, with the range of its aspects' elevations, on its longest piece; labels closer
    than :data:`_LABEL_SPACING_FRAC` of the map width to an earlier one are left out."""
    if not len(lines):
        return []
    if crs is not None and lines.crs is not None and lines.crs != crs:
        lines = lines.to_crs(crs)
    min_gap = _LABEL_SPACING_FRAC * abs(extent[1] - extent[0])
    styles = {
        "upper": ("-", "rain-crust line, upper limit (rain-snow transition)"),
        "lower": ("--", "rain-crust line, lower limit (snow line at the time)"),
    }
    handles, placed = [], []
    for limit, (ls, label) in styles.items():
        part = lines[lines["limit"] == limit] if "limit" in lines.columns else lines
        if not len(part):
            continue
        part.plot(ax=ax, color=_RAIN_CRUST_COLOUR, linewidth=1.6, linestyle=ls, zorder=4)
        groups = part.groupby("zone", sort=True) if "zone" in part.columns else [("", part)]
        for _, g in groups:
            pieces = [
                (piece.length, piece)
                for geom in g.geometry
                for piece in getattr(geom, "geoms", [geom])
            ]
            if not pieces:
                continue
            longest = max(pieces, key=lambda t: t[0])[1]
            p = longest.interpolate(0.5, normalized=True)
            if any(np.hypot(p.x - q[0], p.y - q[1]) < min_gap for q in placed):
                continue
            lo, hi = (
                10 * round(float(v) / 10) for v in (g["elevation_m"].min(), g["elevation_m"].max())
            )
            text = f"{lo:.0f} m" if lo == hi else f"{lo:.0f}–{hi:.0f} m"
            ax.text(
                p.x,
                p.y,
                text,
                fontsize=7,
                zorder=6,
                ha="center",
                va="bottom",
                path_effects=_HALO,
                color=_RAIN_CRUST_COLOUR,
                gid="rain-crust-label",
            )
            placed.append((p.x, p.y))
        handles.append(
            Line2D([], [], color=_RAIN_CRUST_COLOUR, linewidth=1.6, linestyle=ls, label=label)
        )
    return handles


def _finish_map(ax, handles, extent, crs, kx: float, ky: float) -> None:
    from matplotlib.ticker import FuncFormatter

    ax.legend(handles=handles, loc="upper left", fontsize=7, framealpha=0.85)
    ax.set_xlim(extent[0], extent[1])
    ax.set_ylim(extent[2], extent[3])
    ax.set_aspect(ky / kx if kx != 1.0 else "equal")
    if crs is not None and crs.is_geographic:
        ax.set_xlabel("longitude [deg]")
        ax.set_ylabel("latitude [deg]")
    else:
        km = FuncFormatter(lambda v, _: f"{v / 1000:g}")
        ax.xaxis.set_major_formatter(km)
        ax.yaxis.set_major_formatter(km)
        ax.set_xlabel("x [km]" + (f" ({crs.to_string()})" if crs is not None else ""))
        ax.set_ylabel("y [km]")
    _north_arrow(ax)
    _scale_bar(ax, extent, kx)


def rain_crust_events(out, *, limit: int | None = None) -> list[tuple[int, str]]:
    """(event_id, event_time) of the rain-crust lines in ``zones.gpkg``, in time order; with
    ``limit``, only the events with the longest upper-limit lines (the most widespread)."""
    out = _outputs(out)
    lines = out.rain_crust_lines
    if not len(lines):
        return []
    length = lines.geometry.length.groupby([lines["event_id"], lines["event_time"]]).sum()
    if limit is not None:
        length = length.sort_values(ascending=False).iloc[:limit]
    return [(int(e), str(t)) for e, t in sorted(length.index, key=lambda k: str(k[1]))]


def plot_rain_crust_map(out, event_id: int):
    """Draw the rain-crust line of one event over the hillshade, with the zone outlines.

    Returns
    -------
    matplotlib Figure with one map axes: the lines (solid upper limit, dashed lower limit),
    one elevation label per zone and limit (gid ``rain-crust-label``), legend entries, north
    arrow and scale bar.

    Raises
    ------
    InputError
        When the event has no rain-crust line in ``zones.gpkg``.
    """
    import rasterio

    out = _outputs(out)
    lines = out.rain_crust_lines
    lines = lines[lines["event_id"] == int(event_id)] if len(lines) else lines
    if not len(lines):
        raise InputError(
            f"{out.out_dir / 'zones.gpkg'}: no rain-crust line for event {event_id}; "
            f"events with lines: {[e for e, _ in rain_crust_events(out)]}"
        )
    with rasterio.open(out.path("maps/cell_id.tif")) as src:
        transform, crs, shape = src.transform, src.crs, src.shape
    extent = _extent(transform, shape)
    lat = float(np.nanmean(out.table["lat"])) if "lat" in out.table else 45.0
    kx, ky = _metres_per_unit(crs, lat)
    fig, ax, note = _base_map(out, 7.5, 6.6, kx, ky, quiet=True)
    handles = _zone_outlines(out, ax, crs) + _rain_crust_lines(out, ax, crs, lines, extent)
    _finish_map(ax, handles, extent, crs, kx, ky)
    ax.set_title(
        f"rain-crust line of the rain of {event_date_label(event_id, out.local_timezone)}\n"
        "labels: range over the zone's aspects" + (f"; {note}" if note else ""),
        fontsize=10,
    )
    return fig


def _north_arrow(ax) -> None:
    ax.annotate(
        "N",
        xy=(0.93, 0.95),
        xytext=(0.93, 0.83),
        xycoords="axes fraction",
        ha="center",
        va="center",
        fontsize=11,
        weight="bold",
        arrowprops={"arrowstyle": "-|>", "color": "black", "lw": 1.5},
        gid="north-arrow",
        zorder=7,
        path_effects=_HALO,
    )


def _scale_bar(ax, extent, metres_per_unit_x: float) -> None:
    from matplotlib.patches import Rectangle

    left, right, bottom, top = extent
    width_m = (right - left) * metres_per_unit_x
    length_m = _nice_length_m(width_m)
    length_u = length_m / metres_per_unit_x
    x0 = left + 0.05 * (right - left)
    y0 = bottom + 0.05 * (top - bottom)
    h = 0.012 * (top - bottom)
    bar = Rectangle(
        (x0, y0),
        length_u,
        h,
        facecolor="black",
        edgecolor="white",
        linewidth=0.8,
        zorder=7,
        gid="scale-bar",
    )
    ax.add_patch(bar)
    label = f"{length_m / 1000:g} km" if length_m >= 1000 else f"{length_m:g} m"
    ax.text(
        x0 + length_u / 2,
        y0 + 2.2 * h,
        label,
        ha="center",
        va="bottom",
        fontsize=8,
        zorder=7,
        path_effects=_HALO,
        gid="scale-bar-label",
    )


def write_metric_map(out, metric: str) -> Path:
    """Write ``figures/map_<metric>.png``."""
    out = _outputs(out)
    fig = plot_metric_map(out, metric)
    return save_png(fig, out.out_dir / "figures" / f"map_{metric}.png")

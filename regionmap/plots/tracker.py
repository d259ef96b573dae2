"""Season views organised around named layers, and the elevation chart.

* **Layer tracker** — for one layer of concern of a zone (identified as in
  :func:`regionmap.products.summaries.layers_of_concern`: buried surface hoar by the storm
  that buried it, faceted crystals and depth hoar by the storm that deposited their snow,
  rain crusts and glaze by their event, other crusts by kind and formation date, dates in
  the local time zone), its vertical depth below the surface on every daily snapshot, one
  line per elevation band (or per band and aspect), with the share of the band's area where
  it is present as a layer of concern, and the days with new snow marked.
* **Elevation chart** — one metric of a zone against elevation (band centres), one line per
  aspect sector.

Depths are area-weighted means over the cells holding the layer; presence is the weighted
share of the band's cells that hold it.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from regionmap.errors import InputError
from regionmap.io.times import local_time_label
from regionmap.plots.outputs import SECTOR_ORDER, RunOutputs, metric
from regionmap.plots.style import METRIC_CMAP, OKABE_ITO, new_figure, save_png, slug, zone_slug
from regionmap.products.summaries import band_label, decode_snapshot, layer_identities, layer_ids

__all__ = [
    "layer_tracks",
    "new_snow_days",
    "plot_layer_tracker",
    "write_layer_tracker",
    "plot_elevation_chart",
    "write_elevation_chart",
    "NEW_SNOW_DAY_KG_M2",
    "MAX_TRACKER_LINES",
]

#: snowfall per snapshot interval (zone mean) from which a day is marked as a new-snow day
#: [kg m-2] (~10 cm of new snow at 100 kg m-3; common practice, our choice of threshold).
NEW_SNOW_DAY_KG_M2 = 10.0
_DAY_BLOCK = 32
_NO_TIME = np.int64(-(2**62))


def _outputs(out) -> RunOutputs:
    return out if isinstance(out, RunOutputs) else RunOutputs(out)


def _block_rows(snap, cell_ids: np.ndarray, tz: str, criteria, wanted=None) -> pd.DataFrame:
    """(layer_id, cell_id, day, depth_cm) rows of the weak layers of concern and crusts of one
    block (named as in the layers of concern,
    :func:`regionmap.products.summaries.layer_identities`), only those of the ids ``wanted``
    when given. Ids are built once per distinct (kind, time)."""
    pos, kind, ref = layer_identities(snap, criteria)
    ok = ref > _NO_TIME
    pos, kind, ref = tuple(p[ok] for p in pos), kind[ok], ref[ok]
    ref_i, ref_u = pd.factorize(ref)  # hashing, not sorting: millions of entries, few values
    n_ref = max(ref_u.size, 1)
    key_i, key_u = pd.factorize(kind * n_ref + ref_i)
    ids_u = layer_ids(key_u // n_ref, ref_u[key_u % n_ref], tz)
    keep = np.ones(kind.size, bool) if wanted is None else np.isin(ids_u, list(wanted))[key_i]
    ci, di, li = (p[keep] for p in pos)
    return pd.DataFrame(
        {
            "layer_id": ids_u[key_i[keep]],
            "cell_id": cell_ids[ci],
            "day": snap.day[di],
            "depth_cm": snap.depth_cm[ci, di, li],
        }
    )


def layer_tracks(out, zone: str, *, by_aspect: bool = False, layer_ids=None) -> pd.DataFrame:
    """Depth and presence over the season of a zone's weak layers and crusts.

    Parameters
    ----------
    out : output folder (path) or :class:`RunOutputs`.
    zone : zone name.
    by_aspect : one series per band × aspect instead of per band.
    layer_ids : restrict to these layer ids (e.g. ``"SH-2026-01-12"``).

    Returns
    -------
    DataFrame: ``layer_id``, ``band``, ``band_lower_m`` (and ``aspect_sector``), ``day``,
    ``depth_cm`` (weighted mean over the cells with the layer, vertical), ``presence_frac``.
    """
    out = _outputs(out)
    out.check_zone(zone)
    table = out.table
    w_all, _ = out.weights
    cells = table[table["zone"] == zone]
    profiles = (
        out.profiles if layer_ids is None else out.profiles_from_day(_first_day(out, layer_ids))
    )
    pos = np.nonzero(np.isin(profiles["cell_id"].values, cells.index.to_numpy()))[0]
    prof = profiles.isel(cell=pos)
    cell_ids = prof["cell_id"].values.astype(np.int64)
    n_day = prof.sizes["day"]
    rows = [
        _block_rows(
            decode_snapshot(prof, np.arange(d, min(d + _DAY_BLOCK, n_day))),
            cell_ids,
            out.local_timezone,
            out.concern_criteria,
            layer_ids,
        )
        for d in range(0, n_day, _DAY_BLOCK)
    ]
    frame = pd.concat(rows, ignore_index=True)
    frame = frame.sort_values("depth_cm").drop_duplicates(["layer_id", "cell_id", "day"])
    keys = ["band_lower_m", "band"] + (["aspect_sector"] if by_aspect else [])
    frame = frame.merge(table[keys], left_on="cell_id", right_index=True)
    frame["_w"] = w_all.reindex(frame["cell_id"]).to_numpy()
    frame["_wd"] = frame["_w"] * frame["depth_cm"]
    g = frame.groupby(["layer_id", *keys, "day"], sort=True)[["_w", "_wd"]].sum()
    total = w_all.loc[cells.index].groupby([cells[k] for k in keys]).sum().rename("_total")
    res = g.join(total, on=keys).reset_index()
    with np.errstate(invalid="ignore", divide="ignore"):
        res["depth_cm"] = res["_wd"] / res["_w"].where(res["_w"] > 0)
        res["presence_frac"] = res["_w"] / res["_total"].where(res["_total"] > 0)
    return res.drop(columns=["_w", "_wd", "_total"])


def _first_day(out: RunOutputs, layer_ids) -> int:
    """First snapshot position that can hold any of ``layer_ids``: a layer id ends with its
    local reference date (an event's start, a burial or a formation), so no snapshot more than a
    day before the earliest of them holds one (the day covers the local/UTC offset). 0 when
    an id carries no date."""
    dates = []
    for lid in layer_ids:
        try:
            dates.append(np.datetime64(str(lid)[-10:], "D"))
        except ValueError:
            return 0
    if not dates:
        return 0
    start = (min(dates) - np.timedelta64(1, "D")).astype("datetime64[s]")
    return max(0, int(np.searchsorted(out.profile_days, start, side="left")))


def new_snow_days(out, zone: str) -> pd.DataFrame:
    """Zone-mean snowfall [kg m-2] between consecutive daily snapshots (``day`` = the interval
    end) and ``event`` = at least :data:`NEW_SNOW_DAY_KG_M2`."""
    out = _outputs(out)
    table = out.table
    w, _ = out.weights
    cells = table.index[table["zone"] == zone]
    pos = np.nonzero(np.isin(out.cells["cell_id"].values, cells.to_numpy()))[0]
    snow = np.nan_to_num(
        out.cells["snowfall_kg_m2"]
        .isel(cell=pos)
        .transpose("cell", "time")
        .values.astype(np.float64)
    )
    ww = w.reindex(out.cells["cell_id"].values[pos]).to_numpy()
    mean = (snow * ww[:, None]).sum(axis=0) / max(ww.sum(), 1e-12)
    cum = np.concatenate([[0.0], np.cumsum(mean)])
    days = out.profile_days
    k = np.searchsorted(out.times, days, side="right")
    per_day = np.diff(np.concatenate([[0.0], cum[k]]))
    return pd.DataFrame(
        {"day": days, "snowfall_kg_m2": per_day, "event": per_day >= NEW_SNOW_DAY_KG_M2}
    )


def _band_colours(bands_lower: np.ndarray) -> dict:
    order = np.sort(np.unique(bands_lower))
    levels = np.linspace(0.35, 1.0, max(order.size, 1))
    return {b: METRIC_CMAP(levels[i]) for i, b in enumerate(order)}


def _group_bands(out: RunOutputs, zone: str, tr: pd.DataFrame, max_lines: int) -> pd.DataFrame:
    """Merge adjacent elevation bands into at most ``max_lines`` groups of whole bands.

    Depth is re-weighted by the weighted area holding the layer (presence × band area),
    presence by the band areas, so a group's values are those :func:`layer_tracks` would give
    for the merged band."""
    table = out.table[out.table["zone"] == zone]
    w_all, _ = out.weights
    bands = table[["band_lower_m", "band_upper_m"]].drop_duplicates().sort_values("band_lower_m")
    if len(bands) <= max_lines:
        return tr
    per = int(np.ceil(len(bands) / max_lines))
    group = np.arange(len(bands)) // per
    lower = bands["band_lower_m"].to_numpy()
    upper = bands["band_upper_m"].to_numpy()
    g_lo = pd.Series(lower, index=lower).groupby(group).transform("min")
    g_hi = pd.Series(upper, index=lower).groupby(group).transform("max")
    total = w_all.loc[table.index].groupby(table["band_lower_m"]).sum()
    frame = tr.copy()
    frame["_area"] = total.reindex(frame["band_lower_m"]).to_numpy()
    frame["_w"] = frame["presence_frac"] * frame["_area"]
    frame["_wd"] = frame["_w"] * frame["depth_cm"]
    frame["band_lower_m"] = g_lo.reindex(tr["band_lower_m"]).to_numpy()
    frame["band_upper_m_g"] = g_hi.reindex(tr["band_lower_m"]).to_numpy()
    frame["band"] = band_label(frame["band_lower_m"], frame["band_upper_m_g"])
    g_area = (
        pd.Series(total.to_numpy(), index=g_lo.reindex(total.index).to_numpy())
        .groupby(level=0)
        .sum()
    )
    keys = (
        ["layer_id", "band_lower_m", "band"]
        + (["aspect_sector"] if "aspect_sector" in frame.columns else [])
        + ["day"]
    )
    res = frame.groupby(keys, sort=True)[["_w", "_wd"]].sum().reset_index()
    with np.errstate(invalid="ignore", divide="ignore"):
        res["depth_cm"] = res["_wd"] / res["_w"].where(res["_w"] > 0)
        res["presence_frac"] = res["_w"] / g_area.reindex(res["band_lower_m"]).to_numpy()
    return res.drop(columns=["_w", "_wd"])


#: at most this many lines (elevation-band groups) in a layer tracker.
MAX_TRACKER_LINES = 6


def plot_layer_tracker(
    out,
    zone: str,
    layer_id: str,
    *,
    by_aspect: bool = False,
    tracks: pd.DataFrame | None = None,
    new_snow: pd.DataFrame | None = None,
    max_lines: int | None = MAX_TRACKER_LINES,
):
    """Draw one layer's depth and presence over the season in a zone.

    Parameters
    ----------
    tracks : the zone's :func:`layer_tracks` (computed when None).
    new_snow : the zone's :func:`new_snow_days` (computed when None).
    max_lines : merge adjacent elevation bands into at most this many lines (per-band view
        with None); ignored with ``by_aspect``.

    Returns
    -------
    matplotlib Figure with two axes sharing the time axis: depth below the surface [cm]
    (inverted: the surface at the top), one line per band or band group (label
    ``<band> m``, or ``<band> m <aspect>``), and presence [% of the band's area]; new-snow
    days as markers (legend entry "new-snow day …"), the forecast part shaded (legend entry
    "forecast forcing"); the time axis spans the days the layer exists; the legend sits right
    of the axes.

    Raises
    ------
    InputError
        Unknown zone, or a layer id the zone never holds.
    """
    out = _outputs(out)
    tr = (
        layer_tracks(out, zone, by_aspect=by_aspect, layer_ids=[layer_id])
        if tracks is None
        else tracks
    )
    tr = tr[tr["layer_id"] == layer_id]
    if tr.empty:
        raise InputError(
            f"layer tracker: zone {zone!r} never holds layer {layer_id!r}; "
            "hint: the layer ids are in layers_of_concern.csv (column layer_id)"
        )
    if max_lines is not None and not by_aspect:
        tr = _group_bands(out, zone, tr, max_lines)
    fig = new_figure(10.0, 6.0)
    ax_d, ax_p = fig.subplots(2, 1, sharex=True, gridspec_kw={"height_ratios": [2.2, 1]})
    colours = _band_colours(tr["band_lower_m"].to_numpy())
    styles = ["-", "--", ":", "-."]
    groups = ["band_lower_m", "band"] + (["aspect_sector"] if by_aspect else [])
    for key, sub in sorted(
        tr.groupby(groups, sort=True), key=lambda kv: -kv[0][0]
    ):  # highest first in the legend
        lower, band = key[0], key[1]
        label = f"{band} m" + (f" {key[2]}" if by_aspect else "")
        ls = styles[SECTOR_ORDER.index(key[2]) % 4] if by_aspect else "-"
        sub = sub.set_index("day").sort_index()
        ax_d.plot(
            sub.index,
            sub["depth_cm"],
            color=colours[lower],
            linestyle=ls,
            linewidth=1.6,
            label=label,
        )
        ax_p.plot(
            sub.index,
            100.0 * sub["presence_frac"],
            color=colours[lower],
            linestyle=ls,
            linewidth=1.2,
        )
    ax_d.invert_yaxis()
    deepest = np.asarray(tr["depth_cm"], dtype=np.float64)
    deepest = (
        float(np.nanmax(deepest)) if np.isfinite(deepest).any() else 0.0
    )  # present but never depth-measured
    ax_d.set_ylim(bottom=max(deepest * 1.1, 10.0), top=0.0)
    ax_d.set_ylabel("depth below the surface [cm] (vertical)")
    ax_p.set_ylabel("present on [% of band area]")
    ax_p.set_ylim(0, 105)
    ax_p.set_xlabel("date (UTC, daily snapshots)")
    ns = new_snow_days(out, zone) if new_snow is None else new_snow
    t0, t1 = tr["day"].min() - np.timedelta64(3, "D"), tr["day"].max() + np.timedelta64(1, "D")
    ev = ns[
        ns["event"] & (ns["day"] >= t0) & (ns["day"] <= t1)
    ]  # markers are unclipped: keep them inside
    handles, labels = ax_d.get_legend_handles_labels()
    if len(ev):
        ax_d.vlines(
            ev["day"],
            0.0,
            1.0,
            transform=ax_d.get_xaxis_transform(),
            color="#999999",
            linewidth=0.6,
            zorder=0,
        )
        ax_d.plot(
            ev["day"],
            np.zeros(len(ev)),
            linestyle="none",
            marker="v",
            color=OKABE_ITO["sky blue"],
            markersize=7,
            clip_on=False,
            zorder=5,
        )
        handles.append(Line2D([], [], linestyle="none", marker="v", color=OKABE_ITO["sky blue"]))
        labels.append(f"new-snow day\n(≥ {NEW_SNOW_DAY_KG_M2:g} kg m-2\nzone mean)")
    ax_d.set_xlim(t0, t1)
    if out.is_forecast.any():
        t_fc = out.times[np.argmax(out.is_forecast)]
        for ax in (ax_d, ax_p):
            ax.axvspan(t_fc, out.times[-1], color="#EEEEEE", zorder=-1, gid="forecast-part")
        handles.append(Patch(facecolor="#EEEEEE", edgecolor="none"))
        labels.append("forecast forcing")
    ax_d.legend(
        handles,
        labels,
        loc="upper left",
        bbox_to_anchor=(1.01, 1.0),
        fontsize=7,
        frameon=False,
        title="elevation band",
        title_fontsize=8,
    )
    ax_d.grid(color="#E5E5E5", linewidth=0.5)
    ax_p.grid(color="#E5E5E5", linewidth=0.5)
    loc = (
        out.layers_of_concern
        if (out.out_dir / "layers_of_concern.csv").is_file()
        else pd.DataFrame()
    )
    names = (
        loc.loc[loc["layer_id"] == layer_id, "layer_name"] if "layer_name" in loc.columns else []
    )
    title = f"{names.iloc[0]} ({layer_id})" if len(names) else layer_id
    fig.suptitle(
        f"{zone}: layer {title}, depth over the season"
        + (" by band and aspect" if by_aspect else " by elevation band"),
        fontsize=10,
    )
    return fig


def write_layer_tracker(
    out, zone: str, layer_id: str, *, by_aspect: bool = False, tracks=None
) -> Path:
    """Write ``figures/layer_<zone>_<layer_id>[_aspects].png``."""
    out = _outputs(out)
    fig = plot_layer_tracker(out, zone, layer_id, by_aspect=by_aspect, tracks=tracks)
    name = f"layer_{zone_slug(zone)}_{slug(layer_id)}{'_aspects' if by_aspect else ''}.png"
    return save_png(fig, out.out_dir / "figures" / name)


def plot_elevation_chart(out, zone: str, metric_name: str, *, time=None):
    """Draw a metric of a zone against elevation, one line per aspect sector.

    Returns
    -------
    matplotlib Figure, one axes: x the metric with its units, y elevation [m] (band
    centres), one line per sector (legend labels the sector codes; ``flat`` dashed grey).
    """
    out = _outputs(out)
    m = metric(metric_name)
    out.check_zone(zone)
    t = out.map_time if time is None else out.time_in_run(time)
    ba = out.band_aspect(t)
    z = ba[ba["zone"] == zone]
    fig = new_figure(6.4, 5.6)
    ax = fig.add_subplot(1, 1, 1)
    palette = [
        OKABE_ITO[k]
        for k in (
            "blue",
            "orange",
            "bluish green",
            "vermillion",
            "sky blue",
            "reddish purple",
            "yellow",
            "black",
        )
    ]
    has_value = z.groupby("aspect_sector")[m.summary_column].apply(
        lambda v: bool(np.isfinite(v.to_numpy(np.float64)).any())
    )
    present = [
        s for s in SECTOR_ORDER if has_value.get(s, False)
    ]  # sectors without a value get no line
    compass = [s for s in SECTOR_ORDER if s in set(out.table["aspect_sector"]) and s != "flat"]
    for sector in present:
        sub = z[z["aspect_sector"] == sector].sort_values("band_centre_m")
        x = sub[m.summary_column].to_numpy(np.float64) * m.scale
        if sector == "flat":
            ax.plot(
                x,
                sub["band_centre_m"],
                color="#777777",
                linestyle="--",
                marker="s",
                markersize=3,
                label="flat",
            )
        else:
            k = compass.index(sector)  # colour by the run's sector order: the same in every zone
            ax.plot(
                x,
                sub["band_centre_m"],
                color=palette[k % 8],
                linestyle="-" if k < 8 else ":",
                marker="o",
                markersize=3,
                label=sector,
            )
    ax.set_xlabel(f"{m.label} [{m.units}]")
    ax.set_ylabel("elevation [m] (band centre)")
    ax.grid(color="#E5E5E5", linewidth=0.5)
    if present:
        ax.legend(title="aspect", fontsize=7, title_fontsize=8, loc="best")
    else:
        ax.text(
            0.5,
            0.5,
            "no values at this time",
            transform=ax.transAxes,
            ha="center",
            va="center",
            color="#555555",
        )
    status = "forecast" if out.forecast_at(t) else "analysis"
    ax.set_title(
        f"{zone}: {m.label}\nvalid {local_time_label(t, out.local_timezone, year=True)} "
        f"({status}), {out.weights[1]}",
        fontsize=9,
    )
    return fig


def write_elevation_chart(out, zone: str, metric_name: str, *, time=None) -> Path:
    """Write ``figures/elevation_<zone>_<metric>.png``."""
    out = _outputs(out)
    fig = plot_elevation_chart(out, zone, metric_name, time=time)
    return save_png(fig, out.out_dir / "figures" / f"elevation_{zone_slug(zone)}_{metric_name}.png")

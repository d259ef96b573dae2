"""One cell's simulated snow profile on one day (from ``profiles.nc``).

Five panels share the height above the ground: hand hardness on the trade's scale (F, 4F,
1F, P, K, I; Fierz et al. 2009) drawn as bars coloured by grain class with the class code
written on each layer; grain size [mm]; temperature [°C]; density [kg m-3]; liquid water
content [% by volume] with the classification's wetness-class limits. Crusts are hatched,
layers of persistent grains (FC, DH, SH and their subclasses) marked — filled where they are
a weak layer of concern (:mod:`regionmap.products.concern`, the rule of every product),
open where not — and the interface with the
largest structural threshold count (:func:`regionmap.snow.stability.threshold_counts_of_profile`,
relative mode for simulated profiles) drawn across all panels.

The simulated profile is model guidance; it does not replace a profile dug on the slope.

References
----------
Fierz, C. et al. (2009). The International Classification for Seasonal Snow on the Ground.
IHP-VII Technical Documents in Hydrology 83, UNESCO-IHP, Paris (hardness index, grain codes,
wetness classes 0 / 3 / 8 / 15 % by volume).
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from regionmap.constants import RHO_WATER_KG_M3, ZERO_CELSIUS_K
from regionmap.errors import InputError
from regionmap.io.times import local_time_label, utc_datetime64
from regionmap.plots.outputs import SECTOR_ORDER, RunOutputs
from regionmap.plots.style import (
    GRAIN_MAIN_COLOURS,
    grain_colour,
    grain_main_class,
    new_figure,
    save_png,
    text_colour_on,
)
from regionmap.products.concern import weak_layers_of_concern
from regionmap.snow.codes import PERSISTENT_CODES, grain_strings_to_codes
from regionmap.snow.hardness import HARDNESS_LABELS
from regionmap.snow.stability import threshold_counts_of_profile

__all__ = [
    "ProfileFigure",
    "select_cell",
    "read_profile",
    "plot_profile",
    "profile_command",
    "WETNESS_LIMITS_PCT",
]

#: upper limits of the wetness classes dry / moist / wet / very wet, % by volume (Fierz et al.
#: 2009).
WETNESS_LIMITS_PCT = (0.0, 3.0, 8.0, 15.0)


def _outputs(out) -> RunOutputs:
    return out if isinstance(out, RunOutputs) else RunOutputs(out)


def _band_key(text: str) -> str:
    m = re.fullmatch(r"\s*(-?\d+(?:\.\d+)?)\s*-\s*(\d+(?:\.\d+)?)\s*", str(text))
    if m:
        return f"{float(m.group(1)):.0f}-{float(m.group(2)):.0f}"
    return str(text).strip()


def select_cell(out, *, cell=None, zone=None, band=None, aspect=None, slope_class=None) -> int:
    """The ``cell_id`` named by ``cell`` or by zone, band (``LOW-HIGH`` in m, or ``<LOW`` /
    ``>HIGH`` for open bands), aspect sector and, when slopes are split, slope class.

    Raises
    ------
    InputError
        Naming what did not match (unknown cell id, zone, band, aspect or slope class) and
        what the run has.
    """
    out = _outputs(out)
    t = out.table
    if cell is not None:
        if any(v is not None for v in (zone, band, aspect, slope_class)):
            raise InputError("profile: give either --cell or --zone/--band/--aspect, not both")
        try:
            cid = int(cell)
        except (TypeError, ValueError):
            raise InputError(f"profile: --cell expects an integer cell id, got {cell!r}") from None
        if cid not in t.index:
            raise InputError(
                f"profile: cell {cid} is not in this run (cell ids {t.index.min()}–{t.index.max()})"
            )
        return cid
    if zone is None or band is None or aspect is None:
        raise InputError("profile: give --cell ID, or all of --zone, --band LOW-HIGH and --aspect")
    z = t[t["zone"] == str(zone)]
    if z.empty:
        raise InputError(f"profile: unknown zone {zone!r}; this run's zones are {out.zone_names}")
    key = _band_key(band)
    zb = z[z["band"] == key]
    if zb.empty:
        bands = list(z.sort_values("band_lower_m")["band"].unique())
        raise InputError(
            f"profile: zone {zone!r} has no band {band!r}; its bands are {bands} (write LOW-HIGH "
            "in m)"
        )
    wanted = {s.lower(): s for s in SECTOR_ORDER}.get(str(aspect).strip().lower())
    zba = zb[zb["aspect_sector"] == wanted]
    if zba.empty:
        have = [s for s in SECTOR_ORDER if s in set(zb["aspect_sector"])]
        raise InputError(
            f"profile: zone {zone!r} band {key} has no aspect {aspect!r}; it has {have}"
        )
    if slope_class is not None:
        try:
            k = int(slope_class)
        except (TypeError, ValueError):
            raise InputError(
                f"profile: --slope-class expects an integer, got {slope_class!r}"
            ) from None
        hit = zba[zba["slope_class"] == k]
        if hit.empty:
            raise InputError(
                f"profile: no slope class {k} in zone {zone!r} band {key} aspect {wanted}; "
                f"classes there: {sorted(zba['slope_class'].unique().tolist())}"
            )
        zba = hit
    if len(zba) > 1:
        raise InputError(
            f"profile: zone {zone!r} band {key} aspect {wanted} has slope classes "
            f"{sorted(zba['slope_class'].tolist())}; choose one with --slope-class K"
        )
    return int(zba.index[0])


def read_profile(out, cell_id: int, time=None) -> dict:
    """Layer arrays (active layers only, bottom first) of a cell at the last daily snapshot at
    or before ``time`` (default the map time).

    Returns
    -------
    dict with ``day`` (datetime64[s]), ``valid_time``, ``thickness_m``, ``bottom_cm``,
    ``top_cm`` (height above ground), ``grain`` (codes), ``crust`` (kinds), ``hardness``,
    ``grain_size_mm``, ``temperature_c``, ``density_kg_m3``, ``lwc_pct`` (% by volume),
    ``persistent`` (bool: persistent grains), ``of_concern`` (bool: part of a persistent weak
    layer of concern, by the run's criteria).
    """
    out = _outputs(out)
    t = out.map_time if time is None else out.time_in_run(time)
    days = out.profile_days
    d = out.snapshot_position(t)
    if d < 0:
        raise InputError(
            f"profile: no daily snapshot at or before {t} (the first is {days[0]} UTC)"
        )
    prof = out.profiles_on_day(d)
    pos = int(np.nonzero(prof["cell_id"].values == cell_id)[0][0])
    snap = prof.isel(cell=pos, day=0)
    n = int(np.nan_to_num(float(snap["layer_count"].values), nan=0.0))

    def arr(name, dtype=np.float64):
        return np.asarray(snap[name].values[:n]).astype(dtype)

    def strings(name):
        a = np.asarray(snap[name].values[:n])
        if a.dtype.kind == "S":
            a = np.char.decode(a, "utf-8")
        return a.astype(str)

    thick = arr("thickness_m")
    mass = arr("ice_kg_m2") + arr("liquid_kg_m2")
    top = np.cumsum(thick) * 100.0
    grain = strings("grain_class")
    with np.errstate(invalid="ignore", divide="ignore"):
        density = np.where(thick > 0, mass / thick, np.nan)
        lwc = np.where(thick > 0, arr("liquid_kg_m2") / RHO_WATER_KG_M3 / thick * 100.0, np.nan)
    crust = strings("crust_kind")
    concern = weak_layers_of_concern(
        np.array([n]),
        thick[None, :],
        np.nan_to_num(arr("grain_size_mm"))[None, :],
        np.nan_to_num(arr("hardness_index"))[None, :],
        grain_strings_to_codes(grain)[None, :],
        out.concern_criteria,
    )[0]
    return {
        "day": days[d],
        "valid_time": t,
        "thickness_m": thick,
        "bottom_cm": top - thick * 100.0,
        "top_cm": top,
        "grain": grain,
        "crust": np.where(crust == "", "none", crust),
        "hardness": arr("hardness_index"),
        "grain_size_mm": arr("grain_size_mm"),
        "temperature_c": arr("temperature_k") - ZERO_CELSIUS_K,
        "density_kg_m3": density,
        "lwc_pct": lwc,
        "persistent": np.isin(grain, PERSISTENT_CODES),
        "of_concern": concern,
    }


def plot_profile(
    out_dir,
    cell_id=None,
    zone=None,
    band=None,
    aspect=None,
    time=None,
    *,
    slope_class=None,
    profile: dict | None = None,
):
    """Draw one cell's profile (see the module text for the panels).

    Parameters
    ----------
    out_dir : output folder (path) or :class:`RunOutputs`.
    cell_id : int, or None to select by ``zone``, ``band`` (``LOW-HIGH``), ``aspect``
        (and ``slope_class`` when slopes are split).
    time : valid time (UTC); the last daily snapshot at or before it is shown. Default the
        map time.
    profile : the cell's :func:`read_profile` result, when already read.

    Returns
    -------
    matplotlib Figure with five axes sharing y (height above ground [cm]); the hardness axes
    holds one bar patch per layer (gid ``layer-<k>``, bottom first).

    Raises
    ------
    InputError
        Unknown cell, zone, band, aspect or slope class; a time outside the run.
    """
    out = _outputs(out_dir)
    cid = select_cell(
        out, cell=cell_id, zone=zone, band=band, aspect=aspect, slope_class=slope_class
    )
    p = read_profile(out, cid, time) if profile is None else profile
    row = out.table.loc[cid]
    fig = new_figure(11.0, 6.2)
    axes = fig.subplots(1, 5, sharey=True, gridspec_kw={"width_ratios": [2.4, 1, 1, 1, 1]})
    ax_h, ax_e, ax_t, ax_r, ax_w = axes
    depth_total = float(p["top_cm"][-1]) if p["top_cm"].size else 0.0
    status = "forecast" if out.forecast_at(p["valid_time"]) else "analysis"
    day = local_time_label(p["day"], out.local_timezone, year=True)
    fig.suptitle(
        f"{row['zone']}, {row['band']} m, {row['aspect_sector']} (cell {cid}, slope class "
        f"{int(row['slope_class'])}, "
        f"mean slope {float(row.get('slope_deg', np.nan)):.0f}°)\nsimulated profile of {day} "
        f"({status}); "
        f"snow depth {depth_total:.0f} cm (vertical)",
        fontsize=10,
    )
    ax_h.set_ylabel("height above ground [cm]")
    ax_h.set_xlim(0, 6.9)
    ax_h.set_xticks(list(HARDNESS_LABELS.values()), list(HARDNESS_LABELS))
    ax_h.set_xlabel("hand hardness")
    ax_e.set_xlabel("grain size [mm]")
    ax_t.set_xlabel("temperature [°C]")
    ax_r.set_xlabel("density [kg m-3]")
    ax_w.set_xlabel("liquid water [% vol]")
    handles = []
    if p["top_cm"].size == 0:
        for ax in axes:
            ax.text(
                0.5, 0.5, "no snow on the ground", transform=ax.transAxes, ha="center", va="center"
            )
        ax_h.set_ylim(0, 10)
        return fig
    bottom, top, thick_cm = p["bottom_cm"], p["top_cm"], p["thickness_m"] * 100.0
    for k, (code, crust, h) in enumerate(zip(p["grain"], p["crust"], p["hardness"], strict=True)):
        colour = grain_colour(code)
        hh = float(h) if np.isfinite(h) else 1.0
        ax_h.barh(
            bottom[k],
            hh,
            height=thick_cm[k],
            align="edge",
            color=colour,
            edgecolor="#333333",
            linewidth=0.4,
            hatch="xxx" if crust != "none" else None,
            gid=f"layer-{k}",
        )
        if thick_cm[k] >= 0.025 * depth_total:
            ax_h.text(
                hh / 2,
                bottom[k] + thick_cm[k] / 2,
                code,
                ha="center",
                va="center",
                fontsize=7,
                color=text_colour_on(colour),
                clip_on=True,
            )
        if p["persistent"][k]:
            ax_h.plot(
                [6.45],
                [bottom[k] + thick_cm[k] / 2],
                marker="<",
                color="black",
                markerfacecolor="black" if p["of_concern"][k] else "white",
                markersize=6,
                gid=f"pwl-{k}" if p["of_concern"][k] else f"persistent-{k}",
            )
    edges = np.concatenate([[0.0], top])
    ax_e.stairs(
        p["grain_size_mm"],
        edges,
        orientation="horizontal",
        baseline=None,
        color="#0072B2",
        linewidth=1.4,
    )
    ax_r.stairs(
        p["density_kg_m3"],
        edges,
        orientation="horizontal",
        baseline=None,
        color="#0072B2",
        linewidth=1.4,
    )
    ax_w.stairs(
        np.nan_to_num(p["lwc_pct"]),
        edges,
        orientation="horizontal",
        baseline=None,
        color="#0072B2",
        linewidth=1.4,
    )
    ax_t.plot(
        p["temperature_c"],
        0.5 * (bottom + top),
        marker="o",
        markersize=3,
        color="#0072B2",
        linewidth=1.2,
    )
    ax_t.axvline(0.0, color="#777777", linewidth=0.6, linestyle=":")
    for lim in WETNESS_LIMITS_PCT[1:]:
        ax_w.axvline(lim, color="#999999", linewidth=0.5, linestyle=":")
    ax_w.set_xlim(0, max(float(np.nanmax(np.nan_to_num(p["lwc_pct"]))) * 1.1, 4.0))
    ax_e.set_xlim(0, max(float(np.nanmax(p["grain_size_mm"])) * 1.15, 1.0))
    ax_r.set_xlim(0, max(float(np.nanmax(p["density_kg_m3"])) * 1.1, 100.0))
    for ax in axes:
        ax.set_ylim(0, depth_total * 1.05)
        ax.grid(axis="y", color="#DDDDDD", linewidth=0.5)
    # legend: grain classes present, crusts, weak layers, worst interface
    mains = [c for c in GRAIN_MAIN_COLOURS if c in {grain_main_class(g) for g in p["grain"]}]
    handles += [Patch(facecolor=GRAIN_MAIN_COLOURS[c], edgecolor="#333333", label=c) for c in mains]
    if (p["crust"] != "none").any():
        kinds = ", ".join(sorted(set(p["crust"][p["crust"] != "none"])))
        handles.append(
            Patch(facecolor="white", edgecolor="#333333", hatch="xxx", label=f"crust ({kinds})")
        )
    for concern, label in ((True, "weak layer of concern"), (False, "persistent grains")):
        if (p["persistent"] & (p["of_concern"] == concern)).any():
            handles.append(
                Line2D(
                    [],
                    [],
                    marker="<",
                    color="black",
                    markerfacecolor="black" if concern else "white",
                    linestyle="none",
                    label=label,
                )
            )
    if top.size >= 2:
        codes = grain_strings_to_codes(p["grain"]).astype(np.int64)
        count, depth_m = threshold_counts_of_profile(
            p["thickness_m"], p["grain_size_mm"], np.nan_to_num(p["hardness"], nan=1.0), codes
        )
        if count.size and np.isfinite(count).any():
            k = int(np.nanargmax(count))
            height = top[k]
            for ax in axes:
                ax.axhline(
                    height, color="black", linestyle="--", linewidth=1.1, gid="worst-interface"
                )
            handles.append(
                Line2D(
                    [],
                    [],
                    color="black",
                    linestyle="--",
                    label=f"worst interface: threshold count {count[k]:.1f} of 6, "
                    f"{depth_m[k] * 100:.0f} cm below the surface",
                )
            )
    fig.legend(
        handles=handles,
        loc="outside lower center",
        ncols=min(len(handles), 5),
        fontsize=7,
        frameon=False,
    )
    return fig


@dataclass(frozen=True)
class ProfileFigure:
    """What ``regionmap profile`` drew: the file, the snapshot shown and the time asked for.

    ``snapshot_utc`` is the daily snapshot drawn (the last at or before ``asked_utc``);
    ``asked_utc`` is None when no time was given (the map time is used).
    """

    path: Path
    cell_id: int
    snapshot_utc: np.datetime64
    asked_utc: np.datetime64 | None


def profile_command(
    out_dir, cell=None, zone=None, band=None, aspect=None, slope_class=None, time=None
) -> ProfileFigure:
    """``regionmap profile OUTDIR (--cell ID | --zone Z --band LOW-HIGH --aspect A
    [--slope-class K]) [--time T]``: draw the last daily snapshot at or before the time (the
    map time by default) into ``figures/profile_cell<ID>_<snapshot YYYYmmddTHHMM>.png``.

    Raises
    ------
    InputError
        Naming what did not match: unknown cell, zone, band, aspect or slope class, a time
        outside the run or before its first daily snapshot.
    """
    out = _outputs(out_dir)
    try:
        cid = select_cell(
            out, cell=cell, zone=zone, band=band, aspect=aspect, slope_class=slope_class
        )
        asked = None if time is None else utc_datetime64(time, "--time")
        prof = read_profile(out, cid, out.map_time if time is None else out.time_in_run(time))
        fig = plot_profile(out, cid, profile=prof)
        stamp = pd.Timestamp(prof["day"]).strftime("%Y%m%dT%H%M")
        path = save_png(fig, out.out_dir / "figures" / f"profile_cell{cid}_{stamp}.png")
        return ProfileFigure(path, cid, np.datetime64(prof["day"], "s"), asked)
    finally:
        if not isinstance(out_dir, RunOutputs):
            out.close()

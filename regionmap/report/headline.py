"""The words of the morning briefing: one line per layer of concern and a headline per zone.

:func:`layer_lines` turns the layers-of-concern table (``layers_of_concern.csv``, one row per
layer × zone × band × aspect plus a zone-wide row) into one sentence per layer and zone —
"buried surface hoar of 22 Dec: 1700–2900 m, N to E, 105–120 cm deep, on 60 % of avalanche
terrain" — from the table's own columns (``kind``, ``date``, band edges, ``aspect_sector``,
``depth_cm``, ``presence_frac``), whatever layers the run found. :func:`zone_changes`
reads what changed in each zone between a reference time (the previous run's state, else
24 h before the map time) and the map time from ``cells.nc``: snowfall and rain, layers
dated since, and when wet snow sets in.

Model output is guidance for trained people: field observations, the local avalanche
service and professional standards come first.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import sparse

from regionmap.cells import COMPASS_16
from regionmap.io.times import local_date_label, local_time_label

__all__ = [
    "KIND_WORDS",
    "HEADLINE_MIN_PRESENCE_FRAC",
    "ALWAYS_LISTED_KINDS",
    "BAND_MIN_PRESENCE_FRAC",
    "WET_SNOW_MIN_KG_M2",
    "WET_ONSET_FRAC",
    "aspect_phrase",
    "elevation_phrase",
    "layer_lines",
    "ZoneChanges",
    "zone_changes",
]

#: words for the kinds of the layers-of-concern table (weak-layer families and crust kinds).
KIND_WORDS: dict[str, str] = {
    "SH": "buried surface hoar",
    "FC": "facets",
    "DH": "depth hoar",
    "rain": "rain crust",
    "glaze": "freezing-rain glaze",
    "melt-freeze": "melt-freeze crust",
    "sun": "sun crust",
}
#: a layer is in a zone's headline when it covers at least this share of the zone's terrain…
HEADLINE_MIN_PRESENCE_FRAC = 0.1
#: …or is of one of these kinds (the season's rain crusts and glaze: always listed where present).
ALWAYS_LISTED_KINDS: frozenset[str] = frozenset({"rain", "glaze"})
#: the elevations, aspects and depths of a sentence are those of the band × aspect groups in
#: which the layer covers at least this share of the terrain (all groups with it when none does).
BAND_MIN_PRESENCE_FRAC = 0.1
#: liquid water in the snowpack [kg m-2] from which a cell counts as wet snow (a choice of
#: this report: about 1 mm of water, well above the kernel's round-off).
WET_SNOW_MIN_KG_M2 = 1.0
#: wet snow "sets in" in a zone when its wet share of terrain first reaches this.
WET_ONSET_FRAC = 0.1


def _round_to(v: float, step: float) -> int:
    return int(step * np.round(v / step))


def elevation_phrase(lower_m: float, upper_m: float) -> str:
    """``"1700–2900 m"``, ``"below 1500 m"``, ``"above 2700 m"`` or ``"at all elevations"``
    from the lowest band's lower edge and the highest band's upper edge (±inf: open band)."""
    lo_open, hi_open = not np.isfinite(lower_m), not np.isfinite(upper_m)
    if lo_open and hi_open:
        return "at all elevations"
    if lo_open:
        return f"below {upper_m:.0f} m"
    if hi_open:
        return f"above {lower_m:.0f} m"
    return f"{lower_m:.0f}–{upper_m:.0f} m"


def aspect_phrase(sectors, all_sectors) -> str:
    """Aspects as runs of neighbouring compass sectors: ``"N to E"``, ``"N to E and S"``,
    ``"all aspects"``; ``"flat"`` is named last (``"N to E and flat terrain"``).

    Parameters
    ----------
    sectors : the sector names with the layer.
    all_sectors : the sector names of the run (they fix 4, 8 or 16 sectors).
    """
    have = set(sectors)
    flat = "flat" in have
    order = [s for s in COMPASS_16 if s in set(all_sectors)]
    on = np.array([s in have for s in order])
    parts = []
    if on.all():
        parts.append("all aspects")
    elif on.any():
        # walk round from a sector without the layer, so no run is split at the wrap-around
        first_off = int(np.argmin(on))
        runs: list[list[int]] = [[]]
        for k in np.roll(np.arange(len(order)), -first_off):
            if on[k]:
                runs[-1].append(int(k))
            elif runs[-1]:
                runs.append([])
        runs = [r for r in runs if r]
        # clockwise from north; a run across north first
        runs.sort(key=lambda r: r[0] - len(order) if r[0] > r[-1] else r[0])
        parts += [order[r[0]] if len(r) == 1 else f"{order[r[0]]} to {order[r[-1]]}" for r in runs]
    if flat:
        parts.append("flat terrain")
    return " and ".join(parts) if parts else "no aspect"


def _depth_phrase(lo_cm: float, hi_cm: float) -> str:
    if not np.isfinite(hi_cm):
        return "depth unknown"
    if hi_cm < 2.5:
        return "at the surface"
    lo, hi = _round_to(lo_cm, 5), _round_to(hi_cm, 5)
    return f"{hi} cm deep" if lo == hi else f"{lo}–{hi} cm deep"


def _share_phrase(frac: float, terrain: str) -> str:
    pct = 100.0 * frac
    return f"on {'<1' if pct < 0.5 else f'{pct:.0f}'} % of {terrain}"


def layer_lines(loc: pd.DataFrame, *, terrain: str = "avalanche terrain") -> pd.DataFrame:
    """One sentence per layer and zone, from the layers-of-concern table.

    Layers without presence in a zone (zone-wide ``presence_frac`` of 0) are dropped; every
    other layer gets its line. The elevations, aspects and depth range come from the band ×
    aspect rows where the layer covers at least :data:`BAND_MIN_PRESENCE_FRAC` of the terrain
    (all rows with it when none does); the share from the zone-wide row.

    Parameters
    ----------
    loc : the layers-of-concern table (columns ``layer_id``, ``kind``, ``category``,
        ``date``, ``zone``, ``band_lower_m``, ``band_upper_m``, ``aspect_sector``,
        ``presence_frac``, ``depth_cm``).
    terrain : what the shares are of (``"avalanche terrain"`` or ``"all terrain"``).

    Returns
    -------
    DataFrame, one row per zone × layer, ordered by zone, weak layers before crusts, most
    widespread first: ``zone``, ``layer_id``, ``kind``, ``category``, ``date``,
    ``presence_frac``, ``lower_m``, ``upper_m``, ``aspects``, ``depth_lo_cm``,
    ``depth_hi_cm``, ``headline`` (bool: on :data:`HEADLINE_MIN_PRESENCE_FRAC` of the zone or
    of :data:`ALWAYS_LISTED_KINDS`), ``text``.
    """
    key = ["zone", "layer_id"]
    zone_rows = loc[(loc["aspect_sector"] == "all") & (loc["presence_frac"] > 0)]
    zone_rows = zone_rows[[*key, "kind", "category", "date", "presence_frac"]]
    parts = loc[(loc["aspect_sector"] != "all") & (loc["presence_frac"] > 0)].copy()
    parts["_major"] = parts["presence_frac"] >= BAND_MIN_PRESENCE_FRAC
    has_major = parts.groupby(key)["_major"].transform("any")
    parts = parts[parts["_major"] | ~has_major]
    sector_bit = {s: 1 << k for k, s in enumerate([*COMPASS_16, "flat"])}
    parts["_bit"] = parts["aspect_sector"].map(sector_bit).fillna(0).astype(np.int64)
    g = parts.groupby(key)
    ext = pd.DataFrame(
        {
            "lower_m": g["band_lower_m"].min(),
            "upper_m": g["band_upper_m"].max(),
            "depth_lo_cm": g["depth_cm"].min(),
            "depth_hi_cm": g["depth_cm"].max(),
            "_bits": g["_bit"].agg(np.bitwise_or.reduce),
        }
    )
    lines = zone_rows.merge(ext, left_on=key, right_index=True, how="left")
    all_sectors = [s for s in loc["aspect_sector"].unique() if s not in ("all", "flat")]
    names = [*COMPASS_16, "flat"]
    phrases = {
        int(b): aspect_phrase([n for k, n in enumerate(names) if int(b) >> k & 1], all_sectors)
        for b in lines["_bits"].fillna(0).unique()
    }
    lines["aspects"] = lines["_bits"].fillna(0).astype(np.int64).map(phrases)
    lines["headline"] = (lines["presence_frac"] >= HEADLINE_MIN_PRESENCE_FRAC) | lines["kind"].isin(
        ALWAYS_LISTED_KINDS
    )
    lines["text"] = [
        f"{KIND_WORDS.get(r.kind, str(r.kind))} of {local_date_label(r.date)}: "
        f"{elevation_phrase(r.lower_m, r.upper_m)}, {r.aspects}, "
        f"{_depth_phrase(r.depth_lo_cm, r.depth_hi_cm)}, {_share_phrase(r.presence_frac, terrain)}"
        for r in lines.itertuples()
    ]
    lines["_crust"] = lines["category"] == "crust"
    lines = lines.sort_values(["zone", "_crust", "presence_frac"], ascending=[True, True, False])
    return lines.drop(columns=["_bits", "_crust"]).reset_index(drop=True)


# --------------------------------------------------------------------------- changes
@dataclass
class ZoneChanges:
    """What changed per zone between ``since`` and the map time, and after it.

    Attributes
    ----------
    since, map_time, end : datetime64[s] [UTC]: the reference time, the map time, the run's end.
    since_label : why ``since`` ("the previous run" or "24 h before").
    changes : DataFrame indexed by zone: ``snowfall_kg_m2``, ``rain_kg_m2`` (since → map
        time, weighted means), ``forecast_snowfall_kg_m2``, ``forecast_rain_kg_m2`` (map time →
        end), ``wet_frac_since``, ``wet_frac_now`` (share of the terrain with wet snow),
        ``wet_onset`` (datetime64: first time after ``since`` the wet share reaches
        :data:`WET_ONSET_FRAC`, NaT when it does not), ``wet_onset_frac`` (the highest wet
        share from the onset to the end).
    """

    since: np.datetime64
    map_time: np.datetime64
    end: np.datetime64
    since_label: str
    changes: pd.DataFrame


def reference_time(out) -> tuple[np.datetime64, str]:
    """The time to compare the map time with: the state the run continued from (its valid
    time: the hour before the run's first step) when it did, else 24 h before the map time
    (clipped to the run's first output time)."""
    period = out.run.get("period", {}) if isinstance(out.run.get("period"), dict) else {}
    if period.get("continued_from") and period.get("first_step"):
        t = np.datetime64(period["first_step"], "s") - np.timedelta64(1, "h")
        if t < out.map_time:
            return t, "the previous run"
    t = out.map_time - np.timedelta64(24, "h")
    return max(t, out.times[0]), "24 h before"


def zone_changes(out) -> ZoneChanges:
    """Snowfall, rain and wet snow per zone between :func:`reference_time` and the map time
    (and after it, in the forecast), weighted means over the report's terrain weights.
    Reads only the hours from the reference time to the end of ``cells.nc``."""
    since, why = reference_time(out)
    times, t_map = out.times, np.datetime64(out.map_time, "s")
    p0 = int(np.searchsorted(times, since, side="right"))  # first interval after `since`
    pm = int(np.searchsorted(times, t_map, side="right"))
    window = slice(max(p0 - 1, 0), None)
    ds = out.cells.isel(time=window)
    t = times[window]
    w, _ = out.weights
    w = w.reindex(out.table.index).to_numpy(np.float64)
    zone_names = out.zone_names
    code = pd.Categorical(out.table["zone"], categories=zone_names).codes
    # sparse (zone, cell) weights whose rows sum to 1: weighted zone means as one product
    total = np.bincount(code, weights=w, minlength=len(zone_names))
    share = np.divide(w, total[code], out=np.zeros_like(w), where=total[code] > 0)
    member = sparse.csr_matrix(
        (share, (code, np.arange(code.size))), shape=(len(zone_names), code.size)
    )
    first = 1 if p0 >= 1 else 0  # interval sums after `since` only
    cut = pm - window.start  # positions in the window up to and including the map time

    def sums(name: str) -> tuple[np.ndarray, np.ndarray]:
        if name not in ds.variables:
            return np.zeros(len(zone_names)), np.zeros(len(zone_names))
        v = np.nan_to_num(ds[name].values.astype(np.float64))
        return member @ v[:, first:cut].sum(axis=1), member @ v[:, cut:].sum(axis=1)

    snow_now, snow_fc = sums("snowfall_kg_m2")
    rain_now, rain_fc = sums("rain_kg_m2")
    if "liquid_water_kg_m2" in ds.variables:
        wet = member @ (ds["liquid_water_kg_m2"].values >= WET_SNOW_MIN_KG_M2).astype(np.float64)
    else:
        wet = np.zeros((len(zone_names), t.size))
    k_since = 0 if p0 >= 1 and times[window.start] == since else None
    wet_since = wet[:, 0] if k_since == 0 else np.full(len(zone_names), np.nan)
    wet_now = wet[:, cut - 1]
    reached = wet[:, first:] >= WET_ONSET_FRAC
    below_at_start = ~(wet[:, 0] >= WET_ONSET_FRAC)
    has = reached.any(axis=1) & below_at_start
    k = np.argmax(reached, axis=1) + first
    onset = np.where(has, t[k], np.datetime64("NaT"))
    after = np.arange(t.size)[None, :] >= k[:, None]
    peak = np.where(has, np.where(after, wet, -np.inf).max(axis=1), np.nan)
    changes = pd.DataFrame(
        {
            "snowfall_kg_m2": snow_now,
            "rain_kg_m2": rain_now,
            "forecast_snowfall_kg_m2": snow_fc,
            "forecast_rain_kg_m2": rain_fc,
            "wet_frac_since": wet_since,
            "wet_frac_now": wet_now,
            "wet_onset": onset.astype("datetime64[s]"),
            "wet_onset_frac": peak,
        },
        index=pd.Index(zone_names, name="zone"),
    )
    return ZoneChanges(since, t_map, times[-1], why, changes)


def headline_items(
    zone: str,
    changes: ZoneChanges,
    zone_row: pd.Series,
    lines: pd.DataFrame,
    *,
    local_timezone: str,
    window_end,
    terrain: str,
) -> dict:
    """The headline of one zone: ``changed`` (what changed since the reference time),
    ``load`` (new snow of the observation days ending at ``window_end``, and the forecast's),
    ``wet`` (wet snow now and its onset) and ``layers`` (the headline layers' sentences)."""
    c = changes.changes.loc[zone]
    since_date = pd.Timestamp(changes.since).tz_localize("UTC").tz_convert(local_timezone).date()
    zl = lines[lines["zone"] == zone]
    new = zl[pd.to_datetime(zl["date"]).dt.date >= since_date]
    new_words = [
        f"{KIND_WORDS.get(r.kind, r.kind)} of {local_date_label(r.date)} "
        f"({100 * r.presence_frac:.0f} %)"
        for r in new[new["headline"]].itertuples()
    ]
    since = "Since the previous run" if changes.since_label == "the previous run" else "Last 24 h"
    changed = (
        f"{since}: "
        f"{c.snowfall_kg_m2:.0f} kg m-2 snowfall, "
        f"{c.rain_kg_m2:.0f} kg m-2 rain; "
        + (f"new: {', '.join(new_words)}." if new_words else "no new layer of concern.")
    )
    end = local_time_label(window_end, local_timezone)
    hn24, hn72 = zone_row.get("new_snow_24h_cm", np.nan), zone_row.get("new_snow_72h_cm", np.nan)
    load72 = zone_row.get("new_snow_72h_kg_m2", np.nan)
    load = (
        f"New snow to {end}: {_num(hn24)} cm in 24 h, {_num(hn72)} cm ({_num(load72)} kg m-2) "
        "in 72 h."
    )
    if changes.end > changes.map_time:
        load += (
            f" Forecast to {local_time_label(changes.end, local_timezone)}: "
            f"{c.forecast_snowfall_kg_m2:.0f} kg m-2 snowfall, {c.forecast_rain_kg_m2:.0f} kg m-2 "
            "rain."
        )
    if pd.notna(c.wet_onset):
        wet = (
            f"Wet snow sets in {local_time_label(c.wet_onset, local_timezone)}, up to "
            f"{100 * c.wet_onset_frac:.0f} % of {terrain}"
            + (" (forecast)." if c.wet_onset > changes.map_time else ".")
        )
    else:
        wet = f"No wet-snow onset up to {local_time_label(changes.end, local_timezone)}"
        wet += f"; wet snow on {100 * c.wet_frac_now:.0f} % of {terrain} at the map time."
    return {
        "changed": changed,
        "load": load,
        "wet": wet,
        "layers": list(zl.loc[zl["headline"], "text"]),
        "minor": int((~zl["headline"]).sum()),
    }


def _num(v) -> str:
    return "–" if v is None or not np.isfinite(float(v)) else f"{float(v):.0f}"

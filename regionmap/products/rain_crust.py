"""The rain-crust line: where a rain-on-snow event left a crust, per zone and aspect.

Rain on snow leaves a crust on the terrain between two elevations: above the snow line of
the time (below it there was no snow to wet) and below the rain–snow transition (above it the
precipitation fell as snow). That transition sits some way below the freezing level, since
falling snow needs a few hundred metres of above-freezing air to melt (common practice;
the melting distance depends on humidity and rate). The column model tags the crusts such an
event leaves (``crust_kind = "rain"`` and the event's ``event_id``).

**Upper limit: the rain–snow transition** (the rain-crust line). Each cell's *rain share* of the
event — the liquid part of the precipitation it received over the event's window, ``rain_kg_m2 /
(rain_kg_m2 + snowfall_kg_m2)`` — falls with elevation. Per zone × aspect the shares are fitted
against the cells' own mean elevations by an antitonic (non-increasing) weighted least-squares
regression, the pool-adjacent-violators fit of Ayer et al. (1955), and the line is where that
fit, joined linearly between the cells' elevations, crosses 50 % (the interpolated isotonic
estimate of a target level of Stylianou & Flournoy 2002). Where the transition moved during the
event, or lay between two cells, the shares are fractional and the line falls between the cells,
finer than the band step. The column makes a rain crust only where rain was at least half of the
event's precipitation (:class:`regionmap.snow.params.SnowParams` ``rain_crust_min_share``), so
this is also the crust's upper edge. When the share is 50 % or more up to the group's highest
cell, the line is above that cell (``at_or_above``: it is not extrapolated); when it is under
50 % even in the lowest cell, below it (``at_or_below``).

**Lower limit: the snow line of the time**, from the crust's presence: interpolated linearly
between band centres where the area fraction with the crust crosses 0.5
(:func:`regionmap.products.summaries.band_transitions`). A group without the crust has no
limits (``absent``).

The likely range comes from a small perturbation ensemble the run makes around the event
(air temperature ±1 K at all heights, phase threshold ±0.5 K): each member's rain shares and
crust presence go through the same computation and the range is the smallest and largest
limit over the members and the control run. It shows the sensitivity of the model chain;
the NWP's own freezing-level error usually dominates and is not in it.

The limits are drawn as contour lines of the DEM (contourpy) inside each zone-aspect region
(clipped with shapely) and stated in words for the CLI and the zones table.

Model output is guidance for trained people; it does not replace field observations, the
local avalanche service's products or professional judgement.

References
----------
.. [1] Ayer, M., Brunk, H. D., Ewing, G. M., Reid, W. T. and Silverman, E. (1955). An
   empirical distribution function for sampling with incomplete information. Annals of
   Mathematical Statistics 26(4), 641-647. doi:10.1214/aoms/1177728423
.. [2] Stylianou, M. and Flournoy, N. (2002). Dose finding using the biased coin up-and-down
   design and isotonic regression. Biometrics 58(1), 171-177.
   doi:10.1111/j.0006-341X.2002.00171.x [mem: recalled, not re-checked]
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import pandas as pd
import xarray as xr
from scipy.optimize import isotonic_regression

from regionmap.errors import GridMismatchError, InputError
from regionmap.products.summaries import band_transitions, decode_snapshot
from regionmap.snow.codes import CRUST_INDEX

if TYPE_CHECKING:
    import geopandas as gpd

__all__ = [
    "NO_CRUST_CLAUSE",
    "RainEvent",
    "rain_events",
    "line_events",
    "rain_event_windows",
    "event_rain_share",
    "forcing_rain_share",
    "transition_elevation_isotonic",
    "rain_crust_presence",
    "rain_crust_limits",
    "rain_crust_lines",
    "rain_crust_sentence",
    "zone_rain_crust_columns",
]

_KEYS = ["zone", "aspect_sector"]
_ROUND_M = 50.0
SECTOR_WORDS = {
    "N": "north",
    "NNE": "north-north-east",
    "NE": "north-east",
    "ENE": "east-north-east",
    "E": "east",
    "ESE": "east-south-east",
    "SE": "south-east",
    "SSE": "south-south-east",
    "S": "south",
    "SSW": "south-south-west",
    "SW": "south-west",
    "WSW": "west-south-west",
    "W": "west",
    "WNW": "west-north-west",
    "NW": "north-west",
    "NNW": "north-north-west",
}
_SECTOR_ORDER = {s: i for i, s in enumerate(SECTOR_WORDS)} | {"flat": len(SECTOR_WORDS)}


@dataclass(frozen=True)
class RainEvent:
    """One rain-on-snow event and where its crust is, in the control run and the members.

    Attributes
    ----------
    event_id : int, the column's event id of the crust.
    event_time : datetime64[s], representative time (median crust formation time) [UTC].
    presence : (cell,) bool, control run: the cell's column holds the event's rain crust.
    rain_share : (cell,) float, control run: the liquid share of the cell's precipitation
        over the event's window [1] (NaN where it had none; :func:`event_rain_share`).
    members : (member, cell) bool or None, crust presence of each perturbation member.
    member_rain_share : (member, cell) float or None, each member's rain share (NaN where
        the member was not re-simulated: the control's share stands in).
    """

    event_id: int
    event_time: np.datetime64
    presence: np.ndarray
    rain_share: np.ndarray
    members: np.ndarray | None = None
    member_rain_share: np.ndarray | None = None


def _snapshot_day(profiles: xr.Dataset, day) -> int:
    days = profiles["day"].values.astype("datetime64[s]")
    if day is None:
        return days.size - 1
    d = int(
        np.searchsorted(days, np.datetime64(pd.Timestamp(day).to_datetime64(), "s"), side="right")
        - 1
    )
    if d < 0:
        raise InputError(f"profiles.nc: no snapshot at or before {day} (first is {days[0]})")
    return d


def rain_crust_presence(
    profiles: xr.Dataset,
    *,
    day=None,
    event_id: int | None = None,
    formed_between: tuple | None = None,
) -> np.ndarray:
    """(cell,) bool: the snapshot holds a rain crust of ``event_id``, or one formed in
    ``formed_between`` = (start, end) [UTC] (for perturbation members whose event ids may
    differ). ``day`` picks the last snapshot at or before it (default the last)."""
    if (event_id is None) == (formed_between is None):
        raise InputError("rain_crust_presence: give exactly one of event_id or formed_between")
    snap = decode_snapshot(profiles, [_snapshot_day(profiles, day)])
    rain = snap.valid[:, 0] & (snap.crust[:, 0] == CRUST_INDEX["rain"])
    if event_id is not None:
        hit = rain & (snap.event_id[:, 0] == event_id)
    else:
        lo, hi = (
            np.datetime64(pd.Timestamp(t).to_datetime64(), "s").astype(np.int64)
            for t in formed_between
        )
        f = snap.formation_s[:, 0]
        hit = rain & (f >= lo) & (f <= hi)
    return hit.any(axis=1)


def rain_events(profiles: xr.Dataset, *, day=None) -> pd.DataFrame:
    """Rain-crust events found in a snapshot (default the last): ``event_id``,
    ``event_time`` (median formation time of its crusts) [UTC] and ``n_cells``."""
    snap = decode_snapshot(profiles, [_snapshot_day(profiles, day)])
    rain = snap.valid[:, 0] & (snap.crust[:, 0] == CRUST_INDEX["rain"]) & (snap.event_id[:, 0] >= 0)
    ci, li = np.nonzero(rain)
    rows = pd.DataFrame(
        {
            "cell": ci,
            "event_id": snap.event_id[:, 0][ci, li],
            "formation_s": snap.formation_s[:, 0][ci, li],
        }
    )
    g = rows.groupby("event_id")
    out = pd.DataFrame(
        {
            "event_time": g["formation_s"].median().round().astype(np.int64),
            "n_cells": g["cell"].nunique(),
        }
    ).reset_index()
    out["event_time"] = out["event_time"].to_numpy().astype("datetime64[s]")
    return out.sort_values("event_time", ignore_index=True)


#: An event draws a rain-crust line when its crust is in at least this many cells and this
#: share of all cells (ours).
_MIN_EVENT_CELLS = 3
_MIN_EVENT_CELL_FRAC = 0.02


def line_events(
    profiles: xr.Dataset, *, day, n_cells_total: int
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The events of :func:`rain_events` that draw a rain-crust line, and the minor ones.

    A line needs an event that left crusts over some terrain; single cells with a crust of
    their own (e.g. a shallow pack soaked by a shower) do not make a line.
    """
    events = rain_events(profiles, day=day)
    min_cells = max(_MIN_EVENT_CELLS, int(np.ceil(_MIN_EVENT_CELL_FRAC * n_cells_total)))
    return events[events["n_cells"] >= min_cells], events[events["n_cells"] < min_cells]


def rain_event_windows(events_csv) -> dict[int, tuple[np.datetime64, np.datetime64]]:
    """Each rain-on-snow event's window from the run's event log (``events.csv``): the first
    and last hour with rain of the event anywhere in the region, as (first, last) interval
    ends [UTC], by event id; empty when the file does not exist."""
    path = Path(events_csv)
    if not path.exists():
        return {}
    frame = pd.read_csv(path)
    missing = {"kind", "event_id", "first_time", "last_time"} - set(frame.columns)
    if missing:
        raise InputError(f"{path}: missing columns {sorted(missing)} (see docs/outputs.md)")
    frame = frame[frame["kind"] == "rain-on-snow"]
    first = pd.to_datetime(frame["first_time"], utc=True).dt.tz_localize(None)
    last = pd.to_datetime(frame["last_time"], utc=True).dt.tz_localize(None)
    g = pd.DataFrame({"event_id": frame["event_id"], "first": first, "last": last}).groupby(
        "event_id"
    )
    lo, hi = g["first"].min(), g["last"].max()
    return {int(k): (np.datetime64(lo[k], "s"), np.datetime64(hi[k], "s")) for k in lo.index}


def event_rain_share(diag: xr.Dataset, first, last) -> np.ndarray:
    """(cell,) liquid share of each cell's precipitation in the intervals that end in
    [``first``, ``last``] [1]: ``rain_kg_m2 / (rain_kg_m2 + snowfall_kg_m2)`` summed over them
    (``cells.nc``); NaN where a cell had no precipitation then."""
    for name in ("rain_kg_m2", "snowfall_kg_m2"):
        if name not in diag.variables:
            raise InputError(f"cells.nc: missing variable {name!r} (see docs/outputs.md)")
    t = diag["time"].values.astype("datetime64[s]")
    sel = np.nonzero((t >= np.datetime64(first, "s")) & (t <= np.datetime64(last, "s")))[0]
    if sel.size == 0:
        return np.full(diag.sizes["cell"], np.nan)
    part = slice(int(sel[0]), int(sel[-1]) + 1)

    def total(name: str) -> np.ndarray:
        v = diag[name].isel(time=part).transpose("cell", "time").values.astype(np.float64)
        return np.nansum(v, axis=1)

    rain, snow = total("rain_kg_m2"), total("snowfall_kg_m2")
    precip = rain + snow
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(precip > 0.0, rain / precip, np.nan)


def forcing_rain_share(precip_kg_m2: np.ndarray, snow_frac: np.ndarray) -> np.ndarray:
    """(cell,) liquid share of the precipitation in hourly cell forcing (cell, time) [1], as
    the column counts it (rain = precipitation × (1 − snow fraction)): the rain share of a
    perturbed ensemble member, comparable with :func:`event_rain_share`; NaN without
    precipitation."""
    p = np.asarray(precip_kg_m2, dtype=np.float64)
    liquid = (p * (1.0 - np.asarray(snow_frac, dtype=np.float64))).sum(axis=1)
    total = p.sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(total > 0.0, liquid / total, np.nan)


def transition_elevation_isotonic(
    elevation_m: np.ndarray, share: np.ndarray, weight: np.ndarray, *, level: float = 0.5
) -> tuple[float, str]:
    """Elevation where a share that falls with elevation crosses ``level``.

    An antitonic weighted least-squares fit of ``share`` on elevation (pool adjacent
    violators, Ayer et al. 1955; ``scipy.optimize.isotonic_regression``), joined linearly
    between the cells' elevations; the crossing of ``level`` is interpolated between the two
    cells that bracket it (Stylianou & Flournoy 2002).

    Parameters
    ----------
    elevation_m : (n,) float, the cells' mean elevations [m].
    share : (n,) float, e.g. the rain share of an event [1]; NaN entries are left out.
    weight : (n,) float, the cells' area weights [km2]; cells of weight 0 are left out.
    level : the share whose elevation is wanted.

    Returns
    -------
    elevation_m : float [m]
    bound : ``""`` for a crossing between cells; ``"at_or_above"`` when the fit is at or above
        ``level`` up to the highest cell (its elevation is returned: the crossing is higher);
        ``"at_or_below"`` when it is under ``level`` down to the lowest cell (its elevation:
        the crossing is lower); ``"absent"`` (NaN) without cells or when the share is 0
        everywhere (no rain at all).
    """
    z, y, w = (np.asarray(a, dtype=np.float64) for a in (elevation_m, share, weight))
    ok = np.isfinite(z) & np.isfinite(y) & (w > 0)
    order = np.argsort(z[ok], kind="stable")
    z, y, w = z[ok][order], y[ok][order], w[ok][order]
    if z.size == 0 or not (y > 0).any():
        return float("nan"), "absent"
    fit = isotonic_regression(y, weights=w, increasing=False).x
    if fit[-1] >= level:
        return float(z[-1]), "at_or_above"
    if fit[0] < level:
        return float(z[0]), "at_or_below"
    k = int(np.flatnonzero(fit >= level)[-1])  # the fit is non-increasing: k + 1 is under
    frac = (fit[k] - level) / (fit[k] - fit[k + 1])
    return float(z[k] + frac * (z[k + 1] - z[k])), ""


def _share_lines(
    table: pd.DataFrame, weight_km2: np.ndarray, shares: np.ndarray, keys: list[str]
) -> pd.DataFrame:
    """Upper limit per member × group from the rain shares (member, cell):
    :func:`transition_elevation_isotonic` over the group's cells (one call per group)."""
    n_mem = shares.shape[0]
    z = table["elevation_m"].to_numpy(np.float64)
    w = np.asarray(weight_km2, dtype=np.float64)
    groups = table.groupby(keys, sort=True, dropna=False).indices
    rows = []
    for m in range(n_mem):
        for key, idx in groups.items():
            elev, bound = transition_elevation_isotonic(z[idx], shares[m, idx], w[idx])
            key = key if isinstance(key, tuple) else (key,)
            rows.append((m, *key, elev, bound))
    return pd.DataFrame(rows, columns=["member", *keys, "upper_m", "upper_bound"])


def _band_fractions(
    table: pd.DataFrame, weight_km2: np.ndarray, presence: np.ndarray, keys
) -> pd.DataFrame:
    """Area fraction with the crust per member × keys × band; presence (member, cell)."""
    n_mem, n_cell = presence.shape
    w = np.asarray(weight_km2, dtype=np.float64)
    cols = [*keys, "band_lower_m", "band_upper_m"]
    base = table[cols].reset_index(drop=True)
    frame = pd.concat([base] * n_mem, ignore_index=True)
    frame["member"] = np.repeat(np.arange(n_mem), n_cell)
    frame["_w"] = np.tile(w, n_mem)
    frame["_wp"] = frame["_w"] * presence.reshape(-1)
    frame["_wz"] = frame["_w"] * np.tile(table["elevation_m"].to_numpy(np.float64), n_mem)
    g = frame.groupby(["member", *cols], dropna=False)[["_w", "_wp", "_wz"]].sum().reset_index()
    g = g[g["_w"] > 0]
    lo, hi = g["band_lower_m"].to_numpy(np.float64), g["band_upper_m"].to_numpy(np.float64)
    closed = np.isfinite(lo) & np.isfinite(hi)
    g["band_centre_m"] = np.where(closed, 0.5 * (lo + hi), g["_wz"] / g["_w"])
    g["frac"] = g["_wp"] / g["_w"]
    return g


def rain_crust_limits(
    table: pd.DataFrame,
    weight_km2,
    event: RainEvent,
    *,
    by: tuple[str, ...] = ("zone", "aspect_sector"),
) -> pd.DataFrame:
    """Upper and lower limit of an event's rain crust per group, with the likely range.

    Parameters
    ----------
    table : cell table indexed by ``cell_id`` (``zone``, ``aspect_sector``, band edges,
        ``elevation_m``).
    weight_km2 : (cell,) area weights [km2] (all terrain suits: the crust follows elevation).
    event : :class:`RainEvent` with the control presence and rain shares, and optionally the
        members'.
    by : grouping columns (``("zone",)`` for one limit per zone).

    Returns
    -------
    DataFrame per group: ``event_id``, ``event_time``, ``upper_m``, ``upper_bound``,
    ``upper_low_m``, ``upper_high_m``, ``lower_m``, ``lower_bound``, ``lower_low_m``,
    ``lower_high_m``, ``n_members``. The upper limit is the rain share's 50 % crossing
    (:func:`transition_elevation_isotonic`: ``at_or_above`` the highest cell, ``at_or_below`` the
    lowest); the lower limit the crust presence's crossing between band centres
    (:func:`regionmap.products.summaries.band_transitions`: ``at_or_below``: the crust
    reaches down to the lowest band). Both are ``absent`` in a group without the crust.
    """
    keys = list(by)
    control = np.asarray(event.presence, dtype=bool)
    if control.shape != (len(table),):
        raise GridMismatchError(
            f"rain event {event.event_id}: presence has shape {control.shape}, expected "
            f"({len(table)},) cells"
        )
    members = (
        np.zeros((0, control.size), bool)
        if event.members is None
        else np.asarray(event.members, dtype=bool)
    )
    if members.ndim != 2 or members.shape[1] != control.size:
        raise GridMismatchError(
            f"rain event {event.event_id}: member presence has shape {members.shape}, expected "
            f"(member, {control.size})"
        )
    share = np.asarray(event.rain_share, dtype=np.float64)
    if share.shape != control.shape:
        raise GridMismatchError(
            f"rain event {event.event_id}: rain_share has shape {share.shape}, expected "
            f"({control.size},) cells"
        )
    member_share = (
        np.full(members.shape, np.nan)
        if event.member_rain_share is None
        else np.asarray(event.member_rain_share, dtype=np.float64)
    )
    if member_share.shape != members.shape:
        raise GridMismatchError(
            f"rain event {event.event_id}: member rain shares have shape {member_share.shape}, "
            f"expected {members.shape}"
        )
    allp = np.vstack([control[None, :], members])
    shares = np.vstack([share[None, :], np.where(np.isnan(member_share), share, member_share)])
    fr = _band_fractions(table, weight_km2, allp, keys)
    lower = band_transitions(fr, ["member", *keys], "frac")
    upper = _share_lines(table, weight_km2, shares, keys)
    lim = lower.drop(columns=["upper_m", "upper_bound"]).merge(upper, on=["member", *keys])
    no_crust = lim["lower_bound"] == "absent"
    lim.loc[no_crust, "upper_m"] = np.nan
    lim.loc[no_crust, "upper_bound"] = "absent"
    ctl = lim[lim["member"] == 0].drop(columns="member").set_index(keys)
    spread = lim.groupby(keys, dropna=False).agg(
        upper_low_m=("upper_m", "min"),
        upper_high_m=("upper_m", "max"),
        lower_low_m=("lower_m", "min"),
        lower_high_m=("lower_m", "max"),
    )
    out = ctl.join(spread).reset_index()
    out.insert(0, "event_time", np.datetime64(event.event_time, "s"))
    out.insert(0, "event_id", int(event.event_id))
    out["n_members"] = members.shape[0]
    return out[
        [
            "event_id",
            "event_time",
            *keys,
            "upper_m",
            "upper_bound",
            "upper_low_m",
            "upper_high_m",
            "lower_m",
            "lower_bound",
            "lower_low_m",
            "lower_high_m",
            "n_members",
        ]
    ]


# --------------------------------------------------------------------------- words
def _r(v: float) -> str:
    return "?" if not np.isfinite(v) else f"{_ROUND_M * round(v / _ROUND_M):.0f}"


def _aspect_phrase(sectors: list[str], all_sectors: set[str]) -> str:
    compass = sorted((s for s in sectors if s != "flat"), key=_SECTOR_ORDER.__getitem__)
    flat = "flat" in sectors
    if set(sectors) == all_sectors and len(compass) > 1:
        return "on all aspects" + (" and flat terrain" if flat else "")
    words = [SECTOR_WORDS[s] for s in compass]
    text = ""
    if words:
        text = (
            "on "
            + (words[0] if len(words) == 1 else ", ".join(words[:-1]) + " and " + words[-1])
            + " aspects"
        )
    if flat:
        text = (text + " and " if text else "on ") + "flat terrain"
    return text


#: the clause of a zone x aspect group where the event left no crust
NO_CRUST_CLAUSE = "no rain crust"


def _clause(row) -> str:
    spread = row.n_members and _r(row.upper_low_m) != _r(row.upper_high_m)
    # a range is stated only when the members disagree after rounding
    upper_rng = f"({_r(row.upper_low_m)}–{_r(row.upper_high_m)} m)" if spread else ""
    if row.upper_bound == "absent":
        return NO_CRUST_CLAUSE
    if row.upper_bound == "at_or_below":  # rain under half of the precipitation everywhere
        return (
            "rain crust only in places: rain was under half of the precipitation at all elevations"
        )
    if row.upper_bound == "at_or_above":
        if row.lower_bound == "at_or_below":
            return "rain crust likely at all elevations"
        return f"rain crust likely at all elevations above {_r(row.lower_m)} m"
    if row.lower_bound == "at_or_below":
        return f"rain crust likely below {_r(row.upper_m)} m" + (
            f" {upper_rng}" if upper_rng else ""
        )
    if _r(row.lower_m) == _r(row.upper_m):  # limits within one rounding step
        between = f"rain crust likely in a narrow band near {_r(row.upper_m)} m"
    else:
        between = f"rain crust likely between {_r(row.lower_m)} and {_r(row.upper_m)} m"
    return between + (f" (upper limit {upper_rng[1:-1]})" if upper_rng else "")


def rain_crust_sentence(limits: pd.DataFrame) -> pd.Series:
    """Words per zone and event, aspects that agree (same limits rounded to 50 m) together:
    "rain crust likely below 2050 m (1950–2150 m) on north aspects; rain crust likely below
    2150 m (2050–2250 m) on east, south and west aspects".

    Parameters
    ----------
    limits : :func:`rain_crust_limits` output grouped by zone and aspect.

    Returns
    -------
    Series indexed by (``zone``, ``event_id``).
    """
    f = limits.copy()
    f["clause"] = [_clause(r) for r in f.itertuples()]  # one per zone × aspect group
    out = {}
    for (zone, eid), grp in f.groupby(["zone", "event_id"], sort=True):
        all_sectors = set(grp["aspect_sector"])
        parts = []
        for clause, sub in grp.groupby("clause", sort=False):
            if clause == NO_CRUST_CLAUSE and len(grp["clause"].unique()) > 1:
                continue
            parts.append(
                (
                    min(_SECTOR_ORDER[s] for s in sub["aspect_sector"]),
                    f"{clause} {_aspect_phrase(list(sub['aspect_sector']), all_sectors)}",
                )
            )
        out[(zone, eid)] = "; ".join(p for _, p in sorted(parts))
    return pd.Series(out, name="rain_crust_text", dtype=object).rename_axis(["zone", "event_id"])


def zone_rain_crust_columns(zone_limits: pd.DataFrame, sentences: pd.Series) -> pd.DataFrame:
    """Columns for the zones table from the latest event per zone: ``rain_crust_line_m``
    (upper limit, NaN when there is no line), ``rain_crust_low_m``/``rain_crust_high_m``
    (likely range), ``rain_crust_event_time``, ``rain_crust_text``.

    Parameters
    ----------
    zone_limits : :func:`rain_crust_limits` with ``by=("zone",)``, all events concatenated.
    sentences : :func:`rain_crust_sentence` of the zone × aspect limits, all events.
    """
    cols = [
        "rain_crust_line_m",
        "rain_crust_low_m",
        "rain_crust_high_m",
        "rain_crust_event_time",
        "rain_crust_text",
    ]
    if zone_limits.empty:
        return pd.DataFrame(columns=cols).rename_axis("zone")
    last = zone_limits.sort_values("event_time").groupby("zone").tail(1).set_index("zone")
    line = last["upper_m"].where(last["upper_bound"] == "")
    out = pd.DataFrame(
        {
            "rain_crust_line_m": line,
            "rain_crust_low_m": last["upper_low_m"].where(line.notna()),
            "rain_crust_high_m": last["upper_high_m"].where(line.notna()),
            "rain_crust_event_time": last["event_time"],
        }
    )
    keys = list(zip(out.index, last["event_id"], strict=True))
    out["rain_crust_text"] = [sentences.get(k, "") for k in keys]
    return out


# --------------------------------------------------------------------------- lines
def _contour_lines(dem_m: np.ndarray, transform, level: float, bounds) -> list[np.ndarray]:
    import contourpy
    from rasterio.windows import from_bounds

    win = from_bounds(*bounds, transform=transform).round_offsets().round_lengths()
    r0, c0 = max(int(win.row_off) - 1, 0), max(int(win.col_off) - 1, 0)
    r1 = min(int(win.row_off + win.height) + 2, dem_m.shape[0])
    c1 = min(int(win.col_off + win.width) + 2, dem_m.shape[1])
    if r1 - r0 < 2 or c1 - c0 < 2:
        return []
    z = np.ma.masked_invalid(dem_m[r0:r1, c0:c1])
    x = transform.c + transform.a * (np.arange(c0, c1) + 0.5)
    y = transform.f + transform.e * (np.arange(r0, r1) + 0.5)
    gen = contourpy.contour_generator(x, y, z, line_type=contourpy.LineType.Separate)
    return [ln for ln in gen.lines(level) if len(ln) >= 2]


def rain_crust_lines(
    limits: pd.DataFrame, dem_elevation_m: np.ndarray, transform, crs, regions
) -> gpd.GeoDataFrame:
    """Contour lines of the DEM at each limit, clipped to its zone-aspect region.

    Parameters
    ----------
    limits : :func:`rain_crust_limits` output by zone and aspect (one or more events).
    dem_elevation_m : (y, x) DEM [m], NaN for nodata.
    transform, crs : the DEM's affine transform and CRS.
    regions : GeoDataFrame in the DEM CRS with ``zone``, ``aspect_sector`` and geometry
        (e.g. the cell polygons; they are dissolved per zone × aspect).

    Returns
    -------
    GeoDataFrame (MultiLineString, DEM CRS): ``event_id``, ``event_time``, ``zone``,
    ``aspect``, ``limit`` (``upper``: the rain–snow transition; ``lower``: the snow line of
    the time), ``elevation_m`` (the line), ``lower_m``/``upper_m`` (its likely range). Limits
    that are bounds (the crust reaches the top or bottom band) or absent draw no line.
    """
    import geopandas as gpd
    import shapely

    dem = np.asarray(dem_elevation_m, dtype=np.float64)
    region = regions.dissolve(by=_KEYS)["geometry"]
    rows, geoms = [], []
    todo = pd.concat(
        [
            limits.assign(
                limit="upper",
                elevation_m=limits["upper_m"],
                lower_m=limits["upper_low_m"],
                upper_m=limits["upper_high_m"],
                bound=limits["upper_bound"],
            ),
            limits.assign(
                limit="lower",
                elevation_m=limits["lower_m"],
                lower_m=limits["lower_low_m"],
                upper_m=limits["lower_high_m"],
                bound=limits["lower_bound"],
            ),
        ],
        ignore_index=True,
    )
    todo = todo[(todo["bound"] == "") & np.isfinite(todo["elevation_m"].to_numpy(np.float64))]
    for r in todo.itertuples():  # one contour per limit line (zones × aspects × events)
        key = (r.zone, r.aspect_sector)
        if key not in region.index:
            continue
        poly = region.loc[key]
        lines = _contour_lines(dem, transform, r.elevation_m, poly.bounds)
        if not lines:
            continue
        clipped = shapely.intersection(
            shapely.MultiLineString([shapely.LineString(ln) for ln in lines]), poly
        )
        parts = [
            p for p in shapely.get_parts(clipped) if p.geom_type == "LineString" and not p.is_empty
        ]
        if not parts:
            continue
        geoms.append(shapely.MultiLineString(parts))
        rows.append(
            {
                "event_id": r.event_id,
                "event_time": pd.Timestamp(r.event_time),
                "zone": r.zone,
                "aspect": r.aspect_sector,
                "limit": r.limit,
                "elevation_m": float(r.elevation_m),
                "lower_m": float(r.lower_m),
                "upper_m": float(r.upper_m),
            }
        )
    cols = [
        "event_id",
        "event_time",
        "zone",
        "aspect",
        "limit",
        "elevation_m",
        "lower_m",
        "upper_m",
    ]
    frame = pd.DataFrame(rows, columns=cols).astype(
        {"event_id": "int64", "elevation_m": "float64", "lower_m": "float64", "upper_m": "float64"}
    )
    frame["event_time"] = pd.to_datetime(frame["event_time"])
    return gpd.GeoDataFrame(frame, geometry=gpd.GeoSeries(geoms, crs=crs), crs=crs)

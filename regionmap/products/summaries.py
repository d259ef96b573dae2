"""Cell diagnostics → area-weighted summaries per zone and per zone × band × aspect.

Inputs are the run's two result files, as xarray Datasets shaped as docs/outputs.md describes:
``cells.nc`` (dims ``cell``, ``time``; diagnostics, per-interval amounts, ``is_forecast``) and
``profiles.nc`` (dims ``cell``, ``day``, ``layer``; daily layer snapshots), plus the cell table
of :class:`regionmap.cells.CellSet` and per-cell weights.

Weighting. Every statistic is an area-weighted mean over cells, with the area of each cell's
pixels that lie in avalanche terrain (slope inside ``avalanche_terrain_deg``, default 30–50°)
by default, or all of the cell's area for the all-terrain variant
(:func:`terrain_weights_km2`). Conditional quantities (the depth of a weak layer) are means
over the cells where the thing is present.

New snow follows the local observation day: the day that ends at ``observation_hour`` local
time in ``local_timezone`` (IANA name; 07:00 by default, the usual manual-observation time —
common practice). Water-equivalent sums are the ``snowfall_kg_m2`` amounts of the intervals
that end inside the window (so 23 h and 25 h days at clock changes are summed exactly); the
depths in cm are the column's ``new_snow_24h_cm`` / ``new_snow_72h_cm`` at the window's end.
At a map time the window is the last observation day ending at or before it
(``new_snow_window_end`` in the tables).

Slab thickness is measured perpendicular to the slope: vertical depth × cos(slope)
(the column's layer thicknesses are vertical).

Model output is guidance for trained people; it does not replace field observations, the
local avalanche service's products or professional judgement.
"""

from __future__ import annotations

import zoneinfo
from dataclasses import dataclass

import numpy as np
import pandas as pd
import xarray as xr

from regionmap.errors import GridMismatchError, InputError
from regionmap.products.concern import DEFAULT_CRITERIA, ConcernCriteria, weak_layers_of_concern
from regionmap.snow.codes import CRUST_INDEX, CRUST_KINDS, GRAIN_INDEX

__all__ = [
    "terrain_weights_km2",
    "running_snowfall_at",
    "running_snowfall_of",
    "observation_times",
    "observation_window_start",
    "band_transitions",
    "cell_values",
    "summarise",
    "SummaryTables",
    "summary_tables",
    "layers_of_concern",
    "LayerSnapshot",
    "decode_snapshot",
    "LAYER_KINDS",
    "layer_identities",
    "layer_ids",
    "local_dates",
    "band_label",
    "layer_summary_text",
]

#: weak-layer families and the grain codes each covers (Fierz et al. 2009 classes).
PWL_FAMILIES: dict[str, tuple[str, ...]] = {
    "FC": ("FC", "FCxr", "FCsf"),
    "DH": ("DH",),
    "SH": ("SH",),
}
CRUST_TYPES: tuple[str, ...] = tuple(k for k in CRUST_KINDS if k != "none")


# --------------------------------------------------------------------------- weights
def terrain_weights_km2(
    index: np.ndarray,
    slope_deg: np.ndarray,
    pixel_area_m2: np.ndarray,
    n_cells: int,
    *,
    avalanche_terrain_deg: tuple[float, float] = (30.0, 50.0),
) -> pd.DataFrame:
    """Per-cell area in avalanche terrain and in all terrain, from the pixels.

    Parameters
    ----------
    index : ndarray (y, x) int
        Pixel → cell index (−1 outside every zone), ``CellSet.index``.
    slope_deg : ndarray (y, x) float64
        Slope angle [deg] on the DEM grid (NaN for nodata).
    pixel_area_m2 : ndarray (y, x) float64
        True area of each pixel [m2] (``Dem.pixel_area_m2()``).
    n_cells : int
        Number of cells (weights for cells without pixels are 0).
    avalanche_terrain_deg : (low, high)
        Slope range counted as avalanche terrain [deg], inclusive.

    Returns
    -------
    DataFrame indexed by ``cell_id`` with ``avalanche_km2`` and ``all_km2`` [km2].
    """
    index = np.asarray(index)
    if index.shape != np.shape(slope_deg) or index.shape != np.shape(pixel_area_m2):
        raise GridMismatchError(
            f"terrain weights: index {index.shape}, slope_deg {np.shape(slope_deg)} and "
            f"pixel_area_m2 {np.shape(pixel_area_m2)} must share the DEM grid"
        )
    lo, hi = avalanche_terrain_deg
    inside = index >= 0
    cell = index[inside]
    area_km2 = np.asarray(pixel_area_m2, dtype=np.float64)[inside] * 1e-6
    slope = np.asarray(slope_deg, dtype=np.float64)[inside]
    steep = (slope >= lo) & (slope <= hi)
    return pd.DataFrame(
        {
            "avalanche_km2": np.bincount(cell, weights=area_km2 * steep, minlength=n_cells)[
                :n_cells
            ],
            "all_km2": np.bincount(cell, weights=area_km2, minlength=n_cells)[:n_cells],
        },
        index=pd.RangeIndex(n_cells, name="cell_id"),
    )


# --------------------------------------------------------------------------- observation days
def _to_utc_naive(t) -> pd.Timestamp:
    ts = pd.Timestamp(t)
    return ts.tz_convert("UTC").tz_localize(None) if ts.tzinfo is not None else ts


def observation_times(
    start, end, *, local_timezone: str = "UTC", observation_hour: int = 7
) -> np.ndarray:
    """UTC instants in [start, end] at which a local observation day ends.

    Parameters
    ----------
    start, end : datetime-like, UTC when naive.
    local_timezone : IANA time-zone name.
    observation_hour : local clock hour that ends the observation day (0–23).

    Returns
    -------
    ndarray datetime64[s], UTC.
    """
    tz = zoneinfo.ZoneInfo(local_timezone)
    t0, t1 = _to_utc_naive(start), _to_utc_naive(end)
    first = (t0.tz_localize("UTC").tz_convert(tz) - pd.Timedelta(days=1)).date()
    last = (t1.tz_localize("UTC").tz_convert(tz) + pd.Timedelta(days=1)).date()
    days = pd.date_range(first, last, freq="D")
    local = pd.DatetimeIndex(days + pd.Timedelta(hours=observation_hour)).tz_localize(
        tz, ambiguous=True, nonexistent="shift_forward"
    )
    utc = local.tz_convert("UTC").tz_localize(None)
    utc = utc[(utc >= t0) & (utc <= t1)]
    return utc.to_numpy().astype("datetime64[s]")


def observation_window_start(
    end_utc: np.ndarray, n_days: int, *, local_timezone: str = "UTC"
) -> np.ndarray:
    """Start (UTC) of the window of ``n_days`` local days that ends at ``end_utc``: the same
    local clock time ``n_days`` calendar days earlier (23 h or 25 h days at clock changes)."""
    tz = zoneinfo.ZoneInfo(local_timezone)
    local = (
        pd.DatetimeIndex(np.asarray(end_utc, dtype="datetime64[s]"))
        .tz_localize("UTC")
        .tz_convert(tz)
    )
    wall = local.tz_localize(None) - pd.Timedelta(days=n_days)
    back = wall.tz_localize(tz, ambiguous=True, nonexistent="shift_forward")
    return back.tz_convert("UTC").tz_localize(None).to_numpy().astype("datetime64[s]")


def _times_of(diag: xr.Dataset) -> np.ndarray:
    t = diag["time"].values
    if not np.issubdtype(t.dtype, np.datetime64):
        raise InputError(
            f"cells.nc: variable 'time' should decode to datetimes (CF units), got {t.dtype}"
        )
    return t.astype("datetime64[s]")


def _positions(times: np.ndarray, wanted: np.ndarray, what: str) -> np.ndarray:
    pos = np.searchsorted(times, wanted)
    ok = (pos < times.size) & (times[np.minimum(pos, times.size - 1)] == wanted)
    if not ok.all():
        bad = np.asarray(wanted)[~ok][0]
        raise InputError(
            f"cells.nc: no diagnostics at {bad} needed for {what}; expected output times on "
            f"every hour the summaries use (got {times[0]} … {times[-1]} every "
            f"{(times[1] - times[0]) if times.size > 1 else 'n/a'}); hint: set "
            "[output] diagnostics_every to a divisor of 24 h that meets the observation hour"
        )
    return pos


#: cells whose snowfall record is read and summed at a time (bounds the summaries' memory)
_CELL_BLOCK = 1024


def _running_snowfall_blocks(diag: xr.Dataset):
    """Yield ``(lo, hi, cum)``: the running sum (hi - lo, time) of ``snowfall_kg_m2`` over
    the record [kg m-2] (float64) for cells ``lo:hi``, a block of cells at a time."""
    if "snowfall_kg_m2" not in diag.variables:
        raise InputError("cells.nc: missing variable 'snowfall_kg_m2' (see docs/outputs.md)")
    var = diag["snowfall_kg_m2"].transpose("cell", "time")
    n_cell = diag.sizes["cell"]
    for lo in range(0, n_cell, _CELL_BLOCK):
        hi = min(lo + _CELL_BLOCK, n_cell)
        snow = var.isel(cell=slice(lo, hi)).values.astype(np.float64)
        np.nan_to_num(snow, copy=False)
        yield lo, hi, np.cumsum(snow, axis=1, out=snow)


def running_snowfall_at(diag: xr.Dataset, positions: np.ndarray) -> np.ndarray:
    """(cell, n) running sum of ``snowfall_kg_m2`` over the record up to and including
    output position ``positions[k]`` [kg m-2] (float64); 0 where the position is -1 (before
    the record). The record is read a block of cells at a time, never whole."""
    positions = np.asarray(positions, dtype=np.int64)
    out = np.zeros((diag.sizes["cell"], positions.size))
    for lo, hi, cum in _running_snowfall_blocks(diag):
        out[lo:hi] = np.where(positions[None, :] >= 0, cum[:, np.maximum(positions, 0)], 0.0)
    return out


def running_snowfall_of(diag: xr.Dataset, cells: np.ndarray, positions: np.ndarray) -> np.ndarray:
    """Running sum of ``snowfall_kg_m2`` (as :func:`running_snowfall_at`) for pairs: cell
    position ``cells[k]`` up to output position ``positions[k]`` → (k,) [kg m-2]."""
    cells = np.asarray(cells, dtype=np.int64)
    positions = np.asarray(positions, dtype=np.int64)
    out = np.zeros(cells.size)
    for lo, hi, cum in _running_snowfall_blocks(diag):
        mine = np.nonzero((cells >= lo) & (cells < hi) & (positions >= 0))[0]
        out[mine] = cum[cells[mine] - lo, positions[mine]]
    return out


def _interval_positions(times: np.ndarray, instants: np.ndarray) -> np.ndarray:
    """Position of the last interval ending at or before each instant (-1 before the
    record); an instant inside the record must be an interval end."""
    inside = instants >= times[0]
    if inside.any():
        _positions(times, instants[inside], "an observation-day boundary")
    return np.where(inside, np.searchsorted(times, instants, side="right") - 1, -1)


def _snowfall_windows(
    diag: xr.Dataset,
    times: np.ndarray,
    want: np.ndarray,
    *,
    local_timezone: str,
    observation_hour: int,
) -> dict[str, np.ndarray]:
    """The local observation-day windows for each wanted time.

    Returns ``win_end`` (n,) the end of the last observation day at or before each wanted
    time, ``win_pos`` its position in ``times``, and the running snowfall sums ``c_end``,
    ``c_24h``, ``c_72h`` (cell, n) at the window end and the starts of the 1- and 3-day
    windows (:func:`running_snowfall_at`; a window reaching back before the record is
    summed over what there is).
    """
    obs = observation_times(
        times[0] - np.timedelta64(2, "D"),
        times[-1],
        local_timezone=local_timezone,
        observation_hour=observation_hour,
    )
    k = np.searchsorted(obs, want, side="right") - 1
    if (k < 0).any():
        raise InputError(f"summaries: no observation day ends at or before {want[k < 0][0]}")
    win_end = obs[k]
    win_pos = _positions(times, win_end, "the end of the observation day")
    starts = [
        _interval_positions(
            times, observation_window_start(win_end, d, local_timezone=local_timezone)
        )
        for d in (1, 3)
    ]
    c_end, c_24h, c_72h = np.split(
        running_snowfall_at(diag, np.concatenate([win_pos, *starts])), 3, axis=1
    )
    return {"win_end": win_end, "win_pos": win_pos, "c_end": c_end, "c_24h": c_24h, "c_72h": c_72h}


# --------------------------------------------------------------------------- snapshots
@dataclass(frozen=True)
class LayerSnapshot:
    """Decoded layer fields of one or more profile snapshots, arrays (cell, day, layer).

    Attributes
    ----------
    day : (day,) datetime64[s] snapshot times [UTC]
    layer_count : (cell, day) int64, active layers (bottom first)
    valid : bool, layer slot in use
    thickness_m : vertical thickness [m] (0 where unused)
    mass_kg_m2 : ice + liquid mass [kg m-2] (0 where unused)
    grain_size_mm : grain size [mm] (0 where unused)
    hardness_index : hand-hardness index, F = 1 ... I = 6 (0 where unused)
    grain : int8 index into ``GRAIN_CODES``
    crust : int8 index into ``CRUST_KINDS``
    formation_s, deposition_s : int64 seconds since 1970 (UTC)
    event_id : int64 (−1 where none)
    depth_cm : vertical depth of the layer's top below the surface [cm]
    load_above_kg_m2 : mass of the layers above [kg m-2]
    burial_s : deposition time of the layer directly above (int64 s; −2**62 when none)
    burial_event_s : start of the precipitation event that deposited the layer directly above
        (its ``event_id`` in seconds, int64; −2**62 when none): the region-wide window of the
        storm that buried the layer
    """

    day: np.ndarray
    layer_count: np.ndarray
    valid: np.ndarray
    thickness_m: np.ndarray
    mass_kg_m2: np.ndarray
    grain_size_mm: np.ndarray
    hardness_index: np.ndarray
    grain: np.ndarray
    crust: np.ndarray
    formation_s: np.ndarray
    deposition_s: np.ndarray
    event_id: np.ndarray
    depth_cm: np.ndarray
    load_above_kg_m2: np.ndarray
    burial_s: np.ndarray
    burial_event_s: np.ndarray

    def of_concern(self, criteria: ConcernCriteria = DEFAULT_CRITERIA) -> np.ndarray:
        """(cell, day, layer) bool: the layer belongs to a persistent weak layer of concern
        (:func:`regionmap.products.concern.weak_layers_of_concern`)."""
        return weak_layers_of_concern(
            self.layer_count,
            self.thickness_m,
            self.grain_size_mm,
            self.hardness_index,
            self.grain,
            criteria,
        )


_NO_TIME = np.int64(-(2**62))


def _factorize_bytes(arr: np.ndarray) -> tuple[np.ndarray, list[str]]:
    """Exact factorisation of a fixed-width bytes array: each 8-byte slice of the strings is
    read as an integer and the slices' codes are combined slice by slice, so the work is a
    few integer hashings instead of one Python object per element. Returns (inverse
    indices, unique strings decoded as UTF-8)."""
    flat = np.ascontiguousarray(arr).reshape(-1)
    width = flat.dtype.itemsize
    buf = np.zeros((flat.size, -(-width // 8) * 8), np.uint8)
    buf[:, :width] = flat.view(np.uint8).reshape(-1, width)
    inv = None
    for word in buf.view(np.uint64).T:
        codes, uniq = pd.factorize(word)
        inv = codes if inv is None else pd.factorize(inv * uniq.size + codes)[0]
    first = np.zeros(int(inv.max(initial=-1)) + 1, np.int64)
    first[inv[::-1]] = np.arange(flat.size)[::-1]
    return inv, [v.decode("utf-8") for v in flat[first]]


def _codes(values: np.ndarray, table: dict[str, int], name: str, default: str | None) -> np.ndarray:
    """Code strings → int8 indices (``""`` → ``default``'s index when given).

    Fixed-width bytes (netCDF character variables read without decoding) and object arrays
    (variable-length strings) are factorised, other strings compared once per known code.
    """
    arr = np.asarray(values)
    lookup = dict(table)
    if default is not None:
        lookup[""] = table[default]
    if arr.dtype.kind in "SO":
        if arr.dtype.kind == "S":
            inv, uniq = _factorize_bytes(arr)
        else:
            inv, uniq = pd.factorize(arr.reshape(-1), use_na_sentinel=False)
            uniq = ["" if (u is None or u != u) else str(u) for u in uniq]
        out = np.array([lookup.get(u, -1) for u in uniq], dtype=np.int16)[inv].reshape(arr.shape)
    else:
        out = np.full(arr.shape, -1, dtype=np.int16)
        for code, idx in lookup.items():  # one pass per known code (≤ 13), not per layer
            out[arr == code] = idx
    if (out < 0).any():
        bad = sorted(
            {
                v.decode("utf-8", "replace") if isinstance(v, bytes) else str(v)
                for v in arr[out < 0].reshape(-1)[:1000]
            }
        )
        raise InputError(
            f"profiles.nc: variable {name!r} holds unknown codes {bad[:5]}; expected one of "
            f"{sorted(table)}"
        )
    return out.astype(np.int8)


def _seconds_of(values: np.ndarray) -> np.ndarray:
    arr = np.asarray(values)
    if np.issubdtype(arr.dtype, np.datetime64):
        out = arr.astype("datetime64[s]").astype(np.int64)
        return np.where(np.isnat(arr), _NO_TIME, out)
    if np.issubdtype(arr.dtype, np.floating):
        return np.where(np.isfinite(arr), arr, _NO_TIME).astype(np.int64)
    return arr.astype(np.int64)


def decode_snapshot(profiles: xr.Dataset, days=None) -> LayerSnapshot:
    """Decode ``profiles.nc`` layer fields for the chosen snapshot days.

    Parameters
    ----------
    profiles : Dataset with dims (cell, day, layer): ``layer_count``, ``thickness_m``,
        ``ice_kg_m2``, ``liquid_kg_m2``, ``grain_size_mm``, ``hardness_index``,
        ``grain_class``, ``crust_kind``, ``formation_time``, ``deposition_time``,
        ``event_id``; layers bottom first.
    days : positions along ``day`` to decode (default all).
    """
    need = [
        "layer_count",
        "thickness_m",
        "ice_kg_m2",
        "liquid_kg_m2",
        "grain_size_mm",
        "hardness_index",
        "grain_class",
        "crust_kind",
        "formation_time",
        "deposition_time",
        "event_id",
    ]
    missing = [v for v in need if v not in profiles.variables]
    if missing:
        raise InputError(
            f"profiles.nc: missing variables {missing}; expected the layer snapshot fields of "
            "docs/outputs.md"
        )
    ds = profiles if days is None else profiles.isel(day=np.atleast_1d(days))
    ds = ds.transpose("cell", "day", "layer", ...)
    day = ds["day"].values
    if not np.issubdtype(day.dtype, np.datetime64):
        raise InputError(
            f"profiles.nc: coordinate 'day' should decode to datetimes, got {day.dtype}"
        )
    n_layer = ds.sizes["layer"]
    count = np.nan_to_num(ds["layer_count"].values.astype(np.float64), nan=0).astype(np.int64)
    valid = np.arange(n_layer)[None, None, :] < count[:, :, None]
    thick = np.where(valid, np.nan_to_num(ds["thickness_m"].values.astype(np.float64)), 0.0)
    mass = np.where(
        valid,
        np.nan_to_num(ds["ice_kg_m2"].values.astype(np.float64))
        + np.nan_to_num(ds["liquid_kg_m2"].values.astype(np.float64)),
        0.0,
    )
    grain_mm, hardness = (
        np.where(valid, np.nan_to_num(ds[name].values.astype(np.float64)), 0.0)
        for name in ("grain_size_mm", "hardness_index")
    )
    grain = np.where(
        valid, _codes(ds["grain_class"].values, GRAIN_INDEX, "grain_class", None), 0
    ).astype(np.int8)
    crust = np.where(
        valid, _codes(ds["crust_kind"].values, CRUST_INDEX, "crust_kind", "none"), 0
    ).astype(np.int8)
    formation = _seconds_of(ds["formation_time"].values)
    deposition = _seconds_of(ds["deposition_time"].values)
    event = np.nan_to_num(ds["event_id"].values.astype(np.float64), nan=-1).astype(np.int64)
    depth_m = thick.sum(axis=2, keepdims=True) - np.cumsum(thick, axis=2)
    load = mass.sum(axis=2, keepdims=True) - np.cumsum(mass, axis=2)
    above_valid = np.concatenate([valid[:, :, 1:], np.zeros_like(valid[:, :, :1])], axis=2)
    above_dep = np.concatenate([deposition[:, :, 1:], deposition[:, :, :1]], axis=2)
    burial = np.where(valid & above_valid, above_dep, _NO_TIME)
    above_event = np.concatenate([event[:, :, 1:], event[:, :, :1]], axis=2)
    burial_event = np.where(valid & above_valid & (above_event > 0), above_event * 3600, _NO_TIME)
    return LayerSnapshot(
        day=day.astype("datetime64[s]"),
        layer_count=np.minimum(count, n_layer),
        valid=valid,
        thickness_m=thick,
        mass_kg_m2=mass,
        grain_size_mm=grain_mm,
        hardness_index=hardness,
        grain=grain,
        crust=crust,
        formation_s=np.where(valid, formation, _NO_TIME),
        deposition_s=np.where(valid, deposition, _NO_TIME),
        event_id=np.where(valid, event, -1),
        depth_cm=depth_m * 100.0,
        load_above_kg_m2=load,
        burial_s=burial,
        burial_event_s=burial_event,
    )


def _family_mask(snap: LayerSnapshot, family: str, concern: np.ndarray) -> np.ndarray:
    """Layers of a weak-layer family that belong to a weak layer of concern."""
    codes = [GRAIN_INDEX[c] for c in PWL_FAMILIES[family]]
    return np.isin(snap.grain, codes) & concern


# --------------------------------------------------------------------------- cell values
def _check_alignment(diag: xr.Dataset, table: pd.DataFrame, profiles: xr.Dataset | None) -> None:
    ids = diag["cell_id"].values if "cell_id" in diag.variables else None
    if (
        ids is None
        or diag.sizes.get("cell") != len(table)
        or not np.array_equal(ids, table.index.to_numpy())
    ):
        raise GridMismatchError(
            f"cells.nc: its {diag.sizes.get('cell')} cells (cell_id) do not match the cell table's "
            f"{len(table)} cells in cell_id order; hint: summarise the cells.nc of this run's cells"
        )
    if profiles is not None and not np.array_equal(profiles["cell_id"].values, ids):
        raise GridMismatchError(
            "profiles.nc: its cell_id differs from cells.nc's; both must come from the same run"
        )


def cell_values(
    diag: xr.Dataset,
    profiles: xr.Dataset,
    table: pd.DataFrame,
    times,
    *,
    local_timezone: str = "UTC",
    observation_hour: int = 7,
    layers: bool = True,
    criteria: ConcernCriteria = DEFAULT_CRITERIA,
) -> pd.DataFrame:
    """Per-cell metrics at each of ``times`` → long DataFrame (one row per cell × time).

    Parameters
    ----------
    diag : ``cells.nc`` Dataset (cell, time), ``cell_id`` in the table's order.
    profiles : ``profiles.nc`` Dataset (cell, day, layer); the snapshot used at a time is the
        last one at or before it (``profile_time``).
    table : cell table (``CellSet.table``), indexed by ``cell_id``.
    times : datetime-likes [UTC] at which to evaluate; each must be an output time of ``diag``.
    layers : also decode the profile snapshots for the layer metrics (``crust_layers_<kind>``,
        ``FC_``/``DH_``/``SH_…``, ``pwl_slab_cm``, ``pwl_load_kg_m2``); without, only the
        ``cells.nc`` metrics.
    criteria : what makes a persistent layer one of concern (the column model's thresholds,
        :class:`regionmap.products.concern.ConcernCriteria`).

    Returns
    -------
    DataFrame with ``cell_id``, ``valid_time``, ``is_forecast``, ``profile_time``,
    ``new_snow_window_end`` and the metrics: ``snow_depth_cm``, ``swe_kg_m2``,
    ``snow_present`` (depth ≥ 1 cm, our choice), ``new_snow_24h_cm``, ``new_snow_72h_cm``,
    ``new_snow_24h_kg_m2``, ``new_snow_72h_kg_m2``, ``crust_count``, ``crust_layers_<kind>``,
    ``depth_hoar_present`` (the column's flag and threshold), ``pwl_present``,
    ``pwl_depth_cm``, ``threshold_count_max``; from the snapshot: ``pwl_slab_cm``
    (perpendicular to the slope) and ``pwl_load_kg_m2`` above the uppermost weak layer of
    concern, ``<FC|DH|SH>_present``/``_depth_cm``/``_slab_cm`` of the weak layers of concern
    of each family. ``pwl_*`` and the family metrics count only persistent weak layers of
    concern (:mod:`regionmap.products.concern`), as the column's ``pwl_present`` does.
    """
    frames = _cell_value_blocks(
        diag,
        profiles,
        table,
        times,
        local_timezone=local_timezone,
        observation_hour=observation_hour,
        layers=layers,
        criteria=criteria,
    )
    return pd.concat(list(frames), ignore_index=True).sort_values(
        ["cell_id", "valid_time"], ignore_index=True
    )


#: at most this many times have their cell values built (and their layer snapshots decoded)
#: together; a block also ends where the time chunk of cells.nc does (31 days of 744 h)
_TIME_BLOCK = 31


def _time_blocks(diag: xr.Dataset, pos: np.ndarray) -> list[slice]:
    """Consecutive runs of the output positions ``pos`` that fall in one time chunk of
    ``cells.nc``, at most ``_TIME_BLOCK`` long: each compressed chunk is then read once, not
    once for every block that reaches into it."""
    chunks = (
        diag["snow_depth_cm"].encoding.get("chunksizes")
        if "snow_depth_cm" in diag.variables
        else None
    )
    dims = diag["snow_depth_cm"].dims if chunks else ()
    chunk_of = (
        pos // int(chunks[dims.index("time")])
        if chunks and "time" in dims
        else np.zeros(pos.size, int)
    )
    edges = [0]
    for i in range(1, pos.size):
        if chunk_of[i] != chunk_of[i - 1] or i - edges[-1] >= _TIME_BLOCK:
            edges.append(i)
    return [slice(a, b) for a, b in zip(edges, edges[1:] + [pos.size], strict=True)]


def _cell_value_blocks(
    diag,
    profiles,
    table,
    times,
    *,
    local_timezone,
    observation_hour,
    layers,
    criteria: ConcernCriteria = DEFAULT_CRITERIA,
):
    """Yield the rows of :func:`cell_values` a block of times at a time (:func:`_time_blocks`;
    memory ~ cells × block × layers), unsorted."""
    _check_alignment(diag, table, profiles)
    t_all = _times_of(diag)
    want = _as_utc_array(times)
    win = _snowfall_windows(
        diag, t_all, want, local_timezone=local_timezone, observation_hour=observation_hour
    )
    for part in _time_blocks(diag, _positions(t_all, want, "the summary times")):
        yield _cell_values_block(
            diag,
            profiles,
            table,
            t_all,
            want[part],
            {k: v[..., part] for k, v in win.items()},
            layers=layers,
            criteria=criteria,
        )


def _as_utc_array(times) -> np.ndarray:
    return np.atleast_1d(
        np.asarray(
            [_to_utc_naive(t).to_datetime64() for t in np.atleast_1d(times)], dtype="datetime64[s]"
        )
    )


def _cell_values_block(
    diag, profiles, table, t_all, want, win, *, layers, criteria
) -> pd.DataFrame:
    pos = _positions(t_all, want, "the summary times")
    win_end, win_pos = win["win_end"], win["win_pos"]
    n_cell, n_t = diag.sizes["cell"], want.size

    def at(name: str, p=pos) -> np.ndarray:
        if name not in diag.variables:
            raise InputError(f"cells.nc: missing variable {name!r} (see docs/outputs.md)")
        return diag[name].isel(time=p).transpose("cell", ...).values.astype(np.float64)

    values: dict[str, np.ndarray] = {
        "snow_depth_cm": at("snow_depth_cm"),
        "swe_kg_m2": at("swe_kg_m2"),
        "new_snow_24h_cm": at("new_snow_24h_cm", win_pos),
        "new_snow_72h_cm": at("new_snow_72h_cm", win_pos),
        "new_snow_24h_kg_m2": win["c_end"] - win["c_24h"],
        "new_snow_72h_kg_m2": win["c_end"] - win["c_72h"],
        "crust_count": at("crust_count"),
        "depth_hoar_present": at("depth_hoar_present"),
        "pwl_present": at("pwl_present"),
        "pwl_depth_cm": at("pwl_depth_cm"),
        "threshold_count_max": at("threshold_count_max"),
    }
    values["snow_present"] = np.where(
        np.isfinite(values["snow_depth_cm"]),
        (values["snow_depth_cm"] >= 1.0).astype(np.float64),
        np.nan,
    )
    values["pwl_depth_cm"] = np.where(values["pwl_present"] > 0, values["pwl_depth_cm"], np.nan)

    day = profiles["day"].values.astype("datetime64[s]")
    d = np.searchsorted(day, want, side="right") - 1
    has_snap = d >= 0
    if layers:
        values.update(_layer_values(profiles, table, d, has_snap, criteria))
    fc = (
        diag["is_forecast"].values.astype(bool)[pos]
        if "is_forecast" in diag.variables
        else np.zeros(n_t, bool)
    )
    frame = pd.DataFrame({name: v.reshape(-1) for name, v in values.items()})
    frame.insert(0, "cell_id", np.repeat(table.index.to_numpy(), n_t))
    frame.insert(1, "valid_time", np.tile(want, n_cell))
    frame.insert(2, "is_forecast", np.tile(fc, n_cell))
    snap_time = np.where(has_snap & layers, day[np.maximum(d, 0)], np.datetime64("NaT"))
    frame.insert(3, "profile_time", np.tile(snap_time, n_cell))
    frame.insert(4, "new_snow_window_end", np.tile(win_end, n_cell))
    return frame


def _layer_values(profiles, table, d, has_snap, criteria) -> dict[str, np.ndarray]:
    """Layer metrics (cell, n) from the snapshots at positions ``d`` (NaN where none); the
    weak-layer metrics count the persistent weak layers of concern only."""
    values: dict[str, np.ndarray] = {}
    snap = decode_snapshot(profiles, np.maximum(d, 0))
    cos_slope = np.cos(np.deg2rad(table["slope_deg"].to_numpy(np.float64)))[:, None]
    for kind in CRUST_TYPES:
        # model layers of this crust kind (one crust may span several layers)
        values[f"crust_layers_{kind.replace('-', '_')}"] = (
            (snap.crust == CRUST_INDEX[kind]).sum(axis=2).astype(np.float64)
        )
    concern = snap.of_concern(criteria)
    any_pwl = np.zeros_like(snap.valid)
    for fam in PWL_FAMILIES:
        mask = _family_mask(snap, fam, concern)
        any_pwl |= mask
        depth = np.where(mask, snap.depth_cm, np.inf).min(axis=2)
        present = np.isfinite(depth)
        values[f"{fam}_present"] = present.astype(np.float64)
        values[f"{fam}_depth_cm"] = np.where(present, depth, np.nan)
        values[f"{fam}_slab_cm"] = values[f"{fam}_depth_cm"] * cos_slope
    # slab above the uppermost weak layer of concern of any family
    top = np.argmin(np.where(any_pwl, snap.depth_cm, np.inf), axis=2)
    present = any_pwl.any(axis=2)
    depth = np.take_along_axis(snap.depth_cm, top[:, :, None], axis=2)[:, :, 0]
    load = np.take_along_axis(snap.load_above_kg_m2, top[:, :, None], axis=2)[:, :, 0]
    values["pwl_slab_cm"] = np.where(present, depth * cos_slope, np.nan)
    values["pwl_load_kg_m2"] = np.where(present, load, np.nan)
    snap_keys = [
        k
        for k in values
        if k.startswith(("crust_layers_", "FC_", "DH_", "SH_", "pwl_slab", "pwl_load"))
    ]
    for key in snap_keys:
        values[key] = np.where(has_snap[None, :], values[key], np.nan)
    return values


# --------------------------------------------------------------------------- aggregation
_MAX_OF = ("crust_count", "threshold_count_max", "new_snow_72h_cm", "snow_depth_cm")
_FRACTION_OF = {
    "depth_hoar_present": "depth_hoar_fraction",
    "pwl_present": "pwl_fraction",
    "snow_present": "snow_fraction",
    "FC_present": "FC_fraction",
    "DH_present": "DH_fraction",
    "SH_present": "SH_fraction",
}


def band_label(lower_m, upper_m) -> np.ndarray:
    """Readable band labels: ``2100-2400``, ``<1200`` (open below), ``>2700`` (open above)."""
    lo, hi = np.asarray(lower_m, dtype=np.float64), np.asarray(upper_m, dtype=np.float64)
    lo_s = pd.Series(lo).map(lambda v: f"{v:.0f}").to_numpy(object)
    hi_s = pd.Series(hi).map(lambda v: f"{v:.0f}").to_numpy(object)
    out = lo_s + "-" + hi_s
    out = np.where(~np.isfinite(lo), "<" + hi_s, out)
    return np.where(~np.isfinite(hi), ">" + lo_s, out)


def summarise(
    values: pd.DataFrame, table: pd.DataFrame, weight_km2, *, by=("zone",)
) -> pd.DataFrame:
    """Area-weighted summary of :func:`cell_values` rows per ``by`` × valid time.

    Parameters
    ----------
    values : output of :func:`cell_values`.
    table : cell table (``zone``, ``band_lower_m``, ``band_upper_m``, ``aspect_sector``,
        ``elevation_m``), indexed by ``cell_id``.
    weight_km2 : (cell,) weights [km2], e.g. a column of :func:`terrain_weights_km2`.
    by : cell-table columns to group by.

    Returns
    -------
    DataFrame with the group keys, ``valid_time``, ``is_forecast``, ``area_km2`` (sum of
    weights), means of every metric (``<metric>``; flags become ``<…>_fraction``),
    ``<metric>_max`` for crust count, threshold count, 72 h new snow and snow depth
    (over cells with weight > 0), and ``band_centre_m`` when grouping by band (the middle of
    a closed band, the weighted mean cell elevation of an open one).
    """
    keys = list(by)
    pos = table.index.get_indexer(values["cell_id"].to_numpy())
    if (pos < 0).any():
        raise GridMismatchError("summaries: cell values name cell_ids that the cell table lacks")
    w = np.asarray(weight_km2, dtype=np.float64)[pos]
    # group code = (cell-table group of the row's cell, valid time): integer arithmetic, no sort
    # of rows
    cell_group, groups = pd.factorize(pd.MultiIndex.from_frame(table[keys]), sort=True)
    t_code, t_uniq = pd.factorize(values["valid_time"].to_numpy(), sort=True)
    gid, first = np.unique(
        cell_group[pos].astype(np.int64) * len(t_uniq) + t_code, return_index=True
    )
    inv = np.searchsorted(gid, cell_group[pos].astype(np.int64) * len(t_uniq) + t_code)
    n_g = gid.size
    metrics = [
        c
        for c in values.columns
        if c not in ("cell_id", "valid_time", "is_forecast", "profile_time", "new_snow_window_end")
    ]
    out = pd.DataFrame(groups[gid // len(t_uniq)].tolist(), columns=keys)
    out["valid_time"] = t_uniq[gid % len(t_uniq)]
    for col in ("is_forecast", "new_snow_window_end", "profile_time"):
        out[col] = values[col].to_numpy()[first]
    out["is_forecast"] = out["is_forecast"].astype(bool)
    out["area_km2"] = np.bincount(inv, weights=np.nan_to_num(w), minlength=n_g)
    for m in [*metrics, "elevation_m"]:
        x = (
            table["elevation_m"].to_numpy(np.float64)[pos]
            if m == "elevation_m"
            else values[m].to_numpy(np.float64)
        )
        ok = np.isfinite(x) & (w > 0)
        sw = np.bincount(inv, weights=np.where(ok, w, 0.0), minlength=n_g)
        sx = np.bincount(inv, weights=np.where(ok, x * w, 0.0), minlength=n_g)
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.where(sw > 0, sx / sw, np.nan)
        name = (
            "mean_elevation_m"
            if m == "elevation_m"
            else _FRACTION_OF.get(m, m if m != "crust_count" else "crust_count_mean")
        )
        out[name] = mean
        if m in _MAX_OF:
            mx = np.full(n_g, -np.inf)
            np.maximum.at(mx, inv[ok], x[ok])
            out[f"{m}_max"] = np.where(np.isfinite(mx), mx, np.nan)
    if "band_lower_m" in keys and "band_upper_m" in keys:
        lo, hi = out["band_lower_m"].to_numpy(np.float64), out["band_upper_m"].to_numpy(np.float64)
        closed = np.isfinite(lo) & np.isfinite(hi)
        out["band_centre_m"] = np.where(closed, 0.5 * (lo + hi), out["mean_elevation_m"])
        out["band"] = band_label(lo, hi)
    return out


def band_transitions(
    frame: pd.DataFrame,
    keys: list[str],
    frac_col: str,
    *,
    centre_col: str = "band_centre_m",
    level: float = 0.5,
) -> pd.DataFrame:
    """Where presence changes with elevation, interpolated linearly between band centres.

    For each group of ``keys`` the bands are sorted by centre; a band counts as "with" the
    thing when its area fraction ``frac_col`` ≥ ``level``. ``lower_m`` is the lowest elevation
    where presence begins (the fraction crosses ``level`` between the highest band below
    without and the lowest band with it); ``upper_m`` is where presence ends going up from the
    highest band with it. When the lowest (highest) band already has it, the limit is that
    band's centre and ``lower_bound`` (``upper_bound``) says ``at_or_below``
    (``at_or_above``); when no band has it both limits are NaN and the bounds ``absent``.
    Bands without data (NaN fraction or centre) are skipped.

    Returns
    -------
    DataFrame: ``keys``, ``lower_m``, ``lower_bound``, ``upper_m``, ``upper_bound``.
    """
    f = frame[[*keys, centre_col, frac_col]].dropna(subset=[centre_col, frac_col])
    f = f.sort_values([*keys, centre_col], kind="stable")
    grp = f.groupby(keys, sort=False, dropna=False)
    rank = grp.cumcount().to_numpy()
    gid = grp.ngroup().to_numpy()
    n_g, n_b = (gid.max() + 1 if gid.size else 0), (rank.max() + 1 if rank.size else 0)
    c = np.full((n_g, n_b), np.nan)
    p = np.full((n_g, n_b), np.nan)
    c[gid, rank] = f[centre_col].to_numpy(np.float64)
    p[gid, rank] = f[frac_col].to_numpy(np.float64)
    n_valid = np.bincount(gid, minlength=n_g)
    has = np.nan_to_num(p, nan=-1.0) >= level
    anyp = has.any(axis=1)
    rows = np.arange(n_g)
    i0 = np.argmax(has, axis=1)
    i1 = n_b - 1 - np.argmax(has[:, ::-1], axis=1) if n_b else i0
    b0, b1 = np.maximum(i0 - 1, 0), np.minimum(i1 + 1, np.maximum(n_valid - 1, 0))

    def interp(ia, ib):
        ca, cb, pa, pb = c[rows, ia], c[rows, ib], p[rows, ia], p[rows, ib]
        with np.errstate(invalid="ignore", divide="ignore"):
            return ca + (level - pa) / (pb - pa) * (cb - ca)

    lower = np.where(i0 == 0, c[rows, i0], interp(b0, i0))
    upper = np.where(i1 == n_valid - 1, c[rows, i1], interp(i1, b1))
    lower_bound = np.where(i0 == 0, "at_or_below", "")
    upper_bound = np.where(i1 == n_valid - 1, "at_or_above", "")
    out = grp.size().reset_index()[keys]
    out["lower_m"] = np.where(anyp, lower, np.nan)
    out["lower_bound"] = np.where(anyp, lower_bound, "absent")
    out["upper_m"] = np.where(anyp, upper, np.nan)
    out["upper_bound"] = np.where(anyp, upper_bound, "absent")
    return out


# --------------------------------------------------------------------------- tables
@dataclass
class SummaryTables:
    """The summaries of one run.

    Attributes
    ----------
    zones : one row per zone at the map time, over avalanche terrain, with the all-terrain
        variants of the main metrics beside them (suffix ``_all_terrain``) and the snow line
        per aspect (``snow_line_<sector>_m``).
    band_aspect : zone × band × aspect rows at the map time, ``terrain`` ∈ {avalanche, all}.
    daily : zone rows at every local observation-day end in the record, ``terrain`` column.
    cells : per-cell values at the map time, indexed by ``cell_id`` (for the GIS layer/maps).
    snow_line : zone × aspect snow line at the map time (all terrain), with its bounds.
    """

    zones: pd.DataFrame
    band_aspect: pd.DataFrame
    daily: pd.DataFrame
    cells: pd.DataFrame
    snow_line: pd.DataFrame


_ALL_TERRAIN_COLUMNS = (
    "area_km2",
    "depth_hoar_fraction",
    "pwl_fraction",
    "crust_count_mean",
    "new_snow_24h_cm",
    "new_snow_72h_cm",
    "new_snow_72h_kg_m2",
    "snow_depth_cm",
)
_BAND_ASPECT = ["zone", "band_lower_m", "band_upper_m", "aspect_sector"]


def summary_tables(
    diag: xr.Dataset,
    profiles: xr.Dataset,
    table: pd.DataFrame,
    weights: pd.DataFrame,
    *,
    map_time,
    local_timezone: str = "UTC",
    observation_hour: int = 7,
    avalanche_terrain_deg: tuple[float, float] = (30.0, 50.0),
    daily_layers: bool = False,
    criteria: ConcernCriteria = DEFAULT_CRITERIA,
) -> SummaryTables:
    """All summaries of a run: per zone and per zone × band × aspect at the map time, and
    daily series at the local observation-day ends.

    Parameters
    ----------
    diag, profiles : the run's ``cells.nc`` and ``profiles.nc`` as xarray Datasets.
    table : cell table indexed by ``cell_id``.
    weights : :func:`terrain_weights_km2` result (``avalanche_km2``, ``all_km2``).
    map_time : datetime-like [UTC]; must be an output time of ``diag``.
    local_timezone, observation_hour : ``[output]`` keys: the local observation day.
    avalanche_terrain_deg : the ``[cells]`` slope range, recorded in the tables.
    daily_layers : give the daily series the layer metrics too (see :func:`cell_values`);
        by default they carry the ``cells.nc`` metrics and the map time carries all.
    criteria : what makes a persistent layer one of concern (:func:`cell_values`).
    """
    t_all = _times_of(diag)
    obs = observation_times(
        t_all[0], t_all[-1], local_timezone=local_timezone, observation_hour=observation_hour
    )
    map_t = _as_utc_array(map_time)
    kw = dict(local_timezone=local_timezone, observation_hour=observation_hour, criteria=criteria)
    at_map = cell_values(diag, profiles, table, map_t, **kw)
    lo, hi = avalanche_terrain_deg
    terrain_label = {"avalanche": f"avalanche terrain ({lo:g}-{hi:g} deg)", "all": "all terrain"}

    def both(frame: pd.DataFrame, by) -> dict[str, pd.DataFrame]:
        return {
            t: summarise(frame, table, weights[f"{t}_km2"].to_numpy(), by=by).assign(
                terrain=terrain_label[t]
            )
            for t in ("avalanche", "all")
        }

    z = both(at_map, ["zone"])
    ba = both(at_map, _BAND_ASPECT)
    # the daily series are summarised a block of days at a time (the rows of every cell and
    # day together would take ~1 GB for 10 000 cells over a season)
    daily_parts: dict[str, list[pd.DataFrame]] = {"avalanche": [], "all": []}
    for block in _cell_value_blocks(diag, profiles, table, obs, layers=daily_layers, **kw):
        for t, frame in both(block, ["zone"]).items():
            daily_parts[t].append(frame)
    daily = pd.concat(
        [
            pd.concat(parts, ignore_index=True).sort_values(["zone", "valid_time"], kind="stable")
            for parts in daily_parts.values()
        ],
        ignore_index=True,
    )
    snow_line = band_transitions(ba["all"], ["zone", "aspect_sector"], "snow_fraction")
    snow_line = snow_line.rename(
        columns={"lower_m": "snow_line_m", "lower_bound": "snow_line_bound"}
    )
    snow_line = snow_line[["zone", "aspect_sector", "snow_line_m", "snow_line_bound"]]

    zones = z["avalanche"].copy()
    extra = z["all"].set_index("zone")[list(_ALL_TERRAIN_COLUMNS)].add_suffix("_all_terrain")
    zones = zones.merge(extra, left_on="zone", right_index=True, how="left")
    wide = snow_line.pivot(index="zone", columns="aspect_sector", values="snow_line_m")
    wide.columns = [f"snow_line_{c}_m" for c in wide.columns]
    zones = zones.merge(wide, left_on="zone", right_index=True, how="left")
    cells = at_map.set_index("cell_id").drop(columns=["valid_time"])
    cells["valid_time"] = map_t[0]
    return SummaryTables(
        zones.reset_index(drop=True),
        pd.concat(ba.values(), ignore_index=True),
        daily,
        cells,
        snow_line,
    )


# --------------------------------------------------------------------------- layers of concern
#: kinds of tracked layers: the weak-layer families, then the crust kinds (index = kind code)
LAYER_KINDS: tuple[str, ...] = (*PWL_FAMILIES, *CRUST_KINDS)
_N_FAMILIES = len(PWL_FAMILIES)
_FAMILY_OF_GRAIN = np.zeros(len(GRAIN_INDEX), dtype=np.int8)  # 0: none, k + 1: family k
for _number, _family in enumerate(PWL_FAMILIES):
    _FAMILY_OF_GRAIN[[GRAIN_INDEX[c] for c in PWL_FAMILIES[_family]]] = _number + 1


def local_dates(seconds: np.ndarray, local_timezone: str) -> np.ndarray:
    """Local calendar dates ("YYYY-MM-DD", object array) of int64 seconds since 1970 (UTC);
    each distinct time is converted once."""
    uniq, inv = np.unique(np.asarray(seconds, dtype=np.int64), return_inverse=True)
    idx = (
        pd.DatetimeIndex(uniq.astype("datetime64[s]")).tz_localize("UTC").tz_convert(local_timezone)
    )
    return idx.strftime("%Y-%m-%d").to_numpy(object)[inv.reshape(-1)]


def layer_ids(kind: np.ndarray, ref_s: np.ndarray, local_timezone: str) -> np.ndarray:
    """Region-wide names of layers, ``kind-<local date>`` (e.g. ``SH-2026-01-12``), from the
    kind codes and reference times of :func:`layer_identities` (object array)."""
    return np.asarray(LAYER_KINDS, dtype=object)[kind] + "-" + local_dates(ref_s, local_timezone)


def layer_identities(
    snap: LayerSnapshot, criteria: ConcernCriteria = DEFAULT_CRITERIA
) -> tuple[tuple[np.ndarray, ...], np.ndarray, np.ndarray]:
    """Every persistent weak layer of concern and every crust of a snapshot, with what names
    it region-wide.

    A region-wide precipitation event (storm, rain, freezing rain) is one time window for the
    whole region, and its id (``event_id``, the window's start hour) is the same in every
    cell; naming layers by it gives the layers of one event one name everywhere, whatever
    hour each cell's share of the storm arrived.

    Parameters
    ----------
    snap : decoded snapshots (:func:`decode_snapshot`).
    criteria : what makes a persistent layer one of concern
        (:func:`regionmap.products.concern.weak_layers_of_concern`).

    Returns
    -------
    pos : (cell, day, layer) index arrays of the entries: the weak layers first, then the
        crusts (a faceting crust appears once as each).
    kind : int, index into :data:`LAYER_KINDS` (the family FC/DH/SH, or the crust kind).
    ref_s : int64 seconds since 1970 the layer is named for: buried surface hoar by the start
        of the storm that buried it (the event of the layer directly above; that layer's
        deposition when it carries no event), faceted crystals and depth hoar by the start
        of the storm that deposited their snow (their formation without an event), rain
        crusts and glaze by the start of their precipitation event (one event, one layer,
        whatever day each cell refroze), other crusts by their formation; ``_NO_TIME``
        where the snapshot lacks it. :func:`layer_ids` names them.
    """
    family = np.where(snap.of_concern(criteria), _FAMILY_OF_GRAIN[np.maximum(snap.grain, 0)], 0)
    weak = np.nonzero(family)
    crust = np.nonzero(snap.valid & (snap.crust > 0))
    pos = tuple(np.concatenate([w, c]) for w, c in zip(weak, crust, strict=True))
    kind = np.concatenate(
        [family[weak].astype(np.int64) - 1, _N_FAMILIES + snap.crust[crust].astype(np.int64)]
    )
    own_event_s = np.where(snap.event_id[pos] > 0, snap.event_id[pos].astype(np.int64) * 3600, 0)
    is_sh = kind == LAYER_KINDS.index("SH")
    burial_s = np.where(
        snap.burial_event_s[pos] > _NO_TIME, snap.burial_event_s[pos], snap.burial_s[pos]
    )
    by_event = np.isin(
        kind,
        [
            LAYER_KINDS.index("FC"),
            LAYER_KINDS.index("DH"),
            LAYER_KINDS.index("rain", _N_FAMILIES),
            LAYER_KINDS.index("glaze", _N_FAMILIES),
        ],
    ) & (own_event_s > 0)
    ref_s = np.where(is_sh, burial_s, np.where(by_event, own_event_s, snap.formation_s[pos]))
    return pos, kind, ref_s


def layers_of_concern(
    diag: xr.Dataset,
    profiles: xr.Dataset,
    table: pd.DataFrame,
    weight_km2,
    *,
    time,
    local_timezone: str = "UTC",
    observation_hour: int = 7,
    criteria: ConcernCriteria = DEFAULT_CRITERIA,
) -> pd.DataFrame:
    """Persistent weak layers of concern and crusts identified region-wide, summarised per
    zone and per zone × band × aspect at ``time``.

    A layer is identified by its kind and a date in the local time zone
    (:func:`layer_identities`): buried surface hoar (``SH``) by the start of the storm that
    buried it, faceted crystals (``FC``, incl. FCxr and FCsf) and depth hoar (``DH``) by the
    start of the storm that deposited their snow, rain crusts and glaze by the start of
    their precipitation event, melt-freeze and sun crusts by their formation date. Weak
    layers count where they are of concern (:mod:`regionmap.products.concern`: the same rule
    as the column's ``pwl_present``); crusts count also at the surface. The layers of one
    event carry one id, and when a cell holds several layers with the same id (one storm's
    snow faceted in two layers, say) the shallowest one stands for them: one row per layer
    id and group.

    Parameters
    ----------
    diag, profiles : ``cells.nc`` and ``profiles.nc`` Datasets; the snapshot used is the last
        one at or before ``time``.
    table : cell table indexed by ``cell_id`` (``zone``, band edges, ``aspect_sector``,
        ``slope_deg``).
    weight_km2 : (cell,) area weights [km2] (avalanche terrain by default in the run).
    time : datetime-like [UTC]; an output time of ``diag``.
    local_timezone, observation_hour : the local observation day (dates and 24/72 h loads).
    criteria : what makes a persistent layer one of concern (the column model's thresholds).

    Returns
    -------
    DataFrame, one row per layer × zone × band × aspect plus a zone-wide row per layer
    (``band`` = ``aspect_sector`` = ``"all"``): ``layer_id``, ``layer_name`` (e.g.
    "SH buried 2026-01-12"), ``kind``, ``category`` (``weak layer``/``crust``), ``date``,
    ``zone``, ``band``, ``band_lower_m``, ``band_upper_m``, ``aspect_sector``,
    ``presence_frac`` [1], ``area_km2`` with the layer, means over the cells with it:
    ``depth_cm`` (vertical), ``slab_cm`` (perpendicular to the slope), ``thickness_cm``,
    ``load_above_kg_m2``, ``load_since_burial_kg_m2`` (snowfall since the layer above was
    deposited, up to ``time``), ``load_24h_kg_m2`` / ``load_72h_kg_m2`` (snowfall on it in
    the last one / three local observation days); ``valid_time``, ``is_forecast``.
    """
    _check_alignment(diag, table, profiles)
    t_all = _times_of(diag)
    want = _as_utc_array(time)[:1]
    pos = _positions(t_all, want, "the layers-of-concern time")[0]
    day = profiles["day"].values.astype("datetime64[s]")
    d = np.searchsorted(day, want[0], side="right") - 1
    if d < 0:
        return pd.DataFrame(columns=_CONCERN_COLUMNS)
    rows = _concern_layer_rows(decode_snapshot(profiles, [d]), table, criteria, local_timezone)
    _add_snowfall_on_layers(
        rows,
        diag,
        t_all,
        want,
        pos,
        local_timezone=local_timezone,
        observation_hour=observation_hour,
    )
    w = np.asarray(weight_km2, dtype=np.float64)
    rows["_w"] = w[rows["_c"].to_numpy()]
    cells = table[_BAND_ASPECT].copy()
    cells["_w"] = w
    rows = rows.merge(table[_BAND_ASPECT], left_on="cell_id", right_index=True)
    out = [_concern_means_by(rows, cells, keys) for keys in (_BAND_ASPECT, ["zone"])]
    result = pd.concat(out, ignore_index=True)
    result["valid_time"] = want[0]
    result["is_forecast"] = (
        bool(diag["is_forecast"].values[pos]) if "is_forecast" in diag.variables else False
    )
    return result[_CONCERN_COLUMNS].sort_values(
        ["date", "layer_id", "zone", "band_lower_m", "aspect_sector"],
        ignore_index=True,
        na_position="first",
    )


_CONCERN_MEANS = [
    "depth_cm",
    "slab_cm",
    "thickness_cm",
    "load_above_kg_m2",
    "load_since_burial_kg_m2",
    "load_24h_kg_m2",
    "load_72h_kg_m2",
]
_CONCERN_COLUMNS = [
    "layer_id",
    "layer_name",
    "kind",
    "category",
    "date",
    "zone",
    "band",
    "band_lower_m",
    "band_upper_m",
    "aspect_sector",
    "presence_frac",
    "area_km2",
    *_CONCERN_MEANS,
    "valid_time",
    "is_forecast",
]


def _concern_layer_rows(
    snap, table: pd.DataFrame, criteria: ConcernCriteria, local_timezone: str
) -> pd.DataFrame:
    """One row per layer id and cell (the shallowest layer of an id stands for it) with its
    identity, depth [cm], slab [cm], thickness [cm], load above [kg m-2] and burial time [s].

    Raises
    ------
    InputError
        When a weak layer or crust has no formation time.
    """
    sq = {
        k: getattr(snap, k)[:, 0, :]
        for k in ("depth_cm", "load_above_kg_m2", "thickness_m", "burial_s")
    }
    (ci, _, li), code, ref_s = layer_identities(snap, criteria)
    as_crust = code >= _N_FAMILIES
    kind = np.asarray(LAYER_KINDS, dtype=object)[code]
    if (ref_s <= _NO_TIME).any():
        raise InputError(
            "profiles.nc: 'formation_time' is missing for a weak layer or crust; "
            "the layers of concern need it (int64 seconds since 1970, or datetimes)"
        )
    date = local_dates(ref_s, local_timezone)
    verb = np.where(kind == "SH", " buried ", np.where(as_crust, " crust ", " in snow of "))
    rows = pd.DataFrame(
        {
            "cell_id": table.index.to_numpy()[ci],
            "_c": ci,
            "kind": kind,
            "category": np.where(as_crust, "crust", "weak layer"),
            "date": date,
            "layer_id": layer_ids(code, ref_s, local_timezone),
            "layer_name": kind + verb + date,
            "depth_cm": sq["depth_cm"][ci, li],
            "thickness_cm": sq["thickness_m"][ci, li] * 100.0,
            "load_above_kg_m2": sq["load_above_kg_m2"][ci, li],
            "_burial_s": sq["burial_s"][ci, li],
        }
    )
    rows = rows.sort_values(["layer_id", "cell_id", "depth_cm"]).drop_duplicates(
        ["layer_id", "cell_id"]
    )
    cos_slope = np.cos(np.deg2rad(table["slope_deg"].to_numpy(np.float64)))
    rows["slab_cm"] = rows["depth_cm"].to_numpy() * cos_slope[rows["_c"].to_numpy()]
    return rows


def _add_snowfall_on_layers(
    rows: pd.DataFrame,
    diag: xr.Dataset,
    t_all: np.ndarray,
    want: np.ndarray,
    pos: int,
    *,
    local_timezone: str,
    observation_hour: int,
) -> None:
    """Add to ``rows`` the snowfall on each buried layer [kg m-2]: since its burial up to
    ``want``, and in the last one / three local observation days (NaN where not buried)."""
    win = _snowfall_windows(
        diag, t_all, want, local_timezone=local_timezone, observation_hour=observation_hour
    )
    c = rows["_c"].to_numpy()
    burial = rows["_burial_s"].to_numpy()
    is_buried = burial > _NO_TIME
    bpos = np.searchsorted(t_all.astype(np.int64), burial, side="right") - 1
    c_burial, c_now = np.split(
        running_snowfall_of(
            diag, np.concatenate([c, c]), np.concatenate([bpos, np.full(c.size, pos)])
        ),
        2,
    )
    since = np.where(is_buried, c_now - c_burial, np.nan)
    rows["load_since_burial_kg_m2"] = since
    # snowfall in (window start, window end] that also fell after the burial
    for hours, key in ((24, "c_24h"), (72, "c_72h")):
        added = win["c_end"][c, 0] - np.maximum(win[key][c, 0], c_burial)
        rows[f"load_{hours}h_kg_m2"] = np.where(is_buried, np.maximum(added, 0.0), np.nan)


def _concern_means_by(rows: pd.DataFrame, cells: pd.DataFrame, keys: list[str]) -> pd.DataFrame:
    """Area with each layer [km2], its presence fraction [1] and area-weighted means of
    :data:`_CONCERN_MEANS` over the cells with it, per layer and group ``keys``."""
    means = _CONCERN_MEANS
    total = cells.groupby(keys, dropna=False)["_w"].sum().rename("_total")
    x = rows[means].to_numpy(np.float64)
    ok = np.isfinite(x) & (rows["_w"].to_numpy()[:, None] > 0)
    part = pd.DataFrame(
        np.where(ok, x * rows["_w"].to_numpy()[:, None], 0.0), columns=[f"s_{m}" for m in means]
    )
    part[[f"w_{m}" for m in means]] = np.where(ok, rows["_w"].to_numpy()[:, None], 0.0)
    ident = ["layer_id", "layer_name", "kind", "category", "date"]
    for col in (*ident, *keys, "_w"):
        part[col] = rows[col].to_numpy()
    g = part.groupby([*ident, *keys], dropna=False).sum(numeric_only=True)
    res = pd.DataFrame(index=g.index)
    res["area_km2"] = g["_w"]
    for m in means:
        res[m] = g[f"s_{m}"] / g[f"w_{m}"].where(g[f"w_{m}"] > 0)
    res = res.reset_index().merge(total, left_on=keys, right_index=True)
    res = res[res["_total"] > 0]
    res["presence_frac"] = res["area_km2"] / res["_total"]
    if keys == ["zone"]:
        res["band_lower_m"], res["band_upper_m"], res["aspect_sector"], res["band"] = (
            np.nan,
            np.nan,
            "all",
            "all",
        )
    else:
        res["band"] = band_label(res["band_lower_m"], res["band_upper_m"])
    return res


def layer_summary_text(loc: pd.DataFrame, *, min_presence_frac: float = 0.1) -> pd.Series:
    """One line per zone naming its layers of concern (zone-wide rows), most widespread first:
    "SH buried 2026-01-12 (62 %, 45 cm); DH formed 2025-11-20 (30 %, 80 cm)"; layers on less
    than ``min_presence_frac`` of the weighted area are left out. Index: zone."""
    zone_rows = loc[(loc["aspect_sector"] == "all") & (loc["presence_frac"] >= min_presence_frac)]
    zone_rows = zone_rows.sort_values(["zone", "presence_frac"], ascending=[True, False])
    text = (
        zone_rows["layer_name"]
        + " ("
        + (zone_rows["presence_frac"] * 100).round().astype(int).astype(str)
        + " %, "
        + zone_rows["depth_cm"].round().astype(int).astype(str)
        + " cm)"
    )
    return text.groupby(zone_rows["zone"]).agg("; ".join).rename("layers_of_concern")

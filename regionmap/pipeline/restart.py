"""Restart cells from an observed snow profile.

A ``[[restart]]`` entry of the config (or ``regionmap run ... --restart PROFILE --zone Z
--band B --aspect A``) names an observed profile (CAAML v6 or our CSV format, read by
:func:`regionmap.io.profiles.read_profile`), the zone, the elevation bands and the aspect
sectors it stands for, and optionally a time. At that time the matching cells' snow columns
are replaced by the profile's layers and the run continues from there.

* :func:`resolve_restarts` checks the entries against the run's cells and period once, in the
  client, and returns :class:`Restart` objects (profile, restart time, cell positions).
* :func:`apply_restart` replaces the columns of some cells of a (chunk) state and returns the
  explicit **mass and energy increment** of each restarted cell, so the run record can say
  which cells were restarted from what and budgets still close with the increment.
* :func:`run_columns_with_restarts` steps a chunk through one part of the period with
  :func:`regionmap.snow.column.run_columns`, split at the restart times that fall inside it.

Restart time: the profile's observation time (or the entry's ``time``) taken to the nearest
state time of the run (hourly, or the diagnostics interval; a half-way time goes to the
later one). The restart replaces the state valid at that time, i.e. it comes *before* the
step that starts there. It must lie inside the run's period: from the start state up to (not
including) the last step's end.

An observed profile describes one place at one time. Restarting a whole cell (zone x band x
aspect) from it assumes the pit stands for that terrain; the result remains guidance for
trained people and never replaces field observations, the local avalanche service or
professional standards.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from itertools import pairwise
from pathlib import Path

import numpy as np
import pandas as pd

from regionmap.config import parse_band
from regionmap.constants import (
    C_ICE_J_KG_K,
    C_WATER_J_KG_K,
    L_FUSION_J_KG,
    RHO_WATER_KG_M3,
    T_MELT_K,
)
from regionmap.errors import InputError
from regionmap.io.profiles import ObservedProfile, read_profile
from regionmap.io.times import utc_datetime64
from regionmap.snow.codes import CRUST_INDEX, GRAIN_INDEX
from regionmap.snow.column import run_columns
from regionmap.snow.containers import EPOCH_2000_S
from regionmap.snow.crusts import FLAG_WAS_WET, FLAG_WET_MELT
from regionmap.snow.diagnostics import layer_hardness_array
from regionmap.snow.params import SnowParams
from regionmap.snow.state import SnowState
from regionmap.snow.wind_transport import erodible_mass_of_columns

__all__ = [
    "Restart",
    "OPEN_BAND_LOW_M",
    "OPEN_BAND_HIGH_M",
    "MICROSTRUCTURE_OF_CLASS",
    "ALBEDO_OF_CLASS",
    "SNOW_AGE_H_OF_CLASS",
    "resolve_restarts",
    "column_enthalpy_j_m2",
    "apply_restart",
    "restarts_in_chunk",
    "run_columns_with_restarts",
    "merge_restart_records",
]

#: How an open-ended band is written in a restart entry: the band below the first edge as
#: ``0-EDGE``, the band above the last edge as ``EDGE-9000`` [m] (our convention).
OPEN_BAND_LOW_M = 0.0
OPEN_BAND_HIGH_M = 9000.0

#: (dendricity, facetedness) [1] given to a restarted layer of each grain class. Chosen so
#: that the model's own classification (:func:`regionmap.snow.metamorphism.classify_grain`)
#: returns the observed class for a dry layer; our choice, not a published value.
MICROSTRUCTURE_OF_CLASS: dict[str, tuple[float, float]] = {
    "PP": (0.8, 0.0),
    "DF": (0.3, 0.0),
    "RG": (0.0, 0.0),
    "RGxf": (0.0, 0.35),
    "FC": (0.0, 0.7),
    "FCxr": (0.0, 0.35),
    "FCsf": (0.0, 0.7),
    "DH": (0.0, 1.0),
    "SH": (0.0, 1.0),
    "MF": (0.0, 0.0),
    "MFcr": (0.0, 0.0),
    "IF": (0.0, 0.0),
}

#: Surface albedo after a restart, by the grain class of the top layer [1], clipped to the
#: model's [albedo_min, albedo_max]. Mid values of the ranges tabulated for fresh dry snow
#: (0.75-0.95), old clean dry snow and wet snow in Cuffey & Paterson (2010), The Physics of
#: Glaciers, 4th ed., Table 5.2 [mem: ranges recalled, not re-read]. A wet top layer takes
#: the wet-snow value whatever its class.
ALBEDO_OF_CLASS: dict[str, float] = {
    "PP": 0.85,
    "DF": 0.80,
    "RG": 0.75,
    "RGxf": 0.75,
    "FC": 0.75,
    "FCxr": 0.75,
    "FCsf": 0.75,
    "DH": 0.75,
    "SH": 0.80,
    "MF": 0.60,
    "MFcr": 0.60,
    "IF": 0.60,
}
_WET_SURFACE_ALBEDO = 0.60

#: Hours since the last snowfall given to the surface after a restart, by the top layer's
#: class: new snow just fallen, decomposing snow about three days old, older snow two weeks
#: (our choice: the profile does not say when it last snowed).
SNOW_AGE_H_OF_CLASS: dict[str, float] = {"PP": 0.0, "DF": 72.0}
_OLD_SNOW_AGE_H = 336.0
_NO_EVENT_GAP_H = 1e3  # as in a fresh state: the next snowfall/rain starts a new event

# crust kind of restarted crust layers: an observed crust or ice layer of unknown origin is
# taken as melt-freeze (the model's glaze is reserved for freezing rain it simulated itself)
_CRUST_OF_CLASS = {"MFcr": CRUST_INDEX["melt-freeze"], "IF": CRUST_INDEX["melt-freeze"]}


@dataclass
class Restart:
    """One resolved restart: which profile replaces which cells when.

    Attributes
    ----------
    entry : int
        Position of the entry in the list given to :func:`resolve_restarts`.
    profile : ObservedProfile
    observed_time : numpy.datetime64
        The entry's ``time`` or else the profile's observation time (UTC, s).
    time : numpy.datetime64
        Restart time: the state time of the run nearest to ``observed_time`` (UTC, s).
    positions : ndarray (k,) int64
        Row positions of the restarted cells in the cell table.
    cell_ids : ndarray (k,) int64
        Their ``cell_id``.
    zone : str
    bands : list of str
        As written in the entry (``LOW-HIGH`` in m).
    aspects : list of str
        Aspect sectors as in the cell table (``N`` ... ``flat``).
    """

    entry: int
    profile: ObservedProfile
    observed_time: np.datetime64
    time: np.datetime64
    positions: np.ndarray
    cell_ids: np.ndarray
    zone: str
    bands: list[str] = field(default_factory=list)
    aspects: list[str] = field(default_factory=list)


def _entry_value(entry, name):
    return entry[name] if isinstance(entry, dict) else getattr(entry, name)


def _band_text(lo: float, hi: float) -> str:
    a = OPEN_BAND_LOW_M if not np.isfinite(lo) else lo
    b = OPEN_BAND_HIGH_M if not np.isfinite(hi) else hi
    return f"{a:g}-{b:g}"


def _parse_band(text: str, where: str) -> tuple[float, float]:
    try:
        return parse_band(text)
    except InputError as exc:
        raise InputError(f"{where}: {exc}") from None


def _select_cells(
    table: pd.DataFrame, zone: str, bands: list[str], aspects: list[str], where: str
) -> np.ndarray:
    """Positions of the cells of ``zone`` in the written bands and aspect sectors."""
    zones = list(pd.unique(table["zone"]))
    if zone not in zones:
        raise InputError(f"{where}: unknown zone {zone!r}; the run's zones are {zones}")
    in_zone = (table["zone"] == zone).to_numpy()
    lower = table["band_lower_m"].to_numpy(float)
    upper = table["band_upper_m"].to_numpy(float)
    lo_w = np.where(np.isfinite(lower), lower, OPEN_BAND_LOW_M)
    hi_w = np.where(np.isfinite(upper), upper, OPEN_BAND_HIGH_M)
    zone_bands = sorted({(a, b) for a, b in zip(lo_w[in_zone], hi_w[in_zone], strict=True)})
    edges = sorted({e for band in zone_bands for e in band})
    listing = [f"{a:g}-{b:g}" for a, b in zone_bands]
    if not bands:
        raise InputError(
            f"{where}: no band given; zone {zone!r} has bands {listing} (m; open "
            f"bands written from {OPEN_BAND_LOW_M:g} or up to {OPEN_BAND_HIGH_M:g})"
        )
    in_band = np.zeros(len(table), dtype=bool)
    for text in bands:
        lo, hi = _parse_band(text, where)
        if not (np.any(np.isclose(edges, lo)) and np.any(np.isclose(edges, hi))):
            raise InputError(
                f"{where}: band {text!r} does not match the band edges of zone {zone!r}; its bands "
                f"are {listing} (m; one band or several adjacent ones such as "
                f"'{listing[0].split('-')[0]}-{listing[-1].split('-')[1]}')"
            )
        in_band |= (lo_w >= lo - 1e-6) & (hi_w <= hi + 1e-6)
    sectors = table["aspect_sector"].astype(str).to_numpy()
    zone_sectors = list(pd.unique(sectors[in_zone & in_band]))
    if not aspects:
        raise InputError(
            f"{where}: no aspect given; zone {zone!r} has aspects {zone_sectors} in these bands"
        )
    in_aspect = np.zeros(len(table), dtype=bool)
    for text in aspects:
        name = "flat" if str(text).strip().lower() == "flat" else str(text).strip().upper()
        hit = in_zone & in_band & (sectors == name)
        if not hit.any():
            raise InputError(
                f"{where}: aspect {text!r} has no cell in zone {zone!r}, bands {list(bands)}; "
                f"the aspects there are {zone_sectors}"
            )
        in_aspect |= sectors == name
    return np.flatnonzero(in_zone & in_band & in_aspect).astype(np.int64)


def resolve_restarts(
    entries,
    cell_table: pd.DataFrame,
    period_times: np.ndarray,
    *,
    diag_every_h: int = 1,
    max_layers: int | None = None,
) -> list[Restart]:
    """Check restart entries against the run's cells and period.

    Parameters
    ----------
    entries : list of :class:`regionmap.config.RestartEntry` (or dicts with the same keys)
        ``profile`` (path), ``time`` (optional), ``zone``, ``bands`` (``LOW-HIGH`` in m, the
        edges of one band or of several adjacent bands; open bands from 0 or up to 9000 m),
        ``aspects`` (sector names of the cell table, ``N`` … ``flat``; case does not matter).
    cell_table : pandas.DataFrame
        The run's cell table (``zone``, ``band_lower_m``, ``band_upper_m``, ``aspect_sector``;
        index ``cell_id``), in run order: positions are row positions.
    period_times : ndarray (time,) datetime64
        Interval ends of the steps the run simulates (hourly, consecutive).
    diag_every_h : int
        The run's diagnostics interval [h]; restart times fall on its boundaries so that the
        simulation parts hold whole intervals.
    max_layers : int, optional
        Layer slots per cell ([snow] max_layers); a profile with more layers is refused.

    Returns
    -------
    list of Restart
        In entry order.

    Raises
    ------
    InputError
        An unreadable profile; an unknown zone, band or aspect (the message lists what the
        run has); a restart time outside the period; a profile with more layers than slots;
        the same cell restarted twice at one time.
    """
    t = np.asarray(period_times, dtype="datetime64[s]")
    if t.size == 0:
        raise InputError("restart: the run has no steps to restart in")
    start = t[0] - np.timedelta64(3600, "s")
    state_times = np.concatenate([[start], t])[:: max(int(diag_every_h), 1)]
    out: list[Restart] = []
    for k, entry in enumerate(entries):
        path = Path(_entry_value(entry, "profile"))
        where = f"[[restart]] entry {k + 1} (profile {path})"
        profile = read_profile(path)
        given = _entry_value(entry, "time")
        observed = profile.time if given is None else utc_datetime64(given, where)
        if not start <= observed <= t[-1]:
            raise InputError(
                f"{where}: restart time {observed} UTC "
                f"({'from the profile' if given is None else 'from the entry'}) is outside the "
                "run's "
                f"period {start} .. {t[-1]} UTC; hint: set the entry's time, or run a period that "
                "contains the observation"
            )
        offset_s = np.abs((state_times - observed).astype(np.int64))
        i = int(np.flatnonzero(offset_s == offset_s.min())[-1])  # nearest; half-way goes later
        when = state_times[i]
        if when >= t[-1]:
            raise InputError(
                f"{where}: restart time {observed} UTC is at the end of the run "
                f"({t[-1]} UTC) and leaves no step to simulate after it"
            )
        zone = str(_entry_value(entry, "zone"))
        bands = [str(b) for b in _entry_value(entry, "bands")]
        aspects = [str(a) for a in _entry_value(entry, "aspects")]
        positions = _select_cells(cell_table, zone, bands, aspects, where)
        if max_layers is not None and profile.n_layers > max_layers:
            raise InputError(
                f"{where}: the profile has {profile.n_layers} layers but cells hold at most "
                f"[snow] max_layers = {max_layers}; hint: raise max_layers or join similar layers"
            )
        sectors = list(pd.unique(cell_table["aspect_sector"].astype(str).to_numpy()[positions]))
        out.append(
            Restart(
                entry=k,
                profile=profile,
                observed_time=observed,
                time=when,
                positions=positions,
                cell_ids=cell_table.index.to_numpy(np.int64)[positions],
                zone=zone,
                bands=bands,
                aspects=sectors,
            )
        )
    for a in range(len(out)):
        for b in range(a + 1, len(out)):
            if out[a].time == out[b].time:
                both = np.intersect1d(out[a].positions, out[b].positions)
                if both.size:
                    raise InputError(
                        f"[[restart]] entries {a + 1} and {b + 1} both restart cell(s) "
                        f"{cell_table.index.to_numpy()[both][:5].tolist()} at {out[a].time} UTC; "
                        "give "
                        "each cell one profile per time"
                    )
    return out


def column_enthalpy_j_m2(state: SnowState) -> np.ndarray:
    """Enthalpy of each snow column relative to liquid water at 0 °C [J m-2].

    Sum over active layers of ``(c_ice M_ice + c_w M_liq)(T − T0) − L_f M_ice`` and
    ``− L_f M_SH`` for surface hoar on the surface (taken at 0 °C), the convention of the
    column kernel (:func:`regionmap.snow.kernel.column_enthalpy`). Soil is not included.
    Constants from :mod:`regionmap.constants`.
    """
    active = np.arange(state.max_layers)[None, :] < state.layer_count[:, None]
    ice = np.where(active, state.ice_kg_m2, 0.0)
    liq = np.where(active, state.liquid_kg_m2, 0.0)
    dtemp = np.where(active, state.temperature_k.astype(np.float64) - T_MELT_K, 0.0)
    layers = (C_ICE_J_KG_K * ice + C_WATER_J_KG_K * liq) * dtemp - L_FUSION_J_KG * ice
    return layers.sum(axis=1) - L_FUSION_J_KG * state.cell_value("surface_hoar_kg_m2")


def _profile_layers(profile: ObservedProfile, params: SnowParams, restart_s2000: int) -> dict:
    """The profile as one column of state layer values (bottom first), in state dtypes."""
    codes = [str(c) for c in profile.grain_code]
    micro = np.array([MICROSTRUCTURE_OF_CLASS[c] for c in codes], dtype=np.float64)
    liquid = profile.liquid_kg_m2()
    lwc = liquid / (RHO_WATER_KG_M3 * profile.thickness_m)
    wet = liquid > 0.0
    flags = np.where(wet, FLAG_WET_MELT, 0) | np.where(
        wet & (lwc >= params.crust_wet_frac), FLAG_WAS_WET, 0
    )
    return {
        "thickness_m": profile.thickness_m.astype(np.float32),
        "ice_kg_m2": profile.ice_kg_m2().astype(np.float64),
        "liquid_kg_m2": liquid.astype(np.float64),
        "temperature_k": profile.temperature_k.astype(np.float32),
        "grain_size_mm": profile.grain_size_mm.astype(np.float32),
        "dendricity": micro[:, 0].astype(np.float32),
        "facetedness": micro[:, 1].astype(np.float32),
        "grain_code": np.array([GRAIN_INDEX[c] for c in codes], dtype=np.int8),
        "crust_code": np.array(
            [_CRUST_OF_CLASS.get(c, CRUST_INDEX["none"]) for c in codes], dtype=np.int8
        ),
        "flags": flags.astype(np.int8),
        "deposition_time_s2000": np.full(profile.n_layers, restart_s2000, dtype=np.int32),
        "formation_time_s2000": np.full(profile.n_layers, restart_s2000, dtype=np.int32),
        "event_id": np.full(profile.n_layers, -1, dtype=np.int32),
    }


def apply_restart(state: SnowState, positions, restart: Restart, params: SnowParams | None = None):
    """Replace the snow columns of some cells of a state by an observed profile.

    Parameters
    ----------
    state : SnowState
        A state valid at ``restart.time`` (a chunk's state between two ``run_columns`` calls,
        or the run's start state); not modified.
    positions : array_like (k,) int
        Cells to restart, as positions in ``state`` (local to a chunk's state).
    restart : Restart
        From :func:`resolve_restarts`.
    params : SnowParams, optional
        The run's snow settings (layer slots, crust-forming liquid share, albedo bounds).

    Returns
    -------
    state : SnowState
        A copy with, for each listed cell: the profile's layers (thickness, ice and liquid
        mass from density and wetness, temperature, grain class, grain size; dendricity and
        facetedness after :data:`MICROSTRUCTURE_OF_CLASS`; deposition and formation time =
        restart time; MFcr and IF layers as melt-freeze crusts; wet layers flagged wet by
        melt; event id −1); the surface reset: surface temperature = top-layer temperature,
        albedo after :data:`ALBEDO_OF_CLASS`, no surface hoar, snow age after
        :data:`SNOW_AGE_H_OF_CLASS`, no ongoing snowfall/rain event, new-snow history
        cleared. Soil temperatures are kept.
    record : dict
        For ``run.json``: the profile (file, name, observation time), the restart time, the
        zone/bands/aspects, ``cell_id`` of each restarted cell, and per cell
        ``swe_increment_kg_m2`` (SWE after − before, surface hoar included [kg m-2]) and
        ``enthalpy_increment_j_m2`` (column enthalpy after − before relative to liquid water
        at 0 °C, :func:`column_enthalpy_j_m2` [J m-2]); snow depth before and after [m];
        the number of layers whose density was estimated or temperature interpolated; the
        largest difference between the model's hand hardness of a layer (it derives hardness
        from density and grain class) and the observed one.

    Raises
    ------
    InputError
        A state not valid at the restart time, positions outside the state, or a profile
        with more layers than the state has slots.
    """
    params = SnowParams() if params is None else params
    pos = np.unique(np.asarray(positions, dtype=np.int64).ravel())
    prof = restart.profile
    where = f"restart from {prof.source}"
    if np.datetime64(state.time, "s") != restart.time:
        raise InputError(
            f"{where}: the state is valid at {state.time} but the restart is at "
            f"{restart.time}; apply it to the state valid at the restart time"
        )
    if pos.size and (pos.min() < 0 or pos.max() >= state.n_cells):
        raise InputError(
            f"{where}: cell positions {pos.min()}..{pos.max()} outside the state's "
            f"0..{state.n_cells - 1}"
        )
    n_layer = prof.n_layers
    if n_layer > state.max_layers:
        raise InputError(
            f"{where}: the profile has {n_layer} layers but the state has "
            f"{state.max_layers} layer slots ([snow] max_layers)"
        )
    new = state.copy()
    swe_before = state.swe_kg_m2()[pos]
    h_before = column_enthalpy_j_m2(state)[pos]
    depth_before = np.where(
        np.arange(state.max_layers)[None, :] < state.layer_count[:, None],
        state.thickness_m.astype(np.float64),
        0.0,
    ).sum(axis=1)[pos]
    restart_s2000 = int(np.datetime64(restart.time, "s").astype(np.int64)) - EPOCH_2000_S
    values = _profile_layers(prof, params, restart_s2000)
    for name, column in values.items():
        arr = getattr(new, name)
        arr[pos, :] = 0
        arr[pos, :n_layer] = column[None, :]
    top = str(prof.grain_code[-1])
    top_wet = bool(prof.liquid_frac[-1] > 0.0)
    albedo = _WET_SURFACE_ALBEDO if top_wet else ALBEDO_OF_CLASS[top]
    new.set_cell_values(
        pos,
        layer_count=n_layer,
        surface_hoar_start_s2000=0,
        albedo=min(max(albedo, params.albedo_min), params.albedo_max),
        surface_temperature_k=float(np.float32(prof.temperature_k[-1])),
        surface_hoar_kg_m2=0.0,
        snow_age_h=SNOW_AGE_H_OF_CLASS.get(top, _OLD_SNOW_AGE_H),
        hours_since_snowfall=_NO_EVENT_GAP_H,
        hours_since_rain=_NO_EVENT_GAP_H,
        hours_since_freezing_rain=_NO_EVENT_GAP_H,
    )
    # the wind transport's erodible snow: the dry, uncrusted snow at the observed top
    new.set_cell_values(
        pos,
        wind_erodible_kg_m2=erodible_mass_of_columns(
            new.liquid_kg_m2[pos],
            new.ice_kg_m2[pos],
            new.crust_code[pos],
            new.grain_code[pos],
            new.layer_count[pos],
        ),
    )
    new.new_snow_kg_m2[pos] = 0.0
    new.new_snow_m[pos] = 0.0
    swe_after = new.swe_kg_m2()[pos]
    h_after = column_enthalpy_j_m2(new)[pos]
    hardness = (
        layer_hardness_array(new)[pos[:1], :n_layer].astype(np.float64)
        if pos.size
        else np.empty((0, n_layer))
    )
    hard_diff = (
        float(np.nanmax(np.abs(hardness - prof.hardness_index[None, :])))
        if pos.size
        else float("nan")
    )
    record = {
        "entry": restart.entry,
        "profile": str(prof.source),
        "profile_name": prof.name,
        "observed_time": str(restart.observed_time),
        "restart_time": str(restart.time),
        "zone": restart.zone,
        "bands": list(restart.bands),
        "aspects": list(restart.aspects),
        "cell_id": state.cell_id[pos].astype(np.int64).tolist(),
        "layers": n_layer,
        "snow_depth_before_m": depth_before.tolist(),
        "snow_depth_after_m": float(new.thickness_m[pos[:1], :n_layer].astype(np.float64).sum())
        if pos.size
        else 0.0,
        "swe_increment_kg_m2": (swe_after - swe_before).tolist(),
        "enthalpy_increment_j_m2": (h_after - h_before).tolist(),
        "density_estimated_layers": int(prof.density_estimated.sum()),
        "temperature_interpolated_layers": int(prof.temperature_interpolated.sum()),
        "hardness_model_minus_observed_max_abs": hard_diff,
    }
    return new, record


def restarts_in_chunk(
    restarts: list[Restart], lo: int, hi: int
) -> list[tuple[Restart, np.ndarray]]:
    """The restarts that touch cells ``lo:hi`` (run positions), with chunk-local positions.

    Returns
    -------
    list of (Restart, ndarray int64)
        Sorted by restart time (entry order within one time); positions ``p - lo``.
    """
    out = []
    for r in sorted(restarts, key=lambda r: (r.time, r.entry)):
        local = r.positions[(r.positions >= lo) & (r.positions < hi)] - lo
        if local.size:
            out.append((r, local))
    return out


def _join_parts(parts: list[dict], time_key: str = "time") -> dict:
    """Join run_columns outputs of consecutive parts along their time axis."""
    if len(parts) == 1:
        return parts[0]
    out = {}
    for key, first in parts[0].items():
        values = [p[key] for p in parts]
        if key == "status":
            out[key] = np.bitwise_or.reduce(values)
        elif isinstance(first, np.ndarray) and first.ndim >= 2:
            out[key] = np.concatenate(values, axis=1)  # (cell, time, ...) or (cell, day, layer)
        elif key == time_key or key.startswith("event_"):
            out[key] = np.concatenate(values)  # the time axis and the 1-D event log
        else:
            out[key] = first
    return out


def run_columns_with_restarts(
    state: SnowState,
    forcing,
    chunk_restarts,
    params: SnowParams,
    diag_every_h: int = 1,
    snapshot_hour_utc: int | None = None,
    *,
    with_snapshots: bool = True,
    threads: int = 2,
    kept: dict | None = None,
    zones: tuple[np.ndarray, np.ndarray] | None = None,
):
    """:func:`regionmap.snow.column.run_columns` over one part of the period, split at restarts
    (and at the times of ``kept``).

    Parameters
    ----------
    state : SnowState
        The chunk's state valid one step before ``forcing.time[0]``.
    forcing : CellForcing
        The chunk's forcing for this part (analysis or forecast).
    chunk_restarts : list of (Restart, ndarray)
        From :func:`restarts_in_chunk`. A restart is applied here when its time lies in
        [``state.time``, ``forcing.time[-1]``): to the state valid at that time, before the
        next step (so a restart at the boundary of two parts belongs to the later part).
    params, diag_every_h, snapshot_hour_utc, with_snapshots, threads, zones
        As for ``run_columns`` (wind transport starts again from the column's erodible snow
        at every split).
    kept : dict or None
        {valid time (datetime64[s]): anything}; each time inside this part (from the
        state's time to before the last step's) becomes a split point and its value is
        replaced by the state valid then, after the restarts due then (continuing a column
        is exact, so the split changes nothing else).

    Returns
    -------
    state, diagnostics, snapshots
        As ``run_columns`` returns them, the parts joined along time.
    records : list of dict
        One :func:`apply_restart` record per restart applied (``cell_id`` global).

    Raises
    ------
    InputError
        A restart not on a diagnostics boundary of this part (resolve the restarts with the
        run's ``diag_every_h``).
    """
    t = np.asarray(forcing.time, dtype="datetime64[s]")
    t_state = np.datetime64(state.time, "s")
    due = [(r, p) for r, p in chunk_restarts if t_state <= r.time < t[-1]]
    cuts = sorted({int((r.time - t_state) // np.timedelta64(3600, "s")) for r, _ in due})
    for c in cuts:
        if c % int(diag_every_h):
            raise InputError(
                f"restart at {t_state + np.timedelta64(3600 * c, 's')} is not on a "
                f"diagnostics boundary ({diag_every_h} h); resolve restarts with the run's "
                "diag_every_h"
            )
    keep = {
        int((k - t_state) // np.timedelta64(3600, "s")): k
        for k in (kept or {})
        if t_state <= k < t[-1]
    }
    for c in keep:
        if c % int(diag_every_h):
            raise ValueError(
                f"kept time {keep[c]} is not on a diagnostics boundary"
            )  # a bug, not bad input
    records: list[dict] = []
    diags, snaps = [], []
    bounds = sorted({0, *cuts, *keep}) + [t.size]
    current = state
    for step, end in pairwise(bounds):
        when = t_state + np.timedelta64(3600 * step, "s")
        for r, p in due:
            if r.time == when:
                current, rec = apply_restart(current, p, r, params)
                records.append(rec)
        if step in keep:
            kept[keep[step]] = current
        current, d, s = run_columns(
            current,
            forcing.subset(steps=slice(step, end)),
            params,
            diag_every_h,
            snapshot_hour_utc,
            with_snapshots=with_snapshots,
            threads=threads,
            zones=zones,
        )
        diags.append(d)
        snaps.append(s)
    return current, _join_parts(diags), (_join_parts(snaps) if with_snapshots else None), records


def merge_restart_records(records: list[dict]) -> list[dict]:
    """Join the per-chunk records of each restart into one record (cells in id order)."""
    merged: dict = {}
    per_cell = ("cell_id", "snow_depth_before_m", "swe_increment_kg_m2", "enthalpy_increment_j_m2")
    for rec in records:
        key = (rec["entry"], rec["restart_time"])
        if key not in merged:
            merged[key] = {k: (list(v) if k in per_cell else v) for k, v in rec.items()}
            continue
        for k in per_cell:
            merged[key][k].extend(rec[k])
        merged[key]["hardness_model_minus_observed_max_abs"] = max(
            merged[key]["hardness_model_minus_observed_max_abs"],
            rec["hardness_model_minus_observed_max_abs"],
        )
    out = []
    for key in sorted(merged, key=lambda k: (k[1], k[0])):
        rec = merged[key]
        order = np.argsort(rec["cell_id"], kind="stable")
        for k in per_cell:
            rec[k] = [rec[k][i] for i in order]
        out.append(rec)
    return out

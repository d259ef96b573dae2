"""Avalanche-problem indicators per cell and time, and their summary per zone × band × aspect.

Computed from a finished run's ``cells.nc`` and ``profiles.nc`` alone (products can be made
again from the files). The five problems are those of the conceptual model of avalanche
hazard (Statham et al. 2018): new snow, wind slab, persistent slab, deep persistent slab and
wet snow. Each cell at a time either has a problem or not, by the criteria below, and carries
a *sensitivity* in 0–1 from the stability index the problem uses; for the slab problems times
the share of a skier's added shear stress that reaches the weak interface (1 down to 0.94 m,
then falling as 1/D: Föhn 1987, :func:`skier_shear_stress_fohn1987`), so deep slabs, hard to
trigger, rank lower. A group's ``likelihood`` is the area share of its avalanche terrain with
the problem, weighted by that sensitivity.

Criteria (vertical depths; "weak interface" as in the threshold-sum approach):

* **new snow** — the snow deposited in the last 72 h (``new_snow_72h_cm``, settled depth) is
  at least the lower end of the *critical new-snow depth* for its bond to the old surface:
  10–20 cm on a poor bond (an old surface of surface hoar, facets or depth hoar, or a crust or
  ice layer), 20–30 cm otherwise. These are the critical new-snow depths of Swiss forecasting
  practice for unfavourable and mixed conditions (Schweizer et al. 2003, Rev. Geophys. 41,
  section on new snow; recalled from memory; common practice). Index: depth / upper end.
* **wind slab** — recently wind-deposited snow (layers flagged ``wind_packed`` in
  ``profiles.nc``, deposited in the last :data:`WIND_SLAB_RECENT_DAYS` days; ours, common
  practice: wind slabs mostly stabilise within days) forming a slab of at least
  :data:`SLAB_MIN_CM` over a weak interface: the layer below has persistent grains or is a
  crust or ice layer, or is softer by the threshold sum's hardness difference (1.7, Schweizer &
  Jamieson 2007), or the interface scores at or above the critical threshold sum. Wind
  deposition happens on lee cells, so the flag places it. A run whose ``profiles.nc`` has no
  ``wind_packed`` variable does not assess wind slabs: its rows say so (``assessed`` false).
  Index: the threshold sum at the slab's base, over its critical value.
* **persistent slab**, **deep persistent slab** — a persistent weak layer *of concern*
  (:mod:`regionmap.products.concern`: the column model's definition, applied to the snapshot)
  whose top lies at most / more than :data:`DEEP_SLAB_M` (0.94 m) below the surface: the deep
  end of the critical depth window of the threshold sum, below which skier triggering is rare
  (Schweizer & Jamieson 2007; recalled from memory). Below the window the depth criterion
  cannot be met, so a deep layer is of concern when its interfaces reach the same share of the
  five structural criteria (:class:`BelowWindowCriteria`). Index: the threshold sum of the layer's
  bounding interfaces over its maximum (6), so deep layers, lacking the depth criterion, rank
  lower (harder to trigger).
* **wet snow** — the liquid-water index of the column, the thickness-weighted mean volumetric
  liquid water content over 3 % (Mitterer et al. 2011), reaches 1; or liquid water sits on a
  capillary barrier or a persistent weak layer at least :data:`SLAB_MIN_CM` deep (a wet
  layer over one whose grains are 0.75 mm or more coarser — the threshold sum's grain-size
  difference — or of persistent grains); or the pack is wet to the ground (its bottom layer and
  at least half its depth hold water: the pack has become isothermal and wet throughout, when
  wet-snow activity is expected; common practice, e.g. Baggi & Schweizer 2009 [mem]). Index:
  the LWC index, the wetness of the layer on the barrier over the 'wet' class's lower limit
  (3 % by volume, Fierz et al. 2009), or the wet share of the column, whichever is largest.

These are model indicators for trained people, not a hazard rating and not a forecast: field
observations, the local avalanche service and professional standards come first.

References
----------
.. [1] Statham, G. et al. (2018). A conceptual model of avalanche hazard. Natural Hazards 90,
   663-691. doi:10.1007/s11069-017-3070-5
.. [2] Föhn, P. M. B. (1987). The stability index and various triggering mechanisms. IAHS
   Publication 162 (Avalanche Formation, Movement and Effects), 195-214.
.. [3] Schweizer, J., Jamieson, J. B. and Schneebeli, M. (2003). Snow avalanche formation.
   Reviews of Geophysics 41(4), 1016. doi:10.1029/2002RG000123
.. [4] Schweizer, J. and Jamieson, J. B. (2007). A threshold sum approach to stability
   evaluation of manual snow profiles. Cold Regions Science and Technology 47, 50-59.
   doi:10.1016/j.coldregions.2006.08.011
.. [5] Mitterer, C., Hirashima, H. and Schweizer, J. (2011). Wet-snow instabilities:
   comparison of measured and modelled liquid water content and snow stratigraphy. Annals of
   Glaciology 52(58), 201-208. doi:10.3189/172756411797252077
.. [6] Baggi, S. and Schweizer, J. (2009). Characteristics of wet-snow avalanche activity:
   20 years of observations from a high alpine valley (Dischma, Switzerland). Natural Hazards
   50, 97-108. doi:10.1007/s11069-008-9322-7
.. [7] Fierz, C. et al. (2009). The International Classification for Seasonal Snow on the
   Ground. IHP-VII Technical Documents in Hydrology 83, UNESCO-IHP, Paris.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import NamedTuple

import numpy as np
import pandas as pd
import xarray as xr
from numba import njit

from regionmap.cells import COMPASS_16
from regionmap.constants import RHO_WATER_KG_M3
from regionmap.errors import InputError
from regionmap.products.concern import DEFAULT_CRITERIA, ConcernCriteria
from regionmap.products.summaries import (
    _BAND_ASPECT,
    LayerSnapshot,
    _as_utc_array,
    _check_alignment,
    _positions,
    _times_of,
    band_label,
    decode_snapshot,
    running_snowfall_at,
)
from regionmap.snow.codes import CRUST_INDEX, GRAIN_INDEX, PERSISTENT_CODES
from regionmap.snow.stability import (
    DEPTH_WINDOW_M,
    GRAIN_SIZE_DIFF_MIN_MM,
    HARDNESS_DIFF_MIN,
    N_CRITERIA,
    interface_scores_column,
)

__all__ = [
    "PROBLEMS",
    "PROBLEM_LABELS",
    "LIKELIHOOD_CLASSES",
    "DEEP_SLAB_M",
    "SLAB_MIN_CM",
    "WIND_SLAB_RECENT_DAYS",
    "LWC_INDEX_REFERENCE_FRAC",
    "CRITICAL_NEW_SNOW_CM",
    "lwc_index_mitterer2011",
    "skier_shear_stress_fohn1987",
    "skier_reach",
    "BelowWindowCriteria",
    "interface_scores",
    "cell_problems",
    "problem_table",
    "problems_at",
    "likelihood_class",
    "problem_sentences",
    "problem_flags",
]

#: the problems, in the order of the conceptual model of avalanche hazard (Statham et al. 2018)
PROBLEMS: tuple[str, ...] = (
    "new_snow",
    "wind_slab",
    "persistent_slab",
    "deep_persistent_slab",
    "wet_snow",
)
PROBLEM_LABELS: dict[str, str] = {
    "new_snow": "new snow",
    "wind_slab": "wind slab",
    "persistent_slab": "persistent slab",
    "deep_persistent_slab": "deep persistent slab",
    "wet_snow": "wet snow",
}
#: the stability index each problem's sensitivity comes from
PROBLEM_INDEX: dict[str, str] = {
    "new_snow": "new snow 72 h / critical new-snow depth",
    "wind_slab": "threshold sum at the slab's base / critical sum",
    "persistent_slab": "threshold sum of the weak layer / 6",
    "deep_persistent_slab": "threshold sum of the weak layer / 6",
    "wet_snow": "LWC index (Mitterer et al. 2011)",
}
#: weak layers whose top lies deeper than this are deep persistent slabs [m]: the lower edge
#: of the threshold sum's critical depth window, 0.94 m (Schweizer & Jamieson 2007 [mem])
DEEP_SLAB_M: float = DEPTH_WINDOW_M[1]
#: a wind slab or a wet slab needs at least this much snow above its weak interface [cm]
#: (the upper edge of the critical depth window, 0.18 m below the surface; Schweizer &
#: Jamieson 2007 [mem])
SLAB_MIN_CM: float = DEPTH_WINDOW_M[0] * 100.0
#: wind-deposited layers count as a wind slab for this many days after deposition (ours;
#: common practice: wind slabs mostly stabilise within days)
WIND_SLAB_RECENT_DAYS: float = 7.0
#: the skier as a line load on the snow surface [N m-1] (Föhn 1987 [mem])
SKIER_LINE_LOAD_N_M: float = 780.0
#: critical new-snow depth (lower, upper end) [cm] for a poor and a fair bond to the old
#: surface: unfavourable and mixed conditions of Swiss practice (Schweizer et al. 2003 [mem];
#: common practice)
CRITICAL_NEW_SNOW_CM: dict[str, tuple[float, float]] = {"poor": (10.0, 20.0), "fair": (20.0, 30.0)}
#: mean volumetric liquid water content of the column at which the LWC index is 1 (3 %,
#: Mitterer et al. 2011 [mem])
LWC_INDEX_REFERENCE_FRAC: float = 0.03
#: the lower limit of the 'wet' liquid-water class, by volume (Fierz et al. 2009, Table 3.3)
WET_CLASS_FRAC: float = 0.03
#: the column counts as wet to the ground when its bottom layer and at least this share of its
#: depth hold liquid water (ours)
WET_TO_GROUND_SHARE: float = 0.5
#: likelihood classes (terms of Statham et al. 2018) by the likelihood proxy: upper edges (ours)
LIKELIHOOD_CLASSES: tuple[tuple[str, float], ...] = (
    ("unlikely", 0.1),
    ("possible", 0.3),
    ("likely", 0.6),
    ("very likely", np.inf),
)

_PERSISTENT = np.zeros(max(GRAIN_INDEX.values()) + 1, bool)
_PERSISTENT[[GRAIN_INDEX[c] for c in PERSISTENT_CODES]] = True
_IF = GRAIN_INDEX["IF"]
_MFCR = GRAIN_INDEX["MFcr"]
_NO_CRUST = CRUST_INDEX["none"]


# --------------------------------------------------------------------------- physics
def lwc_index_mitterer2011(
    liquid_kg_m2: np.ndarray, thickness_m: np.ndarray, *, axis: int = -1
) -> np.ndarray:
    """Liquid-water-content index of a snow column (Mitterer et al. 2011).

    Parameters
    ----------
    liquid_kg_m2 : ndarray (..., layer) float64
        Liquid water of each layer [kg m-2] (0 in unused slots).
    thickness_m : ndarray (..., layer) float64
        Layer thickness [m] (0 in unused slots).
    axis : the layer axis.

    Returns
    -------
    ndarray (...) float64
        Thickness-weighted mean volumetric liquid water content of the column divided by 3 %
        [1]; NaN where the column has no snow.

    Notes
    -----
    LWC_index = θ̄_w / 0.03 with θ̄_w = Σ θ_k h_k / Σ h_k = (Σ L_k / ρ_w) / H; an index of 1
    marked the onset of wet-snow avalanche activity in Mitterer et al. (2011), Ann. Glaciol.
    52(58), 201-208, doi:10.3189/172756411797252077 (recalled from memory).
    """
    water_m = np.sum(np.asarray(liquid_kg_m2, dtype=np.float64), axis=axis) / RHO_WATER_KG_M3
    depth_m = np.sum(np.asarray(thickness_m, dtype=np.float64), axis=axis)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(depth_m > 0, water_m / depth_m / LWC_INDEX_REFERENCE_FRAC, np.nan)


def skier_shear_stress_fohn1987(
    depth_m, slope_deg, *, line_load_n_m: float = SKIER_LINE_LOAD_N_M
) -> np.ndarray:
    """Largest added shear stress of a skier in a weak layer at depth ``depth_m`` (Föhn 1987).

    Parameters
    ----------
    depth_m : array_like float
        Slab thickness above the weak layer [m] (> 0).
    slope_deg : array_like float
        Slope angle ψ [deg].
    line_load_n_m : float
        The skier as a line load R on the snow surface [N m-1]; 780 N m-1 for a skier of
        about 80 kg on 1.5 m long skis, dynamic (Föhn 1987 [mem]).

    Returns
    -------
    ndarray float64
        max over α of Δτ_xz = 2 R cos α sin² α sin(α + ψ) / (π D) [Pa], α the angle from the
        surface normal to the point in the layer, searched on 0.1° steps.

    Notes
    -----
    The slab and weak layer as a homogeneous elastic half-space under a line load (Flamant's
    solution), after Föhn, P. M. B. (1987), The stability index and various triggering
    mechanisms, IAHS Publication 162, 195-214; used in the skier stability index of Jamieson
    & Johnston (1998), Annals of Glaciology 26, 296-302, doi:10.3189/1998AoG26-1-296-302.
    The stress falls as 1/D with depth.
    """
    alpha = np.deg2rad(np.arange(0.0, 90.0, 0.1))
    psi = np.deg2rad(np.asarray(slope_deg, dtype=np.float64))[..., None]
    shape = np.cos(alpha) * np.sin(alpha) ** 2 * np.sin(alpha + psi)
    depth = np.asarray(depth_m, dtype=np.float64)
    return 2.0 * line_load_n_m * shape.max(axis=-1) / (np.pi * depth)


def skier_reach(depth_cm) -> np.ndarray:
    """Share of the skier's added shear stress that reaches a weak layer at ``depth_cm``,
    relative to a layer at the deep end of the critical depth window (0.94 m): 1 down to
    it, then DEEP_SLAB_M / D, the 1/D decay of :func:`skier_shear_stress_fohn1987` [1]."""
    depth_m = np.asarray(depth_cm, dtype=np.float64) / 100.0
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(depth_m > DEEP_SLAB_M, DEEP_SLAB_M / depth_m, 1.0)


@dataclass(frozen=True)
class BelowWindowCriteria(ConcernCriteria):
    """:class:`~regionmap.products.concern.ConcernCriteria` for weak layers below the critical
    depth window (deeper than 0.94 m), where the depth criterion cannot be met: the critical
    score is the same share of the five criteria left (relative sum 4.8 × 5/6 = 4.0; count:
    all five), so that a deep weak layer is judged by its structure."""

    @property
    def critical_score(self) -> float:
        return super().critical_score * (N_CRITERIA - 1) / N_CRITERIA


@njit(cache=True, nogil=True, error_model="numpy")
def _interface_scores(
    layer_count, thickness_m, grain_size_mm, hardness_index, grain_code, relative, scores
):
    """Threshold score of every interface k (top of layer k) of many columns (rows), NaN at
    and above the top layer (:func:`regionmap.snow.stability.interface_scores_column`)."""
    n_col, n_layer = thickness_m.shape
    scratch = np.empty((N_CRITERIA + 1, max(n_layer, 1)))
    for c in range(n_col):
        for k in range(n_layer):
            scores[c, k] = np.nan
        n = min(max(layer_count[c], 0), n_layer)
        if n >= 2:
            interface_scores_column(
                n,
                thickness_m[c],
                grain_size_mm[c],
                hardness_index[c],
                grain_code[c],
                relative,
                scratch,
                scores[c],
            )


def interface_scores(snap: LayerSnapshot, criteria: ConcernCriteria) -> np.ndarray:
    """(cell, day, layer) threshold score of the interface at the top of each layer, 0..6
    (relative sum or count as ``criteria.relative`` says); NaN at and above the top layer."""
    shape = (snap.valid.shape[0] * snap.valid.shape[1], snap.valid.shape[2])
    scores = np.empty(shape)
    _interface_scores(
        np.ascontiguousarray(snap.layer_count, dtype=np.int64).reshape(-1),
        np.ascontiguousarray(snap.thickness_m, dtype=np.float64).reshape(shape),
        np.ascontiguousarray(snap.grain_size_mm, dtype=np.float64).reshape(shape),
        np.ascontiguousarray(snap.hardness_index, dtype=np.float64).reshape(shape),
        np.ascontiguousarray(snap.grain, dtype=np.int64).reshape(shape),
        criteria.relative,
        scores,
    )
    return scores.reshape(snap.valid.shape)


def _run_tops(concern: np.ndarray, scores: np.ndarray) -> np.ndarray:
    """At the top layer of each run of layers of concern, the better score of the run's two
    bounding interfaces (above its top, below its bottom); 0 elsewhere."""
    layer = np.arange(concern.shape[-1])
    below = np.concatenate([np.zeros_like(concern[..., :1]), concern[..., :-1]], axis=-1)
    above = np.concatenate([concern[..., 1:], np.zeros_like(concern[..., :1])], axis=-1)
    bottom = np.maximum.accumulate(np.where(concern & ~below, layer, -1), axis=-1)
    under = np.take_along_axis(np.nan_to_num(scores), np.maximum(bottom - 1, 0), axis=-1)
    under = np.where(bottom >= 1, under, 0.0)
    return np.where(concern & ~above, np.maximum(np.nan_to_num(scores), under), 0.0)


# --------------------------------------------------------------------------- per cell
def _take(a: np.ndarray, idx: np.ndarray, fill=np.nan) -> np.ndarray:
    """``a[..., idx]`` per row (``fill`` where idx < 0)."""
    got = np.take_along_axis(a, np.maximum(idx, 0)[..., None], axis=-1)[..., 0]
    return np.where(idx >= 0, got, fill)


def _top_index(mask: np.ndarray) -> np.ndarray:
    """Index of the uppermost True layer of each row, -1 where none."""
    n = mask.shape[-1]
    last = n - 1 - np.argmax(mask[..., ::-1], axis=-1)
    return np.where(mask.any(axis=-1), last, -1)


@dataclass(frozen=True)
class _Columns:
    """Layer fields of snapshot columns, arrays (cell, time, layer) bottom first, and what
    the indicators share: the threshold score of each interface (top of layer k) and the
    runs of weak layers of concern."""

    time_s: np.ndarray  # (1, time, 1) int64 valid times
    valid: np.ndarray
    thickness_m: np.ndarray
    depth_cm: np.ndarray  # of the layer's top below the surface
    grain: np.ndarray
    hardness: np.ndarray
    grain_mm: np.ndarray
    liquid_kg_m2: np.ndarray
    deposition_s: np.ndarray
    wind_packed: np.ndarray | None
    persistent: np.ndarray
    hard_surface: np.ndarray  # crusts and ice
    scores: np.ndarray
    critical: float
    concern: np.ndarray  # at the top of each run of concern, its bounding score; else 0
    concern_deep: np.ndarray  # the same by the criteria below the depth window

    @property
    def snow_depth_cm(self) -> np.ndarray:
        return self.thickness_m.sum(axis=2) * 100.0


class _Indicator(NamedTuple):
    """One problem of every cell and time (cell, time): presence, sensitivity 0-1, the
    stability index, the depth of the weak interface [cm]; new snow also the bond."""

    present: np.ndarray
    sensitivity: np.ndarray
    index: np.ndarray
    depth_cm: np.ndarray
    bond: np.ndarray | None = None


def _read_columns(
    profiles: xr.Dataset, days: np.ndarray, want: np.ndarray, criteria: ConcernCriteria
) -> _Columns:
    """Decode the snapshots ``days`` (one per wanted time) and score their interfaces."""
    snap = decode_snapshot(profiles, days)
    valid = snap.valid
    wind = None
    if "wind_packed" in profiles.variables:
        flag = profiles["wind_packed"].isel(day=days).transpose("cell", "day", "layer")
        wind = valid & (flag.values.astype(np.float64) == 1.0)
    liquid = profiles["liquid_kg_m2"].isel(day=days).transpose("cell", "day", "layer").values
    grain = snap.grain.astype(np.int64)
    scores = interface_scores(snap, criteria)
    return _Columns(
        time_s=want.astype(np.int64)[None, :, None],
        valid=valid,
        thickness_m=snap.thickness_m,
        depth_cm=snap.depth_cm,
        grain=grain,
        hardness=np.where(valid, snap.hardness_index, np.nan),
        grain_mm=np.where(valid, snap.grain_size_mm, np.nan),
        liquid_kg_m2=np.where(valid, np.nan_to_num(liquid.astype(np.float64)), 0.0),
        deposition_s=snap.deposition_s,
        wind_packed=wind,
        persistent=valid & _PERSISTENT[grain],
        hard_surface=valid & ((snap.crust != _NO_CRUST) | (grain == _IF) | (grain == _MFCR)),
        scores=scores,
        critical=criteria.critical_score,
        concern=_run_tops(snap.of_concern(criteria), scores),
        concern_deep=_run_tops(snap.of_concern(BelowWindowCriteria(**asdict(criteria))), scores),
    )


def _new_snow(col: _Columns, new_snow_72h_cm: np.ndarray) -> _Indicator:
    """New snow of the last 72 h against the critical new-snow depth of its bond."""
    recent = col.valid & (col.deposition_s > col.time_s - 72 * 3600)
    old = _top_index(col.valid & ~recent)  # the old snow surface
    poor = _take(col.persistent | col.hard_surface, old, False).astype(bool)
    bond = np.where(old < 0, "none", np.where(poor, "poor", "fair"))
    low = np.where(poor, CRITICAL_NEW_SNOW_CM["poor"][0], CRITICAL_NEW_SNOW_CM["fair"][0])
    high = np.where(poor, CRITICAL_NEW_SNOW_CM["poor"][1], CRITICAL_NEW_SNOW_CM["fair"][1])
    ratio = new_snow_72h_cm / high
    depth = np.where(old >= 0, _take(col.depth_cm, old), col.snow_depth_cm)
    return _Indicator(new_snow_72h_cm >= low, ratio * skier_reach(depth), ratio, depth, bond)


def _wind_slab(col: _Columns) -> _Indicator | None:
    """Recent wind-deposited slab over a weak interface; None without the wind flag."""
    if col.wind_packed is None:
        return None
    wind = col.wind_packed & (col.deposition_s > col.time_s - int(WIND_SLAB_RECENT_DAYS * 86400))
    top = _top_index(wind)
    # the lowest layer of the uppermost run of wind-deposited layers, and the one under it
    gap = (np.arange(wind.shape[2]) <= top[..., None]) & ~wind
    base = np.where(top >= 0, np.where(gap.any(axis=2), _top_index(gap) + 1, 0), -1)
    under = base - 1
    slab_cm = np.where(base >= 1, _take(col.depth_cm, under), np.nan)
    score = _take(col.scores, under, 0.0)
    weak = (
        _take(col.persistent | col.hard_surface, under, False).astype(bool)
        | (_take(col.hardness, base) - _take(col.hardness, under) >= HARDNESS_DIFF_MIN)
        | (score >= col.critical)
    )
    present = (base >= 1) & weak & (slab_cm >= SLAB_MIN_CM)
    index = score / col.critical
    return _Indicator(present, index * skier_reach(slab_cm), index, slab_cm)


def _persistent_slabs(col: _Columns) -> tuple[_Indicator, _Indicator]:
    """The uppermost weak layer of concern within and below the depth window."""
    deep = col.depth_cm > DEEP_SLAB_M * 100.0
    out = []
    for runs, where in ((col.concern, ~deep), (col.concern_deep, deep)):
        k = _top_index((runs > 0) & where)  # the top layer of the uppermost run of concern
        index = _take(runs, k, 0.0) / N_CRITERIA
        depth = _take(col.depth_cm, k)
        out.append(_Indicator(k >= 0, index * skier_reach(depth), index, depth))
    return out[0], out[1]


def _wet_snow(col: _Columns) -> _Indicator:
    """LWC index of the column; water on a capillary barrier or weak layer; wet to the ground."""
    lwc_index = np.nan_to_num(lwc_index_mitterer2011(col.liquid_kg_m2, col.thickness_m))
    theta = np.where(
        col.valid & (col.thickness_m > 0),
        col.liquid_kg_m2 / (RHO_WATER_KG_M3 * np.maximum(col.thickness_m, 1e-9)),
        0.0,
    )
    theta_above = np.concatenate([theta[..., 1:], np.zeros_like(theta[..., :1])], axis=2)
    size_above = np.concatenate(
        [col.grain_mm[..., 1:], np.full_like(col.grain_mm[..., :1], np.nan)], axis=2
    )
    # a capillary barrier (coarser than the layer above) or a persistent weak layer, with
    # water in the layer above it (or, for the weak layer, in itself), under a slab
    barrier = col.valid & ((col.grain_mm - size_above >= GRAIN_SIZE_DIFF_MIN_MM) | col.persistent)
    wetted = (theta_above > 0) | (col.persistent & (theta > 0))
    k = _top_index(barrier & wetted & (col.depth_cm >= SLAB_MIN_CM))
    theta_on = np.maximum(
        _take(theta_above, k, 0.0), _take(np.where(col.persistent, theta, 0.0), k, 0.0)
    )
    depth_cm = col.snow_depth_cm
    wet_cm = ((theta > 0) * col.thickness_m).sum(axis=2) * 100.0
    wet_share = np.where(depth_cm > 0, wet_cm / np.maximum(depth_cm, 1e-9), 0.0)
    to_ground = (theta[..., 0] > 0) & (wet_share >= WET_TO_GROUND_SHARE)
    present = ((lwc_index >= 1.0) | (k >= 0) | to_ground) & (depth_cm > 0)
    sensitivity = np.maximum.reduce(
        [lwc_index, theta_on / WET_CLASS_FRAC, np.where(to_ground, wet_share, 0.0)]
    )
    return _Indicator(
        present, sensitivity, lwc_index, np.where(k >= 0, _take(col.depth_cm, k), depth_cm)
    )


#: cells whose snapshots are decoded together (bounds the memory of the layer arrays)
_CELL_BLOCK = 4096


def cell_problems(
    diag: xr.Dataset,
    profiles: xr.Dataset,
    table: pd.DataFrame,
    times,
    *,
    criteria: ConcernCriteria = DEFAULT_CRITERIA,
) -> pd.DataFrame:
    """The avalanche problems of every cell at each of ``times`` (module notes).

    Parameters
    ----------
    diag, profiles : the run's ``cells.nc`` and ``profiles.nc`` Datasets; the snapshot used at
        a time is the last one at or before it.
    table : cell table indexed by ``cell_id`` in ``cells.nc`` order.
    times : datetime-likes [UTC], output times of ``diag``.
    criteria : what makes a weak layer one of concern (the run's ``[snow]`` settings; the
        column model's defaults).

    Returns
    -------
    DataFrame, one row per cell × time × problem: ``cell_id``, ``valid_time``, ``problem``,
    ``assessed`` (False for wind slab without wind-transport flags), ``present`` (bool),
    ``sensitivity`` (0–1, the index scaled, NaN where absent), ``index_value`` (the problem's
    stability index), ``depth_cm`` (vertical depth of its weak interface, or of the wet
    layer's barrier; for wet snow by the LWC index alone, the snow depth), ``load_24h_kg_m2``,
    ``load_72h_kg_m2`` (snowfall of the last 24 / 72 h) and for new snow ``bond``
    (``poor``/``fair``/``none``).
    """
    _check_alignment(diag, table, profiles)
    t_all = _times_of(diag)
    want = _as_utc_array(times)
    pos = _positions(t_all, want, "the avalanche-problem times")
    day = profiles["day"].values.astype("datetime64[s]")
    d = np.searchsorted(day, want, side="right") - 1
    if (d < 0).any():
        raise InputError(
            f"profiles.nc: no layer snapshot at or before {want[d < 0][0]} for the avalanche "
            "problems"
        )
    if "new_snow_72h_cm" not in diag.variables:
        raise InputError("cells.nc: missing variable 'new_snow_72h_cm' (see docs/outputs.md)")
    # snowfall of the last 24 / 72 h at each time
    back = [
        np.searchsorted(t_all, want - np.timedelta64(h * 3600, "s"), side="right") - 1
        for h in (24, 72)
    ]
    c_now, c_24, c_72 = np.split(running_snowfall_at(diag, np.concatenate([pos, *back])), 3, axis=1)
    frames = []
    n_cell = diag.sizes["cell"]
    for lo in range(0, n_cell, _CELL_BLOCK):
        block = slice(lo, min(lo + _CELL_BLOCK, n_cell))
        col = _read_columns(profiles.isel(cell=block), d, want, criteria)
        hn72 = diag["new_snow_72h_cm"].isel(cell=block, time=pos).transpose("cell", ...).values
        persistent, deep = _persistent_slabs(col)
        found = {
            "new_snow": _new_snow(col, np.nan_to_num(hn72.astype(np.float64))),
            "wind_slab": _wind_slab(col),
            "persistent_slab": persistent,
            "deep_persistent_slab": deep,
            "wet_snow": _wet_snow(col),
        }
        ids = np.repeat(table.index.to_numpy()[block], want.size)
        common = {
            "cell_id": ids,
            "valid_time": np.tile(want, ids.size // want.size),
            "load_24h_kg_m2": (c_now - c_24)[block].reshape(-1),
            "load_72h_kg_m2": (c_now - c_72)[block].reshape(-1),
        }
        for problem in PROBLEMS:
            frames.append(_indicator_rows(problem, found[problem], common))
    out = pd.concat(frames, ignore_index=True)
    out["problem"] = pd.Categorical(out["problem"], categories=PROBLEMS)
    return out.sort_values(["cell_id", "valid_time", "problem"], ignore_index=True)


def _indicator_rows(problem: str, found: _Indicator | None, common: dict) -> pd.DataFrame:
    """The :func:`cell_problems` rows of one problem (not assessed when ``found`` is None)."""
    frame = pd.DataFrame(common)
    frame.insert(2, "problem", problem)
    frame.insert(3, "assessed", found is not None)
    if found is None:
        frame.insert(4, "present", False)
        for name in ("sensitivity", "index_value", "depth_cm"):
            frame[name] = np.nan
        frame["bond"] = ""
        return frame
    present = found.present.reshape(-1)
    frame.insert(4, "present", present)

    def where_present(v) -> np.ndarray:
        return np.where(present, np.asarray(v, dtype=np.float64).reshape(-1), np.nan)

    frame["sensitivity"] = np.clip(where_present(found.sensitivity), 0.0, 1.0)
    frame["index_value"] = where_present(found.index)
    frame["depth_cm"] = where_present(found.depth_cm)
    frame["bond"] = "" if found.bond is None else found.bond.reshape(-1)
    return frame


# --------------------------------------------------------------------------- per group
def likelihood_class(likelihood) -> np.ndarray:
    """Class names of likelihood proxies (:data:`LIKELIHOOD_CLASSES`; "" where NaN)."""
    x = np.asarray(likelihood, dtype=np.float64)
    names = np.array([c for c, _ in LIKELIHOOD_CLASSES], dtype=object)
    edges = np.array([e for _, e in LIKELIHOOD_CLASSES[:-1]])
    return np.where(np.isfinite(x), names[np.searchsorted(edges, x, side="right")], "")


PROBLEM_COLUMNS = [
    "zone",
    "band",
    "band_lower_m",
    "band_upper_m",
    "aspect_sector",
    "problem",
    "assessed",
    "present_frac",
    "area_km2",
    "depth_min_cm",
    "depth_max_cm",
    "likelihood",
    "likelihood_class",
    "stability_index",
    "index_mean",
    "load_24h_kg_m2",
    "load_72h_kg_m2",
    "poor_bond_frac",
    "terrain_km2",
    "valid_time",
    "is_forecast",
    "note",
]


def problem_table(cells: pd.DataFrame, table: pd.DataFrame, weight_km2) -> pd.DataFrame:
    """Summary of :func:`cell_problems` rows per zone × band × aspect and per zone.

    Parameters
    ----------
    cells : :func:`cell_problems` rows (one valid time).
    table : cell table indexed by ``cell_id``.
    weight_km2 : (cell,) area weights [km2] (avalanche terrain in the run).

    Returns
    -------
    DataFrame with :data:`PROBLEM_COLUMNS` (``is_forecast`` and ``valid_time`` filled by the
    caller when missing): one row per group with terrain of the weighting and problem, and a
    zone-wide row per problem (``band`` = ``aspect_sector`` = ``all``). ``present_frac`` and
    ``area_km2`` [km2] where the problem is present; ``depth_min_cm``/``depth_max_cm`` the
    range of its weak interface's vertical depth over those cells; ``likelihood`` the
    sensitivity-weighted area share (0–1) and ``likelihood_class``; ``index_mean`` the
    area-mean stability index where present; loads the area means of the last 24 / 72 h of
    snowfall; ``poor_bond_frac`` (new snow) the share of its area with a poor bond;
    ``terrain_km2`` the group's weighted area. Not-assessed problems have NaN values and a
    ``note``.
    """
    w_all = pd.Series(np.asarray(weight_km2, dtype=np.float64), index=table.index)
    rows = cells.merge(table[_BAND_ASPECT], left_on="cell_id", right_index=True)
    rows["_w"] = w_all.reindex(rows["cell_id"]).to_numpy()
    pres = rows["present"].to_numpy(bool)
    w = rows["_w"].to_numpy()
    rows["_wp"] = np.where(pres, w, 0.0)
    rows["_wl"] = np.where(pres, w * np.nan_to_num(rows["sensitivity"].to_numpy()), 0.0)
    rows["_wi"] = np.where(pres, w * np.nan_to_num(rows["index_value"].to_numpy()), 0.0)
    rows["_wb"] = np.where(pres & (rows["bond"].to_numpy() == "poor"), w, 0.0)
    for load in ("load_24h_kg_m2", "load_72h_kg_m2"):
        rows[f"_w{load}"] = w * np.nan_to_num(rows[load].to_numpy())
    rows["_dmin"] = np.where(pres & (w > 0), rows["depth_cm"], np.nan)
    rows["_dmax"] = rows["_dmin"]
    out = []
    for keys in (_BAND_ASPECT, ["zone"]):
        g = rows.groupby([*keys, "problem"], observed=True, dropna=False, sort=True)
        agg = g.agg(
            terrain_km2=("_w", "sum"),
            area_km2=("_wp", "sum"),
            _wl=("_wl", "sum"),
            _wi=("_wi", "sum"),
            _wb=("_wb", "sum"),
            _w24=("_wload_24h_kg_m2", "sum"),
            _w72=("_wload_72h_kg_m2", "sum"),
            depth_min_cm=("_dmin", "min"),
            depth_max_cm=("_dmax", "max"),
            assessed=("assessed", "all"),
        ).reset_index()
        agg = agg[agg["terrain_km2"] > 0].copy()
        tot, area = agg["terrain_km2"], agg["area_km2"]
        agg["present_frac"] = area / tot
        agg["likelihood"] = agg["_wl"] / tot
        agg["index_mean"] = (agg["_wi"] / area).where(area > 0)
        agg["poor_bond_frac"] = (agg["_wb"] / area).where(
            (area > 0) & (agg["problem"] == "new_snow")
        )
        agg["load_24h_kg_m2"] = agg["_w24"] / tot
        agg["load_72h_kg_m2"] = agg["_w72"] / tot
        if keys == ["zone"]:
            agg["band_lower_m"], agg["band_upper_m"] = np.nan, np.nan
            agg["band"], agg["aspect_sector"] = "all", "all"
        else:
            agg["band"] = band_label(agg["band_lower_m"], agg["band_upper_m"])
        out.append(agg)
    res = pd.concat(out, ignore_index=True)
    not_assessed = ~res["assessed"].astype(bool)
    for col in (
        "present_frac",
        "area_km2",
        "likelihood",
        "index_mean",
        "depth_min_cm",
        "depth_max_cm",
    ):
        res.loc[not_assessed, col] = np.nan
    res["likelihood_class"] = np.where(
        not_assessed,
        "not assessed",
        np.where(res["present_frac"] > 0, likelihood_class(res["likelihood"]), "none"),
    )
    res["stability_index"] = res["problem"].astype(str).map(PROBLEM_INDEX)
    res["note"] = np.where(
        not_assessed,
        "not assessed: profiles.nc has no wind_packed layers (wind transport off in this run)",
        "",
    )
    res["problem"] = res["problem"].astype(str)
    for col in ("valid_time", "is_forecast"):
        if col not in res.columns:
            res[col] = pd.NaT if col == "valid_time" else False
    order = {p: i for i, p in enumerate(PROBLEMS)}
    res["_order"] = res["problem"].map(order)
    res = res.sort_values(
        ["zone", "_order", "band_lower_m", "aspect_sector"], na_position="first", ignore_index=True
    )
    return res[PROBLEM_COLUMNS]


def problems_at(
    diag: xr.Dataset,
    profiles: xr.Dataset,
    table: pd.DataFrame,
    weight_km2,
    *,
    time,
    criteria: ConcernCriteria = DEFAULT_CRITERIA,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """The problems table (:func:`problem_table`) at ``time`` and the per-cell rows it was
    made from (:func:`cell_problems`)."""
    cells = cell_problems(diag, profiles, table, [time], criteria=criteria)
    res = problem_table(cells, table, weight_km2)
    t_all = _times_of(diag)
    want = _as_utc_array(time)[:1]
    pos = _positions(t_all, want, "the avalanche-problem time")[0]
    res["valid_time"] = want[0]
    res["is_forecast"] = (
        bool(diag["is_forecast"].values[pos]) if "is_forecast" in diag.variables else False
    )
    return res, cells


def problem_flags(cells: pd.DataFrame) -> pd.DataFrame:
    """Per cell (index ``cell_id``), ``<problem>_present`` as 1.0 / 0.0 from
    :func:`cell_problems` rows of one time; NaN where the problem is not assessed."""
    value = np.where(cells["assessed"].to_numpy(bool), cells["present"].to_numpy(float), np.nan)
    wide = (
        cells.assign(_v=value)
        .pivot(index="cell_id", columns="problem", values="_v")
        .reindex(columns=list(PROBLEMS))
    )
    wide.columns = [f"{p}_present" for p in wide.columns]
    return wide


def problem_sentences(problems: pd.DataFrame, *, min_present_frac: float = 0.1) -> pd.Series:
    """One line per zone naming its problems, from the zone-wide rows: "persistent slab,
    likely (45 % of avalanche terrain, weak layer 60-85 cm deep, mostly N-E 2100-2400 m);
    …", most likely first; problems on less than ``min_present_frac`` of the area are left
    out, a not-assessed wind slab is named as such. Index: zone."""
    zone_rows = problems[problems["aspect_sector"] == "all"]
    groups = problems[problems["aspect_sector"] != "all"]
    lines = {}
    for zone, rows in zone_rows.groupby("zone", sort=True):
        parts = []
        rows = rows.sort_values("likelihood", ascending=False, na_position="last")
        for r in rows.itertuples():
            label = PROBLEM_LABELS[r.problem]
            if not r.assessed:
                parts.append(f"{label} not assessed (no wind transport in this run)")
                continue
            if not r.present_frac >= min_present_frac:
                continue
            where = groups[(groups["zone"] == zone) & (groups["problem"] == r.problem)]
            where = where[where["present_frac"] >= 0.5]
            aspects = _aspect_text(where["aspect_sector"])
            bands = where["band_lower_m"].to_numpy(float), where["band_upper_m"].to_numpy(float)
            elev = _elevation_text(*bands)
            depth = (
                f"{r.depth_min_cm:.0f}-{r.depth_max_cm:.0f} cm deep"
                if np.isfinite(r.depth_min_cm)
                else ""
            )
            detail = ", ".join(
                x
                for x in (
                    f"{r.present_frac * 100:.0f} % of avalanche terrain",
                    depth,
                    " ".join(x for x in (aspects, elev) if x),
                )
                if x
            )
            parts.append(f"{label}, {r.likelihood_class} ({detail})")
        lines[zone] = "; ".join(parts) if parts else "no avalanche problem indicated"
    return pd.Series(lines, name="problems", dtype=object)


def _aspect_text(sectors: pd.Series) -> str:
    named = [s for s in COMPASS_16 if s in set(sectors)]
    if not named:
        return ""
    if len(named) >= 6:
        return "most aspects"
    return "/".join(named)


def _elevation_text(lo: np.ndarray, hi: np.ndarray) -> str:
    if lo.size == 0:
        return ""
    low = np.nanmin(np.where(np.isfinite(lo), lo, np.nan)) if np.isfinite(lo).any() else -np.inf
    high = np.nanmax(np.where(np.isfinite(hi), hi, np.nan)) if np.isfinite(hi).any() else np.inf
    if not np.isfinite(lo).all():
        low = -np.inf
    if not np.isfinite(hi).all():
        high = np.inf
    if np.isfinite(low) and np.isfinite(high):
        return f"{low:.0f}-{high:.0f} m"
    if np.isfinite(low):
        return f"above {low:.0f} m"
    if np.isfinite(high):
        return f"below {high:.0f} m"
    return "all elevations"

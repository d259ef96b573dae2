"""Per-cell diagnostics of one column (compiled): structure a forecaster reads.

Crust counts (contiguous runs of counted crust layers count once), depth hoar, the uppermost
persistent weak layer of concern, surface wetness class (Fierz et al. 2009) and the worst
interface's structural threshold count (:mod:`regionmap.snow.stability`).

A *persistent weak layer of concern* is a run of layers of persistent grain type (FC, FCxr,
FCsf, DH, SH; Schweizer & Jamieson 2007) at least ``pwl_min_thickness_m`` thick (buried
surface hoar at any thickness: it is millimetres thin), with grains of at least
``pwl_min_grain_mm``, under a slab at least ``pwl_min_depth_m`` deep, and one of its two
bounding interfaces scoring at or above the critical value of the threshold count
(:data:`regionmap.snow.stability.CRITICAL_COUNT_ABSOLUTE`, or
:data:`~regionmap.snow.stability.CRITICAL_SUM_RELATIVE` for the relative sum of Monti et al.
2014). Persistent layers that miss one of these are not counted. Model output is
guidance for trained people, never a substitute for field observations, the local avalanche
service or professional standards.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from regionmap.constants import RHO_WATER_KG_M3
from regionmap.snow.codes import GRAIN_INDEX
from regionmap.snow.crusts import counts_as_crust
from regionmap.snow.hardness import hardness_index_from_density, hardness_index_from_density_array
from regionmap.snow.layering import F_GRAIN, F_ICE, F_LIQ, F_THICK, I_CODE, I_CRUST
from regionmap.snow.stability import (
    CRITICAL_COUNT_ABSOLUTE,
    CRITICAL_SUM_RELATIVE,
    N_CRITERIA,
    interface_scores_column,
)
from regionmap.snow.vecmath import padded_count

__all__ = [
    "wetness_class_fierz2009",
    "layer_hardness",
    "column_structure",
    "layer_hardness_array",
    "mark_weak_layers_of_concern",
    "N_SCRATCH_ROWS",
]

#: grain indices of the classification table (module-level ints: constants to the compiled code)
_FC, _FCXR, _FCSF, _DH, _SH = (GRAIN_INDEX[c] for c in ("FC", "FCxr", "FCsf", "DH", "SH"))

# indices into the structure output vector
S_CRUST, S_CRUST_MF, S_CRUST_SUN, S_CRUST_RAIN, S_CRUST_GLAZE = 0, 1, 2, 3, 4
S_DH_THICK_M, S_PWL, S_PWL_DEPTH_M, S_PWL_THICK_M, S_PWL_GRAIN_MM, S_PWL_CODE = 5, 6, 7, 8, 9, 10
S_TC_MAX, S_TC_DEPTH_M, S_WETNESS = 11, 12, 13
N_STRUCT = 14
#: rows of the scratch array :func:`column_structure` needs (shape (N_SCRATCH_ROWS, layer))
N_SCRATCH_ROWS = N_CRITERIA + 2


@njit(cache=True, nogil=True, error_model="numpy")
def wetness_class_fierz2009(liquid_volume_frac):
    """Liquid-water-content class (Fierz et al. 2009, Table 3.3 [src]).

    0 dry (0), 1 moist (0-3 %), 2 wet (3-8 %), 3 very wet (8-15 %), 4 soaked (> 15 %) by volume.
    """
    if liquid_volume_frac <= 0.0:
        return 0
    if liquid_volume_frac <= 0.03:
        return 1
    if liquid_volume_frac <= 0.08:
        return 2
    if liquid_volume_frac <= 0.15:
        return 3
    return 4


@njit(cache=True, nogil=True, error_model="numpy")
def _is_persistent(code):
    return code == _FC or code == _FCXR or code == _FCSF or code == _DH or code == _SH


@njit(cache=True, nogil=True, error_model="numpy")
def mark_weak_layers_of_concern(
    n,
    thickness_m,
    grain_size_mm,
    grain_code,
    scores,
    critical,
    min_depth_m,
    min_thickness_m,
    min_grain_mm,
    mark,
):
    """Mark the persistent weak layers of concern of one column (module notes).

    Parameters
    ----------
    n : int
        Active layers, bottom first.
    thickness_m, grain_size_mm : ndarray (>= n,) float64
        Layer thickness [m] and grain size [mm].
    grain_code : ndarray (>= n,) int
        Indices into GRAIN_CODES.
    scores : ndarray (>= n - 1,) float64
        Threshold score of interface k (top of layer k), 0..6.
    critical : float
        Score at or above which an interface is critical.
    min_depth_m, min_thickness_m, min_grain_mm : float
        Slab above the run [m], thickness of the run [m] (buried SH at any thickness) and
        its coarsest grains [mm].
    mark : ndarray (>= n,) float64
        Written: 1 for each layer of a run of concern, else 0.

    Returns
    -------
    int
        Index of the top layer of the uppermost run of concern, -1 when none.
    """
    for k in range(n):
        mark[k] = 0.0
    top = -1
    depth = 0.0
    i = n - 1
    while i >= 0:
        if not _is_persistent(grain_code[i]):
            depth += thickness_m[i]
            i -= 1
            continue
        # a run of persistent layers from i down to j + 1
        thick = 0.0
        grain = 0.0
        has_sh = False
        j = i
        while j >= 0 and _is_persistent(grain_code[j]):
            thick += thickness_m[j]
            grain = max(grain, grain_size_mm[j])
            has_sh = has_sh or grain_code[j] == _SH
            j -= 1
        score = scores[i] if i < n - 1 else 0.0  # the interface above the run
        if j >= 0:
            score = max(score, scores[j])  # and the one below it
        if (
            depth >= min_depth_m
            and (thick >= min_thickness_m or has_sh)
            and grain >= min_grain_mm
            and score >= critical
        ):
            for k in range(j + 1, i + 1):
                mark[k] = 1.0
            if top < 0:
                top = i
        depth += thick
        i = j
    return top


@njit(cache=True, nogil=True, error_model="numpy")
def layer_hardness(fw, iw, n, out):
    """Hand-hardness index of each active layer from its dry density (ice mass per volume)
    and grain class (Geldsetzer & Jamieson 2000 within field ranges, via hardness.py)."""
    for i in range(padded_count(n)):  # vectorises; ``out`` has room (vecmath.padded_count)
        dens = fw[F_ICE, i] / max(fw[F_THICK, i], 1e-9)
        out[i] = hardness_index_from_density(dens, iw[I_CODE, i], iw[I_CRUST, i])


@njit(cache=True, nogil=True, error_model="numpy")
def column_structure(
    fw,
    iw,
    n,
    hardness,
    crust_min_thickness_m,
    crust_min_hardness,
    pwl_min_depth_m,
    pwl_min_thickness_m,
    pwl_min_grain_mm,
    relative,
    scratch,
    out,
):
    """Fill ``out`` (N_STRUCT,) with crust counts, DH, PWL and threshold-count diagnostics.

    ``hardness`` (layer,) is the hardness of each layer from :func:`layer_hardness`;
    ``scratch`` (N_SCRATCH_ROWS, layer) float64 work space for the threshold count
    (:func:`regionmap.snow.stability.interface_scores_column`), reused between calls so the
    hourly diagnostics allocate nothing. The PWL entries describe the uppermost persistent
    weak layer of concern (module notes).
    """
    for k in range(N_STRUCT):
        out[k] = 0.0
    # crusts: contiguous runs of crust layers count once, kind of the run's thickest layer
    i = n - 1
    while i >= 0:
        wet = fw[F_LIQ, i] > 0.0
        if iw[I_CRUST, i] != 0 and not wet:
            run_thick = 0.0
            run_hard = 0.0
            kind = iw[I_CRUST, i]
            kind_thick = 0.0
            while i >= 0 and iw[I_CRUST, i] != 0 and not fw[F_LIQ, i] > 0.0:
                run_thick += fw[F_THICK, i]
                run_hard = max(run_hard, hardness[i])
                if fw[F_THICK, i] > kind_thick:
                    kind_thick = fw[F_THICK, i]
                    kind = iw[I_CRUST, i]
                i -= 1
            if counts_as_crust(
                kind, run_thick, run_hard, False, crust_min_thickness_m, crust_min_hardness
            ):
                out[S_CRUST] += 1.0
                out[S_CRUST + kind] += 1.0
        else:
            i -= 1
    # structural threshold count of every interface (active layers only); the worst one
    scores = scratch[N_CRITERIA + 1]
    tc, tc_depth = interface_scores_column(
        n, fw[F_THICK], fw[F_GRAIN], hardness, iw[I_CODE], relative, scratch, scores
    )
    out[S_TC_MAX] = tc
    out[S_TC_DEPTH_M] = tc_depth
    # depth hoar thickness; uppermost persistent weak layer of concern
    for i in range(n):
        if iw[I_CODE, i] == _DH:
            out[S_DH_THICK_M] += fw[F_THICK, i]
    out[S_PWL_DEPTH_M] = -1.0
    mark = scratch[0]  # free once the interfaces are scored
    top = mark_weak_layers_of_concern(
        n,
        fw[F_THICK],
        fw[F_GRAIN],
        iw[I_CODE],
        scores,
        CRITICAL_SUM_RELATIVE if relative else CRITICAL_COUNT_ABSOLUTE,
        pwl_min_depth_m,
        pwl_min_thickness_m,
        pwl_min_grain_mm,
        mark,
    )
    if top >= 0:
        depth = 0.0
        for i in range(n - 1, top, -1):
            depth += fw[F_THICK, i]
        thick = 0.0
        grain = 0.0
        i = top
        while i >= 0 and mark[i] > 0.0 and _is_persistent(iw[I_CODE, i]):
            thick += fw[F_THICK, i]
            grain = max(grain, fw[F_GRAIN, i])
            i -= 1
        out[S_PWL] = 1.0
        out[S_PWL_DEPTH_M] = depth
        out[S_PWL_THICK_M] = thick
        out[S_PWL_GRAIN_MM] = grain
        out[S_PWL_CODE] = iw[I_CODE, top]
    # surface wetness class of the top layer
    if n > 0:
        lwc = fw[F_LIQ, n - 1] / (RHO_WATER_KG_M3 * max(fw[F_THICK, n - 1], 1e-9))
        out[S_WETNESS] = wetness_class_fierz2009(lwc)


def layer_hardness_array(state) -> np.ndarray:
    """Hand-hardness index (cell, layer) of a :class:`~regionmap.snow.state.SnowState`
    (float32, NaN in unused slots), from dry density and grain class (hardness.py)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        dens = state.ice_kg_m2 / state.thickness_m.astype(np.float64)
    dens = np.where(state.thickness_m > 0, dens, np.nan)
    return hardness_index_from_density_array(dens, state.grain_code, state.crust_code).astype(
        np.float32
    )

"""Per-cell diagnostics of one column (compiled): structure a forecaster reads.

Crust counts (contiguous runs of counted crust layers count once), depth hoar, the uppermost
buried persistent weak layer, surface wetness class (Fierz et al. 2009) and the worst
interface's structural threshold count (:mod:`regionmap.snow.stability`). Model output is
guidance for trained people, never a substitute for field observations, the local avalanche
service or professional standards.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from regionmap.snow.constants import RHO_WATER_KG_M3
from regionmap.snow.crusts import counts_as_crust
from regionmap.snow.hardness import hardness_index_from_density, hardness_index_from_density_array
from regionmap.snow.layering import F_GRAIN, F_ICE, F_LIQ, F_THICK, I_CODE, I_CRUST
from regionmap.snow.stability import N_CRITERIA, worst_interface_column
from regionmap.snow.vecmath import padded_count

__all__ = [
    "wetness_class_fierz2009",
    "layer_hardness",
    "column_structure",
    "layer_hardness_array",
    "N_SCRATCH_ROWS",
]

_FC, _FCXR, _FCSF, _DH, _SH = 5, 6, 7, 8, 9

# indices into the structure output vector
S_CRUST, S_CRUST_MF, S_CRUST_SUN, S_CRUST_RAIN, S_CRUST_GLAZE = 0, 1, 2, 3, 4
S_DH_THICK_M, S_PWL, S_PWL_DEPTH_M, S_PWL_THICK_M, S_PWL_GRAIN_MM, S_PWL_CODE = 5, 6, 7, 8, 9, 10
S_TC_MAX, S_TC_DEPTH_M, S_WETNESS = 11, 12, 13
N_STRUCT = 14
#: rows of the scratch array :func:`column_structure` needs (shape (N_SCRATCH_ROWS, layer))
N_SCRATCH_ROWS = N_CRITERIA + 1


@njit(cache=True, nogil=True, error_model="numpy")
def wetness_class_fierz2009(liquid_volume_frac):
    """Liquid-water-content class (Fierz et al. 2009, Table 3.3 [src in METHODS.md]).

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
    relative,
    scratch,
    out,
):
    """Fill ``out`` (N_STRUCT,) with crust counts, DH, PWL and threshold-count diagnostics.

    ``hardness`` (layer,) is the hardness of each layer from :func:`layer_hardness`;
    ``scratch`` (N_SCRATCH_ROWS, layer) float64 work space for the threshold count
    (:func:`regionmap.snow.stability.worst_interface_column`), reused between calls so the
    hourly diagnostics allocate nothing.
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
    # depth hoar thickness; uppermost buried persistent layer
    depth = 0.0
    found = False
    for i in range(n - 1, -1, -1):
        code = iw[I_CODE, i]
        if code == _DH:
            out[S_DH_THICK_M] += fw[F_THICK, i]
        if not found and _is_persistent(code) and depth >= pwl_min_depth_m:
            found = True
            out[S_PWL] = 1.0
            out[S_PWL_DEPTH_M] = depth
            out[S_PWL_GRAIN_MM] = fw[F_GRAIN, i]
            out[S_PWL_CODE] = code
            t = 0.0
            j = i
            while j >= 0 and _is_persistent(iw[I_CODE, j]):
                t += fw[F_THICK, j]
                j -= 1
            out[S_PWL_THICK_M] = t
        depth += fw[F_THICK, i]
    if not found:
        out[S_PWL_DEPTH_M] = -1.0
    # surface wetness class of the top layer
    if n > 0:
        lwc = fw[F_LIQ, n - 1] / (RHO_WATER_KG_M3 * max(fw[F_THICK, n - 1], 1e-9))
        out[S_WETNESS] = wetness_class_fierz2009(lwc)
    # structural threshold count of the worst interface (active layers only)
    tc, tc_depth = worst_interface_column(
        n, fw[F_THICK], fw[F_GRAIN], hardness, iw[I_CODE], relative, scratch
    )
    out[S_TC_MAX] = tc
    out[S_TC_DEPTH_M] = tc_depth


def layer_hardness_array(state) -> np.ndarray:
    """Hand-hardness index (cell, layer) of a :class:`~regionmap.snow.state.SnowState`
    (float32, NaN in unused slots), from dry density and grain class (hardness.py)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        dens = state.ice_kg_m2 / state.thickness_m.astype(np.float64)
    dens = np.where(state.thickness_m > 0, dens, np.nan)
    return hardness_index_from_density_array(dens, state.grain_code, state.crust_code).astype(
        np.float32
    )

"""Layer bookkeeping of one column: insert, remove and merge layers.

A column is held in two work arrays, ``fw`` (float rows, see ``F_*``) and ``iw`` (integer
rows, ``I_*``), shaped (row, layer), bottom layer first. Merging keeps mass exactly (ice and
liquid add), keeps enthalpy (temperature by heat-capacity weighting of two layers in the same
phase state) and takes mass-weighted microstructure. Thin similar neighbours merge; crusts,
surface hoar, depth hoar, ice and clearly different layers (class, size, density, age) never
merge away. Rules are ours.
"""

from __future__ import annotations

from numba import njit

from regionmap.constants import C_ICE_J_KG_K, C_WATER_J_KG_K
from regionmap.snow.codes import GRAIN_INDEX

__all__ = [
    "F_ROWS",
    "FLAG_WIND_PACKED",
    "I_ROWS",
    "insert_top",
    "remove_layer",
    "merge_pair",
    "mergeable",
    "merge_pass",
]

F_THICK, F_ICE, F_LIQ, F_TEMP, F_GRAIN, F_DEND, F_FACET = 0, 1, 2, 3, 4, 5, 6
F_ROWS = 7
I_CODE, I_CRUST, I_FLAGS, I_DEP, I_FORM, I_EVENT = 0, 1, 2, 3, 4, 5
I_ROWS = 6

#: grain indices of the classification table (module-level ints: constants to the compiled code)
_SH, _DH, _MFCR, _IF = (GRAIN_INDEX[c] for c in ("SH", "DH", "MFcr", "IF"))

#: layer flag (``I_FLAGS`` bit): snow deposited by wind transport (a wind-packed layer)
FLAG_WIND_PACKED = 32


@njit(cache=True, nogil=True, error_model="numpy")
def insert_top(fw, iw, n):
    """Open a new top slot (index n) by copying nothing; returns the new count (n + 1)."""
    for r in range(F_ROWS):
        fw[r, n] = 0.0
    for r in range(I_ROWS):
        iw[r, n] = 0
    return n + 1


@njit(cache=True, nogil=True, error_model="numpy")
def remove_layer(fw, iw, n, i):
    """Remove layer i (shifting the layers above down); returns n - 1."""
    for j in range(i, n - 1):
        for r in range(F_ROWS):
            fw[r, j] = fw[r, j + 1]
        for r in range(I_ROWS):
            iw[r, j] = iw[r, j + 1]
    for r in range(F_ROWS):
        fw[r, n - 1] = 0.0
    for r in range(I_ROWS):
        iw[r, n - 1] = 0
    return n - 1


@njit(cache=True, nogil=True, error_model="numpy")
def merge_pair(fw, iw, n, i):
    """Merge layer i + 1 into layer i; returns n - 1.

    Mass adds exactly; temperature is heat-capacity weighted (enthalpy kept when both layers
    are dry, or both wet at 0 degC); grain size, dendricity and facetedness mass-weighted;
    integer attributes (class, crust, times, event) of the more massive layer; flags or-ed.
    """
    j = i + 1
    m_i = fw[F_ICE, i] + fw[F_LIQ, i]
    m_j = fw[F_ICE, j] + fw[F_LIQ, j]
    m = m_i + m_j
    c_i = C_ICE_J_KG_K * fw[F_ICE, i] + C_WATER_J_KG_K * fw[F_LIQ, i]
    c_j = C_ICE_J_KG_K * fw[F_ICE, j] + C_WATER_J_KG_K * fw[F_LIQ, j]
    if c_i + c_j > 0.0:
        fw[F_TEMP, i] = (c_i * fw[F_TEMP, i] + c_j * fw[F_TEMP, j]) / (c_i + c_j)
    if m > 0.0:
        w_i = m_i / m
        w_j = m_j / m
        for r in (F_GRAIN, F_DEND, F_FACET):
            fw[r, i] = w_i * fw[r, i] + w_j * fw[r, j]
    fw[F_THICK, i] += fw[F_THICK, j]
    fw[F_ICE, i] += fw[F_ICE, j]
    fw[F_LIQ, i] += fw[F_LIQ, j]
    flags = iw[I_FLAGS, i] | iw[I_FLAGS, j]
    if m_j > m_i:
        for r in range(I_ROWS):
            iw[r, i] = iw[r, j]
    iw[I_FLAGS, i] = flags
    return remove_layer(fw, iw, n, j)


@njit(cache=True, nogil=True, error_model="numpy")
def _protected(fw, iw, i):
    code = iw[I_CODE, i]
    return iw[I_CRUST, i] != 0 or code == _SH or code == _DH or code == _MFCR or code == _IF


@njit(cache=True, nogil=True, error_model="numpy")
def mergeable(fw, iw, i, now_s, max_thick_m, strict):
    """Whether layers i and i + 1 may merge.

    Never when either is a crust, SH, DH, MFcr or IF; otherwise when both have the same
    class, the same wetness state, both or neither wind-packed, grain sizes within
    0.25 mm + 20 %, densities within 30 %, and, when ``strict``, deposition times within
    max(1 day, 20 % of the older layer's age at ``now_s``) and a merged thickness within
    ``max_thick_m``.
    """
    j = i + 1
    if _protected(fw, iw, i) or _protected(fw, iw, j):
        return False
    if iw[I_CODE, i] != iw[I_CODE, j]:
        return False
    if (iw[I_FLAGS, i] & FLAG_WIND_PACKED) != (iw[I_FLAGS, j] & FLAG_WIND_PACKED):
        return False
    if (fw[F_LIQ, i] > 0.0) != (fw[F_LIQ, j] > 0.0):
        return False
    g_i = fw[F_GRAIN, i]
    g_j = fw[F_GRAIN, j]
    if abs(g_i - g_j) > 0.25 + 0.2 * max(g_i, g_j):
        return False
    r_i = fw[F_ICE, i] / max(fw[F_THICK, i], 1e-9)
    r_j = fw[F_ICE, j] / max(fw[F_THICK, j], 1e-9)
    if abs(r_i - r_j) > 0.3 * max(r_i, r_j):
        return False
    if strict:
        if fw[F_THICK, i] + fw[F_THICK, j] > max_thick_m:
            return False
        age_s = now_s - min(iw[I_DEP, i], iw[I_DEP, j])
        if abs(iw[I_DEP, i] - iw[I_DEP, j]) > max(86400.0, 0.2 * age_s):
            return False
    return True


@njit(cache=True, nogil=True, error_model="numpy")
def merge_pass(fw, iw, n, now_s, new_layer_max_m, depth_frac, target_n):
    """Merge thin similar neighbours below the top 3 layers; returns the new layer count.

    Strict pass: from the surface down, a pair merges when :func:`mergeable` allows and the
    merged layer is at most max(new_layer_max_m, depth_frac x depth of its top). When the
    column still has more than ``target_n`` layers, the pair with the smallest merged
    thickness among the merely similar ones merges (repeated until at target or none left).
    """
    depth = 0.0
    for k in range(n - 1, n - 4, -1):
        if k >= 0:
            depth += fw[F_THICK, k]
    i = n - 5
    while i >= 0:
        d_top = depth
        max_thick = max(new_layer_max_m, depth_frac * d_top)
        if mergeable(fw, iw, i, now_s, max_thick, True):
            n = merge_pair(fw, iw, n, i)
        else:
            depth += fw[F_THICK, i + 1]
        i -= 1
    while n > target_n:
        best = -1
        best_t = 1e30
        for k in range(0, n - 4):
            if mergeable(fw, iw, k, now_s, 0.0, False):
                t = fw[F_THICK, k] + fw[F_THICK, k + 1]
                if t < best_t:
                    best_t = t
                    best = k
        if best < 0:
            break
        n = merge_pair(fw, iw, n, best)
    return n


@njit(cache=True, nogil=True, error_model="numpy")
def merge_to_make_room(fw, iw, n):
    """Last resort when a full column has no similar neighbours left; returns (n, gentle).

    Below the top four layers: the lightest layer that is not a crust, SH, DH, MFcr or IF
    merges into its lighter neighbour (a thin snow layer between two crusts joins one of
    them, so the crust keeps its identity: :func:`merge_pair` keeps the integer attributes of
    the more massive layer). With no such layer, two adjacent layers of the same class and
    crust kind merge (e.g. glaze of two freezing-rain events with nothing between). Only
    when neither exists does the lightest adjacent pair merge whatever it is; ``gentle`` is
    then False so the caller can flag it. Mass and heat capacity are kept exactly.
    """
    last = n - 5
    best = -1
    best_m = 1e30
    for k in range(0, last + 1):
        if not _protected(fw, iw, k):
            m = fw[F_ICE, k] + fw[F_LIQ, k]
            if m < best_m:
                best_m = m
                best = k
    if best >= 0:
        if best == 0:
            return merge_pair(fw, iw, n, 0), True
        m_below = fw[F_ICE, best - 1] + fw[F_LIQ, best - 1]
        m_above = fw[F_ICE, best + 1] + fw[F_LIQ, best + 1]
        return merge_pair(fw, iw, n, best - 1 if m_below <= m_above else best), True
    pair = -1
    pair_m = 1e30
    alike = -1
    alike_m = 1e30
    for k in range(0, last + 1):
        m = fw[F_ICE, k] + fw[F_LIQ, k] + fw[F_ICE, k + 1] + fw[F_LIQ, k + 1]
        if (
            iw[I_CODE, k] == iw[I_CODE, k + 1]
            and iw[I_CRUST, k] == iw[I_CRUST, k + 1]
            and m < alike_m
        ):
            alike_m = m
            alike = k
        if m < pair_m:
            pair_m = m
            pair = k
    if alike >= 0:
        return merge_pair(fw, iw, n, alike), True
    if pair >= 0:
        return merge_pair(fw, iw, n, pair), False
    return n, False

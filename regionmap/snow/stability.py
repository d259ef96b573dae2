"""Structural threshold count of layer interfaces (structural weakness, not a stability test).

For every interface between two adjacent layers the six structural variables of the
threshold-sum ("lemons") approach are evaluated on the interface's *weak layer* -- the softer
of the two layers; on equal hardness the larger-grained one; on equal hardness and grain size
the one of persistent grain type, else the lower one:

1. persistent grain type of the weak layer (FC, FCxr, FCsf, DH, SH);
2. weak-layer grain size >= 1.25 mm;
3. weak-layer hand hardness <= 1.3 (index, F = 1);
4. grain-size difference across the interface >= 0.75 mm;
5. hand-hardness difference across the interface >= 1.7;
6. interface depth below the surface within 0.18-0.94 m.

**Absolute mode** counts the criteria met (0..6; McCammon & Schweizer 2002; Schweizer &
Jamieson 2007). 5-6 marks a likely problem interface in observed profiles [mem].

**Relative mode** is our reading of the relative threshold sum approach of Monti, Schweizer &
Fierz (2014), meant for simulated profiles whose grain sizes and hardness differ
systematically from field observations. What we take from the paper [mem, not re-verified]:
each variable is standardised within the profile itself and rescaled to 0..1 between the
profile's minimum and maximum, and the scores of the variables are summed, so a layer stands
out by how extreme it is *relative to its own profile*, not by fixed thresholds. Our
implementation details (our choices, to be checked against the paper):

* the distribution is taken over the interfaces of the column (not over layers);
* each variable is oriented so that larger is more critical: persistent indicator (1/0),
  weak-layer grain size, minus weak-layer hardness, |grain-size difference|,
  |hardness difference|, depth-window indicator (1 inside 0.18-0.94 m, else 0);
* score_i = (v_i - min_i) / (max_i - min_i) over the column's interfaces, 0 where the
  column has no spread in that variable (standardising by mean and standard deviation first
  would not change this min-max result, which is affine-invariant; computed as
  (v_i - min_i) * (1 / (max_i - min_i)));
* depth counts only for an interface that stands out structurally (one of the other five
  scores above 0): depth alone is no weakness, and without this rule every interface of a
  uniform column inside the window would score 1;
* the relative sum is the sum of the six scores, 0..6, comparable in range with the count.

Consequences to keep in mind: in relative mode a column with a single interface, or a
uniform column, scores 0 everywhere; the worst interface of every column scores high even
where the column has no real weakness, and tiny spreads (1.000 against 1.001 mm) are
stretched to the full 0..1 range. Interfaces below the depth window still score in the
other five criteria, so deep persistent layers stay visible.

This is structural guidance derived from a model, for trained people: it is never a
substitute for field observations, stability tests, the local avalanche service or
professional standards.

Layers are stored bottom first; ``layer_count`` layers are active. Interface ``k`` is the top
of layer ``k`` (between layers ``k`` and ``k + 1``); its depth is the sum of the thicknesses
of the layers above it (vertical metres).

References
----------
.. [1] McCammon, I. and Schweizer, J. (2002). A field method for identifying structural
   weaknesses in the snowpack. Proc. International Snow Science Workshop 2002, Penticton.
.. [2] Schweizer, J. and Jamieson, J. B. (2007). A threshold sum approach to stability
   evaluation of manual snow profiles. Cold Regions Science and Technology 47(1-2), 50-59.
   doi:10.1016/j.coldregions.2006.08.011
.. [3] Monti, F., Schweizer, J. and Fierz, C. (2014). Hardness estimation and weak layer
   detection in simulated snow stratigraphy. Cold Regions Science and Technology 103,
   82-90. doi:10.1016/j.coldregions.2014.03.009
"""

from __future__ import annotations

from typing import Literal

import numpy as np
from numba import njit

from regionmap.errors import InputError
from regionmap.snow.codes import GRAIN_CODES, GRAIN_INDEX, PERSISTENT_CODES

__all__ = [
    "WEAK_GRAIN_SIZE_MIN_MM",
    "WEAK_HARDNESS_MAX",
    "GRAIN_SIZE_DIFF_MIN_MM",
    "HARDNESS_DIFF_MIN",
    "DEPTH_WINDOW_M",
    "CRITICAL_COUNT_ABSOLUTE",
    "CRITICAL_SUM_RELATIVE",
    "N_CRITERIA",
    "threshold_count_interfaces",
    "threshold_count_columns",
    "worst_interface_column",
    "interface_scores_column",
    "threshold_counts_of_profile",
    "threshold_count_reference",
    "worst_interface_reference",
]

#: Thresholds of Schweizer & Jamieson (2007) / McCammon & Schweizer (2002) [mem].
WEAK_GRAIN_SIZE_MIN_MM: float = 1.25
WEAK_HARDNESS_MAX: float = 1.3
GRAIN_SIZE_DIFF_MIN_MM: float = 0.75
HARDNESS_DIFF_MIN: float = 1.7
DEPTH_WINDOW_M: tuple[float, float] = (0.18, 0.94)
N_CRITERIA: int = 6
#: Critical score: 5 or more of the 6 criteria mark a likely problem interface (Schweizer &
#: Jamieson 2007 [mem]); for the relative sum, 0.8 of its maximum, 6 (Monti et al. 2014 [mem]).
CRITICAL_COUNT_ABSOLUTE: float = 5.0
CRITICAL_SUM_RELATIVE: float = 0.8 * N_CRITERIA

_DEPTH_MIN_M, _DEPTH_MAX_M = DEPTH_WINDOW_M
_N_CODES = len(GRAIN_CODES)
_IS_PERSISTENT = np.zeros(_N_CODES, dtype=np.bool_)
for _code in PERSISTENT_CODES:
    _IS_PERSISTENT[GRAIN_INDEX[_code]] = True


@njit(cache=True, nogil=True, error_model="numpy")
def _persistent(code):
    return code > 0 and code < _N_CODES and _IS_PERSISTENT[code]


@njit(cache=True, nogil=True, error_model="numpy")
def _interface_variables(k, depth_m, grain_size_mm, hardness_index, grain_code):
    """Six oriented variables of interface k (larger = more critical), see module notes."""
    hl, hu = hardness_index[k], hardness_index[k + 1]
    el, eu = grain_size_mm[k], grain_size_mm[k + 1]
    pl, pu = _persistent(grain_code[k]), _persistent(grain_code[k + 1])
    if hu < hl:
        upper = True
    elif hl < hu:
        upper = False
    elif eu > el:
        upper = True
    elif el > eu:
        upper = False
    else:
        upper = pu and not pl
    if upper:
        p, e_w, h_w = pu, eu, hu
    else:
        p, e_w, h_w = pl, el, hl
    in_window = depth_m >= _DEPTH_MIN_M and depth_m <= _DEPTH_MAX_M
    return (
        1.0 if p else 0.0,
        e_w,
        -h_w,
        abs(eu - el),
        abs(hu - hl),
        1.0 if in_window else 0.0,
    )


@njit(cache=True, nogil=True, error_model="numpy")
def _absolute_count(v0, v1, v2, v3, v4, v5):
    """Schweizer & Jamieson (2007) count from the oriented variables (v2 = -hardness)."""
    c = v0
    c += 1.0 if v1 >= WEAK_GRAIN_SIZE_MIN_MM else 0.0
    c += 1.0 if -v2 <= WEAK_HARDNESS_MAX else 0.0
    c += 1.0 if v3 >= GRAIN_SIZE_DIFF_MIN_MM else 0.0
    c += 1.0 if v4 >= HARDNESS_DIFF_MIN else 0.0
    c += v5
    return c


@njit(cache=True, nogil=True, error_model="numpy")
def _column_variables(n, thickness_m, grain_size_mm, hardness_index, grain_code, var, depth_m):
    """Oriented variables ``var[:, k]`` and depth ``depth_m[k]`` of interfaces 0..n-2."""
    d = 0.0
    for k in range(n - 2, -1, -1):
        d += thickness_m[k + 1]
        depth_m[k] = d
        v = _interface_variables(k, d, grain_size_mm, hardness_index, grain_code)
        var[0, k] = v[0]
        var[1, k] = v[1]
        var[2, k] = v[2]
        var[3, k] = v[3]
        var[4, k] = v[4]
        var[5, k] = v[5]


@njit(cache=True, nogil=True, error_model="numpy")
def _row_scaling(var, i, n):
    """Minimum of ``var[i, :n-1]`` and 1 / (max - min), 0 where there is no spread."""
    lo = np.inf
    hi = -np.inf
    for k in range(n - 1):
        lo = min(lo, var[i, k])
        hi = max(hi, var[i, k])
    return lo, (1.0 / (hi - lo) if hi > lo else 0.0)


@njit(cache=True, nogil=True, error_model="numpy")
def _relative_scaling(n, var):
    """Per variable, minimum over the column's interfaces and inverse span (two 6-tuples)."""
    l0, i0 = _row_scaling(var, 0, n)
    l1, i1 = _row_scaling(var, 1, n)
    l2, i2 = _row_scaling(var, 2, n)
    l3, i3 = _row_scaling(var, 3, n)
    l4, i4 = _row_scaling(var, 4, n)
    l5, i5 = _row_scaling(var, 5, n)
    return (l0, l1, l2, l3, l4, l5), (i0, i1, i2, i3, i4, i5)


@njit(cache=True, nogil=True, error_model="numpy")
def _relative_sum(v, lo, inv):
    """Relative threshold sum of one interface (6-tuples: variables, minima, inverse spans)."""
    s = (v[0] - lo[0]) * inv[0]
    s += (v[1] - lo[1]) * inv[1]
    s += (v[2] - lo[2]) * inv[2]
    s += (v[3] - lo[3]) * inv[3]
    s += (v[4] - lo[4]) * inv[4]
    if s > 0.0:  # depth counts only where the interface stands out structurally
        s += (v[5] - lo[5]) * inv[5]
    return s


@njit(cache=True, nogil=True, error_model="numpy")
def threshold_count_interfaces(
    layer_count,
    thickness_m,
    grain_size_mm,
    hardness_index,
    grain_code,
    relative,
    out_count,
    out_depth_m,
):
    """Threshold count (absolute) or relative threshold sum of every interface of one column.

    Parameters
    ----------
    layer_count : int
        Number of active layers (bottom first); clipped to the array length.
    thickness_m : ndarray (layer,) float64
        Layer thickness, vertical [m].
    grain_size_mm : ndarray (layer,) float64
        Grain size [mm].
    hardness_index : ndarray (layer,) float64
        Hand-hardness index, F = 1 ... I = 6 (Fierz et al. 2009) [dimensionless].
    grain_code : ndarray (layer,) int
        Indices into :data:`regionmap.snow.codes.GRAIN_CODES`.
    relative : bool
        True: relative threshold sum (our reading of Monti et al. 2014); False: count of the
        six absolute criteria of Schweizer & Jamieson (2007).
    out_count : ndarray (>= layer - 1,) float64
        Written: score of interface k (top of layer k) at index k, 0..6; NaN beyond the
        active interfaces [dimensionless].
    out_depth_m : ndarray (>= layer - 1,) float64
        Written: depth of interface k below the surface [m]; NaN beyond the active ones.

    Notes
    -----
    Compiled; never raises. The caller supplies output arrays of at least
    ``len(thickness_m) - 1`` elements. Allocates a small scratch array per call; for many
    columns use :func:`threshold_count_columns`. See the module docstring for the criteria,
    the weak-layer rule and the relative scores; sources: McCammon & Schweizer (2002), Proc.
    ISSW; Schweizer & Jamieson (2007), Cold Reg. Sci. Technol. 47,
    doi:10.1016/j.coldregions.2006.08.011; Monti, Schweizer & Fierz (2014), Cold Reg. Sci.
    Technol. 103, doi:10.1016/j.coldregions.2014.03.009.
    """
    n = min(max(layer_count, 0), thickness_m.shape[0])
    for k in range(out_count.shape[0]):
        out_count[k] = np.nan
        out_depth_m[k] = np.nan
    if n < 2:
        return
    var = np.empty((N_CRITERIA, n))
    _column_variables(n, thickness_m, grain_size_mm, hardness_index, grain_code, var, out_depth_m)
    if relative:
        lo, inv = _relative_scaling(n, var)
        for k in range(n - 1):
            v = (var[0, k], var[1, k], var[2, k], var[3, k], var[4, k], var[5, k])
            out_count[k] = _relative_sum(v, lo, inv)
    else:
        for k in range(n - 1):
            out_count[k] = _absolute_count(
                var[0, k], var[1, k], var[2, k], var[3, k], var[4, k], var[5, k]
            )


@njit(cache=True, nogil=True, error_model="numpy")
def _scan_interfaces(
    n, thickness_m, grain_size_mm, hardness_index, grain_code, relative, scratch, scores, store
):
    """Score every interface of ``n`` active layers, worst first found from the top; with
    ``store``, score k into ``scores[k]``. Returns (worst score, its depth)."""
    best = 0.0
    best_depth_m = np.nan
    if relative:
        depth_m = scratch[N_CRITERIA]
        _column_variables(
            n, thickness_m, grain_size_mm, hardness_index, grain_code, scratch, depth_m
        )
        lo, inv = _relative_scaling(n, scratch)
        for k in range(n - 2, -1, -1):
            v = (
                scratch[0, k],
                scratch[1, k],
                scratch[2, k],
                scratch[3, k],
                scratch[4, k],
                scratch[5, k],
            )
            s = _relative_sum(v, lo, inv)
            if store:
                scores[k] = s
            if s > best:
                best = s
                best_depth_m = depth_m[k]
    else:
        d = 0.0
        for k in range(n - 2, -1, -1):
            d += thickness_m[k + 1]
            v = _interface_variables(k, d, grain_size_mm, hardness_index, grain_code)
            s = _absolute_count(v[0], v[1], v[2], v[3], v[4], v[5])
            if store:
                scores[k] = s
            if s > best:
                best = s
                best_depth_m = d
    return best, best_depth_m


@njit(cache=True, nogil=True, error_model="numpy")
def worst_interface_column(
    layer_count, thickness_m, grain_size_mm, hardness_index, grain_code, relative, scratch
):
    """Worst interface of one column, without allocating: for calls from inside kernels.

    Parameters
    ----------
    layer_count : int
        Active layers (bottom first); clipped to the array length.
    thickness_m, grain_size_mm, hardness_index : ndarray (layer,) float64
        Thickness [m], grain size [mm], hand-hardness index (F = 1 ... I = 6).
    grain_code : ndarray (layer,) int
        Indices into :data:`regionmap.snow.codes.GRAIN_CODES`.
    relative : bool
        True: relative threshold sum (Monti et al. 2014, our reading); False: absolute count
        (Schweizer & Jamieson 2007).
    scratch : ndarray (N_CRITERIA + 1, >= layer) float64
        Work space, overwritten.

    Returns
    -------
    count : float
        Largest score over the column's interfaces, 0..6; 0 with fewer than two layers.
    depth_m : float
        Depth below the surface of that interface [m], the shallowest on ties; NaN when no
        interface scores above 0.

    Notes
    -----
    Compiled; never raises. Criteria and sources as in :func:`threshold_count_interfaces`.
    """
    n = min(max(layer_count, 0), thickness_m.shape[0])
    if n < 2:
        return 0.0, np.nan
    return _scan_interfaces(
        n,
        thickness_m,
        grain_size_mm,
        hardness_index,
        grain_code,
        relative,
        scratch,
        scratch[0],
        False,
    )


@njit(cache=True, nogil=True, error_model="numpy")
def interface_scores_column(
    layer_count, thickness_m, grain_size_mm, hardness_index, grain_code, relative, scratch, scores
):
    """:func:`worst_interface_column` that also writes the score of every interface k (top of
    layer k) into ``scores[k]`` (k < layer_count - 1; ``scores`` (>= layer,) float64, not a
    row of ``scratch``). Returns (worst score, its depth [m])."""
    n = min(max(layer_count, 0), thickness_m.shape[0])
    if n < 2:
        return 0.0, np.nan
    return _scan_interfaces(
        n, thickness_m, grain_size_mm, hardness_index, grain_code, relative, scratch, scores, True
    )


@njit(cache=True, nogil=True, error_model="numpy")
def threshold_count_columns(
    layer_count,
    thickness_m,
    grain_size_mm,
    hardness_index,
    grain_code,
    relative,
    out_count,
    out_depth_m,
):
    """Worst interface of each column: its threshold count (or relative sum) and depth.

    Parameters
    ----------
    layer_count : ndarray (cell,) int64
        Active layers per cell (bottom first).
    thickness_m : ndarray (cell, layer) float64
        Layer thickness, vertical [m].
    grain_size_mm : ndarray (cell, layer) float64
        Grain size [mm].
    hardness_index : ndarray (cell, layer) float64
        Hand-hardness index, F = 1 ... I = 6 [dimensionless].
    grain_code : ndarray (cell, layer) int8
        Indices into :data:`regionmap.snow.codes.GRAIN_CODES`.
    relative : bool
        True: relative threshold sum (Monti et al. 2014, our reading); False: absolute count
        (Schweizer & Jamieson 2007).
    out_count : ndarray (cell,) float64
        Written: the largest score over the column's interfaces, 0..6; 0 with fewer than two
        layers [dimensionless].
    out_depth_m : ndarray (cell,) float64
        Written: depth below the surface of that interface [m]; the shallowest one on ties;
        NaN when no interface scores above 0 (including columns of 0 or 1 layers).

    Notes
    -----
    Compiled; never raises; allocates one work array per call (use
    :func:`worst_interface_column` with your own work array to call it per cell inside a
    kernel). Same criteria and sources as :func:`threshold_count_interfaces`.
    """
    scratch = np.empty((N_CRITERIA + 1, max(thickness_m.shape[1], 1)))
    for c in range(layer_count.shape[0]):
        out_count[c], out_depth_m[c] = worst_interface_column(
            layer_count[c],
            thickness_m[c],
            grain_size_mm[c],
            hardness_index[c],
            grain_code[c],
            relative,
            scratch,
        )


def _profile_arrays(thickness_m, grain_size_mm, hardness_index, grain_code):
    th = np.asarray(thickness_m, dtype=np.float64)
    e = np.asarray(grain_size_mm, dtype=np.float64)
    h = np.asarray(hardness_index, dtype=np.float64)
    g = np.asarray(grain_code)
    for name, a in (
        ("thickness_m", th),
        ("grain_size_mm", e),
        ("hardness_index", h),
        ("grain_code", g),
    ):
        if a.ndim != 1 or a.shape != th.shape:
            raise InputError(
                f"threshold count: {name} must be a 1-D layer array (bottom first) of the "
                f"same length as thickness_m {th.shape}, got shape {a.shape}"
            )
    if not np.issubdtype(g.dtype, np.integer) or ((g < 0) | (g >= _N_CODES)).any():
        raise InputError(
            f"threshold count: grain_code must hold integer indices 0..{_N_CODES - 1} into "
            f"GRAIN_CODES, got dtype {g.dtype} values {np.unique(g)[:5].tolist()}; hint: "
            "convert code strings with regionmap.snow.codes.grain_strings_to_codes"
        )
    return th, e, h, g.astype(np.int64)


def threshold_counts_of_profile(
    thickness_m: np.ndarray,
    grain_size_mm: np.ndarray,
    hardness_index: np.ndarray,
    grain_code: np.ndarray,
    *,
    mode: Literal["relative", "absolute"] = "relative",
) -> tuple[np.ndarray, np.ndarray]:
    """Scores and depths of every interface of one profile (for profile plots).

    Parameters
    ----------
    thickness_m, grain_size_mm, hardness_index : array_like (layer,) float
        Active layers only, bottom first; [m], [mm], hand-hardness index.
    grain_code : array_like (layer,) int
        Indices into GRAIN_CODES.
    mode : {"relative", "absolute"}
        ``"relative"`` (default, for simulated profiles): relative threshold sum after Monti
        et al. (2014), our reading; ``"absolute"``: count of Schweizer & Jamieson (2007).

    Returns
    -------
    count : ndarray (layer - 1,) float64
        Score of interface k (top of layer k), 0..6.
    depth_m : ndarray (layer - 1,) float64
        Depth of interface k below the surface [m].

    Raises
    ------
    InputError
        For arrays of different length or dimension, non-integer or unknown grain codes, or an
        unknown mode.
    """
    if mode not in ("relative", "absolute"):
        raise InputError(f"threshold count: mode must be 'relative' or 'absolute', got {mode!r}")
    th, e, h, g = _profile_arrays(thickness_m, grain_size_mm, hardness_index, grain_code)
    m = max(th.size - 1, 0)
    count = np.empty(m)
    depth = np.empty(m)
    threshold_count_interfaces(th.size, th, e, h, g, mode == "relative", count, depth)
    return count, depth


def threshold_count_reference(
    thickness_m: np.ndarray,
    grain_size_mm: np.ndarray,
    hardness_index: np.ndarray,
    grain_code: np.ndarray,
    relative: bool,
) -> tuple[np.ndarray, np.ndarray]:
    """Plain-NumPy reference of :func:`threshold_count_interfaces` (for tests).

    Same inputs as :func:`threshold_counts_of_profile` (active layers only, bottom first) and
    the same criteria, written vectorised over interfaces. Returns ``(count, depth_m)`` per
    interface.
    """
    th, e, h, g = _profile_arrays(thickness_m, grain_size_mm, hardness_index, grain_code)
    if th.size < 2:
        return np.empty(0), np.empty(0)
    depth_m = np.cumsum(th[:0:-1])[::-1]  # sum of the layers above, summed from the top
    el, eu, hl, hu = e[:-1], e[1:], h[:-1], h[1:]
    pers = _IS_PERSISTENT[g]
    pl, pu = pers[:-1], pers[1:]
    upper = (hu < hl) | (~(hl < hu) & ((eu > el) | (~(el > eu) & pu & ~pl)))
    v = np.stack(
        [
            np.where(upper, pu, pl).astype(np.float64),
            np.where(upper, eu, el),
            -np.where(upper, hu, hl),
            np.abs(eu - el),
            np.abs(hu - hl),
            ((depth_m >= _DEPTH_MIN_M) & (depth_m <= _DEPTH_MAX_M)).astype(np.float64),
        ]
    )
    if relative:
        lo = v.min(axis=1, keepdims=True)
        span = v.max(axis=1, keepdims=True) - lo
        inv_span = np.divide(1.0, span, out=np.zeros_like(span), where=span > 0)
        scores = (v - lo) * inv_span
        structural = scores[0] + scores[1] + scores[2] + scores[3] + scores[4]
        scores[5] = np.where(structural > 0, scores[5], 0.0)
    else:
        scores = np.stack(
            [
                v[0],
                (v[1] >= WEAK_GRAIN_SIZE_MIN_MM).astype(np.float64),
                (-v[2] <= WEAK_HARDNESS_MAX).astype(np.float64),
                (v[3] >= GRAIN_SIZE_DIFF_MIN_MM).astype(np.float64),
                (v[4] >= HARDNESS_DIFF_MIN).astype(np.float64),
                v[5],
            ]
        )
    count = scores[0] + scores[1] + scores[2] + scores[3] + scores[4] + scores[5]
    return count, depth_m


def worst_interface_reference(
    thickness_m: np.ndarray,
    grain_size_mm: np.ndarray,
    hardness_index: np.ndarray,
    grain_code: np.ndarray,
    relative: bool,
) -> tuple[float, float]:
    """Plain-NumPy reference of one column of :func:`threshold_count_columns` (for tests).

    Returns ``(count, depth_m)`` of the highest-scoring interface (the shallowest on ties);
    ``(0.0, nan)`` when no interface scores above 0.
    """
    count, depth_m = threshold_count_reference(
        thickness_m, grain_size_mm, hardness_index, grain_code, relative
    )
    if count.size == 0 or not (count > 0).any():
        return 0.0, float("nan")
    top_first = count[::-1]
    k = int(np.argmax(np.where(np.isnan(top_first), -np.inf, top_first)))
    return float(top_first[k]), float(depth_m[::-1][k])

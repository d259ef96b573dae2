"""Horizon angles, sky-view factor and maximum upwind slope by compiled line scans.

For one azimuth the grid is cut into parallel lines in that direction, spaced one pixel
apart across it; elevations along a line are linearly interpolated between the two
nearest pixels of each column (or row), so a plane stays exactly a plane. The maximum
elevation angle within the search distance is found with upper convex hulls: the search
window [i − L, i − 1] is split at block boundaries of length L into a prefix of the
observer's own block (hull built forward, O(1) amortised per point) and a suffix of the
previous block (hull built backward, queried by a galloping search), so a line of n points
costs O(n log L) instead of O(n L). The same two hulls answer the opposite azimuth, whose
window [i + 1, i + L] splits the other way, so opposite azimuths are scanned together along
shared lines. Earth curvature enters exactly (in the parabolic form d²/2R) through the
transformed height w = z − t²/2R, because (z_j − z_i − d²/2R)/d = (w_j − w_i)/d ∓ t_i/R
with d = |t_i − t_j| (minus when looking toward lower t). A pixel's value is interpolated
between the two lines that pass beside its centre.

Memory access: lines are taken in blocks of ``_BLOCK``; their points are gathered column by
column from short contiguous runs of a copy of the grid laid out along the cross-line
direction, each line is scanned as a contiguous 1-D array, and the pixels lying between the
block's lines are finished (angle, sky-view term) before the next block, so no full-grid
temporary is made per azimuth and every grid access walks a narrow band of rows.

Azimuth pairs are split between two threads running the nogil kernels.

Cost (fractal terrain, 3 km at 10 m, CPU per pixel and azimuth on a 2-core EPYC VM): about
11 ns for the hull scans, 1 ns for gathering the lines and 4 ns for the write-back. The hull
scans are bound by mispredicted branches (each point joins two hulls and pops a
data-dependent number of vertices); branch-free insertions, two lines scanned in one loop,
both hulls of a block boundary grown in one loop, and float32 heights and hulls (which also
lose tangents by up to 2 %) were each measured slower.
"""

from __future__ import annotations

import math
from concurrent.futures import ThreadPoolExecutor
from itertools import pairwise

import numba
import numpy as np

from regionmap.constants import EARTH_RADIUS_M

__all__ = [
    "horizon_sky_view_dozier_frew1990",
    "sky_view_dozier_frew1990",
    "max_upwind_slope_winstral2002",
]

_N_THREADS = 2


@numba.njit(cache=True, nogil=True, error_model="numpy", inline="always")
def _atan_reduction(ax):
    """(num, den, offset) with atan(ax) = offset + atan(num/den) and |num/den| <= tan(pi/16),
    for ax >= 0: offset [rad] is the multiple of pi/8 nearest to atan(ax), and num/den =
    tan(atan(ax) - offset) = (ax - tan(offset))/(1 + ax tan(offset)), or -1/ax near pi/2."""
    t = (
        0.0
        if ax <= 0.198912367379658
        else (
            0.41421356237309503
            if ax <= 0.6681786379192989
            else (1.0 if ax <= 1.496605762665489 else 2.414213562373095)
        )
    )
    offset = (
        0.0
        if ax <= 0.198912367379658
        else (
            0.39269908169872414
            if ax <= 0.6681786379192989
            else (0.7853981633974483 if ax <= 1.496605762665489 else 1.1780972450961724)
        )
    )
    big = ax > 5.027339492125848
    num = -1.0 if big else ax - t
    den = ax if big else 1.0 + ax * t
    return num, den, 1.5707963267948966 if big else offset


@numba.njit(cache=True, nogil=True, error_model="numpy", inline="always")
def _atan_series(u):
    """atan(u) [rad] for |u| <= tan(pi/16) by the Taylor series to u**13 (truncation error
    < 3e-12 rad)."""
    u2 = u * u
    p = -1.0 / 15.0
    for k in range(6, -1, -1):
        p = (1.0 if k % 2 == 0 else -1.0) / (2 * k + 1) + u2 * p
    return u * p


@numba.njit(cache=True, nogil=True, error_model="numpy", inline="always")
def _atan(x):
    """Arctangent [rad] from one division; the range reduction is a chain of selects, so loops
    calling it vectorise (a libm call does not)."""
    num, den, offset = _atan_reduction(abs(x))
    r = offset + _atan_series(num / den)
    return -r if x < 0 else r


@numba.njit(cache=True, nogil=True, error_model="numpy", inline="always")
def _atan_cos2(m):
    """atan(m) [rad] and cos^2(atan m) = 1/(1 + m^2) [1], for m >= 0."""
    num, den, offset = _atan_reduction(m)
    return offset + _atan_series(num / den), 1.0 / (1.0 + m * m)


@numba.njit(cache=True, nogil=True, error_model="numpy", inline="always")
def _slope_rises(sw, si, k, wi, xi):
    """Whether the hull vertex k+1 is seen steeper than vertex k from the point (xi, wi)
    lying outside the hull's range (distances |xi - si|, no division)."""
    return (sw[k + 1] - wi) * abs(xi - si[k]) > (sw[k] - wi) * abs(xi - si[k + 1])


@numba.njit(cache=True, nogil=True, error_model="numpy", inline="always")
def _tangent_vertex(sw, si, top, wi, xi, guess):
    """Hull vertex (stack index) of the steepest sight line from (xi, wi).

    The stack holds an upper hull with its bottom nearest to the observer, so the slope to
    the vertices rises and then falls; the search gallops from ``guess`` (the previous
    observer's answer, which moves little) and ends with a bisection.
    """
    p = guess if guess < top else top
    if p < top and _slope_rises(sw, si, p, wi, xi):
        lo = p + 1
        step = 1
        hi = lo
        while hi < top:
            if _slope_rises(sw, si, hi, wi, xi):
                lo = hi + 1
                hi = min(hi + 2 * step, top)
                step *= 2
            else:
                break
    else:
        hi = p
        step = 1
        lo = hi
        while lo > 0:
            if _slope_rises(sw, si, lo - 1, wi, xi):
                break
            hi = lo - 1
            lo = max(lo - 2 * step, 0)
            step *= 2
    while lo < hi:
        mid = (lo + hi) >> 1
        if _slope_rises(sw, si, mid, wi, xi):
            lo = mid + 1
        else:
            hi = mid
    return lo


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _scan_line_pair(w, n, L, ds, inv_r, floor0, back, sw, si, best, best_b, out, out_b):
    """Max elevation tangents over the windows [i-L, i-1] and, when ``back``, [i+1, i+L].

    ``w`` holds the curvature-transformed heights (NaN = no data); hulls are kept as
    parallel stacks of heights ``sw`` and indices ``si``. ``out[i]`` gets the tangent toward
    lower indices (minus the curvature term t_i/R), ``out_b[i]`` the one toward higher
    indices (plus t_i/R, see the module docstring), floored at 0 when ``floor0``; NaN for a
    missing observer, and 0 (``floor0``) or NaN when the window holds no data.

    The line is cut into blocks of L. A hull grown rightwards over a block gives, for free,
    each point's tangent toward lower indices inside its own block, and is searched by the
    points of the block before for the part of their upward window inside this block; a hull
    grown leftwards over a block gives the upward in-block tangents for free and is searched
    by the points of the block after.
    """
    for i in range(n):
        best[i] = -np.inf
    if back:
        for i in range(n):
            best_b[i] = -np.inf
    for start in range(0, n + L, L):
        if start < n:
            # hull grown rightwards over [start, end)
            end = min(start + L, n)
            top = -1
            guess = 0
            for q in range(start, end):
                wq = w[q]
                if wq == wq:
                    while top >= 1:
                        if (sw[top - 1] - wq) * (q - si[top]) >= (sw[top] - wq) * (q - si[top - 1]):
                            top -= 1
                        else:
                            break
                    if top >= 0:
                        best[q] = (sw[top] - wq) / (q - si[top])
                    top += 1
                    sw[top] = wq
                    si[top] = q
                if not back or start == 0:
                    continue
                # observers of the block before whose upward window ends at q (all the
                # remaining ones once the block is complete or the line ends)
                i_hi = q - L if q < end - 1 else start - 1
                for i in range(q - L, i_hi + 1):
                    wi = w[i]
                    if top < 0 or wi != wi:
                        continue
                    guess = _tangent_vertex(sw, si, top, wi, i, guess)
                    m = (sw[guess] - wi) / (si[guess] - i)
                    if m > best_b[i]:
                        best_b[i] = m
        # hull grown leftwards over the block before, [start - L, start); searched by the
        # observers of [start, end) toward lower indices
        if start == 0:
            continue
        if start >= n and not back:
            break
        top = -1
        nxt = min(start, n) - 1
        guess = 0
        # observers from min(start + L, n) - 1 down to start; the last pass (o = start - 1,
        # the only one when start >= n) just completes the hull for the upward tangents
        for o in range(max(min(start + L, n) - 1, start - 1), start - 2, -1):
            lo_idx = o - L if o >= start else start - L
            while nxt >= lo_idx:
                wp = w[nxt]
                if wp == wp:
                    while top >= 1:
                        # drop the top when it is on or below the segment p-(top-1)
                        if (sw[top] - wp) * (si[top - 1] - nxt) <= (sw[top - 1] - wp) * (
                            si[top] - nxt
                        ):
                            top -= 1
                        else:
                            break
                    if back and top >= 0:
                        m = (sw[top] - wp) / (si[top] - nxt)
                        if m > best_b[nxt]:
                            best_b[nxt] = m
                    top += 1
                    sw[top] = wp
                    si[top] = nxt
                nxt -= 1
            if o < start:
                break
            wi = w[o]
            if top < 0 or wi != wi:
                continue
            guess = _tangent_vertex(sw, si, top, wi, o, guess)
            m = (sw[guess] - wi) / (o - si[guess])
            if m > best[o]:
                best[o] = m
    inv_ds = 1.0 / ds
    for i in range(n):
        out[i] = _final_tangent(w[i], best[i], -i * ds * inv_r, inv_ds, floor0)
    if back:
        for i in range(n):
            out_b[i] = _final_tangent(w[i], best_b[i], i * ds * inv_r, inv_ds, floor0)


@numba.njit(cache=True, nogil=True, error_model="numpy", inline="always")
def _final_tangent(wi, m, curvature_term, inv_ds, floor0):
    """Tangent [1] from the best per-index tangent ``m`` of observer height ``wi``."""
    if wi != wi:
        return np.nan
    if m == -np.inf:
        return 0.0 if floor0 else np.nan
    m = m * inv_ds + curvature_term
    if floor0 and m < 0.0:
        m = 0.0
    return m


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _scan_one_line(w, n, L, ds, inv_r, floor0, sw, si, best, out):
    """Max elevation tangent over the window [i-L, i-1] for each point i of one line (the
    one-directional form of :func:`_scan_line_pair`)."""
    _scan_line_pair(w, n, L, ds, inv_r, floor0, False, sw, si, best, best, out, out)


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _column_offsets(nx_v, s):
    """Where the line o crosses view column c: row o + fl[c] + fr[c] (0 <= fr < 1).

    Also ``up[c]``, the pixel row (relative to o) just below the crossing, and ``g[c]``, the
    interpolation weight of the line below a pixel: pixel (r, c) lies between the lines
    r - up[c] (weight 1 - g[c]) and r - up[c] + 1 (weight g[c]).
    """
    fl = np.empty(nx_v, dtype=np.int64)
    fr = np.empty(nx_v)
    up = np.empty(nx_v, dtype=np.int64)
    g = np.empty(nx_v)
    for c in range(nx_v):
        q = c * s
        f0 = math.floor(q)
        f = q - f0
        k = int(f0)
        if f < 1e-9:
            f = 0.0
        elif f > 1.0 - 1e-9:
            f = 0.0
            k += 1
        fl[c] = k
        fr[c] = f
        up[c] = k + 1 if f > 0.0 else k
        g[c] = 1.0 - f if f > 0.0 else 0.0
    return fl, fr, up, g


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _scan_block(
    zc,
    flip,
    fl,
    fr,
    ny_v,
    o0,
    nb,
    ds,
    L,
    inv_r,
    floor0,
    back,
    wbuf,
    res,
    res_b,
    span,
    sw,
    si,
    best,
    best_b,
):
    """Scan the lines o0 .. o0+nb-1 of one azimuth into ``res[1:nb+1]`` (NaN off the line),
    and when ``back`` those of the opposite azimuth (the same lines) into ``res_b[1:nb+1]``.

    ``zc[c', r]`` is the elevation at view row r of view column c (c' = nx_v-1-c when
    ``flip``), contiguous along r, so the nb lines are gathered column by column from short
    contiguous runs; each line is then scanned as a contiguous 1-D array.
    """
    nx_v = fl.size
    half_inv_r = 0.5 * inv_r
    # the line o0+b is on the grid at column c when 0 <= base+b <= ny_v-1 (-1 if fr > 0),
    # base = o0 + fl[c]: a run of lines that shifts by at most one per column, so each
    # line's span of columns is set where it enters and leaves the run
    for b in range(nb):
        span[b, 0] = nx_v
        span[b, 1] = -1
    p_lo = 0
    p_hi = -1
    for c in range(nx_v):
        base = o0 + fl[c]
        lo = max(0, -base)
        hi = min(nb - 1, ny_v - 1 - base - (1 if fr[c] > 0.0 else 0))
        for b in range(lo, min(hi, p_lo - 1) + 1):
            span[b, 0] = c
        for b in range(max(lo, p_hi + 1), hi + 1):
            span[b, 0] = c
        for b in range(p_lo, min(p_hi, lo - 1) + 1):
            span[b, 1] = c - 1
        for b in range(max(p_lo, hi + 1), p_hi + 1):
            span[b, 1] = c - 1
        p_lo, p_hi = (lo, hi) if lo <= hi else (0, -1)
    for b in range(p_lo, p_hi + 1):
        span[b, 1] = nx_v - 1
    for c in range(nx_v):
        cc = nx_v - 1 - c if flip else c
        f = fr[c]
        base = o0 + fl[c]
        lo = max(0, -base)
        hi = min(nb - 1, ny_v - 1 - base - (1 if f > 0.0 else 0))
        if f == 0.0:
            for b in range(lo, hi + 1):
                t = (c - span[b, 0]) * ds
                wbuf[b, c] = zc[cc, base + b] - t * t * half_inv_r
        else:
            for b in range(lo, hi + 1):
                t = (c - span[b, 0]) * ds
                wbuf[b, c] = (
                    (1.0 - f) * zc[cc, base + b] + f * zc[cc, base + b + 1] - t * t * half_inv_r
                )
    for b in range(nb):
        c_lo = span[b, 0]
        c_hi = span[b, 1]
        row = res[b + 1]
        row_b = res_b[b + 1]
        for c in range(nx_v):
            row[c] = np.nan
        if back:
            for c in range(nx_v):
                row_b[c] = np.nan
        if c_hi < c_lo:
            continue
        if back:
            _scan_line_pair(
                wbuf[b, c_lo : c_hi + 1],
                c_hi - c_lo + 1,
                L,
                ds,
                inv_r,
                floor0,
                True,
                sw,
                si,
                best,
                best_b,
                row[c_lo : c_hi + 1],
                row_b[c_lo : c_hi + 1],
            )
        else:
            _scan_one_line(
                wbuf[b, c_lo : c_hi + 1],
                c_hi - c_lo + 1,
                L,
                ds,
                inv_r,
                floor0,
                sw,
                si,
                best,
                row[c_lo : c_hi + 1],
            )


@numba.njit(cache=True, nogil=True, error_model="numpy", inline="always")
def _between_lines(a, b, g):
    """(1 - g) a + g b, falling back to the defined one of a, b (NaN when neither is)."""
    a2 = b if a != a else a
    b2 = a if b != b else b
    return (1.0 - g) * a2 + g * b2


_BLOCK = 32


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _horizon_azimuth(
    zc,
    flip,
    s,
    o_min,
    n_lines,
    ds,
    L,
    inv_r,
    cos_phi,
    sin_phi,
    back,
    cos_s,
    sin_cos,
    sin_sin,
    horizon_out,
    horizon_b,
    sky_acc,
):
    """Horizon angle [deg] of one azimuth and its sky-view term, both on the view frame;
    with ``back``, also those of the opposite azimuth (into ``horizon_b``) from the same lines.

    The view arrays are indexed [c', r] like ``zc``: ``cos_s``, ``sin_cos``, ``sin_sin`` hold
    cos S, sin S cos A, sin S sin A (NaN = no data); ``horizon_out`` gets the angle [deg];
    ``sky_acc`` is incremented by the azimuth's term of Eq. 7b of Dozier & Frew (1990).
    Lines are processed in blocks of ``_BLOCK``; the pixels between the last line of the
    previous block (kept in ``res[0]``) and the lines of this block are finished before the
    next block, so only (block + 1) lines are ever held.
    """
    nx_v = zc.shape[0]
    ny_v = zc.shape[1]
    fl, fr, up, g = _column_offsets(nx_v, s)
    nb_max = _BLOCK
    wbuf = np.empty((nb_max, nx_v))
    res = np.empty((nb_max + 1, nx_v))
    span = np.empty((nb_max, 2), dtype=np.int64)
    sw = np.empty(nx_v)
    si = np.empty(nx_v)  # float indices: no int-to-float conversions in the hull tests
    best = np.empty(nx_v)
    res_b = np.empty((nb_max + 1, nx_v)) if back else res
    best_b = np.empty(nx_v) if back else best
    e_buf = np.empty((nb_max, nx_v))
    e_buf_b = np.empty((nb_max, nx_v)) if back else e_buf
    p_buf = np.empty((nb_max, nx_v))
    q_buf = np.empty((nb_max, nx_v))
    rad2deg = 180.0 / math.pi
    half_pi = 0.5 * math.pi
    for c in range(nx_v):
        res[0, c] = np.nan
        res_b[0, c] = np.nan
    o_first = int(o_min)
    for o0 in range(o_first, o_first + n_lines, nb_max):
        nb = min(nb_max, o_first + n_lines - o0)
        _scan_block(
            zc,
            flip,
            fl,
            fr,
            ny_v,
            o0,
            nb,
            ds,
            L,
            inv_r,
            True,
            back,
            wbuf,
            res,
            res_b,
            span,
            sw,
            si,
            best,
            best_b,
        )
        # pixels whose upper line is o0-1 .. o0+nb-2 (res rows 0 .. nb-1): first the angles
        # and the sky-view weights along each line (loops that vectorise), then the pixel
        # updates. With H = pi/2 - e: sin^2 H = 1/(1+m^2), sin H cos H = m/(1+m^2); the
        # opposite azimuth has cos(phi - A) of the other sign.
        for k in range(nb):
            for c in range(nx_v):
                m = _between_lines(res[k, c], res[k + 1, c], g[c])
                m = 0.0 if m != m else m
                e, inv = _atan_cos2(m)
                e_buf[k, c] = e
                p_buf[k, c] = inv
                q_buf[k, c] = half_pi - e - m * inv
            if back:
                for c in range(nx_v):
                    m = _between_lines(res_b[k, c], res_b[k + 1, c], g[c])
                    m = 0.0 if m != m else m
                    e, inv = _atan_cos2(m)
                    e_buf_b[k, c] = e
                    p_buf[k, c] += inv
                    q_buf[k, c] -= half_pi - e - m * inv
        for c in range(nx_v):
            cc = nx_v - 1 - c if flip else c
            u = up[c]
            r_lo = max(0, o0 - 1 + u)
            r_hi = min(ny_v - 1, o0 + nb - 2 + u)
            for r in range(r_lo, r_hi + 1):
                k = r - u - o0 + 1
                cs = cos_s[cc, r]
                if cs != cs:
                    horizon_out[cc, r] = np.nan
                    if back:
                        horizon_b[cc, r] = np.nan
                else:
                    horizon_out[cc, r] = e_buf[k, c] * rad2deg
                    if back:
                        horizon_b[cc, r] = e_buf_b[k, c] * rad2deg
                    cos_rel = sin_cos[cc, r] * cos_phi + sin_sin[cc, r] * sin_phi
                    sky_acc[cc, r] += cs * p_buf[k, c] + cos_rel * q_buf[k, c]
        for c in range(nx_v):
            res[0, c] = res[nb, c]
            res_b[0, c] = res_b[nb, c]


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _sx_azimuth(zc, flip, s, o_min, n_lines, ds, L, total, count):
    """Accumulate atan(max upwind tangent) [deg] of one direction at each pixel.

    ``total`` and ``count`` are view arrays indexed [c', r] like ``zc``; pixels where no
    line value is defined are left alone.
    """
    nx_v = zc.shape[0]
    ny_v = zc.shape[1]
    fl, fr, up, g = _column_offsets(nx_v, s)
    nb_max = _BLOCK
    wbuf = np.empty((nb_max, nx_v))
    res = np.empty((nb_max + 1, nx_v))
    span = np.empty((nb_max, 2), dtype=np.int64)
    sw = np.empty(nx_v)
    si = np.empty(nx_v)  # float indices: no int-to-float conversions in the hull tests
    best = np.empty(nx_v)
    e_buf = np.empty((nb_max, nx_v))
    rad2deg = 180.0 / math.pi
    for c in range(nx_v):
        res[0, c] = np.nan
    o_first = int(o_min)
    for o0 in range(o_first, o_first + n_lines, nb_max):
        nb = min(nb_max, o_first + n_lines - o0)
        _scan_block(
            zc,
            flip,
            fl,
            fr,
            ny_v,
            o0,
            nb,
            ds,
            L,
            0.0,
            False,
            False,
            wbuf,
            res,
            res,
            span,
            sw,
            si,
            best,
            best,
        )
        for k in range(nb):
            for c in range(nx_v):
                if g[c] == 0.0:
                    m = res[k, c]
                else:
                    m = _between_lines(res[k, c], res[k + 1, c], g[c])
                e_buf[k, c] = _atan(m) * rad2deg  # NaN stays NaN
        for c in range(nx_v):
            cc = nx_v - 1 - c if flip else c
            u = up[c]
            r_lo = max(0, o0 - 1 + u)
            r_hi = min(ny_v - 1, o0 + nb - 2 + u)
            for r in range(r_lo, r_hi + 1):
                e = e_buf[r - u - o0 + 1, c]
                if e == e and zc[cc, r] == zc[cc, r]:
                    total[cc, r] += e
                    count[cc, r] += 1.0
        for c in range(nx_v):
            res[0, c] = res[nb, c]


class _Geometry:
    """Line geometry of one azimuth on a grid (see the module docstring).

    The view frame has its lines running along view columns; ``transpose`` says whether the
    view rows are the grid's columns, ``flip`` whether view columns run against the grid's.
    Kernels index view arrays as [c', r] (c' the grid-side column index): ``view`` gives that
    form of a (y, x) grid array.
    """

    def __init__(
        self, azimuth_deg: float, ny: int, nx: int, dx_m: float, dy_m: float, distance_m: float
    ):
        phi = math.radians(azimuth_deg)
        dr = -math.cos(phi) / dy_m  # toward the horizon, in pixels per metre
        dc = math.sin(phi) / dx_m
        if abs(dc) >= abs(dr):
            self.transpose = False
            DR, DC, col_m, row_m, ny_v, nx_v = dr, dc, dx_m, dy_m, ny, nx
        else:
            self.transpose = True
            DR, DC, col_m, row_m, ny_v, nx_v = dc, dr, dy_m, dx_m, nx, ny
        self.flip = DC > 0
        if self.flip:
            DC = -DC
        self.s = DR / DC
        if abs(self.s) < 1e-12:
            self.s = 0.0
        self.ds = math.hypot(col_m, self.s * row_m)
        self.L = max(1, int(math.floor(distance_m / self.ds + 1e-9)))
        lo = min(0.0, -(nx_v - 1) * self.s)
        hi = max(ny_v - 1.0, ny_v - 1.0 - (nx_v - 1) * self.s)
        self.o_min = float(math.floor(lo)) - 1.0
        self.n_lines = int(math.ceil(hi)) - int(self.o_min) + 2

    def view(self, grid: np.ndarray) -> np.ndarray:
        """The [c', r] view of a (y, x) array (no copy)."""
        return grid if self.transpose else grid.T

    def elevation(self, z: np.ndarray, zt: np.ndarray) -> np.ndarray:
        """The [c', r] view of the elevations, contiguous along r (``zt`` is ``z.T`` copied)."""
        return z if self.transpose else zt


def _prepare(elevation_m):
    z = np.ascontiguousarray(elevation_m, dtype=np.float64)
    return z, np.ascontiguousarray(z.T)


def _slope_terms(z, slope_deg, aspect_deg, cos_s, sin_cos, sin_sin):
    """cos S, sin S cos A and sin S sin A [1] into the float32 arrays given (NaN where ``z``
    is NaN; a flat pixel's NaN aspect counts as 0, its sin S being 0). Float32 ufuncs, which
    release the GIL, so row blocks can run in threads."""
    s_rad = np.radians(slope_deg, dtype=np.float32)
    a_rad = np.nan_to_num(np.radians(aspect_deg, dtype=np.float32), nan=0.0)
    s_rad[np.isnan(z)] = np.nan
    np.cos(s_rad, out=cos_s)
    sin_s = np.sin(s_rad)
    np.multiply(sin_s, np.cos(a_rad), out=sin_cos)
    np.multiply(sin_s, np.sin(a_rad), out=sin_sin)


def _opposite_pairs(azimuths_deg: np.ndarray) -> list[tuple[int, int]]:
    """Azimuth indices as (i, j) tasks, j the opposite azimuth scanned along the same lines
    (or -1), each index exactly once."""
    todo = list(range(azimuths_deg.size))
    tasks = []
    while todo:
        i = todo.pop(0)
        gap = (azimuths_deg[todo] - azimuths_deg[i] - 180.0) % 360.0
        near = np.flatnonzero(np.minimum(gap, 360.0 - gap) < 1e-9)
        j = todo.pop(int(near[0])) if near.size else -1
        tasks.append((i, j))
    return tasks


def horizon_sky_view_dozier_frew1990(
    elevation_m: np.ndarray,
    dx_m: float,
    dy_m: float,
    slope_deg: np.ndarray,
    aspect_deg: np.ndarray,
    azimuths_deg: np.ndarray,
    distance_m: float,
    *,
    earth_curvature: bool = True,
    progress=None,
) -> tuple[np.ndarray, np.ndarray]:
    """Horizon elevation angles per azimuth and the sky-view factor.

    Parameters
    ----------
    elevation_m : ndarray (y, x) float64
        Elevations [m] on a north-up metric grid, NaN for nodata.
    dx_m, dy_m : float
        Pixel size [m].
    slope_deg, aspect_deg : ndarray (y, x)
        Slope and aspect [deg] (aspect NaN where flat).
    azimuths_deg : ndarray (n_az,)
        Equally spaced azimuths [deg], 0 = north, clockwise.
    distance_m : float
        Maximum search distance [m].
    earth_curvature : bool
        Lower distant terrain by d²/2R, R = 6.371e6 m.
    progress : callable or None
        Called with 1 after each azimuth (e.g. ``tqdm.update``).

    Returns
    -------
    horizon_deg : ndarray (n_az, y, x) float32
        Horizon elevation angle [deg], floored at 0; NaN for nodata. Terrain beyond the
        grid edge is unknown and counts as flat.
    sky_view_frac : ndarray (y, x) float64
        Sky-view factor [1].

    Notes
    -----
    Horizon: e_φ = max over 0 < d ≤ d_max of atan[(z(d) − z0 − d²/2R)/d], floored at 0.
    Sky view (Eq. 7b of [1], the integral as a mean over the N azimuths), with the horizon
    zenith H_φ = 90° − e_φ, slope S and aspect A:
    V = (1/2π) ∫ [cos S sin²H_φ + sin S cos(φ − A)(H_φ − sin H_φ cos H_φ)] dφ.
    The sky-view sum is accumulated in the scan, pixel by pixel, as each azimuth's angles are
    finished. Azimuths 180° apart (every one when N is even) are scanned together along the
    lines of the first of the two; off the grid directions their lines sit a fraction of a
    pixel from where a scan of the second alone would put them, which moves single angles by
    about as much as the line interpolation itself does.

    References
    ----------
    .. [1] Dozier, J., & Frew, J. (1990). Rapid calculation of terrain parameters for
       radiation modeling from digital elevation data. IEEE Transactions on Geoscience and
       Remote Sensing 28(5), 963–969. https://doi.org/10.1109/36.58986
    """
    z, zt = _prepare(elevation_m)
    ny, nx = z.shape
    az = np.asarray(azimuths_deg, dtype=np.float64)
    slope = np.asarray(slope_deg)
    aspect = np.asarray(aspect_deg)
    cos_s = np.empty((ny, nx), dtype=np.float32)
    sin_cos = np.empty((ny, nx), dtype=np.float32)
    sin_sin = np.empty((ny, nx), dtype=np.float32)
    horizon = np.empty((az.size, ny, nx), dtype=np.float32)
    inv_r = 1.0 / EARTH_RADIUS_M if earth_curvature else 0.0

    def terms(rows):
        _slope_terms(z[rows], slope[rows], aspect[rows], cos_s[rows], sin_cos[rows], sin_sin[rows])

    def work(tasks):
        acc = np.zeros((ny, nx))
        for i, j in tasks:
            g = _Geometry(az[i], ny, nx, dx_m, dy_m, distance_m)
            phi = math.radians(az[i])
            _horizon_azimuth(
                g.elevation(z, zt),
                g.flip,
                g.s,
                g.o_min,
                g.n_lines,
                g.ds,
                g.L,
                inv_r,
                math.cos(phi),
                math.sin(phi),
                j >= 0,
                g.view(cos_s),
                g.view(sin_cos),
                g.view(sin_sin),
                g.view(horizon[i]),
                g.view(horizon[j if j >= 0 else i]),
                g.view(acc),
            )
            if progress is not None:
                progress(1 if j < 0 else 2)
        return acc

    tasks = _opposite_pairs(az)
    chunks = [tasks[k::_N_THREADS] for k in range(_N_THREADS)]
    bounds = np.linspace(0, ny, _N_THREADS + 1).astype(int)
    with ThreadPoolExecutor(_N_THREADS) as pool:
        list(pool.map(terms, [slice(a, b) for a, b in pairwise(bounds)]))
        parts = list(pool.map(work, chunks))
    sky = parts[0]
    for p in parts[1:]:
        sky += p
    sky /= az.size
    np.clip(sky, 0.0, 1.0, out=sky)
    sky[np.isnan(z)] = np.nan
    return horizon, sky


def sky_view_dozier_frew1990(horizon_deg, azimuths_deg, slope_deg, aspect_deg) -> np.ndarray:
    """Sky-view factor from given horizon angles (the discrete form of Eq. 7b of [1]).

    Parameters
    ----------
    horizon_deg : array (n_az, ...) horizon elevation angles [deg] at equally spaced azimuths
    azimuths_deg : array (n_az,) [deg]
    slope_deg, aspect_deg : arrays broadcastable to ``horizon_deg[0]`` [deg]

    Returns
    -------
    ndarray : sky-view factor [1]

    References
    ----------
    .. [1] Dozier, J., & Frew, J. (1990). IEEE TGRS 28(5), 963–969.
       https://doi.org/10.1109/36.58986
    """
    e = np.radians(np.asarray(horizon_deg, dtype=np.float64))
    h = 0.5 * np.pi - e
    phi = np.radians(np.asarray(azimuths_deg, dtype=np.float64)).reshape(
        (-1,) + (1,) * (e.ndim - 1)
    )
    s = np.radians(np.asarray(slope_deg, dtype=np.float64))
    a = np.radians(np.nan_to_num(np.asarray(aspect_deg, dtype=np.float64), nan=0.0))
    term = np.cos(s) * np.sin(h) ** 2 + np.sin(s) * np.cos(phi - a) * (h - np.sin(h) * np.cos(h))
    return term.mean(axis=0)


def max_upwind_slope_winstral2002(
    elevation_m: np.ndarray,
    dx_m: float,
    dy_m: float,
    directions_deg: np.ndarray,
    distance_m: float,
    *,
    half_width_deg: float = 15.0,
    step_deg: float = 5.0,
    progress=None,
) -> np.ndarray:
    """Maximum upwind slope Sx per wind direction (Winstral et al. 2002).

    Parameters
    ----------
    elevation_m : ndarray (y, x) float64
        Elevations [m], NaN for nodata.
    dx_m, dy_m : float
        Pixel size [m].
    directions_deg : ndarray (n_dir,)
        Wind directions (where the wind comes from) [deg], 0 = north, clockwise.
    distance_m : float
        Upwind search distance d_max [m].
    half_width_deg, step_deg : float
        Each direction is the mean over A ± half_width in steps of ``step_deg``.

    Returns
    -------
    ndarray (n_dir, y, x) float32
        Sx [deg]: positive where upwind terrain rises above the pixel (sheltered), negative
        where the pixel stands above its upwind terrain (exposed); NaN for nodata and where
        no upwind pixel lies inside the grid.

    Notes
    -----
    Sx(A, d_max) = max over the upwind ray of atan[(z_v − z_i)/dist] (Eq. 1 of [1]), averaged
    over the sub-directions (Sect. 3 of [1]). No earth curvature (distances are short).

    References
    ----------
    .. [1] Winstral, A., Elder, K., & Davis, R. E. (2002). Spatial snow modeling of
       wind-redistributed snow using terrain-based parameters. Journal of
       Hydrometeorology 3(5), 524–538.
       https://doi.org/10.1175/1525-7541(2002)003<0524:SSMOWR>2.0.CO;2
    """
    z, zt = _prepare(elevation_m)
    ny, nx = z.shape
    dirs = np.asarray(directions_deg, dtype=np.float64)
    offsets = np.arange(-half_width_deg, half_width_deg + 1e-9, step_deg)
    out = np.empty((dirs.size, ny, nx), dtype=np.float32)

    def work(indices):
        for i in indices:
            total = np.zeros((ny, nx))
            count = np.zeros((ny, nx))
            for off in offsets:
                g = _Geometry((dirs[i] + off) % 360.0, ny, nx, dx_m, dy_m, distance_m)
                _sx_azimuth(
                    g.elevation(z, zt),
                    g.flip,
                    g.s,
                    g.o_min,
                    g.n_lines,
                    g.ds,
                    g.L,
                    g.view(total),
                    g.view(count),
                )
            with np.errstate(invalid="ignore", divide="ignore"):
                out[i] = np.where(count > 0, total / np.maximum(count, 1.0), np.nan)
            if progress is not None:
                progress(1)

    chunks = [list(range(k, dirs.size, _N_THREADS)) for k in range(_N_THREADS)]
    with ThreadPoolExecutor(_N_THREADS) as pool:
        list(pool.map(work, chunks))
    return out

"""Horizon angles, sky-view factor and maximum upwind slope by compiled line scans.

For one azimuth the grid is cut into parallel lines in that direction, spaced one pixel
apart across it; elevations along a line are linearly interpolated between the two
nearest pixels of each column (or row), so a plane stays exactly a plane. Each line is a
contiguous 1-D array scanned once. The maximum elevation angle within the search distance
is found with upper convex hulls: the search window [i − L, i − 1] is split at block
boundaries of length L into a prefix of the observer's own block (hull built forward,
O(1) amortised per point) and a suffix of the previous block (hull built backward, queried
by binary search), so a line of n points costs O(n log L) instead of O(n L). Earth
curvature enters exactly (in the parabolic form d²/2R) through the transformed height
w = z − t²/2R, because (z_j − z_i − d²/2R)/d = (w_j − w_i)/d − t_i/R with d = t_i − t_j.
A pixel's value is interpolated between the two lines that pass beside its centre.

Azimuths are split between two threads running the nogil kernels.
"""

from __future__ import annotations

import math
from concurrent.futures import ThreadPoolExecutor

import numba
import numpy as np

__all__ = [
    "EARTH_RADIUS_M",
    "horizon_sky_view_dozier_frew1990",
    "sky_view_dozier_frew1990",
    "max_upwind_slope_winstral2002",
]

EARTH_RADIUS_M = 6.371e6
_N_THREADS = 2


@numba.njit(cache=True, nogil=True, error_model="numpy", inline="always")
def _atan(x):
    """Arctangent [rad] by argument reduction (|u| <= tan(pi/8)) and the Taylor series to
    u**23 (truncation error < 1e-11 rad). A libm call does not vectorise; this does."""
    ax = abs(x)
    inv = ax > 1.0
    if inv:
        ax = 1.0 / ax
    hi = ax > 0.41421356237309503
    u = (ax - 1.0) / (ax + 1.0) if hi else ax
    u2 = u * u
    p = -1.0 / 23.0
    for k in range(10, -1, -1):
        p = (1.0 if k % 2 == 0 else -1.0) / (2 * k + 1) + u2 * p
    r = u * p
    if hi:
        r += 0.7853981633974483
    if inv:
        r = 1.5707963267948966 - r
    return -r if x < 0 else r


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _scan_one_line(w, n, L, ds, inv_r, floor0, sw, si, best, out):
    """Max elevation tangent over the window [i-L, i-1] for each point i of one line.

    ``w`` holds the curvature-transformed heights (NaN = no data); the hull is kept as
    parallel stacks of heights ``sw`` and indices ``si``. ``out[i]`` gets the tangent
    (minus the curvature term t_i/R, floored at 0 when ``floor0``), NaN for a missing
    observer, and 0 (``floor0``) or NaN when the window holds no data.
    """
    for i in range(n):
        best[i] = -np.inf
    # prefix of the observer's own block: forward hull with popping
    for start in range(0, n, L):
        top = -1
        for i in range(start, min(start + L, n)):
            wi = w[i]
            if wi != wi:
                continue
            while top >= 1:
                if (sw[top - 1] - wi) * (i - si[top]) >= (sw[top] - wi) * (i - si[top - 1]):
                    top -= 1
                else:
                    break
            if top >= 0:
                best[i] = (sw[top] - wi) / (i - si[top])
            top += 1
            sw[top] = wi
            si[top] = i
    # suffix of the previous block: hull grown leftwards, tangent by galloping search
    for start in range(L, n, L):
        end = min(start + L, n)
        top = -1
        nxt = start - 1
        guess = 0
        for i in range(end - 1, start - 1, -1):
            lo_idx = i - L
            while nxt >= lo_idx:
                wp = w[nxt]
                if wp == wp:
                    while top >= 1:
                        # drop the top when it is on or below the segment p-(top-1)
                        if (sw[top] - wp) * (si[top - 1] - nxt) <= (sw[top - 1] - wp) * (si[top] - nxt):
                            top -= 1
                        else:
                            break
                    top += 1
                    sw[top] = wp
                    si[top] = nxt
                nxt -= 1
            wi = w[i]
            if top < 0 or wi != wi:
                continue
            # tangent index k*: first k with slope(k+1) <= slope(k); gallop from the
            # previous tangent (it moves little between neighbouring observers)
            p = guess if guess < top else top
            if p < top and (sw[p + 1] - wi) * (i - si[p]) > (sw[p] - wi) * (i - si[p + 1]):
                lo = p + 1
                step = 1
                hi = lo
                while hi < top:
                    if (sw[hi + 1] - wi) * (i - si[hi]) > (sw[hi] - wi) * (i - si[hi + 1]):
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
                    if (sw[lo] - wi) * (i - si[lo - 1]) > (sw[lo - 1] - wi) * (i - si[lo]):
                        break
                    hi = lo - 1
                    lo = max(lo - 2 * step, 0)
                    step *= 2
            while lo < hi:
                mid = (lo + hi) >> 1
                if (sw[mid + 1] - wi) * (i - si[mid]) > (sw[mid] - wi) * (i - si[mid + 1]):
                    lo = mid + 1
                else:
                    hi = mid
            guess = lo
            m = (sw[lo] - wi) / (i - si[lo])
            if m > best[i]:
                best[i] = m
    inv_ds = 1.0 / ds
    for i in range(n):
        wi = w[i]
        m = best[i]
        if wi != wi:
            out[i] = np.nan
        elif m == -np.inf:
            out[i] = 0.0 if floor0 else np.nan
        else:
            m = m * inv_ds - i * ds * inv_r
            if floor0 and m < 0.0:
                m = 0.0
            out[i] = m


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _scan_lines(z, flip, s, o_min, n_lines, ds, L, inv_r, floor0, buf):
    """Scan every line of one azimuth in the view frame of ``z``.

    The line o = o_min + k crosses column c at row o + c*s. Its result there is stored at
    buf[o + ceil(c*s), c], the pixel row just below the crossing, so that the value at pixel
    (r, c) is (1 - g_c) buf[r, c] + g_c buf[r + 1, c] with g_c = ceil(c*s) - c*s.
    ``buf`` (ny + 1, nx) float32 must be NaN on entry.
    """
    ny, nx = z.shape
    fl = np.empty(nx, dtype=np.int64)
    fr = np.empty(nx)
    up = np.empty(nx, dtype=np.int64)
    for c in range(nx):
        q = c * s
        f0 = math.floor(q)
        fl[c] = int(f0)
        fr[c] = q - f0
        if fr[c] < 1e-9:
            fr[c] = 0.0
        elif fr[c] > 1.0 - 1e-9:
            fr[c] = 0.0
            fl[c] += 1
        up[c] = fl[c] + 1 if fr[c] > 0.0 else fl[c]
    w = np.empty(nx)
    sw = np.empty(nx)
    si = np.empty(nx, dtype=np.int64)
    best = np.empty(nx)
    res = np.empty(nx)
    half_inv_r = 0.5 * inv_r
    for k in range(n_lines):
        o = int(o_min) + k
        # columns where the line lies inside the grid: 0 <= o + c*s <= ny-1
        c_lo = -1
        c_hi = -2
        for c in range(nx):
            r0 = o + fl[c]
            if r0 >= 0 and (r0 < ny - 1 or (r0 == ny - 1 and fr[c] == 0.0)):
                if c_lo < 0:
                    c_lo = c
                c_hi = c
            elif c_lo >= 0:
                break
        n = c_hi - c_lo + 1
        if n <= 0:
            continue
        for i in range(n):
            c = c_lo + i
            r0 = o + fl[c]
            f = fr[c]
            cc = nx - 1 - c if flip else c
            if f == 0.0:
                v = z[r0, cc]
            else:
                v = (1.0 - f) * z[r0, cc] + f * z[r0 + 1, cc]
            t = i * ds
            w[i] = v - t * t * half_inv_r
        _scan_one_line(w, n, L, ds, inv_r, floor0, sw, si, best, res)
        for i in range(n):
            c = c_lo + i
            buf[o + up[c], c] = res[i]


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _column_weights(nx, s):
    g = np.empty(nx)
    for c in range(nx):
        q = c * s
        gc = math.ceil(q) - q
        if gc < 1e-9 or gc > 1.0 - 1e-9:
            gc = 0.0
        g[c] = gc
    return g


_TILE = 64


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _gather_horizon(buf, transpose, flip, s, cos_phi, sin_phi, terms, horizon_out, sky_acc):
    """Pixel horizon angles [deg] for one azimuth, plus its sky-view term (Dozier & Frew).

    ``terms`` (3, y, x) float32 holds cos S, sin S cos A, sin S sin A (NaN = no data).
    Loops over the view frame in tiles; (r, c) of the view is (r, c') of the original grid,
    c' = nx-1-c when flipped, transposed when ``transpose``.
    """
    ny_v = buf.shape[0] - 1
    nx_v = buf.shape[1]
    g = _column_weights(nx_v, s)
    rad2deg = 180.0 / math.pi
    half_pi = 0.5 * math.pi
    tr = 1 if transpose else 0
    fl = 1 if flip else 0
    for r0 in range(0, ny_v, _TILE):
        for c0 in range(0, nx_v, _TILE):
            for r in range(r0, min(r0 + _TILE, ny_v)):
                for c in range(c0, min(c0 + _TILE, nx_v)):
                    cc = c + fl * (nx_v - 1 - 2 * c)
                    ro = r + tr * (cc - r)
                    co = cc + tr * (r - cc)
                    cos_s = terms[0, ro, co]
                    if cos_s != cos_s:
                        horizon_out[ro, co] = np.nan
                        continue
                    gc = g[c]
                    a = buf[r, c]
                    b = buf[r + 1, c]
                    if a != a:
                        a = b
                    if b != b:
                        b = a
                    m = (1.0 - gc) * a + gc * b
                    if m != m:
                        m = 0.0
                    e = _atan(m)
                    horizon_out[ro, co] = e * rad2deg
                    # with H = pi/2 - e: sin^2 H = 1/(1+m^2), sin H cos H = m/(1+m^2)
                    inv = 1.0 / (1.0 + m * m)
                    cos_rel = terms[1, ro, co] * cos_phi + terms[2, ro, co] * sin_phi
                    sky_acc[ro, co] += cos_s * inv + cos_rel * (half_pi - e - m * inv)


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _gather_degrees(buf, transpose, flip, s, z, total, count):
    """Accumulate atan(line value) [deg] at each pixel (for direction averages)."""
    ny_v = buf.shape[0] - 1
    nx_v = buf.shape[1]
    g = _column_weights(nx_v, s)
    rad2deg = 180.0 / math.pi
    for r0 in range(0, ny_v, _TILE):
        for c0 in range(0, nx_v, _TILE):
            for r in range(r0, min(r0 + _TILE, ny_v)):
                for c in range(c0, min(c0 + _TILE, nx_v)):
                    cc = nx_v - 1 - c if flip else c
                    if transpose:
                        ro = cc
                        co = r
                    else:
                        ro = r
                        co = cc
                    if math.isnan(z[ro, co]):
                        continue
                    gc = g[c]
                    a = buf[r, c]
                    if gc == 0.0:
                        m = a
                    else:
                        b = buf[r + 1, c]
                        if math.isnan(a):
                            m = b
                        elif math.isnan(b):
                            m = a
                        else:
                            m = (1.0 - gc) * a + gc * b
                    if not math.isnan(m):
                        total[ro, co] += _atan(m) * rad2deg
                        count[ro, co] += 1.0


class _Geometry:
    """Line geometry of one azimuth on a grid (see the module docstring)."""

    def __init__(self, azimuth_deg: float, ny: int, nx: int, dx_m: float, dy_m: float, distance_m: float):
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
        self.ny_v = ny_v
        self.nx_v = nx_v

    def scan(self, z, zt, inv_r, floor0):
        """Line results in the view frame: (ny_v + 1, nx_v) float32, NaN where undefined."""
        buf = np.full((self.ny_v + 1, self.nx_v), np.nan, dtype=np.float32)
        _scan_lines(zt if self.transpose else z, self.flip, self.s, self.o_min, self.n_lines,
                    self.ds, self.L, inv_r, floor0, buf)
        return buf


def _prepare(elevation_m):
    z = np.ascontiguousarray(elevation_m, dtype=np.float64)
    return z, np.ascontiguousarray(z.T)


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

    References
    ----------
    .. [1] Dozier, J., & Frew, J. (1990). Rapid calculation of terrain parameters for
       radiation modeling from digital elevation data. IEEE Transactions on Geoscience and
       Remote Sensing 28(5), 963–969. https://doi.org/10.1109/36.58986
    """
    z, zt = _prepare(elevation_m)
    ny, nx = z.shape
    az = np.asarray(azimuths_deg, dtype=np.float64)
    s_rad = np.radians(np.asarray(slope_deg, dtype=np.float64))
    a_rad = np.radians(np.nan_to_num(np.asarray(aspect_deg, dtype=np.float64), nan=0.0))
    s_rad[np.isnan(z)] = np.nan
    terms = np.empty((3, ny, nx), dtype=np.float32)
    terms[0] = np.cos(s_rad)
    terms[1] = np.sin(s_rad) * np.cos(a_rad)
    terms[2] = np.sin(s_rad) * np.sin(a_rad)
    del s_rad, a_rad
    horizon = np.empty((az.size, ny, nx), dtype=np.float32)
    inv_r = 1.0 / EARTH_RADIUS_M if earth_curvature else 0.0

    def work(indices):
        acc = np.zeros((ny, nx))
        for i in indices:
            g = _Geometry(az[i], ny, nx, dx_m, dy_m, distance_m)
            buf = g.scan(z, zt, inv_r, True)
            phi = math.radians(az[i])
            _gather_horizon(buf, g.transpose, g.flip, g.s, math.cos(phi), math.sin(phi), terms,
                            horizon[i], acc)
            del buf
            if progress is not None:
                progress(1)
        return acc

    chunks = [list(range(k, az.size, _N_THREADS)) for k in range(_N_THREADS)]
    with ThreadPoolExecutor(_N_THREADS) as pool:
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
    phi = np.radians(np.asarray(azimuths_deg, dtype=np.float64)).reshape((-1,) + (1,) * (e.ndim - 1))
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
                buf = g.scan(z, zt, 0.0, False)
                _gather_degrees(buf, g.transpose, g.flip, g.s, z, total, count)
            with np.errstate(invalid="ignore", divide="ignore"):
                out[i] = np.where(count > 0, total / np.maximum(count, 1.0), np.nan)
            if progress is not None:
                progress(1)

    chunks = [list(range(k, dirs.size, _N_THREADS)) for k in range(_N_THREADS)]
    with ThreadPoolExecutor(_N_THREADS) as pool:
        list(pool.map(work, chunks))
    return out

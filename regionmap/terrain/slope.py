"""Slope, aspect and curvature on a metric grid (compiled 3 x 3 / stencil kernels)."""

from __future__ import annotations

import math

import numba
import numpy as np

__all__ = ["slope_aspect_horn1981", "curvature_liston_sturm1998"]


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _horn_kernel(z, dx, dy, slope_deg, aspect_deg):
    ny, nx = z.shape
    rad2deg = 180.0 / math.pi
    w = np.empty(9)
    for r in range(ny):
        for c in range(nx):
            zc = z[r, c]
            if math.isnan(zc):
                slope_deg[r, c] = np.nan
                aspect_deg[r, c] = np.nan
                continue
            k = 0
            for rr in range(r - 1, r + 2):
                for cc in range(c - 1, c + 2):
                    if 0 <= rr < ny and 0 <= cc < nx and not math.isnan(z[rr, cc]):
                        w[k] = z[rr, cc]
                    else:
                        w[k] = zc  # missing neighbour: the centre value (as gdaldem -compute_edges)
                    k += 1
            p = ((w[2] + 2.0 * w[5] + w[8]) - (w[0] + 2.0 * w[3] + w[6])) / (8.0 * dx)
            q = ((w[0] + 2.0 * w[1] + w[2]) - (w[6] + 2.0 * w[7] + w[8])) / (8.0 * dy)
            slope_deg[r, c] = math.atan(math.sqrt(p * p + q * q)) * rad2deg
            if p == 0.0 and q == 0.0:
                aspect_deg[r, c] = np.nan
            else:
                a = math.atan2(-p, -q) * rad2deg
                aspect_deg[r, c] = a + 360.0 if a < 0.0 else a


def slope_aspect_horn1981(
    elevation_m: np.ndarray, dx_m: float, dy_m: float
) -> tuple[np.ndarray, np.ndarray]:
    """Slope and aspect from the 3 x 3 weighted difference of Horn (1981).

    Parameters
    ----------
    elevation_m : ndarray (y, x) float64
        Elevations [m] on a north-up metric grid, NaN for nodata.
    dx_m, dy_m : float
        Pixel size east-west and north-south [m].

    Returns
    -------
    slope_deg : ndarray (y, x) float64
        Slope angle [deg], NaN where the elevation is missing.
    aspect_deg : ndarray (y, x) float64
        Direction the slope faces [deg], 0 = north, clockwise; NaN where the gradient is
        exactly zero (flat) or the elevation is missing.

    Notes
    -----
    With the window z1…z9 read row by row from the north-west corner,
    p = [(z3+2z6+z9) − (z1+2z4+z7)]/(8Δx) (eastward rise), q = [(z1+2z2+z3) − (z7+2z8+z9)]/(8Δy)
    (northward rise); slope = atan √(p²+q²), aspect = atan2(−p, −q) mod 360 (Eqs. of [1],
    p. 18). Neighbours outside the grid or missing take the centre value, as GDAL's
    ``gdaldem -compute_edges`` does.

    References
    ----------
    .. [1] Horn, B. K. P. (1981). Hill shading and the reflectance map. Proceedings of the
       IEEE 69(1), 14–47. https://doi.org/10.1109/PROC.1981.11918
    """
    z = np.ascontiguousarray(elevation_m, dtype=np.float64)
    slope = np.empty_like(z)
    aspect = np.empty_like(z)
    _horn_kernel(z, float(dx_m), float(dy_m), slope, aspect)
    return slope, aspect


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _curvature_kernel(z, di, dj, eta_x, eta_y, eta_d, out):
    ny, nx = z.shape
    for r in range(ny):
        for c in range(nx):
            zc = z[r, c]
            if math.isnan(zc):
                out[r, c] = np.nan
                continue
            rn = max(r - di, 0)
            rs = min(r + di, ny - 1)
            cw = max(c - dj, 0)
            ce = min(c + dj, nx - 1)
            z_w = z[r, cw]
            z_e = z[r, ce]
            z_n = z[rn, c]
            z_s = z[rs, c]
            z_sw = z[rs, cw]
            z_ne = z[rn, ce]
            z_nw = z[rn, cw]
            z_se = z[rs, ce]
            total = 0.0
            count = 0
            if not (math.isnan(z_w) or math.isnan(z_e)):
                total += (zc - 0.5 * (z_w + z_e)) / (2.0 * eta_x)
                count += 1
            if not (math.isnan(z_s) or math.isnan(z_n)):
                total += (zc - 0.5 * (z_s + z_n)) / (2.0 * eta_y)
                count += 1
            if not (math.isnan(z_sw) or math.isnan(z_ne)):
                total += (zc - 0.5 * (z_sw + z_ne)) / (2.0 * eta_d)
                count += 1
            if not (math.isnan(z_nw) or math.isnan(z_se)):
                total += (zc - 0.5 * (z_nw + z_se)) / (2.0 * eta_d)
                count += 1
            out[r, c] = total / count if count > 0 else np.nan


def curvature_liston_sturm1998(
    elevation_m: np.ndarray, dx_m: float, dy_m: float, length_m: float
) -> np.ndarray:
    """Terrain curvature over a length scale, after Liston & Sturm (1998).

    Parameters
    ----------
    elevation_m : ndarray (y, x) float64
        Elevations [m], NaN for nodata.
    dx_m, dy_m : float
        Pixel size [m].
    length_m : float
        Curvature length scale η [m], about half the ridge-to-valley wavelength.

    Returns
    -------
    ndarray (y, x) float64
        Curvature [1]: positive on convex terrain (ridges), negative in hollows. Not yet
        scaled to ±0.5 (the downscaling does that over the region).

    Notes
    -----
    Ωc = ¼ [ (z − ½(z_W + z_E))/(2η) + (z − ½(z_S + z_N))/(2η)
            + (z − ½(z_SW + z_NE))/(2√2 η) + (z − ½(z_NW + z_SE))/(2√2 η) ],
    the neighbours taken at distance η along each axis (rounded to whole pixels, clipped at
    the grid edge); pairs with a missing value are left out of the mean. Form recalled
    from [1] [mem] — verify against the paper before relying on its scaling.

    References
    ----------
    .. [1] Liston, G. E., & Sturm, M. (1998). A snow-transport model for complex terrain.
       Journal of Glaciology 44(148), 498–516. https://doi.org/10.3189/S0022143000002021
    """
    z = np.ascontiguousarray(elevation_m, dtype=np.float64)
    dj = max(1, int(round(length_m / dx_m)))
    di = max(1, int(round(length_m / dy_m)))
    eta_x = dj * dx_m
    eta_y = di * dy_m
    eta_d = math.hypot(eta_x, eta_y) / math.sqrt(2.0)
    out = np.empty_like(z)
    _curvature_kernel(z, di, dj, eta_x, eta_y, eta_d, out)
    return out

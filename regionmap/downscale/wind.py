"""Wind speed at the cell: exposure to the current wind direction, bounded."""

from __future__ import annotations

import numpy as np

__all__ = [
    "EXPOSURE_CLASSES",
    "exposure_class_from_sx",
    "sx_at_direction",
    "wind_factor_winstral_sx",
    "wind_factor_liston_sturm1998",
]


def sx_at_direction(
    sx_deg: np.ndarray, directions_deg: np.ndarray, wind_from_deg: np.ndarray
) -> np.ndarray:
    """Sx of each cell at the current wind direction, linear between tabulated directions.

    Parameters
    ----------
    sx_deg : ndarray (cell, direction) float64
        Maximum upwind slope per wind direction, positive = sheltered [deg].
    directions_deg : ndarray (direction,) float64
        Ascending wind-from directions of the table in [0, 360) [deg], periodic.
    wind_from_deg : ndarray (cell, time) float64
        Current wind-from direction [deg].

    Returns
    -------
    ndarray (cell, time) float64
        Sx interpolated circularly in direction [deg]. A direction whose Sx is NaN (a cell on
        the DEM's edge with no upwind pixel inside the DEM) counts as 0: no shelter and no
        exposure, the wind and precipitation of the grid left unadjusted.
    """
    d = np.asarray(directions_deg, dtype=np.float64)
    ext = np.concatenate([d, [d[0] + 360.0]])
    w = np.mod(np.asarray(wind_from_deg, dtype=np.float64) - d[0], 360.0) + d[0]
    hi = np.clip(np.searchsorted(ext, w, side="right"), 1, d.size)
    lo = hi - 1
    frac = (w - ext[lo]) / (ext[hi] - ext[lo])
    hi = np.where(hi == d.size, 0, hi)
    sx = np.nan_to_num(np.asarray(sx_deg, dtype=np.float64), nan=0.0)
    a = np.take_along_axis(sx, lo, axis=1)
    b = np.take_along_axis(sx, hi, axis=1)
    return a + frac * (b - a)


def wind_factor_winstral_sx(
    sx_deg, *, coef_per_deg: float = 0.025, bounds: tuple[float, float] = (0.4, 1.3)
) -> np.ndarray:
    """Wind-speed factor from the maximum-upwind-slope index Sx.

    Parameters
    ----------
    sx_deg : array_like float64
        Sx at the current wind direction, positive = sheltered, negative = exposed [deg].
    coef_per_deg : float
        Speed reduction per degree of shelter [deg-1] (a tuning parameter).
    bounds : (float, float)
        Bounds of the factor [1].

    Returns
    -------
    ndarray float64
        clip(1 - k Sx, bounds) [1].

    Notes
    -----
    Sx: Winstral, Elder & Davis (2002), J. Hydrometeor. 3(5), 524-538,
    doi:10.1175/1525-7541(2002)003<0524:SMOWRS>2.0.CO;2. Scaling wind speed linearly with
    Sx follows the terrain-parameter wind distribution of Winstral, Marks & Gurney (2009),
    Hydrol. Process. 23, 2526-2535 (from memory [mem]).
    """
    return np.clip(1.0 - coef_per_deg * np.asarray(sx_deg, dtype=np.float64), bounds[0], bounds[1])


def wind_factor_liston_sturm1998(
    slope_deg,
    aspect_deg,
    wind_from_deg,
    *,
    gamma_s: float = 0.5,
    slope_ref_deg: float = 45.0,
    bounds: tuple[float, float] = (0.4, 1.3),
) -> np.ndarray:
    """Wind-speed factor from the slope in the wind direction (Liston & Sturm 1998).

    Parameters
    ----------
    slope_deg, aspect_deg : array_like float64
        Cell slope and the direction it faces [deg].
    wind_from_deg : array_like float64
        Wind-from direction [deg].
    gamma_s : float
        Slope weight gamma_s [1] (0.5 in [1], from memory [mem]).
    slope_ref_deg : float
        Slope that maps to the largest |Omega_s| = 0.5 (the paper scales Omega_s to +-0.5
        over the domain; a fixed reference keeps results independent of the chunk) [deg].
    bounds : (float, float)
        Bounds of the factor [1].

    Returns
    -------
    ndarray float64
        clip(1 + gamma_s Omega_s, bounds), Omega_s = 0.5 min(beta / beta_ref, 1)
        cos(omega - xi): positive on windward slopes (facing into the wind) [1].

    Notes
    -----
    The curvature term of [1] needs a curvature per cell, which cells do not carry; it is
    left out (gamma_c = 0).

    References
    ----------
    [1] Liston, G. E. & Sturm, M. (1998). A snow-transport model for complex terrain.
        J. Glaciol. 44(148), 498-516, Eqs. 15-16. doi:10.3189/S0022143000002021
    """
    beta = np.minimum(np.asarray(slope_deg, dtype=np.float64) / slope_ref_deg, 1.0)
    rel = np.radians(
        np.asarray(wind_from_deg) - np.nan_to_num(np.asarray(aspect_deg, dtype=np.float64))
    )
    omega_s = 0.5 * beta * np.cos(rel)
    return np.clip(1.0 + gamma_s * omega_s, bounds[0], bounds[1])


#: Exposure classes shared by cells, stations and the ``[bias]`` entries.
EXPOSURE_CLASSES = ("sheltered", "neutral", "exposed")


def exposure_class_from_sx(sx_deg: np.ndarray, *, threshold_deg: float = 2.0) -> np.ndarray:
    """Exposure class of cells or points from their Winstral Sx over all wind directions.

    The mean maximum-upwind slope over the directions (Winstral, Elder & Davis 2002,
    J. Hydrometeor. 3(5), 524-538, doi:10.1175/1525-7541(2002)003<0524:SDSWRU>2.0.CO;2)
    above ``+threshold_deg`` is sheltered, below ``-threshold_deg`` exposed, else neutral.
    The threshold is ours (a few degrees separates hollows from ridges at 100 m grids).

    Parameters
    ----------
    sx_deg : ndarray (point, direction) float
        Sx per wind direction [deg], positive = sheltered.
    threshold_deg : float
        Half width of the neutral class [deg].

    Returns
    -------
    ndarray (point,) of str: ``sheltered``, ``neutral`` or ``exposed``.
    """
    mean = np.nanmean(np.asarray(sx_deg, dtype=np.float64), axis=-1)
    out = np.full(mean.shape, "neutral", dtype=object)
    out[mean > threshold_deg] = "sheltered"
    out[mean < -threshold_deg] = "exposed"
    return out

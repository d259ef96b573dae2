"""Temperature and humidity lapse from model terrain to cell elevation.

Sign convention: a lapse rate is the *decrease* of a quantity per metre of height
(positive = colder aloft, negative = inversion) [K m-1].
"""

from __future__ import annotations

import numpy as np
import scipy.sparse as sp

from regionmap.constants import ZERO_CELSIUS_K
from regionmap.downscale.thermo import (
    BUCK1981_WATER_B,
    BUCK1981_WATER_C_DEGC,
    dew_point_from_vapour_pressure_buck1981,
    relative_humidity_from_dew_point,
    saturation_vapour_pressure_water_buck1981,
)

__all__ = [
    "KUNKEL1989_T_LAPSE_K_PER_KM",
    "KUNKEL1989_VP_COEF_PER_KM",
    "monthly_lapse_rates_kunkel1989",
    "dew_point_lapse_liston_elder2006",
    "adjust_temperature_lapse",
    "humidity_at_new_temperature",
    "dew_point_from_relative_humidity",
    "grid_lapse_fit",
]

#: Northern-Hemisphere monthly temperature lapse rates, January..December [K km-1],
#: Kunkel (1989), J. Climate 2, as tabulated by Liston & Elder (2006), J. Hydrometeor. 7(2),
#: 217-234, Table 1 (doi:10.1175/JHM486.1).
KUNKEL1989_T_LAPSE_K_PER_KM = np.array([4.4, 5.9, 7.1, 7.8, 8.1, 8.2, 8.1, 8.1, 7.7, 6.8, 5.5, 4.7])
#: Northern-Hemisphere monthly vapour-pressure coefficients lambda, January..December
#: [km-1], same sources.
KUNKEL1989_VP_COEF_PER_KM = np.array(
    [0.41, 0.42, 0.40, 0.39, 0.38, 0.36, 0.33, 0.33, 0.36, 0.37, 0.40, 0.40]
)


def monthly_lapse_rates_kunkel1989(month, latitude_deg) -> tuple[np.ndarray, np.ndarray]:
    """Monthly temperature lapse rate and vapour-pressure coefficient, hemisphere-aware.

    Parameters
    ----------
    month : array_like int
        Calendar month 1..12.
    latitude_deg : array_like float64
        Latitude [deg]; south of the equator the table is shifted by six months.

    Returns
    -------
    t_lapse_k_m : ndarray float64
        Temperature lapse rate [K m-1].
    vp_coef_per_m : ndarray float64
        Vapour-pressure coefficient lambda [m-1].

    References
    ----------
    Kunkel, K. E. (1989). Simple procedures for extrapolation of humidity variables in the
    mountainous western United States. J. Climate 2(7), 656-669; Liston, G. E. & Elder, K.
    (2006). A meteorological distribution system for high-resolution terrestrial modeling
    (MicroMet). J. Hydrometeor. 7(2), 217-234, Table 1. doi:10.1175/JHM486.1
    """
    m0 = np.asarray(month, dtype=np.int64) - 1
    idx = np.where(np.asarray(latitude_deg) < 0.0, (m0 + 6) % 12, m0)
    return KUNKEL1989_T_LAPSE_K_PER_KM[idx] / 1000.0, KUNKEL1989_VP_COEF_PER_KM[idx] / 1000.0


def dew_point_lapse_liston_elder2006(vp_coef_per_m) -> np.ndarray:
    """Dew-point lapse rate from the vapour-pressure coefficient.

    Parameters
    ----------
    vp_coef_per_m : array_like float64
        Vapour-pressure coefficient lambda [m-1].

    Returns
    -------
    ndarray float64
        Dew-point lapse rate lambda c / b [K m-1] (Liston & Elder 2006, Eq. 6).
    """
    return np.asarray(vp_coef_per_m) * BUCK1981_WATER_C_DEGC / BUCK1981_WATER_B


def adjust_temperature_lapse(t_k, dz_m, lapse_k_m) -> np.ndarray:
    """Temperature at a height ``dz_m`` above the reference: T - lapse dz [K].

    Parameters
    ----------
    t_k : array_like float64
        Reference temperature [K].
    dz_m : array_like float64
        Target height minus reference height [m].
    lapse_k_m : array_like float64
        Lapse rate, positive when colder aloft [K m-1].
    """
    return np.asarray(t_k) - np.asarray(lapse_k_m) * np.asarray(dz_m)


def humidity_at_new_temperature(t_new_k, dew_point_new_k) -> np.ndarray:
    """Relative humidity over water from a temperature and a dew point (Buck 1981).

    Parameters
    ----------
    t_new_k, dew_point_new_k : array_like float64
        Air temperature and dew point [K]; the dew point is first capped at T.

    Returns
    -------
    ndarray float64
        e_s(T_d) / e_s(T) in (0, 1] [1].
    """
    return relative_humidity_from_dew_point(np.minimum(dew_point_new_k, t_new_k), t_new_k)


def dew_point_from_relative_humidity(t_k, rh_frac) -> np.ndarray:
    """Dew point from temperature and relative humidity over water (Buck 1981) [K].

    Parameters
    ----------
    t_k : array_like float64
        Air temperature [K].
    rh_frac : array_like float64
        Relative humidity [1]; floored at 1e-4 so the logarithm stays finite.
    """
    e = np.maximum(rh_frac, 1e-4) * saturation_vapour_pressure_water_buck1981(t_k)
    return dew_point_from_vapour_pressure_buck1981(e)


def grid_lapse_fit(
    t_points_k: np.ndarray,
    z_points_m: np.ndarray,
    neighbours: np.ndarray,
    fallback_lapse_k_m: np.ndarray,
    *,
    bounds_k_m: tuple[float, float] = (-0.015, 0.0098),
    min_r2: float = 0.5,
    min_z_range_m: float = 150.0,
) -> tuple[np.ndarray, np.ndarray]:
    """Lapse rate fitted by least squares to neighbouring grid points, with fallback.

    Parameters
    ----------
    t_points_k : ndarray (point, time) float64
        Temperature at the grid points [K].
    z_points_m : ndarray (point,) float64
        Model terrain height of the points [m].
    neighbours : ndarray (cell, k) int
        For each cell, the positions (into ``point``) of its k neighbouring grid points.
    fallback_lapse_k_m : ndarray broadcastable to (cell, time) float64
        Lapse rate used where the fit is poor (monthly or fixed) [K m-1].
    bounds_k_m : (float, float)
        Accepted fitted lapse rates (strongest inversion, steepest lapse; default
        -15 K km-1 .. dry adiabatic 9.8 K km-1) [K m-1]; fits outside are clipped.
    min_r2 : float
        Minimum coefficient of determination of the fit [1].
    min_z_range_m : float
        Minimum spread of neighbour heights for a fit to be tried [m].

    Returns
    -------
    lapse_k_m : ndarray (cell, time) float64
        Fitted (bounded) rate where the fit is good, else the fallback [K m-1].
    fitted : ndarray (cell, time) bool
        Where the fitted value was used.

    Notes
    -----
    Ordinary least squares of T on z per cell and step; the lapse rate is minus the slope.
    The sums are sparse matrix products, so no (cell, k, time) array is formed. A poor fit
    (R^2 < ``min_r2``, or too little height spread) falls back, so noisy neighbourhoods do
    not invent structure while a clear inversion is kept.
    """
    nb = np.asarray(neighbours, dtype=np.int64)
    n_cell, k = nb.shape
    z = np.asarray(z_points_m, dtype=np.float64)
    z_nb = z[nb]
    za = z_nb - z_nb.mean(axis=1, keepdims=True)
    szz = np.sum(za * za, axis=1)
    rows = np.repeat(np.arange(n_cell), k)
    shape = (n_cell, z.size)
    cov = sp.csr_matrix((za.ravel(), (rows, nb.ravel())), shape=shape)
    mean = sp.csr_matrix((np.full(n_cell * k, 1.0 / k), (rows, nb.ravel())), shape=shape)
    t = np.asarray(t_points_k, dtype=np.float64)
    # a common offset keeps E[T^2] - E[T]^2 from cancelling; a constant one, so that a cell's
    # fit does not depend on which other points its chunk of cells reads
    t = t - ZERO_CELSIUS_K
    szt = np.asarray(cov @ t)
    t_mean = np.asarray(mean @ t)
    stt = np.maximum(k * (np.asarray(mean @ (t * t)) - t_mean * t_mean), 0.0)
    spread_ok = (z_nb.max(axis=1) - z_nb.min(axis=1)) >= min_z_range_m
    safe_szz = np.where(szz > 0, szz, 1.0)
    slope = szt / safe_szz[:, None]
    r2 = np.divide(szt * szt, safe_szz[:, None] * stt, out=np.zeros_like(stt), where=stt > 0)
    fitted = spread_ok[:, None] & (r2 >= min_r2)
    lapse = np.clip(-slope, bounds_k_m[0], bounds_k_m[1])
    fallback = np.broadcast_to(fallback_lapse_k_m, lapse.shape)
    return np.where(fitted, lapse, fallback), fitted

"""Moist thermodynamics of near-surface air (SI units).

The saturation curves and the specific humidity are numba ufuncs: one implementation serves
NumPy code (arrays of any shape, xarray objects, scalars) and the compiled snow kernel,
which calls them on scalars. The other functions work on float64 arrays.
"""

from __future__ import annotations

import math

import numpy as np
from numba import float64, vectorize

from regionmap.constants import (
    C_AIR_J_KG_K,
    EPSILON,
    GRAVITY_M_S2,
    ICAO_LAPSE_RATE_K_M,
    ICAO_PRESSURE_EXPONENT,
    ICAO_PRESSURE_PA,
    ICAO_TEMPERATURE_K,
    L_VAPOUR_J_KG,
    R_DRY_J_KG_K,
    ZERO_CELSIUS_K,
)

__all__ = [
    "BUCK1981_WATER_PA",
    "BUCK1981_WATER_B",
    "BUCK1981_WATER_C_DEGC",
    "BUCK1981_ICE_PA",
    "BUCK1981_ICE_B",
    "BUCK1981_ICE_C_DEGC",
    "saturation_vapour_pressure_water_buck1981",
    "saturation_vapour_pressure_ice_buck1981",
    "dew_point_from_vapour_pressure_buck1981",
    "relative_humidity_from_dew_point",
    "vapour_pressure_from_specific_humidity",
    "specific_humidity_from_vapour_pressure",
    "relative_humidity_from_specific_humidity",
    "specific_humidity_from_relative_humidity",
    "wet_bulb_temperature_normand",
    "pressure_standard_atmosphere_icao",
    "pressure_hypsometric",
]

#: Buck (1981)'s curve e = a exp(b T / (c + T)), T in degC, over plane water: the
#: coefficients he calls e_w1 (a = 6.1121 hPa, b = 17.502, c = 240.97 degC; fitted for
#: -20 to +50 degC).
BUCK1981_WATER_PA = 611.21
BUCK1981_WATER_B = 17.502
BUCK1981_WATER_C_DEGC = 240.97
#: The same form over plane ice, Buck's e_i1 (6.1115 hPa, 22.452, 272.55 degC; -50 to 0 degC).
BUCK1981_ICE_PA = 611.15
BUCK1981_ICE_B = 22.452
BUCK1981_ICE_C_DEGC = 272.55


@vectorize([float64(float64)], nopython=True, cache=True)
def saturation_vapour_pressure_water_buck1981(t_k):
    """Saturation vapour pressure over plane pure water (Buck 1981).

    Parameters
    ----------
    t_k : float or array_like
        Temperature [K].

    Returns
    -------
    float or ndarray float64
        e_w = 611.21 exp(17.502 T / (240.97 + T)), T in degC [Pa] (no enhancement factor).

    References
    ----------
    Buck, A. L. (1981). New equations for computing vapor pressure and enhancement factor.
    J. Appl. Meteorol. 20(12), 1527-1532, coefficients e_w1 of his Table 2 [mem: the
    table and its labels recalled, not re-read]. doi:10.1175/1520-0450(1981)020<1527:NEFCVP>2.0.CO;2
    """
    t_c = t_k - ZERO_CELSIUS_K
    return BUCK1981_WATER_PA * math.exp(BUCK1981_WATER_B * t_c / (BUCK1981_WATER_C_DEGC + t_c))


@vectorize([float64(float64)], nopython=True, cache=True)
def saturation_vapour_pressure_ice_buck1981(t_k):
    """Saturation vapour pressure over plane ice (Buck 1981).

    Parameters
    ----------
    t_k : float or array_like
        Temperature [K].

    Returns
    -------
    float or ndarray float64
        e_i = 611.15 exp(22.452 T / (272.55 + T)), T in degC [Pa] (no enhancement factor).

    References
    ----------
    Buck, A. L. (1981). New equations for computing vapor pressure and enhancement factor.
    J. Appl. Meteorol. 20(12), 1527-1532, coefficients e_i1 of his Table 2 [mem: the
    table and its labels recalled, not re-read]. doi:10.1175/1520-0450(1981)020<1527:NEFCVP>2.0.CO;2
    """
    t_c = t_k - ZERO_CELSIUS_K
    return BUCK1981_ICE_PA * math.exp(BUCK1981_ICE_B * t_c / (BUCK1981_ICE_C_DEGC + t_c))


def dew_point_from_vapour_pressure_buck1981(e_pa) -> np.ndarray:
    """Dew point: the inverse of :func:`saturation_vapour_pressure_water_buck1981`.

    Parameters
    ----------
    e_pa : array_like float64
        Vapour pressure [Pa], > 0.

    Returns
    -------
    ndarray float64
        Dew point T_d = c x / (b - x) + 273.15, x = ln(e / a) [K], with Buck's water
        coefficients a, b, c.
    """
    x = np.log(np.asarray(e_pa, dtype=np.float64) / BUCK1981_WATER_PA)
    return BUCK1981_WATER_C_DEGC * x / (BUCK1981_WATER_B - x) + ZERO_CELSIUS_K


def relative_humidity_from_dew_point(t_dew_k, t_k) -> np.ndarray:
    """Relative humidity over water from the dew point [1].

    Parameters
    ----------
    t_dew_k, t_k : array_like float64
        Dew point and air temperature [K].

    Returns
    -------
    ndarray float64
        e_s(T_d) / e_s(T) with the water curve of
        :func:`saturation_vapour_pressure_water_buck1981`, not clipped [1].
    """
    es = saturation_vapour_pressure_water_buck1981
    return es(t_dew_k) / es(t_k)


def vapour_pressure_from_specific_humidity(q_kg_kg, pressure_pa) -> np.ndarray:
    """Vapour pressure from specific humidity.

    Parameters
    ----------
    q_kg_kg : array_like float64
        Specific humidity [kg kg-1].
    pressure_pa : array_like float64
        Air pressure [Pa].

    Returns
    -------
    ndarray float64
        e = q p / (epsilon + (1 - epsilon) q) [Pa].
    """
    q = np.asarray(q_kg_kg, dtype=np.float64)
    return q * pressure_pa / (EPSILON + (1.0 - EPSILON) * q)


@vectorize([float64(float64, float64)], nopython=True, cache=True)
def specific_humidity_from_vapour_pressure(e_pa, pressure_pa):
    """Specific humidity from vapour pressure [kg kg-1].

    Parameters
    ----------
    e_pa, pressure_pa : float or array_like
        Vapour pressure and air pressure [Pa].

    Returns
    -------
    float or ndarray float64
        q = eps e / (p - (1 - eps) e), eps = R_d / R_v (e.g. Wallace & Hobbs 2006,
        Atmospheric Science, Eq. 3.57) [kg kg-1].
    """
    return EPSILON * e_pa / (pressure_pa - (1.0 - EPSILON) * e_pa)


def relative_humidity_from_specific_humidity(q_kg_kg, t_k, pressure_pa) -> np.ndarray:
    """Relative humidity over water from specific humidity (Buck 1981 saturation).

    Parameters
    ----------
    q_kg_kg : array_like float64
        Specific humidity [kg kg-1].
    t_k : array_like float64
        Air temperature [K].
    pressure_pa : array_like float64
        Air pressure [Pa].

    Returns
    -------
    ndarray float64
        e / e_s(T), not clipped [1].
    """
    e = vapour_pressure_from_specific_humidity(q_kg_kg, pressure_pa)
    return e / saturation_vapour_pressure_water_buck1981(t_k)


def specific_humidity_from_relative_humidity(rh_frac, t_k, pressure_pa) -> np.ndarray:
    """Specific humidity from relative humidity over water [kg kg-1].

    Parameters
    ----------
    rh_frac : array_like float64
        Relative humidity [1].
    t_k, pressure_pa : array_like float64
        Air temperature [K] and pressure [Pa].
    """
    e = np.asarray(rh_frac) * saturation_vapour_pressure_water_buck1981(t_k)
    return specific_humidity_from_vapour_pressure(e, pressure_pa)


def wet_bulb_temperature_normand(t_k, rh_frac, pressure_pa, n_steps: int = 6) -> np.ndarray:
    """Wet-bulb temperature at the actual pressure by Normand's rule.

    Parameters
    ----------
    t_k : array_like float64
        Air temperature [K].
    rh_frac : array_like float64
        Relative humidity over water [1].
    pressure_pa : array_like float64
        Air pressure [Pa].
    n_steps : int
        Fourth-order Runge-Kutta steps along the moist adiabat.

    Returns
    -------
    ndarray float64
        Wet-bulb temperature [K].

    Notes
    -----
    Normand's rule: lift the air dry-adiabatically to its lifting condensation level, then
    bring it back to its own pressure along the saturated pseudo-adiabat
    dT/dp = (R_d T + L_v r_s) / (p (c_pd + L_v^2 r_s eps / (R_d T^2))). LCL temperature from
    Bolton (1980), Mon. Wea. Rev. 108, Eq. 15: T_L = 1 / (1/(T_d - 56) + ln(T/T_d)/800) + 56;
    p_L = p (T_L / T)^(c_pd / R_d). Saturation over water from Buck (1981). Normand, C. W. B.
    (1921), Mem. India Meteorol. Dep. 23; the form of e.g. Bohren & Albrecht (1998),
    Atmospheric Thermodynamics, sec. 6.4.
    """
    t = np.asarray(t_k, dtype=np.float64)
    p = np.asarray(pressure_pa, dtype=np.float64)
    e = np.maximum(np.asarray(rh_frac, dtype=np.float64), 1e-4) * (
        saturation_vapour_pressure_water_buck1981(t)
    )
    td = np.minimum(dew_point_from_vapour_pressure_buck1981(e), t)
    t_lcl = 1.0 / (1.0 / (td - 56.0) + np.log(t / td) / 800.0) + 56.0
    p_lcl = p * (t_lcl / t) ** (C_AIR_J_KG_K / R_DRY_J_KG_K)

    def slope(tt, pp):
        es = saturation_vapour_pressure_water_buck1981(tt)
        rs = EPSILON * es / (pp - es)
        lv, rd = L_VAPOUR_J_KG, R_DRY_J_KG_K
        return (rd * tt + lv * rs) / (pp * (C_AIR_J_KG_K + lv * lv * rs * EPSILON / (rd * tt * tt)))

    h = (p - p_lcl) / n_steps
    tw, pp = t_lcl, p_lcl
    for _ in range(n_steps):
        k1 = slope(tw, pp)
        k2 = slope(tw + 0.5 * h * k1, pp + 0.5 * h)
        k3 = slope(tw + 0.5 * h * k2, pp + 0.5 * h)
        k4 = slope(tw + h * k3, pp + h)
        tw = tw + h * (k1 + 2.0 * k2 + 2.0 * k3 + k4) / 6.0
        pp = pp + h
    return tw


def pressure_standard_atmosphere_icao(elevation_m) -> np.ndarray:
    """Pressure of the ICAO / ISO 2533 standard atmosphere in the troposphere.

    Parameters
    ----------
    elevation_m : array_like float64
        Geopotential height above mean sea level [m].

    Returns
    -------
    ndarray float64
        p = 101325 (1 - 0.0065 z / 288.15)^5.25588 [Pa].

    References
    ----------
    ICAO (1993), Manual of the ICAO Standard Atmosphere, Doc 7488/3; ISO 2533:1975.
    """
    z = np.asarray(elevation_m, dtype=np.float64)
    return ICAO_PRESSURE_PA * (1.0 - ICAO_LAPSE_RATE_K_M * z / ICAO_TEMPERATURE_K) ** (
        ICAO_PRESSURE_EXPONENT
    )


def pressure_hypsometric(pressure_pa, t_mean_k, dz_m) -> np.ndarray:
    """Pressure after a height change through a layer of known mean temperature.

    Parameters
    ----------
    pressure_pa : array_like float64
        Pressure at the lower reference level [Pa].
    t_mean_k : array_like float64
        Mean (virtual) temperature of the layer [K].
    dz_m : array_like float64
        Height of the target above the reference level (negative below) [m].

    Returns
    -------
    ndarray float64
        p exp(-g0 dz / (R_d T_mean)) [Pa] (the hypsometric equation, e.g. Wallace & Hobbs
        2006, Atmospheric Science, Eq. 3.29).
    """
    dz = np.asarray(dz_m)
    return np.asarray(pressure_pa) * np.exp(
        -GRAVITY_M_S2 * dz / (R_DRY_J_KG_K * np.asarray(t_mean_k))
    )

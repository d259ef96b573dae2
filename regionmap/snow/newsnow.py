"""New-snow density.

Two published forms, one function each; :func:`new_snow_density` picks one by model code
(0 = Hedstrom & Pomeroy 1998, 1 = the wind-dependent form of Vionnet et al. 2012).
"""

from __future__ import annotations

import math

from numba import njit

from regionmap.constants import T_MELT_K

__all__ = [
    "new_snow_density_hedstrom1998",
    "new_snow_density_vionnet2012",
    "new_snow_density",
]


@njit(cache=True, nogil=True, error_model="numpy")
def new_snow_density_hedstrom1998(t_air_k):
    """Density of fresh snow from air temperature (Hedstrom & Pomeroy 1998).

    Parameters
    ----------
    t_air_k : float
        Air temperature [K]; values above 0 degC are taken as 0 degC.

    Returns
    -------
    float
        New-snow density [kg m-3].

    Notes
    -----
    rho = 67.92 + 51.25 exp(T / 2.59), T in degC (Eq. 3 of [1], recalled [mem]).

    References
    ----------
    [1] Hedstrom, N. R. & Pomeroy, J. W. (1998), Measurements and modelling of snow
        interception in the boreal forest, Hydrol. Process. 12, 1611-1625,
        doi:10.1002/(SICI)1099-1085(199808/09)12:10/11<1611::AID-HYP684>3.0.CO;2-4
    """
    t_c = min(t_air_k - T_MELT_K, 0.0)
    return 67.92 + 51.25 * math.exp(t_c / 2.59)


@njit(cache=True, nogil=True, error_model="numpy")
def new_snow_density_vionnet2012(t_air_k, wind_m_s):
    """Wind-dependent density of fresh snow (Vionnet et al. 2012).

    Parameters
    ----------
    t_air_k : float
        Air temperature [K]; values above 0 degC are taken as 0 degC.
    wind_m_s : float
        Wind speed [m s-1].

    Returns
    -------
    float
        New-snow density [kg m-3], at least 50.

    Notes
    -----
    rho = max(50, 109 + 6 T + 26 sqrt(U)), T in degC (Eq. 4 of [1], recalled [mem]).

    References
    ----------
    [1] Vionnet, V. et al. (2012), Geosci. Model Dev. 5, 773-791,
        doi:10.5194/gmd-5-773-2012
    """
    t_c = min(t_air_k - T_MELT_K, 0.0)
    return max(50.0, 109.0 + 6.0 * t_c + 26.0 * math.sqrt(max(wind_m_s, 0.0)))


@njit(cache=True, nogil=True, error_model="numpy")
def new_snow_density(model, t_air_k, wind_m_s):
    """Dispatch: 0 = :func:`new_snow_density_hedstrom1998`, else the wind-dependent form."""
    if model == 0:
        return new_snow_density_hedstrom1998(t_air_k)
    return new_snow_density_vionnet2012(t_air_k, wind_m_s)

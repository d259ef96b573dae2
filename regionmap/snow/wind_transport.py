"""Wind transport of snow: threshold, saltation rate and the zone's hourly redistribution.

Snow moves where the wind at the cell exceeds the transport threshold of its surface: exposed
cells (negative maximum upwind slope at the hour's wind direction) lose snow at the saltation
rate spread over a fetch, and the zone's sheltered cells (positive maximum upwind slope)
receive what the zone's exposed cells lost, in proportion to their area and shelter.

The snow column steps each cell through all hours on its own, so the exchange between cells is
decided before the column runs, by :func:`zone_transport`, from the forcing and a bucket of
erodible snow per cell, carried in the snow state from run to run (and set from the column,
the dry, uncrusted snow at its top, where a column is restarted from an observed profile).
Every hour it deposits in each zone exactly what it erodes. The column then erodes at most the
snow its surface really offers (:func:`erodible_layer`); what it cannot give (the bucket held
snow the column had wetted, crusted or bonded) is its *shortfall*, reported per cell and zone:
the zone then gains that much mass.

Not modelled: sublimation of blowing snow, transport by suspension (only saltation: it
underestimates transport in strong winds over long fetches), transport between zones and
cornices.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from regionmap.constants import GRAVITY_M_S2, R_DRY_J_KG_K, T_MELT_K, VON_KARMAN
from regionmap.snow.codes import GRAIN_INDEX

_IF, _MFCR, _SH = GRAIN_INDEX["IF"], GRAIN_INDEX["MFcr"], GRAIN_INDEX["SH"]

__all__ = [
    "threshold_wind_li_pomeroy1997",
    "threshold_ustar_density_liston2007",
    "saltation_transport_pomeroy_gray1990",
    "friction_velocity_neutral",
    "erodible_layer",
    "zone_transport",
    "erodible_mass_of_columns",
]


@njit(cache=True, nogil=True, error_model="numpy")
def threshold_wind_li_pomeroy1997(t_air_k):
    """Threshold 10 m wind speed for the transport of dry snow (Li & Pomeroy 1997).

    Parameters
    ----------
    t_air_k : float
        Air temperature [K].

    Returns
    -------
    float
        U_10t = 9.43 + 0.18 T + 0.0033 T^2, T in degC [m s-1]: 9.43 m s-1 at 0 degC, its
        minimum 6.97 m s-1 near -27 degC.

    Notes
    -----
    The regression of the observed threshold wind speed of dry snow on air temperature from
    prairie stations [1] (recalled from memory [mem]). For wet snow [1] observed thresholds of
    7-14 m s-1; here wet or crusted snow is not eroded at all (:func:`erodible_layer`).

    References
    ----------
    [1] Li, L. & Pomeroy, J. W. (1997). Estimates of threshold wind speeds for snow
        transport using meteorological data. J. Appl. Meteorol. 36(3), 205-213,
        doi:10.1175/1520-0450(1997)036<0205:EOTWSF>2.0.CO;2
    """
    t = t_air_k - T_MELT_K
    return 9.43 + 0.18 * t + 0.0033 * t * t


@njit(cache=True, nogil=True, error_model="numpy")
def threshold_ustar_density_liston2007(density_kg_m3):
    """Threshold friction velocity of snow from its density: bonding as snow settles.

    Parameters
    ----------
    density_kg_m3 : float
        Density of the surface snow [kg m-3].

    Returns
    -------
    float
        u*_t = 0.10 exp(0.003 rho) [m s-1]: 0.135 at 100, 0.246 at 300 kg m-3.

    Notes
    -----
    Snow sinters and settles with age, so its threshold rises with its density; the
    exponential form is that of Liston et al. (2007), from memory [mem].

    References
    ----------
    Liston, G. E., Haehnel, R. B., Sturm, M., Hiemstra, C. A., Berezovskaya, S. & Tabler,
    R. D. (2007). J. Glaciol. 53(181), 241-256, doi:10.3189/172756507782202865
    """
    return 0.10 * math.exp(0.003 * density_kg_m3)


@njit(cache=True, nogil=True, error_model="numpy")
def friction_velocity_neutral(wind_m_s, height_m, roughness_m):
    """u* = k U(z) / ln(z / z0) of a neutral logarithmic profile [m s-1], k = 0.40."""
    return VON_KARMAN * wind_m_s / math.log(height_m / roughness_m)


@njit(cache=True, nogil=True, error_model="numpy")
def saltation_transport_pomeroy_gray1990(ustar_m_s, ustar_t_m_s, air_density_kg_m3):
    """Saltation transport rate of snow over a fully developed fetch (Pomeroy & Gray 1990).

    Parameters
    ----------
    ustar_m_s : float
        Friction velocity of the wind [m s-1].
    ustar_t_m_s : float
        Threshold friction velocity of the surface [m s-1].
    air_density_kg_m3 : float
        Air density [kg m-3].

    Returns
    -------
    float
        Q = 0.68 rho_a u*_t (u*^2 - u*_t^2) / (g u*) [kg m-1 s-1] (mass crossing a metre of
        width each second); 0 at and below the threshold.

    Notes
    -----
    The saltation equation of [1] with no partition of the wind's stress to vegetation
    (u*_n = 0); the constant 0.68 m s-1 (recalled from memory [mem]).

    References
    ----------
    [1] Pomeroy, J. W. & Gray, D. M. (1990). Saltation of snow. Water Resour. Res. 26(7),
        1583-1594, doi:10.1029/WR026i007p01583
    """
    if ustar_m_s <= ustar_t_m_s:
        return 0.0
    return (
        0.68
        * air_density_kg_m3
        * ustar_t_m_s
        * (ustar_m_s * ustar_m_s - ustar_t_m_s * ustar_t_m_s)
        / (GRAVITY_M_S2 * ustar_m_s)
    )


@njit(cache=True, nogil=True, error_model="numpy")
def erodible_layer(liquid_kg_m2, crust_code, grain_code, density_kg_m3, ustar_m_s):
    """Whether the wind can take snow from a layer at the surface.

    Wet snow and crusts are not eroded (their grains are bonded by water or ice: Li & Pomeroy
    1997 observed wet-snow transport only in rare strong winds), nor ice (IF), melt-freeze
    crusts (MFcr) or buried surface hoar brought to the surface; dry snow only when the wind's
    friction velocity exceeds the threshold of its density
    (:func:`threshold_ustar_density_liston2007`).
    """
    return (
        liquid_kg_m2 <= 0.0
        and crust_code == 0
        and grain_code != _IF
        and grain_code != _MFCR
        and grain_code != _SH
        and ustar_m_s > threshold_ustar_density_liston2007(density_kg_m3)
    )


@njit(cache=True, nogil=True, error_model="numpy")
def zone_transport(
    zone,
    area_m2,
    sx_deg,
    wind_m_s,
    t_air_k,
    pressure_pa,
    snowfall_kg_m2,
    rain_kg_m2,
    erodible0_kg_m2,
    wind_height_m,
    roughness_m,
    fetch_m,
    neutral_sx_deg,
    dt_s,
    out_kg_m2,
):
    """Hourly erosion and deposition of every cell, conserving each zone's mass.

    Parameters
    ----------
    zone : ndarray (cell,) int64
        Zone index of each cell, 0..n_zone-1; all cells of a zone must be present.
    area_m2 : ndarray (cell,) float64
        Cell area [m2].
    sx_deg : ndarray (cell, time) float64
        Maximum upwind slope at the hour's wind direction, positive = sheltered [deg].
    wind_m_s, t_air_k, pressure_pa : ndarray (cell, time) float64
        Wind at ``wind_height_m`` [m s-1], air temperature [K], pressure [Pa] at the cell.
    snowfall_kg_m2, rain_kg_m2 : ndarray (cell, time) float64
        Snowfall and liquid precipitation of each hour [kg m-2].
    erodible0_kg_m2 : ndarray (cell,) float64
        Erodible snow at the start: the bucket of the previous hours, or of a column
        (:func:`erodible_mass_of_columns`) [kg m-2].
    wind_height_m, roughness_m : float
        Height of the wind [m] and the snow's aerodynamic roughness length [m].
    fetch_m : float
        Distance over which the saltation flux of an exposed cell builds up from zero [m].
    neutral_sx_deg : float
        Cells within +-this of zero upwind slope neither lose nor gain [deg].
    dt_s : float
        Step length [s].
    out_kg_m2 : ndarray (cell, time) float64
        Receives the transport of each hour [kg m-2]: positive deposited, negative eroded.

    Returns
    -------
    ndarray (cell,) float64
        Erodible snow after the last hour [kg m-2].

    Notes
    -----
    Each hour: snowfall joins a cell's erodible bucket; rain or air above 0 degC empties it
    (a wetted surface is no longer erodible until new snow falls). An exposed cell whose wind
    exceeds the dry-snow threshold (:func:`threshold_wind_li_pomeroy1997`, as u*_t of the
    same log profile) loses min(Q dt / fetch, bucket), Q from
    :func:`saltation_transport_pomeroy_gray1990`: the flux divergence of a flux growing from
    zero over the fetch. The zone's eroded mass is shared by its sheltered cells by area x
    (Sx - neutral) and joins their buckets; a zone without sheltered cells that hour keeps
    its snow in place.
    """
    n_cell, n_t = wind_m_s.shape
    n_zone = 0
    for c in range(n_cell):
        n_zone = max(n_zone, zone[c] + 1)
    bucket = erodible0_kg_m2.copy()
    eroded = np.zeros(n_zone)
    weight = np.zeros(n_zone)
    log_ratio = math.log(wind_height_m / roughness_m)
    for s in range(n_t):
        for z in range(n_zone):
            eroded[z] = 0.0
            weight[z] = 0.0
        for c in range(n_cell):
            out_kg_m2[c, s] = 0.0
            bucket[c] += snowfall_kg_m2[c, s]
            if rain_kg_m2[c, s] > 0.0 or t_air_k[c, s] > T_MELT_K:
                bucket[c] = 0.0
            sx = sx_deg[c, s]
            if sx > neutral_sx_deg:
                weight[zone[c]] += area_m2[c] * (sx - neutral_sx_deg)
        for c in range(n_cell):
            if sx_deg[c, s] >= -neutral_sx_deg or bucket[c] <= 0.0 or weight[zone[c]] <= 0.0:
                continue
            ustar = VON_KARMAN * wind_m_s[c, s] / log_ratio
            ustar_t = VON_KARMAN * threshold_wind_li_pomeroy1997(t_air_k[c, s]) / log_ratio
            rho_air = pressure_pa[c, s] / (R_DRY_J_KG_K * t_air_k[c, s])
            q = saltation_transport_pomeroy_gray1990(ustar, ustar_t, rho_air)
            loss = min(q * dt_s / fetch_m, bucket[c])
            if loss > 0.0:
                bucket[c] -= loss
                out_kg_m2[c, s] = -loss
                eroded[zone[c]] += loss * area_m2[c]
        for c in range(n_cell):
            sx = sx_deg[c, s]
            z = zone[c]
            if sx > neutral_sx_deg and eroded[z] > 0.0:
                gain = eroded[z] * (sx - neutral_sx_deg) / weight[z]
                out_kg_m2[c, s] = gain
                bucket[c] += gain
    return bucket


def erodible_mass_of_columns(
    liquid_kg_m2, ice_kg_m2, crust_code, grain_code, layer_count
) -> np.ndarray:
    """Dry, uncrusted snow at the top of each column, down to the first wet layer, crust,
    melt-freeze crust or ice layer [kg m-2] (the start of :func:`zone_transport`'s bucket).

    Parameters
    ----------
    liquid_kg_m2, ice_kg_m2 : ndarray (cell, layer) float
        Layer water and ice, bottom layer first [kg m-2].
    crust_code, grain_code : ndarray (cell, layer) int
        Crust kind and grain class indices (:mod:`regionmap.snow.codes`).
    layer_count : ndarray (cell,) int
        Layers in use.
    """
    n_layer = np.shape(ice_kg_m2)[1]
    used = np.arange(n_layer)[None, :] < np.asarray(layer_count)[:, None]
    code = np.asarray(grain_code)
    open_ = (
        (np.asarray(liquid_kg_m2) <= 0.0)
        & (np.asarray(crust_code) == 0)
        & (code != _IF)
        & (code != _MFCR)
        & (code != _SH)
    )
    # unused slots above the top count as open; a closed layer shuts everything below it
    blocked_above = np.cumsum((~(open_ | ~used))[:, ::-1], axis=1)[:, ::-1]
    # blocked_above[i] counts closed layers at or above i
    take = used & (blocked_above == 0)
    return np.where(take, np.asarray(ice_kg_m2, dtype=np.float64), 0.0).sum(axis=1)

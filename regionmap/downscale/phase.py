"""Precipitation phase at the cell and freezing rain from a melting layer aloft."""

from __future__ import annotations

import numpy as np

from regionmap.constants import R_DRY_J_KG_K, ZERO_CELSIUS_K
from regionmap.downscale.thermo import wet_bulb_temperature_normand

__all__ = [
    "snow_probability_jennings2018",
    "threshold_temperature_jennings2018",
    "snow_fraction_jennings2018",
    "no_liquid_below_wet_bulb",
    "snow_fraction",
    "snow_fraction_wet_bulb_threshold",
    "snow_fraction_air_temperature_threshold",
    "bourgouin2000_areas",
    "freezing_rain_fraction_bourgouin2000",
    "freezing_rain_at_cell",
]


#: Half width of the mixed rain-snow band around the Jennings et al. (2018) 50 % threshold
#: [K] (ours: a narrow band, so that hours within half a degree of the threshold mix).
JENNINGS2018_MIXED_HALF_WIDTH_K = 0.5


def snow_probability_jennings2018(t_air_k, rh_frac) -> np.ndarray:
    """Probability that precipitation is snow, from air temperature and humidity.

    Parameters
    ----------
    t_air_k : array_like float64
        Near-surface air temperature [K].
    rh_frac : array_like float64
        Relative humidity [1] (the regression uses percent).

    Returns
    -------
    ndarray float64
        p = 1 / (1 + exp(alpha + beta T + gamma RH)), T in degC, RH in %,
        alpha = -10.04, beta = 1.41, gamma = 0.09 [1]. This is the share of observations
        that were snow at that temperature and humidity, not the solid share of one hour's
        precipitation: use :func:`snow_fraction_jennings2018` for the mass partition.

    References
    ----------
    Jennings, K. S., Winchell, T. S., Livneh, B. & Molotch, N. P. (2018). Spatial
    variation of the rain-snow temperature threshold across the Northern Hemisphere.
    Nature Communications 9, 1148, Table 2 (bivariate binary logistic regression).
    doi:10.1038/s41467-018-03629-7
    """
    t_c = np.asarray(t_air_k, dtype=np.float64) - ZERO_CELSIUS_K
    rh_pct = 100.0 * np.asarray(rh_frac, dtype=np.float64)
    return 1.0 / (1.0 + np.exp(-10.04 + 1.41 * t_c + 0.09 * rh_pct))


def threshold_temperature_jennings2018(rh_frac) -> np.ndarray:
    """Air temperature of 50 % snow probability at a given humidity [K].

    Parameters
    ----------
    rh_frac : array_like float64
        Relative humidity [1].

    Returns
    -------
    ndarray float64
        T50 = (10.04 - 0.09 RH) / 1.41 degC (RH in %), where the bivariate logistic
        regression of Jennings et al. (2018), Nature Communications 9, 1148, Table 2, equals
        1/2: 0.738 degC at 100 % RH, 3.929 degC at 50 % [K].
    """
    rh_pct = 100.0 * np.asarray(rh_frac, dtype=np.float64)
    return ZERO_CELSIUS_K + (10.04 - 0.09 * rh_pct) / 1.41


def snow_fraction_jennings2018(
    t_air_k, rh_frac, *, half_width_k: float = JENNINGS2018_MIXED_HALF_WIDTH_K
) -> np.ndarray:
    """Solid share of precipitation: the humidity-dependent threshold of Jennings et al.

    Parameters
    ----------
    t_air_k : array_like float64
        Near-surface air temperature [K].
    rh_frac : array_like float64
        Relative humidity [1].
    half_width_k : float
        Half width of the linear mixed band centred on the threshold [K]; 0 gives a step.

    Returns
    -------
    ndarray float64
        1 below T50(RH) - half width, 0 above T50(RH) + half width, linear between [1];
        T50 from :func:`threshold_temperature_jennings2018` (Jennings et al. 2018, Nature
        Communications 9, 1148, Table 2, doi:10.1038/s41467-018-03629-7).
    """
    return snow_fraction_wet_bulb_threshold(
        t_air_k, threshold_k=threshold_temperature_jennings2018(rh_frac), half_width_k=half_width_k
    )


def snow_fraction_wet_bulb_threshold(
    t_wet_bulb_k, *, threshold_k=274.15, half_width_k: float = 0.0
) -> np.ndarray:
    """Solid fraction from a wet-bulb threshold, with an optional linear transition.

    Parameters
    ----------
    t_wet_bulb_k : array_like float64
        Wet-bulb temperature [K].
    threshold_k : float or array_like float64
        50 % snow at this wet-bulb temperature [K] (default 1 degC, common practice).
    half_width_k : float
        Half width of a linear rain-snow transition; 0 gives a step [K].

    Returns
    -------
    ndarray float64
        1 below, 0 above, linear in between [1].
    """
    tw = np.asarray(t_wet_bulb_k, dtype=np.float64)
    if half_width_k <= 0:
        return np.where(tw <= threshold_k, 1.0, 0.0)
    return np.clip(0.5 - (tw - threshold_k) / (2.0 * half_width_k), 0.0, 1.0)


def snow_fraction_air_temperature_threshold(
    t_air_k, *, threshold_k: float = 274.15, half_width_k: float = 0.0
) -> np.ndarray:
    """Solid fraction from an air-temperature threshold, with optional linear transition.

    Parameters
    ----------
    t_air_k : array_like float64
        Air temperature [K].
    threshold_k : float
        50 % snow at this temperature [K]; default 1 degC, near the Northern-Hemisphere
        mean threshold of Jennings et al. (2018), Nature Comm. 9, 1148.
    half_width_k : float
        Half width of a linear transition; 0 gives a step [K].

    Returns
    -------
    ndarray float64
        Solid fraction [1].
    """
    return snow_fraction_wet_bulb_threshold(
        t_air_k, threshold_k=threshold_k, half_width_k=half_width_k
    )


def no_liquid_below_wet_bulb(snow_frac, t_wet_bulb_k) -> np.ndarray:
    """All precipitation solid where the wet-bulb temperature is at or below 0 degC.

    Parameters
    ----------
    snow_frac : array_like float64
        Solid share from a surface phase method [1].
    t_wet_bulb_k : array_like float64
        Wet-bulb temperature [K].

    Returns
    -------
    ndarray float64
        1 where T_w <= 273.15 K, else ``snow_frac`` [1].

    Notes
    -----
    A falling hydrometeor tends to the wet-bulb temperature (it cools by evaporation and
    sublimation); a snowflake melts only where its surface exceeds 0 degC, so below 0 degC
    wet bulb no melt water reaches the ground (Matsuo & Sasyo 1981, J. Meteorol. Soc.
    Japan 59(1), 10-25; Ding et al. 2014, J. Hydrol. 513, 154-163,
    doi:10.1016/j.jhydrol.2014.03.038, whose rain-snow threshold in wet bulb stays above
    0 degC [mem]). Supercooled liquid from a melting layer aloft is the freezing-rain path
    (:func:`freezing_rain_at_cell`), not this one.
    """
    sf = np.asarray(snow_frac, dtype=np.float64)
    return np.where(np.asarray(t_wet_bulb_k) <= ZERO_CELSIUS_K, 1.0, sf)


def snow_fraction(
    method: str,
    t_air_k,
    rh_frac,
    pressure_pa,
    *,
    threshold_c: float = 1.0,
    half_width_k: float = 0.0,
) -> np.ndarray:
    """Solid share of precipitation at the cell by the configured method [1].

    Parameters
    ----------
    method : "jennings2018", "wet_bulb" or "air_temperature"
        Jennings et al. (2018) humidity-dependent threshold with its narrow mixed band, or a
        wet-bulb or air-temperature threshold ``threshold_c`` [degC] with a linear band of
        half width ``half_width_k`` [K].
    t_air_k, rh_frac, pressure_pa : array_like float64
        Air temperature [K], relative humidity [1], pressure [Pa].

    Returns
    -------
    ndarray float64
        Solid share, 1 wherever the wet-bulb temperature is at or below 0 degC
        (:func:`no_liquid_below_wet_bulb`) [1].
    """
    t = np.asarray(t_air_k, dtype=np.float64)
    rh = np.broadcast_to(np.asarray(rh_frac, dtype=np.float64), t.shape)
    p = np.broadcast_to(np.asarray(pressure_pa, dtype=np.float64), t.shape)
    threshold_k = ZERO_CELSIUS_K + threshold_c
    if method == "jennings2018":
        sf = snow_fraction_jennings2018(t, rh)
    elif method == "air_temperature":
        sf = snow_fraction_air_temperature_threshold(
            t, threshold_k=threshold_k, half_width_k=half_width_k
        )
    elif method != "wet_bulb":
        raise ValueError(
            f"phase method: expected jennings2018, wet_bulb or air_temperature, got {method!r}"
        )
    # the wet bulb only where liquid is possible (it costs a moist-adiabat integration)
    liquid_possible = (t > ZERO_CELSIUS_K) if method == "wet_bulb" else (sf < 1.0)
    tw = np.full(t.shape, ZERO_CELSIUS_K - 1.0)
    tw[liquid_possible] = wet_bulb_temperature_normand(
        t[liquid_possible], rh[liquid_possible], p[liquid_possible]
    )
    if method == "wet_bulb":
        sf = snow_fraction_wet_bulb_threshold(
            tw, threshold_k=threshold_k, half_width_k=half_width_k
        )
    return no_liquid_below_wet_bulb(sf, tw)


def _split_area(d_lo, d_hi, dlnp):
    """Positive and negative parts of the integral of d, linear between two ends."""
    pos = np.where(
        (d_lo >= 0) & (d_hi >= 0),
        0.5 * (d_lo + d_hi),
        np.where(
            (d_lo <= 0) & (d_hi <= 0),
            0.0,
            0.5 * np.maximum(d_lo, d_hi) ** 2 / np.maximum(np.abs(d_lo - d_hi), 1e-12),
        ),
    )
    neg = pos - 0.5 * (d_lo + d_hi)
    return pos * dlnp, neg * dlnp


def bourgouin2000_areas(
    t_surface_k: np.ndarray,
    p_surface_pa: np.ndarray,
    t_levels_k: np.ndarray,
    p_levels_pa: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """Melting (warm layer aloft) and refreezing (cold surface layer) energy areas.

    Parameters
    ----------
    t_surface_k : ndarray (...) float64
        Near-surface air temperature [K].
    p_surface_pa : ndarray (...) float64
        Surface pressure [Pa].
    t_levels_k : ndarray (level, ...) float64
        Temperature on pressure levels [K].
    p_levels_pa : ndarray (level,) float64
        Pressure of the levels [Pa]; levels below the ground (p > p_surface) are ignored.

    Returns
    -------
    melt_area_j_kg : ndarray (...) float64
        Positive area of the lowest warm (> 0 degC) layer above a sub-freezing surface
        layer [J kg-1]; 0 where the surface air is not below freezing.
    cold_area_j_kg : ndarray (...) float64
        Negative area of the surface cold layer below it, as a positive number [J kg-1].

    Notes
    -----
    Area between the sounding and the 0 degC isotherm on a thermodynamic diagram,
    A = R_d integral (T - 273.15) d ln p, with T linear in ln p between levels
    (Bourgouin 2000, Weather and Forecasting 15(5), 583-592,
    doi:10.1175/1520-0434(2000)015<0583:AMTDPT>2.0.CO;2; method from memory [mem]).
    """
    order = np.argsort(-np.asarray(p_levels_pa))
    p_lev = np.asarray(p_levels_pa, dtype=np.float64)[order]
    t_lev = np.asarray(t_levels_k, dtype=np.float64)[order]
    shape = np.shape(t_surface_k)
    cold_sfc = np.asarray(t_surface_k) < ZERO_CELSIUS_K
    stage = np.where(cold_sfc, 0, 3)  # 0 cold surface layer, 1 warm layer, 2 above, 3 none
    melt = np.zeros(shape)
    cold = np.zeros(shape)
    t_lo = np.asarray(t_surface_k, dtype=np.float64).copy()
    lnp_lo = np.log(np.asarray(p_surface_pa, dtype=np.float64)).copy()
    for k in range(p_lev.size):
        lnp_hi = np.log(p_lev[k])
        above = lnp_hi < lnp_lo
        dlnp = np.where(above, lnp_lo - lnp_hi, 0.0)
        t_hi = t_lev[k]
        pos, neg = _split_area(t_lo - ZERO_CELSIUS_K, t_hi - ZERO_CELSIUS_K, dlnp)
        cross_up = (t_lo < ZERO_CELSIUS_K) & (t_hi >= ZERO_CELSIUS_K)
        cross_down = (t_lo >= ZERO_CELSIUS_K) & (t_hi < ZERO_CELSIUS_K)
        in0, in1 = stage == 0, stage == 1
        cold += np.where(in0 & above, neg, 0.0)
        melt += np.where((in0 | in1) & above, pos, 0.0)
        stage = np.where(above & in0 & cross_up, 1, stage)
        stage = np.where(above & (stage == 1) & cross_down, 2, stage)
        t_lo = np.where(above, t_hi, t_lo)
        lnp_lo = np.where(above, lnp_hi, lnp_lo)
    return R_DRY_J_KG_K * melt, R_DRY_J_KG_K * cold


def freezing_rain_fraction_bourgouin2000(melt_area_j_kg, cold_area_j_kg) -> np.ndarray:
    """Freezing-rain fraction of precipitation from the Bourgouin (2000) energy areas.

    Parameters
    ----------
    melt_area_j_kg : array_like float64
        Melting area aloft [J kg-1].
    cold_area_j_kg : array_like float64
        Refreezing area of the surface cold layer [J kg-1].

    Returns
    -------
    ndarray float64
        0 below 5.6 J kg-1 of melting energy (snow survives), rising linearly to 1 at
        13.2 J kg-1 (complete melting); 0 where the cold layer refreezes the drops to ice
        pellets, cold area > 46 + 0.66 melt area [1].

    Notes
    -----
    Thresholds of Bourgouin (2000), Weather and Forecasting 15(5), 583-592 (recalled from
    memory [mem]); the linear ramp between them stands for partial melting.
    """
    ma = np.asarray(melt_area_j_kg, dtype=np.float64)
    ca = np.asarray(cold_area_j_kg, dtype=np.float64)
    melted = np.clip((ma - 5.6) / (13.2 - 5.6), 0.0, 1.0)
    return np.where(ca > 46.0 + 0.66 * ma, 0.0, melted)


def freezing_rain_at_cell(
    snow_frac: np.ndarray, fzra_aloft_frac: np.ndarray, t_air_k: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """Combine the surface phase with freezing rain from a melting layer aloft.

    Parameters
    ----------
    snow_frac : ndarray (cell, time) float64
        Solid fraction from the surface phase method [1].
    fzra_aloft_frac : ndarray (cell, time) float64
        Share of precipitation that reaches the cold surface layer as supercooled liquid,
        from the forcing's freezing-rain variable or from the Bourgouin areas [1].
    t_air_k : ndarray (cell, time) float64
        Cell air temperature [K].

    Returns
    -------
    snow_frac : ndarray (cell, time) float64
        Solid fraction, reduced so that solid + freezing rain <= 1 [1].
    freezing_rain_frac : ndarray (cell, time) float64
        The aloft fraction where the cell's air is below 0 degC, else 0 [1].
    """
    fzra = np.where(np.asarray(t_air_k) < ZERO_CELSIUS_K, np.clip(fzra_aloft_frac, 0.0, 1.0), 0.0)
    return np.minimum(snow_frac, 1.0 - fzra), fzra

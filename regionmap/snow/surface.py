"""Surface energy balance: radiation, stability-corrected bulk turbulent fluxes, Newton solve.

Fluxes are positive towards the surface [W m-2]. Exchange coefficients use the forcing's real
measurement heights (wind at ``z_wind_m``, temperature and humidity at ``z_temp_m``).
"""

from __future__ import annotations

import math

from numba import njit

from regionmap.constants import (
    C_AIR_J_KG_K,
    EPSILON,
    GRAVITY_M_S2,
    L_SUBLIMATION_J_KG,
    L_VAPOUR_J_KG,
    R_DRY_J_KG_K,
    STEFAN_BOLTZMANN_W_M2_K4,
    T_MELT_K,
    VON_KARMAN,
)
from regionmap.downscale.thermo import (
    BUCK1981_ICE_B,
    BUCK1981_ICE_C_DEGC,
    BUCK1981_WATER_B,
    BUCK1981_WATER_C_DEGC,
    saturation_vapour_pressure_ice_buck1981,
    saturation_vapour_pressure_water_buck1981,
    specific_humidity_from_vapour_pressure,
)

__all__ = [
    "wet_bulb_temperature_psychrometric",
    "neutral_exchange_coefficient",
    "stability_factor_louis1979",
    "turbulent_exchange_coefficient",
    "surface_fluxes",
    "solve_surface_temperature",
]


@njit(cache=True, nogil=True, error_model="numpy")
def wet_bulb_temperature_psychrometric(t_k, rh_frac, pressure_pa):
    """Wet-bulb temperature from the psychrometric equation (Newton iterations) [K].

    Solves e_s(T_w) - A p (T - T_w) = RH e_s(T) for T_w, with e_s over water from Buck
    (1981) and the psychrometer coefficient A = c_p / (eps L_v) = 6.46e-4 K-1 of an
    aspirated psychrometer (WMO 2008, Guide to Meteorological Instruments and Methods of
    Observation, WMO-No. 8, Annex 4.B, which gives 6.53e-4 K-1 for the Assmann type [mem]).
    Checked against MetPy's ``wet_bulb_temperature`` (Normand's construction).
    """
    a = C_AIR_J_KG_K / (EPSILON * L_VAPOUR_J_KG)
    e = min(max(rh_frac, 1e-4), 1.0) * saturation_vapour_pressure_water_buck1981(t_k)
    b, c = BUCK1981_WATER_B, BUCK1981_WATER_C_DEGC
    tw = t_k
    for _ in range(8):
        es = saturation_vapour_pressure_water_buck1981(tw)
        t_c = tw - T_MELT_K
        des = es * b * c / ((c + t_c) * (c + t_c))
        f = es - a * pressure_pa * (t_k - tw) - e
        tw -= f / (des + a * pressure_pa)
    return min(tw, t_k)


@njit(cache=True, nogil=True, error_model="numpy")
def neutral_exchange_coefficient(z_wind_m, z_temp_m, z0_m, z0h_m):
    """Neutral bulk exchange coefficient C_HN = k^2 / [ln(z_u/z0) ln(z_t/z0h)] [1].

    Monin-Obukhov similarity in neutral air with separate wind and temperature heights
    (e.g. Garratt 1992, The Atmospheric Boundary Layer, Eq. 3.45). k = 0.40.
    """
    return VON_KARMAN * VON_KARMAN / (math.log(z_wind_m / z0_m) * math.log(z_temp_m / z0h_m))


@njit(cache=True, nogil=True, error_model="numpy")
def stability_factor_louis1979(ri_bulk, c_neutral, z_m, z0_m):
    """Stability factor for heat and moisture, Louis (1979), Bound.-Layer Meteorol. 17.

    Parameters
    ----------
    ri_bulk : float
        Bulk Richardson number [1].
    c_neutral : float
        Neutral exchange coefficient [1].
    z_m, z0_m : float
        Reference height and roughness length [m].

    Returns
    -------
    float
        F_h: stable 1 / [1 + 3b Ri sqrt(1 + d Ri)], unstable
        1 - 3b Ri / [1 + 3 b c C_N sqrt(-Ri z/z0)], with b = c = d = 5 (Eqs. 24-25 of the
        paper as recalled [mem]). doi:10.1007/BF00117978
    """
    b = 5.0
    if ri_bulk >= 0.0:
        return 1.0 / (1.0 + 3.0 * b * ri_bulk * math.sqrt(1.0 + 5.0 * ri_bulk))
    return 1.0 - 3.0 * b * ri_bulk / (
        1.0 + 3.0 * b * 5.0 * c_neutral * math.sqrt(-ri_bulk * z_m / z0_m)
    )


@njit(cache=True, nogil=True, error_model="numpy")
def turbulent_exchange_coefficient(
    t_air_k, t_surf_k, wind_m_s, c_neutral, z_temp_m, z0_m, stable_floor_frac
):
    """Stability-corrected exchange coefficient C_H [1] with a floor in very stable air.

    The bulk Richardson number Ri = g z_t (T_a - T_s) / (T_mean U^2) (Louis 1979). The
    floor keeps ``stable_floor_frac`` of the neutral value: without it a clear calm night
    decouples the surface completely, which observations over snow do not show (common
    practice in snow models; e.g. Jordan 1991 adds a windless exchange term).
    ``c_neutral`` is :func:`neutral_exchange_coefficient` at the measurement heights.
    """
    c_n = c_neutral
    t_mean = 0.5 * (t_air_k + t_surf_k)
    ri = GRAVITY_M_S2 * z_temp_m * (t_air_k - t_surf_k) / (t_mean * wind_m_s * wind_m_s)
    f = stability_factor_louis1979(ri, c_n, z_temp_m, z0_m)
    return c_n * max(f, stable_floor_frac)


@njit(cache=True, nogil=True, error_model="numpy")
def surface_fluxes(
    t_surf_k,
    t_air_k,
    q_air,
    pressure_pa,
    wind_m_s,
    lw_in_w_m2,
    sw_abs_surface_w_m2,
    emissivity,
    c_neutral,
    z_temp_m,
    z0_m,
    stable_floor_frac,
):
    """Energy fluxes at a snow surface of temperature ``t_surf_k`` (positive downwards).

    Returns
    -------
    q_net : float
        Absorbed shortwave (surface part) + emissivity LW_in - emissivity sigma Ts^4 + H + LE
        [W m-2].
    sensible : float
        H = rho_a c_p C_H U (T_a - T_s) [W m-2].
    latent : float
        LE = L_s rho_a C_H U (q_a - q_sat,ice(T_s)) [W m-2].
    vapour_flux : float
        Deposition (+) or sublimation (-) rate [kg m-2 s-1].
    dq_dts : float
        d q_net / d T_s with the exchange coefficient held fixed [W m-2 K-1] (always < 0;
        the slope used by the Newton iteration).

    Notes
    -----
    Bulk aerodynamic formulas with equal coefficients for heat and vapour (e.g. Garratt
    1992, Eqs. 3.43-3.44) and Louis (1979) stability.
    """
    rho_air = pressure_pa / (R_DRY_J_KG_K * t_air_k)
    c_h = turbulent_exchange_coefficient(
        t_air_k, t_surf_k, wind_m_s, c_neutral, z_temp_m, z0_m, stable_floor_frac
    )
    e_s = saturation_vapour_pressure_ice_buck1981(t_surf_k)
    q_surf = specific_humidity_from_vapour_pressure(e_s, pressure_pa)
    t_c = t_surf_k - T_MELT_K
    b, c = BUCK1981_ICE_B, BUCK1981_ICE_C_DEGC
    dq_surf = q_surf * b * c / ((c + t_c) * (c + t_c))
    conductance = rho_air * c_h * wind_m_s
    sensible = C_AIR_J_KG_K * conductance * (t_air_k - t_surf_k)
    vapour_flux = conductance * (q_air - q_surf)
    latent = L_SUBLIMATION_J_KG * vapour_flux
    t2 = t_surf_k * t_surf_k
    lw_out = emissivity * STEFAN_BOLTZMANN_W_M2_K4 * t2 * t2
    lw_net = emissivity * lw_in_w_m2 - lw_out
    dq_dts = (
        -4.0 * lw_out / t_surf_k
        - C_AIR_J_KG_K * conductance
        - (L_SUBLIMATION_J_KG * conductance * dq_surf)
    )
    return sw_abs_surface_w_m2 + lw_net + sensible + latent, sensible, latent, vapour_flux, dq_dts


@njit(cache=True, nogil=True, error_model="numpy")
def solve_surface_temperature(
    t_guess_k,
    t_top_k,
    k_surf_w_m2_k,
    t_air_k,
    q_air,
    pressure_pa,
    wind_m_s,
    lw_in_w_m2,
    sw_abs_surface_w_m2,
    emissivity,
    c_neutral,
    z_temp_m,
    z0_m,
    stable_floor_frac,
    n_iter,
):
    """Skin temperature from q_net(Ts) = K (Ts - T_top): safeguarded Newton, capped at 0 degC.

    The root is bracketed in [180 K, 273.15 K]: when the balance is still positive at
    0 degC the surface melts (returned as 273.15). Otherwise a fixed number of Newton steps
    with the slope of :func:`surface_fluxes` (stability frozen), falling back to bisection
    whenever a step leaves the bracket, so the solve never diverges and never raises.

    Returns
    -------
    t_surf_k : float
        Skin temperature [K], at most 273.15.
    q_net, sensible, latent, vapour_flux, dq_dts : float
        :func:`surface_fluxes` at ``t_surf_k`` (computed once, by the solve's last step).
    residual : float
        q_net(Ts) - K (Ts - T_top) at the solution [W m-2] (0 when capped at melting).
    """
    hi = T_MELT_K
    q_hi, s_hi, l_hi, v_hi, d_hi = surface_fluxes(
        hi,
        t_air_k,
        q_air,
        pressure_pa,
        wind_m_s,
        lw_in_w_m2,
        sw_abs_surface_w_m2,
        emissivity,
        c_neutral,
        z_temp_m,
        z0_m,
        stable_floor_frac,
    )
    f_hi = q_hi - k_surf_w_m2_k * (hi - t_top_k)
    if f_hi >= 0.0:
        return T_MELT_K, q_hi, s_hi, l_hi, v_hi, d_hi, 0.0
    lo = 150.0
    ts = min(max(t_guess_k, lo + 1.0), hi - 1e-6)
    f = 0.0
    dq = d_hi
    for _ in range(n_iter):
        q0, _s, _l, _v, dq = surface_fluxes(
            ts,
            t_air_k,
            q_air,
            pressure_pa,
            wind_m_s,
            lw_in_w_m2,
            sw_abs_surface_w_m2,
            emissivity,
            c_neutral,
            z_temp_m,
            z0_m,
            stable_floor_frac,
        )
        f = q0 - k_surf_w_m2_k * (ts - t_top_k)
        if f > 0.0:
            lo = ts
        else:
            hi = ts
        step = -f / (dq - k_surf_w_m2_k)
        if abs(step) < 1e-9:
            break
        nxt = ts + step
        if nxt < lo or nxt > hi:
            nxt = 0.5 * (lo + hi)
        ts = nxt
    q0, sens, lat, vap, dq = surface_fluxes(
        ts,
        t_air_k,
        q_air,
        pressure_pa,
        wind_m_s,
        lw_in_w_m2,
        sw_abs_surface_w_m2,
        emissivity,
        c_neutral,
        z_temp_m,
        z0_m,
        stable_floor_frac,
    )
    return ts, q0, sens, lat, vap, dq, q0 - k_surf_w_m2_k * (ts - t_top_k)

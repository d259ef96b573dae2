"""The column kernel: steps cells through a whole period in one compiled call.

Each cell is independent: its layers are copied into small work arrays, stepped through all
time steps (the time loop is inside the kernel), and written back, so a result never depends
on which block or thread a cell falls in. The process functions called here live in their own
modules with their sources (newsnow, compaction, conduction, surface, radiation, water,
metamorphism, crusts, surface_hoar, layering, diagnostics).

Order of processes in a step: precipitation partition -> surface-hoar burial and snowfall ->
glaze -> rain -> surface energy balance coupled implicitly to conduction (snow + soil) ->
melt/refreeze from enthalpy -> deposition/sublimation -> percolation with ponding -> crust
formation -> compaction -> metamorphism -> surface hoar growth/destruction -> merging ->
albedo -> closure bookkeeping and diagnostics.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from regionmap.constants import (
    C_ICE_J_KG_K,
    C_WATER_J_KG_K,
    GRAVITY_M_S2,
    L_FUSION_J_KG,
    RHO_ICE_KG_M3,
    RHO_WATER_KG_M3,
    T_MELT_K,
)
from regionmap.downscale.thermo import (
    saturation_vapour_pressure_water_buck1981,
    specific_humidity_from_vapour_pressure,
)
from regionmap.snow.codes import GRAIN_INDEX
from regionmap.snow.compaction import compaction_strain_rate
from regionmap.snow.conduction import (
    conduction_back_substitution,
    conduction_forward_sweep,
    snow_conductivity,
    soil_heat_capacity,
)
from regionmap.snow.containers import EPOCH_2000_S
from regionmap.snow.crusts import (
    FLAG_FRONT,
    FLAG_WAS_WET,
    FLAG_WET_MELT,
    FLAG_WET_RAIN,
    FLAG_WET_SUN,
    GLAZE,
    NO_CRUST,
    crust_kind_on_refreeze,
    glaze_thickness_m,
    refrozen_by_surface_front,
    substantial_rain,
)
from regionmap.snow.layering import (
    F_DEND,
    F_FACET,
    F_GRAIN,
    F_ICE,
    F_LIQ,
    F_TEMP,
    F_THICK,
    FLAG_WIND_PACKED,
    I_CODE,
    I_CRUST,
    I_DEP,
    I_EVENT,
    I_FLAGS,
    I_FORM,
    insert_top,
    merge_pair,
    merge_pass,
    merge_to_make_room,
    remove_layer,
)
from regionmap.snow.metamorphism import (
    arrhenius_ratio_6000,
    classify_grain,
    dendricity_rate_brun1992,
    dry_dendricity_rate_brun1992,
    facetedness_rate,
    grain_growth_marbouty1980,
    grain_growth_wet_brun1989,
)
from regionmap.snow.newsnow import new_snow_density
from regionmap.snow.params import (
    N_SOIL,
    P_ALBEDO_DRY_DECAY_PER_DAY,
    P_ALBEDO_MAX,
    P_ALBEDO_MIN,
    P_ALBEDO_REFRESH_PER_KG_M2,
    P_ALBEDO_WET_EFOLD_PER_DAY,
    P_BARRIER_DENSITY_KG_M3,
    P_CAPILLARY_RATIO,
    P_COMPACTION_C_RHO_M3_KG,
    P_COMPACTION_C_T_PER_K,
    P_COMPACTION_ETA0_PA_S,
    P_CONDUCTIVITY_MODEL,
    P_CRUST_REFREEZE_WINDOW_H,
    P_CRUST_WET_FRAC,
    P_DEEP_GROUND_TEMPERATURE_K,
    P_DEPTH_HOAR_MIN_GRAIN_MM,
    P_EMISSIVITY,
    P_EVENT_GAP_H,
    P_EVENT_MIN_KG_M2,
    P_FACET_RATE_PER_DAY,
    P_GRADIENT_ROUND_K_M,
    P_IRREDUCIBLE_PORE_FRAC,
    P_KINETIC_GROWTH_M_S,
    P_MERGE_DEPTH_FRAC,
    P_NEAR_SURFACE_DEPTH_M,
    P_NEW_LAYER_MAX_M,
    P_NEW_SNOW_DENSITY_MODEL,
    P_NEW_SNOW_GRAIN_MM,
    P_NEWTON_ITERATIONS,
    P_POND_PORE_FRAC,
    P_RAIN_CRUST_MIN_KG_M2,
    P_RAIN_CRUST_MIN_SHARE,
    P_ROUGHNESS_M,
    P_ROUND_RATE_PER_DAY,
    P_SETTLING_RATE0_PER_S,
    P_SETTLING_RHO_D_KG_M3,
    P_SH_DENSITY_KG_M3,
    P_SH_DESTROY_SW_W_M2,
    P_SH_DESTROY_USTAR_M_S,
    P_SH_KEEP_USTAR_M_S,
    P_SH_MIN_MASS_KG_M2,
    P_SH_SHIELD_KG_M2,
    P_SH_WIND_MAX_M_S,
    P_SNOW_EVENT_GAP_H,
    P_SOIL_CONDUCTIVITY_W_M_K,
    P_SOIL_FREEZING_RANGE_K,
    P_SOIL_HEAT_CAPACITY_J_M3_K,
    P_SOIL_WATER_KG_M3,
    P_STABLE_FLOOR_FRAC,
    P_SW_SURFACE_FRAC,
    P_WIND_MIN_M_S,
    P_WIND_PACKED_DENSITY_KG_M3,
    P_WIND_PACKED_GRAIN_MM,
    SOIL_THICKNESS_M,
)
from regionmap.snow.radiation import albedo_douville1995, penetration_fraction
from regionmap.snow.surface import (
    neutral_exchange_coefficient,
    solve_surface_temperature,
    wet_bulb_temperature_psychrometric,
)
from regionmap.snow.surface_hoar import (
    friction_velocity_log_law,
    surface_hoar_destroyed,
    surface_hoar_forms,
    surface_hoar_size_mm,
    surface_hoar_survival,
)
from regionmap.snow.vecmath import padded_count
from regionmap.snow.water import is_flow_barrier, layer_enthalpy, percolate_column, resolve_phase
from regionmap.snow.wind_transport import erodible_layer

# per-cell surface state vector (float64)
V_ALBEDO, V_TSURF, V_SH_MASS, V_SNOW_AGE_H, V_SNOW_GAP_H, V_RAIN_GAP_H, V_FZ_GAP_H = range(7)
# rain and all precipitation since the current rain event began [kg m-2]
V_RAIN_EV_KG_M2, V_RAIN_EV_PRECIP_KG_M2 = 7, 8
# erodible snow of the wind-transport bucket [kg m-2]: kept by run_columns for the zone's
# transport (regionmap.snow.wind_transport.zone_transport), carried but not used by the kernel
V_WIND_ERODIBLE = 9
V_SOIL = 10  # soil temperatures V_SOIL .. V_SOIL + N_SOIL - 1, deepest first
N_SV = V_SOIL + N_SOIL
# per-cell integer state vector (J_FRONT_START: start of the current refreezing front from
# the surface, s since 2000)
J_N, J_SNOW_EV, J_RAIN_EV, J_FZ_EV, J_SH_START, J_FRONT_START = range(6)
# event ids are whole hours since 1970; layer times are seconds since 2000
EPOCH_2000_H = EPOCH_2000_S // 3600
N_SI = 6
RING_H = 72  # hours of new-snow history

# accumulated fluxes of one step (float64)
A_SNOW, A_RAIN, A_RUNOFF, A_SUBL, A_DEPO, A_MASS_RES, A_ENERGY_RES, A_RAIN_ON_SNOW, A_FZ = range(9)
# wind transport: deposited, eroded, and the erosion asked for that the surface could not give
A_WIND_IN, A_WIND_OUT, A_WIND_SHORT = 9, 10, 11
N_ACC = 12

# status bits
ST_LAYER_FULL = 1  # no room for a new layer: snow added to the top layer instead
ST_EVENT_OVERFLOW = 2  # event log full for this cell
ST_NONFINITE = 4  # a non-finite value appeared (cell state kept, step skipped)

# event kinds in the log
EV_RAIN_ON_SNOW, EV_FREEZING_RAIN = 1, 2

_SOIL_DZ = np.array(SOIL_THICKNESS_M, dtype=np.float64)
#: [K-1] share of a wet layer's latent heat counted as heat capacity per kelvin
APPARENT_PER_K = 1.0
#: grain indices of the classification table (module-level ints: constants to the compiled code)
_PP, _RG, _SH, _DH, _MF, _MFCR, _IF = (
    GRAIN_INDEX[c] for c in ("PP", "RG", "SH", "DH", "MF", "MFcr", "IF")
)


@njit(cache=True, nogil=True, error_model="numpy")
def _f32(x):
    return np.float64(np.float32(x))


@njit(cache=True, nogil=True, error_model="numpy")
def column_enthalpy(fw, n, sh_mass):
    """Enthalpy of the column relative to liquid water at 0 degC [J m-2] (SH at 0 degC)."""
    e = -L_FUSION_J_KG * sh_mass
    for i in range(n):
        e += layer_enthalpy(fw[F_ICE, i], fw[F_LIQ, i], fw[F_TEMP, i])
    return e


@njit(cache=True, nogil=True, error_model="numpy")
def column_mass(fw, n, sh_mass):
    """Ice + liquid + surface hoar [kg m-2]."""
    m = sh_mass
    for i in range(n):
        m += fw[F_ICE, i] + fw[F_LIQ, i]
    return m


@njit(cache=True, nogil=True, error_model="numpy")
def _column_mass_enthalpy(fw, n, sh_mass):
    """(:func:`column_mass`, :func:`column_enthalpy`) in one pass."""
    m = sh_mass
    e = -L_FUSION_J_KG * sh_mass
    for i in range(n):
        m += fw[F_ICE, i] + fw[F_LIQ, i]
        e += layer_enthalpy(fw[F_ICE, i], fw[F_LIQ, i], fw[F_TEMP, i])
    return m, e


@njit(cache=True, nogil=True, error_model="numpy")
def _round_and_totals(fw, n, sh_mass):
    """Round the fields the state keeps as float32 (a vectorised pass) and return
    (:func:`column_mass`, :func:`column_enthalpy`) of the rounded column."""
    for i in range(padded_count(n)):  # vectorises
        fw[F_THICK, i] = _f32(fw[F_THICK, i])
        fw[F_TEMP, i] = _f32(fw[F_TEMP, i])
        fw[F_GRAIN, i] = _f32(fw[F_GRAIN, i])
        fw[F_DEND, i] = _f32(fw[F_DEND, i])
        fw[F_FACET, i] = _f32(fw[F_FACET, i])
    return _column_mass_enthalpy(fw, n, sh_mass)


@njit(cache=True, nogil=True, error_model="numpy")
def _set_layer(fw, iw, i, thick, ice, t_k, grain_mm, dend, facet, code, crust, dep, event):
    fw[F_THICK, i] = thick
    fw[F_ICE, i] = ice
    fw[F_LIQ, i] = 0.0
    fw[F_TEMP, i] = t_k
    fw[F_GRAIN, i] = grain_mm
    fw[F_DEND, i] = dend
    fw[F_FACET, i] = facet
    iw[I_CODE, i] = code
    iw[I_CRUST, i] = crust
    iw[I_FLAGS, i] = 0
    iw[I_DEP, i] = dep
    iw[I_FORM, i] = dep
    iw[I_EVENT, i] = event


@njit(cache=True, nogil=True, error_model="numpy")
def _make_room(fw, iw, n, now_s, p, cap):
    """Merge until a slot is free; returns (n, ok). ``ok`` is False when only the last resort
    of :func:`regionmap.snow.layering.merge_to_make_room` (merging unlike protected layers)
    could free a slot; the caller then adds to the top layer and flags ST_LAYER_FULL."""
    if n < cap:
        return n, True
    n = merge_pass(fw, iw, n, now_s, p[P_NEW_LAYER_MAX_M], p[P_MERGE_DEPTH_FRAC], cap - 1)
    if n < cap:
        return n, True
    return merge_to_make_room(fw, iw, n)


@njit(cache=True, nogil=True, error_model="numpy")
def _add_snow(fw, iw, n, mass, rho, t_air, now_s, event, p, cap, code, grain_mm, dend, flag):
    """New snow of density ``rho`` [kg m-3], class ``code``, grain size, dendricity and
    layer ``flag``: fills the top layer of the same kind and event up to the new-layer
    thickness, then opens new thin layers. Snowfall is PP (dendricity 1, no flag); snow
    the wind deposits is rounded, broken grains flagged ``FLAG_WIND_PACKED``.
    Returns (n, status)."""
    t_snow = min(t_air, T_MELT_K)
    max_dz = p[P_NEW_LAYER_MAX_M]
    status = 0
    remaining = mass
    while remaining > 0.0:
        top = n - 1
        if (
            n > 0
            and iw[I_CODE, top] == code
            and (iw[I_FLAGS, top] & FLAG_WIND_PACKED) == flag
            and iw[I_EVENT, top] == event
            and fw[F_THICK, top] < max_dz * 0.999
            and fw[F_LIQ, top] == 0.0
        ):
            room_kg = (max_dz - fw[F_THICK, top]) * rho
            add = min(remaining, room_kg)
            c_old = C_ICE_J_KG_K * fw[F_ICE, top]
            c_add = C_ICE_J_KG_K * add
            fw[F_TEMP, top] = (c_old * fw[F_TEMP, top] + c_add * t_snow) / (c_old + c_add)
            fw[F_GRAIN, top] = (fw[F_ICE, top] * fw[F_GRAIN, top] + add * grain_mm) / (
                fw[F_ICE, top] + add
            )
            fw[F_DEND, top] = (fw[F_ICE, top] * fw[F_DEND, top] + add * dend) / (
                fw[F_ICE, top] + add
            )
            fw[F_FACET, top] = fw[F_ICE, top] * fw[F_FACET, top] / (fw[F_ICE, top] + add)
            fw[F_ICE, top] += add
            fw[F_THICK, top] += add / rho
            remaining -= add
            continue
        n, ok = _make_room(fw, iw, n, now_s, p, cap)
        if not ok:
            status |= ST_LAYER_FULL
            top = n - 1
            c_old = C_ICE_J_KG_K * fw[F_ICE, top]
            c_add = C_ICE_J_KG_K * remaining
            fw[F_TEMP, top] = (c_old * fw[F_TEMP, top] + c_add * t_snow) / (c_old + c_add)
            fw[F_ICE, top] += remaining
            fw[F_THICK, top] += remaining / rho
            remaining = 0.0
            continue
        add = min(remaining, max_dz * rho)
        n = insert_top(fw, iw, n)
        _set_layer(
            fw, iw, n - 1, add / rho, add, t_snow, grain_mm, dend, 0.0, code, 0, now_s, event
        )
        iw[I_FLAGS, n - 1] = flag
        remaining -= add
    return n, status


@njit(cache=True, nogil=True, error_model="numpy")
def _wind_erode(fw, iw, n, request, ustar):
    """Take up to ``request`` kg m-2 from the top layers the wind can erode
    (:func:`regionmap.snow.wind_transport.erodible_layer`), stopping at the first it cannot.
    Returns (n, mass taken)."""
    taken = 0.0
    while n > 0 and taken < request:
        top = n - 1
        dens = fw[F_ICE, top] / max(fw[F_THICK, top], 1e-9)
        if not erodible_layer(fw[F_LIQ, top], iw[I_CRUST, top], iw[I_CODE, top], dens, ustar):
            break
        take = request - taken
        if take >= fw[F_ICE, top]:
            taken += fw[F_ICE, top]
            n = remove_layer(fw, iw, n, top)
        else:
            fw[F_THICK, top] *= 1.0 - take / fw[F_ICE, top]
            fw[F_ICE, top] -= take
            taken += take
    return n, taken


@njit(cache=True, nogil=True, error_model="numpy")
def _glaze(fw, iw, n, water, now_s, event, p, cap):
    """Freezing rain on a sub-freezing surface freezes on contact: a glaze (IF) layer of
    ``water`` kg m-2 of ice at 0 degC, thickness water / 917. Its latent heat is released at
    the surface (returned, J m-2) and enters the step's surface energy balance, so it leaves
    to the air and into the snow; what the surface cannot shed melts back and drains.
    Returns (n, status, latent heat)."""
    top = n - 1
    if iw[I_CODE, top] == _IF and iw[I_CRUST, top] == GLAZE and iw[I_EVENT, top] == event:
        g = top
    else:
        n, ok = _make_room(fw, iw, n, now_s, p, cap)
        if not ok:
            return n, ST_LAYER_FULL, 0.0
        t_top = fw[F_TEMP, n - 1]
        n = insert_top(fw, iw, n)
        g = n - 1
        _set_layer(fw, iw, g, 0.0, 0.0, t_top, 1.0, 0.0, 0.0, _IF, GLAZE, now_s, event)
    c_old = C_ICE_J_KG_K * fw[F_ICE, g] + C_WATER_J_KG_K * fw[F_LIQ, g]
    c_add = C_ICE_J_KG_K * water
    fw[F_TEMP, g] = (c_old * fw[F_TEMP, g] + c_add * T_MELT_K) / (c_old + c_add)
    fw[F_ICE, g] += water
    fw[F_THICK, g] += glaze_thickness_m(water)
    iw[I_FORM, g] = now_s
    return n, 0, L_FUSION_J_KG * water


@njit(cache=True, nogil=True, error_model="numpy")
def _energy_and_conduction(
    fw,
    n,
    sv,
    ta,
    q_air,
    pres,
    wind,
    sw_in,
    lw_in,
    q_extra,
    dt,
    zu,
    zt,
    p,
    tn,
    kn,
    cn,
    dzn,
    sn,
    lo,
    di,
    dens_w,
    sol,
):
    """Surface energy balance coupled to one backward-Euler conduction step of snow + soil.

    ``tn`` ... ``sol`` are work arrays of at least N_SOIL + n elements (``dens_w``: snow
    density of each layer [kg m-3]).

    Returns (q_surface_net, sw_into_snow, ground_flux, sw_absorbed, lw_net, sensible,
    latent, vapour_flux, t_surf).
    """
    ns = N_SOIL
    m = ns + n
    ks = p[P_SOIL_CONDUCTIVITY_W_M_K]
    for i in range(ns):
        dzn[i] = _SOIL_DZ[i]
        kn[i] = ks
        tn[i] = sv[V_SOIL + i]
        cn[i] = soil_heat_capacity(
            tn[i],
            _SOIL_DZ[i],
            p[P_SOIL_HEAT_CAPACITY_J_M3_K],
            p[P_SOIL_WATER_KG_M3],
            p[P_SOIL_FREEZING_RANGE_K],
        )
        sn[i] = 0.0
    model_k = int(p[P_CONDUCTIVITY_MODEL])
    thick_w = fw[F_THICK]
    ice_w = fw[F_ICE]
    liq_w = fw[F_LIQ]
    temp_w = fw[F_TEMP]
    for l in range(padded_count(n)):  # vectorises
        j = ns + l
        dzn[j] = thick_w[l]
        dens = ice_w[l] / max(thick_w[l], 1e-9)
        dens_w[l] = dens  # kept for the shortwave penetration below
        kn[j] = snow_conductivity(model_k, dens)
        # a wet layer stays at 0 degC while its water freezes: its latent heat counts as an
        # apparent heat capacity over 1 K in the implicit step, so the front's heat flux is
        # not lost to a wet node cooling far below 0 degC within one step
        cn[j] = (
            C_ICE_J_KG_K * ice_w[l]
            + C_WATER_J_KG_K * liq_w[l]
            + APPARENT_PER_K * L_FUSION_J_KG * liq_w[l]
        )
        tn[j] = temp_w[l]
        sn[j] = 0.0
    albedo = sv[V_ALBEDO]
    sw_abs = (1.0 - albedo) * sw_in if n > 0 else 0.0
    remaining = sw_abs - p[P_SW_SURFACE_FRAC] * sw_abs
    sw_surf = p[P_SW_SURFACE_FRAC] * sw_abs + q_extra  # heat absorbed at the skin
    if remaining > 1e-6:
        absorbed_frac = sol  # free until the back substitution below
        grain_w = fw[F_GRAIN]
        for l in range(padded_count(n)):  # vectorises
            absorbed_frac[l] = penetration_fraction(dens_w[l], grain_w[l], thick_w[l])
        for l in range(n - 1, -1, -1):
            if remaining <= 1e-6:  # below a microwatt: nothing left to absorb
                break
            a = remaining * absorbed_frac[l]
            sn[ns + l] = a
            remaining -= a
    sw_snow = sw_abs - p[P_SW_SURFACE_FRAC] * sw_abs - remaining
    if n > 0:
        sn[ns - 1] += remaining  # what passes the snow warms the soil
    # the column's response to the heat flux G entering its top: T_top' = y_top + G / beta
    top = m - 1
    beta, y_top = conduction_forward_sweep(
        m, tn, kn, cn, dzn, sn, dt, ks / (0.5 * dzn[0]), p[P_DEEP_GROUND_TEMPERATURE_K], lo, di
    )
    # the skin sits half a top layer above the top node: G = K_s (Ts - T_top'), so
    # G = K_eff (Ts - y_top); the skin balance q_net(Ts) = G is solved exactly (Newton)
    k_s = 2.0 * kn[top] / dzn[top]
    k_eff = k_s * beta / (k_s + beta)
    eps = p[P_EMISSIVITY]
    z0 = p[P_ROUGHNESS_M]
    floor = p[P_STABLE_FLOOR_FRAC]
    c_n = neutral_exchange_coefficient(zu, zt, z0, z0)
    if n > 0:
        ts, q_net, sens, lat, vap, _dq, _r = solve_surface_temperature(
            sv[V_TSURF],
            y_top,
            k_eff,
            ta,
            q_air,
            pres,
            wind,
            lw_in,
            sw_surf,
            eps,
            c_n,
            zt,
            z0,
            floor,
            int(p[P_NEWTON_ITERATIONS]),
        )
        g_top = q_net if ts >= T_MELT_K else k_eff * (ts - y_top)
    else:
        # bare ground: the soil surface follows the air temperature
        ts = ta
        g_top = k_eff * (ta - y_top)
    conduction_back_substitution(m, g_top, beta, lo, di, sol)
    for i in range(m):
        tn[i] = sol[i]
    for i in range(ns):
        sv[V_SOIL + i] = tn[i]
    if n == 0:
        sv[V_TSURF] = ts
        return 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, ts
    for l in range(padded_count(n)):
        # back to the temperature that carries the same heat change at the real heat
        # capacity (identical for dry layers); the phase step then freezes the water
        c_real = C_ICE_J_KG_K * ice_w[l] + C_WATER_J_KG_K * liq_w[l]
        t_old = temp_w[l]
        fw[F_TEMP, l] = t_old + (tn[ns + l] - t_old) * cn[ns + l] / max(c_real, 1e-12)
    kint = 1.0 / (0.5 * dzn[ns - 1] / kn[ns - 1] + 0.5 * dzn[ns] / kn[ns])
    ground = kint * (tn[ns - 1] - tn[ns])
    lw_net = q_net - sw_surf - sens - lat  # (q_extra stays out of lw_net)
    return q_net, sw_snow, ground, sw_abs, lw_net, sens, lat, vap, ts


@njit(cache=True, nogil=True, error_model="numpy")
def _resolve_all(fw, n):
    """Melt/refreeze every layer from its enthalpy; heat beyond melting a whole layer passes
    to the layer below. A layer losing ice to melt shrinks in proportion (its density stays).
    Returns heat leaving through the base [J m-2]."""
    excess = 0.0
    for i in range(n - 1, -1, -1):
        if excess == 0.0 and fw[F_LIQ, i] <= 0.0 and fw[F_TEMP, i] <= T_MELT_K:
            continue  # dry and not above melting: nothing to melt or refreeze
        ice_old = fw[F_ICE, i]
        h = layer_enthalpy(ice_old, fw[F_LIQ, i], fw[F_TEMP, i]) + excess
        ice, liq, t, excess = resolve_phase(ice_old + fw[F_LIQ, i], h)
        fw[F_ICE, i] = ice
        fw[F_LIQ, i] = liq
        fw[F_TEMP, i] = t
        if ice < ice_old and ice_old > 0.0:
            fw[F_THICK, i] *= ice / ice_old
    return excess


@njit(cache=True, nogil=True, error_model="numpy")
def _vapour_exchange(fw, iw, n, sv, mass, to_hoar):
    """Deposition (mass > 0) onto surface hoar or the top layer; sublimation (mass < 0) from
    surface hoar, then the top layers. Returns (n, applied mass, enthalpy change [J m-2])."""
    if mass > 0.0:
        if to_hoar:
            sv[V_SH_MASS] += mass
            return n, mass, -L_FUSION_J_KG * mass
        top = n - 1
        h0 = layer_enthalpy(fw[F_ICE, top], fw[F_LIQ, top], fw[F_TEMP, top])
        dens = max(fw[F_ICE, top] / max(fw[F_THICK, top], 1e-9), 50.0)
        fw[F_ICE, top] += mass
        fw[F_THICK, top] += mass / dens
        return n, mass, layer_enthalpy(fw[F_ICE, top], fw[F_LIQ, top], fw[F_TEMP, top]) - h0
    need = -mass
    take = min(need, sv[V_SH_MASS])
    sv[V_SH_MASS] -= take
    dh = L_FUSION_J_KG * take
    need -= take
    while need > 0.0 and n > 0:
        top = n - 1
        h0 = layer_enthalpy(fw[F_ICE, top], fw[F_LIQ, top], fw[F_TEMP, top])
        m_top = fw[F_ICE, top] + fw[F_LIQ, top]
        if m_top > need:
            frac = need / m_top
            from_ice = min(need, fw[F_ICE, top])
            fw[F_ICE, top] -= from_ice
            fw[F_LIQ, top] -= need - from_ice
            fw[F_THICK, top] *= 1.0 - frac
            need = 0.0
            dh += layer_enthalpy(fw[F_ICE, top], fw[F_LIQ, top], fw[F_TEMP, top]) - h0
        else:
            need -= m_top
            dh -= h0
            fw[F_ICE, top] = 0.0
            fw[F_LIQ, top] = 0.0
            n = remove_layer(fw, iw, n, top)
    return n, mass + need, dh


@njit(cache=True, nogil=True, error_model="numpy")
def _hoar_into_top(fw, n, mass):
    """Mix ``mass`` kg m-2 of surface hoar (ice at 0 degC) into the top layer at its density."""
    top = n - 1
    dens = max(fw[F_ICE, top] / max(fw[F_THICK, top], 1e-9), 50.0)
    fw[F_ICE, top] += mass
    fw[F_THICK, top] += mass / dens


@njit(cache=True, nogil=True, error_model="numpy")
def _bury_or_drop_hoar(fw, iw, n, sv, si, ustar, now_s, p, cap):
    """At snowfall: the share of the surface hoar that survives this hour's wind
    (:func:`regionmap.snow.surface_hoar.surface_hoar_survival`, nothing above it yet) becomes
    a buried SH layer when there is enough of it; the rest is mixed into the top layer."""
    m_sh = sv[V_SH_MASS]
    sv[V_SH_MASS] = 0.0
    keep = m_sh * surface_hoar_survival(
        ustar, 0.0, p[P_SH_KEEP_USTAR_M_S], p[P_SH_DESTROY_USTAR_M_S], p[P_SH_SHIELD_KG_M2]
    )
    if keep >= p[P_SH_MIN_MASS_KG_M2]:
        n, ok = _make_room(fw, iw, n, now_s, p, cap)
        if ok:
            _hoar_into_top(fw, n, m_sh - keep)
            t_top = fw[F_TEMP, n - 1]
            n = insert_top(fw, iw, n)
            rho = p[P_SH_DENSITY_KG_M3]
            _set_layer(
                fw,
                iw,
                n - 1,
                keep / rho,
                keep,
                t_top,
                surface_hoar_size_mm(keep, rho),
                0.0,
                1.0,
                _SH,
                0,
                si[J_SH_START],
                (si[J_SH_START] // 3600) + EPOCH_2000_H,
            )
            iw[I_FORM, n - 1] = now_s
            return n
    _hoar_into_top(fw, n, m_sh)
    return n


@njit(cache=True, nogil=True, error_model="numpy")
def _erode_buried_hoar(fw, iw, n, ustar, p):
    """Wind on surface hoar buried under less snow than the shield load: the share that does
    not survive this hour (:func:`regionmap.snow.surface_hoar.surface_hoar_survival`) joins
    the layer above (enthalpy kept); a layer left below the smallest kept mass merges into
    it. Returns n."""
    shield = p[P_SH_SHIELD_KG_M2]
    load = 0.0
    i = n - 1
    while i >= 0 and load < shield:
        m_i = fw[F_ICE, i] + fw[F_LIQ, i]
        if iw[I_CODE, i] == _SH and i < n - 1:
            frac = surface_hoar_survival(
                ustar, load, p[P_SH_KEEP_USTAR_M_S], p[P_SH_DESTROY_USTAR_M_S], shield
            )
            j = i + 1
            if fw[F_ICE, i] * frac < p[P_SH_MIN_MASS_KG_M2]:
                n = merge_pair(fw, iw, n, i)
                j = i
                lost = 0.0
            else:
                lost = fw[F_ICE, i] * (1.0 - frac)
            if lost > 0.0:
                h = layer_enthalpy(fw[F_ICE, j], fw[F_LIQ, j], fw[F_TEMP, j]) + layer_enthalpy(
                    lost, 0.0, fw[F_TEMP, i]
                )
                dens = max(fw[F_ICE, j] / max(fw[F_THICK, j], 1e-9), 50.0)
                fw[F_THICK, j] += lost / dens
                fw[F_THICK, i] *= frac
                fw[F_GRAIN, i] *= frac
                fw[F_ICE, i] -= lost
                ice, liq, t, _ = resolve_phase(fw[F_ICE, j] + fw[F_LIQ, j] + lost, h)
            else:
                h = layer_enthalpy(fw[F_ICE, j], fw[F_LIQ, j], fw[F_TEMP, j])
                ice, liq, t, _ = resolve_phase(fw[F_ICE, j] + fw[F_LIQ, j], h)
            fw[F_ICE, j] = ice
            fw[F_LIQ, j] = liq
            fw[F_TEMP, j] = t
        load += m_i
        i -= 1
    return n


@njit(cache=True, nogil=True, error_model="numpy")
def _wet_flags_and_crusts(
    fw, iw, n, si, rain_event, rain_wetting, rain_crust_event, surface_melt, solar_melt, now_s, p
):
    """Tag wet layers with the source of their water; turn wet layers refrozen from the cold
    surface into crusts.

    Water from the top down in a step with rain is rain water; water in a layer of a step
    with surface melt is melt (sun melt when the sun drove it). A layer that reached the
    "wet" class (``crust_wet_frac`` by volume) with water of a known source becomes a crust
    when it refreezes (:func:`regionmap.snow.crusts.crust_kind_on_refreeze`) as part of the
    refreezing front that descends from the cold surface
    (:func:`regionmap.snow.crusts.refrozen_by_surface_front`): every layer above it dry, and
    refrozen within ``crust_refreeze_window_h`` of the front's start (``si[J_FRONT_START]``,
    set when the first layer of a front refreezes). Wet snow that refreezes later, or from
    below or in place under a wet layer, refreezes as melt forms without a crust kind. A
    rain-wetted layer is a rain crust only when its rain event is substantial
    (``rain_crust_event`` at refreeze, :func:`regionmap.snow.crusts.substantial_rain`).
    Water of no known source (a trace, the melt-back of a glaze) wets without making a crust.
    """
    wet_src = FLAG_WET_RAIN | FLAG_WET_SUN | FLAG_WET_MELT
    window_s = 3600.0 * p[P_CRUST_REFREEZE_WINDOW_H]
    from_top = True
    lid_dry = True  # every layer above is dry
    front_above = False  # a layer above was refrozen by the current front
    for i in range(n - 1, -1, -1):
        liq = fw[F_LIQ, i]
        fl = iw[I_FLAGS, i]
        if liq > 0.0:
            if rain_wetting and from_top:
                if not fl & FLAG_WET_RAIN:
                    iw[I_EVENT, i] = rain_event
                fl |= FLAG_WET_RAIN
            elif surface_melt and from_top and not fl & wet_src:
                fl |= FLAG_WET_SUN if solar_melt else FLAG_WET_MELT
            if liq / (RHO_WATER_KG_M3 * max(fw[F_THICK, i], 1e-9)) >= p[P_CRUST_WET_FRAC]:
                fl |= FLAG_WAS_WET
            fl &= ~FLAG_FRONT
            lid_dry = False
        else:
            from_top = False
            if fl & FLAG_WAS_WET and fl & wet_src and fw[F_TEMP, i] < T_MELT_K:
                if lid_dry and not front_above:
                    si[J_FRONT_START] = now_s
                in_crust = refrozen_by_surface_front(lid_dry, now_s - si[J_FRONT_START], window_s)
                if lid_dry:
                    fl |= FLAG_FRONT
                same_event = iw[I_EVENT, i] == rain_event
                kind = crust_kind_on_refreeze(iw[I_CRUST, i], fl, rain_crust_event and same_event)
                if kind != NO_CRUST and in_crust:
                    if iw[I_CRUST, i] == NO_CRUST:
                        iw[I_FORM, i] = si[J_FRONT_START]
                    iw[I_CRUST, i] = kind
                    if iw[I_CODE, i] != _IF:
                        iw[I_CODE, i] = _MFCR
                fl &= ~(FLAG_WAS_WET | wet_src)
            elif fw[F_TEMP, i] < T_MELT_K:
                fl &= ~(FLAG_WAS_WET | wet_src)
            front_above = front_above or (fl & FLAG_FRONT) != 0
        iw[I_FLAGS, i] = fl


@njit(cache=True, nogil=True, error_model="numpy")
def _compact(fw, n, dt, p, load_w):
    """Settle every layer under its overburden plus destructive settling (backward Euler).

    ``load_w`` (>= n,) work array: the mass above each layer's centre [kg m-2]. The loop
    over layers has no branches and vectorises."""
    eta0 = p[P_COMPACTION_ETA0_PA_S]
    c_t = p[P_COMPACTION_C_T_PER_K]
    c_rho = p[P_COMPACTION_C_RHO_M3_KG]
    rate0 = p[P_SETTLING_RATE0_PER_S]
    rho_d = p[P_SETTLING_RHO_D_KG_M3]
    load = 0.0
    for i in range(n - 1, -1, -1):
        m = fw[F_ICE, i] + fw[F_LIQ, i]
        load_w[i] = load + 0.5 * m
        load += m
    thick_w = fw[F_THICK]
    ice_w = fw[F_ICE]
    liq_w = fw[F_LIQ]
    temp_w = fw[F_TEMP]
    for i in range(padded_count(n)):
        ice = ice_w[i]
        liq = liq_w[i]
        thick = thick_w[i]
        dens = ice / max(thick, 1e-9)
        theta_w = liq * (1.0 / RHO_WATER_KG_M3) / max(thick, 1e-9)
        rate = compaction_strain_rate(
            dens, temp_w[i], theta_w, GRAVITY_M_S2 * load_w[i], eta0, c_t, c_rho, rate0, rho_d
        )
        dz = thick / (1.0 + rate * dt)
        dz_min = ice / RHO_ICE_KG_M3 + liq / RHO_WATER_KG_M3
        thick_w[i] = max(dz, dz_min)


@njit(cache=True, nogil=True, error_model="numpy")
def _layer_gradients(fw, n, sv, ts, grad_w, centre_w):
    """Hourly temperature gradient across each layer [K m-1] (from the temperatures of the
    neighbours above and below, the surface on top and the top soil node at the base) and
    the depth of each layer's centre [m]."""
    depth = 0.0
    t_up = ts
    for i in range(n - 1, -1, -1):
        dz = fw[F_THICK, i]
        d_up = 0.5 * dz if i == n - 1 else 0.5 * (dz + fw[F_THICK, i + 1])
        if i == 0:
            t_dn = sv[V_SOIL + N_SOIL - 1]
            d_dn = 0.5 * (dz + _SOIL_DZ[N_SOIL - 1])
        else:
            t_dn = fw[F_TEMP, i - 1]
            d_dn = 0.5 * (dz + fw[F_THICK, i - 1])
        grad_w[i] = (t_up - t_dn) / (d_up + d_dn)
        t_up = fw[F_TEMP, i]
        centre_w[i] = depth + 0.5 * dz
        depth += dz


@njit(cache=True, nogil=True, error_model="numpy")
def _is_wet(liq, dz):
    """Liquid volume fraction above 1e-4 (written without a division)."""
    return liq > 1e-4 * RHO_WATER_KG_M3 * max(dz, 1e-9)


@njit(cache=True, nogil=True, error_model="numpy")
def _metamorphose(fw, iw, n, sv, ts, dt, p, grad_w, centre_w, arr_w):
    """Grain evolution of every layer from its hourly temperature gradient, temperature,
    density and wetness; then its grain class.

    After the gradients (:func:`_layer_gradients`), four passes: the dry-snow laws for
    every layer, without branches so the loop vectorises (faceting or rounding and kinetic
    growth; ice layers, surface hoar and wet layers keep their values); the decomposition of
    dry new snow, vectorised likewise; then, layer by layer, the wet-snow laws for the few
    wet layers (skipped when there are none); then, again vectorised, the clamping and the
    grain class (ice layers unchanged, dry crusts keep their class). The vectorised passes run to
    ``padded_count(n)`` (:func:`regionmap.snow.vecmath.padded_count`).
    ``grad_w``, ``centre_w``, ``arr_w`` (>= padded_count(n),) are work arrays.
    """
    days = dt / 86400.0
    g_round = p[P_GRADIENT_ROUND_K_M]
    facet_rate = p[P_FACET_RATE_PER_DAY]
    round_rate = p[P_ROUND_RATE_PER_DAY]
    kinetic = p[P_KINETIC_GROWTH_M_S]
    near_m = p[P_NEAR_SURFACE_DEPTH_M]
    dh_min = p[P_DEPTH_HOAR_MIN_GRAIN_MM]
    _layer_gradients(fw, n, sv, ts, grad_w, centre_w)
    thick_w = fw[F_THICK]
    ice_w = fw[F_ICE]
    liq_w = fw[F_LIQ]
    temp_w = fw[F_TEMP]
    grain_w = fw[F_GRAIN]
    facet_w = fw[F_FACET]
    code_w = iw[I_CODE]
    dend_w = fw[F_DEND]
    wet_layers = 0
    for i in range(padded_count(n)):
        dz = thick_w[i]
        t = temp_w[i]
        grad = grad_w[i]
        dens = ice_w[i] / max(dz, 1e-9)
        # one exponential per layer serves decomposition and rounding
        arr = arrhenius_ratio_6000(t)
        f = (
            facet_w[i]
            + facetedness_rate(t, dens, grad, g_round, facet_rate, round_rate, arr) * days
        )
        gs = grain_growth_marbouty1980(grain_w[i], t, dens, grad, dt, kinetic)
        code = code_w[i]
        wet = _is_wet(liq_w[i], dz)
        wet_layers += 1 if wet & (i < n) else 0
        dry_snow = (code != _IF) & (code != _SH) & (not wet)
        facet_w[i] = f if dry_snow else facet_w[i]
        grain_w[i] = gs if dry_snow else grain_w[i]
        arr_w[i] = arr if dry_snow & (dend_w[i] > 0.0) else 0.0  # 0: no decomposition
    # (a pass of its own: fused into the pass above, the loop runs slower)
    for i in range(padded_count(n)):
        d = dend_w[i]
        decomposed = d - dry_dendricity_rate_brun1992(arr_w[i], grad_w[i]) * days
        dend_w[i] = decomposed if arr_w[i] > 0.0 else d
    for i in range(n if wet_layers > 0 else 0):
        if iw[I_CODE, i] == _IF or not _is_wet(fw[F_LIQ, i], fw[F_THICK, i]):
            continue
        pct = 100.0 * fw[F_LIQ, i] / max(fw[F_ICE, i] + fw[F_LIQ, i], 1e-12)
        fw[F_DEND, i] -= dendricity_rate_brun1992(fw[F_TEMP, i], grad_w[i], pct) * days
        fw[F_FACET, i] = fw[F_FACET, i] - 1.0 * days
        fw[F_GRAIN, i] = grain_growth_wet_brun1989(fw[F_GRAIN, i], pct, dt)
    crust_w = iw[I_CRUST]
    for i in range(padded_count(n)):
        code = code_w[i]
        wet = _is_wet(liq_w[i], thick_w[i])
        d = min(max(dend_w[i], 0.0), 1.0)
        f = min(max(facet_w[i], 0.0), 1.0)
        new_code = classify_grain(code, d, f, grain_w[i], wet, centre_w[i] < near_m, dh_min)
        is_ice = code == _IF
        dry_crust = (crust_w[i] != 0) & (code == _MFCR) & (not wet)
        dend_w[i] = dend_w[i] if is_ice else d
        facet_w[i] = facet_w[i] if is_ice else f
        code_w[i] = code if is_ice | dry_crust else new_code


@njit(cache=True, nogil=True, error_model="numpy")
def _cleanup(fw, iw, n):
    """Remove ice-free layers (their water moves down, or leaves) and fold layers thinner
    than 0.1 mm or with less than 0.01 kg m-2 of ice (ice layers: 0.001 kg m-2, a film of
    about a micrometre) into a neighbour: a node without heat capacity or thickness would
    leave the conduction step's tridiagonal system near-singular. Returns (n, water leaving
    the base [kg m-2])."""
    out = 0.0
    i = n - 1
    while i >= 0:
        if fw[F_ICE, i] <= 0.0:
            if i > 0:  # its water (at 0 degC, zero enthalpy) joins the layer below
                j = i - 1
                h = layer_enthalpy(fw[F_ICE, j], fw[F_LIQ, j], fw[F_TEMP, j])
                ice, liq, t, _ = resolve_phase(fw[F_ICE, j] + fw[F_LIQ, j] + fw[F_LIQ, i], h)
                fw[F_ICE, j] = ice
                fw[F_LIQ, j] = liq
                fw[F_TEMP, j] = t
            else:
                out += fw[F_LIQ, i]
            n = remove_layer(fw, iw, n, i)
        elif n > 1 and (
            (fw[F_THICK, i] < 1e-4 or fw[F_ICE, i] < 0.01)
            and iw[I_CODE, i] != _IF
            or fw[F_ICE, i] < 1e-3  # a glaze melted back to a film under a micrometre
        ):
            k = i - 1 if i > 0 else 0
            n = merge_pair(fw, iw, n, k)
            h = layer_enthalpy(fw[F_ICE, k], fw[F_LIQ, k], fw[F_TEMP, k])
            ice, liq, t, _ = resolve_phase(fw[F_ICE, k] + fw[F_LIQ, k], h)
            fw[F_ICE, k] = ice
            fw[F_LIQ, k] = liq
            fw[F_TEMP, k] = t
        i -= 1
        if i > n - 1:
            i = n - 1
    return n, out


@njit(cache=True, nogil=True, error_model="numpy")
def _step(col, met, p, cap, work):
    """Advance one cell by one step; fills ``work.acc`` (N_ACC,) and returns a status bitmask.

    Parameters
    ----------
    col : Column
        The cell's layers and surface state, updated in place.
    met : StepWeather
        The step's forcing and time. An event (snowfall, rain, freezing rain) that starts in
        this step takes the id ``met.event_hour`` (the region-wide window's start, hours since
        1970) when it is positive, else this hour. ``met.wind_transport_kg_m2`` is the hour's
        wind transport decided for the zone
        (:func:`regionmap.snow.wind_transport.zone_transport`): positive deposits a
        wind-packed layer (with the hour's snowfall, which lands in the same wind), negative
        asks the surface for that much erodible snow.
    p : ndarray (N_PARAMS,) float64
        Settings.
    cap : int
        Layer slots.
    work : StepWork
        Work arrays; ``work.totals`` (2,) holds the column mass [kg m-2] and enthalpy
        [J m-2] of the state on entry (:func:`_column_mass_enthalpy`, kept from the previous
        step) and receives those of the state on exit.
    """
    fw, iw, sv, si, ring_m, ring_d = col
    wk, wb, acc, tot = work
    ta = met.t_air_k
    rh = met.rh_frac
    pres = met.pressure_pa
    wind_raw = met.wind_m_s
    sw_in = met.sw_in_w_m2
    lw_in = met.lw_in_w_m2
    precip = met.precip_kg_m2
    sf = met.snow_frac
    fzf = met.freezing_rain_frac
    transport = met.wind_transport_kg_m2
    now_s = met.now_s2000
    hour_abs = met.hour_abs
    region_event_hour = met.event_hour
    dt = met.dt_s
    zu = met.wind_height_m
    zt = met.temp_height_m
    for k in range(N_ACC):
        acc[k] = 0.0
    status = 0
    n = si[J_N]
    wind = max(wind_raw, p[P_WIND_MIN_M_S])
    hours = dt / 3600.0
    m_before = tot[0]
    e_before = tot[1]
    e_mass = 0.0
    liquid = precip * (1.0 - sf)
    snow = precip * sf
    fz = min(precip * fzf, liquid)
    rain = liquid - fz
    acc[A_SNOW] = snow
    acc[A_RAIN] = liquid
    # event identities (start hour since 1970) of snowfall, rain and freezing rain: the
    # region-wide window's when known, so an event has one id in every cell
    event_start = region_event_hour if region_event_hour > 0 else hour_abs
    if snow > 0.0:
        if sv[V_SNOW_GAP_H] >= p[P_SNOW_EVENT_GAP_H] or si[J_SNOW_EV] == 0:
            si[J_SNOW_EV] = event_start
        sv[V_SNOW_GAP_H] = 0.0
    else:
        sv[V_SNOW_GAP_H] += hours
    if liquid > 0.0:
        if sv[V_RAIN_GAP_H] >= p[P_EVENT_GAP_H] or si[J_RAIN_EV] == 0:
            si[J_RAIN_EV] = event_start
            sv[V_RAIN_EV_KG_M2] = 0.0
            sv[V_RAIN_EV_PRECIP_KG_M2] = 0.0
        sv[V_RAIN_GAP_H] = 0.0
    else:
        sv[V_RAIN_GAP_H] += hours
    if sv[V_RAIN_GAP_H] < p[P_EVENT_GAP_H]:
        sv[V_RAIN_EV_KG_M2] += liquid - fz
        sv[V_RAIN_EV_PRECIP_KG_M2] += precip
    if fz > 0.0:
        if sv[V_FZ_GAP_H] >= p[P_EVENT_GAP_H] or si[J_FZ_EV] == 0:
            si[J_FZ_EV] = event_start
        sv[V_FZ_GAP_H] = 0.0
    else:
        sv[V_FZ_GAP_H] += hours
    # wind on thinly buried surface hoar, burial of surface hoar, then snowfall
    ustar = friction_velocity_log_law(wind_raw, zu, p[P_ROUGHNESS_M])
    if ustar > p[P_SH_KEEP_USTAR_M_S] and n > 1:
        n = _erode_buried_hoar(fw, iw, n, ustar, p)
    slot = hour_abs % RING_H
    ring_m[slot] = 0.0
    ring_d[slot] = 0.0
    if snow > 0.0:
        e0 = column_enthalpy(fw, n, sv[V_SH_MASS])
        if sv[V_SH_MASS] > 0.0 and n > 0:
            n = _bury_or_drop_hoar(fw, iw, n, sv, si, ustar, now_s, p, cap)
        rho_new = new_snow_density(int(p[P_NEW_SNOW_DENSITY_MODEL]), ta, wind)
        if transport > 0.0:
            # falling and drifting snow land together: their volumes add; the layer is
            # wind-packed when most of its mass came with the drift
            rho_mix = (snow + transport) / (
                snow / rho_new + transport / p[P_WIND_PACKED_DENSITY_KG_M3]
            )
            packed = transport >= snow
            n, st = _add_snow(
                fw,
                iw,
                n,
                snow + transport,
                rho_mix,
                ta,
                now_s,
                si[J_SNOW_EV],
                p,
                cap,
                _RG if packed else _PP,
                p[P_WIND_PACKED_GRAIN_MM] if packed else p[P_NEW_SNOW_GRAIN_MM],
                0.0 if packed else 1.0,
                FLAG_WIND_PACKED if packed else 0,
            )
            acc[A_WIND_IN] = transport
            transport = 0.0
        else:
            n, st = _add_snow(
                fw,
                iw,
                n,
                snow,
                rho_new,
                ta,
                now_s,
                si[J_SNOW_EV],
                p,
                cap,
                _PP,
                p[P_NEW_SNOW_GRAIN_MM],
                1.0,
                0,
            )
        status |= st
        e_mass += column_enthalpy(fw, n, sv[V_SH_MASS]) - e0
        ring_m[slot] = snow
        ring_d[slot] = snow / rho_new
        if snow >= 0.1:
            sv[V_SNOW_AGE_H] = 0.0
    # wind transport: deposition on sheltered, erosion of what the surface offers on exposed
    if transport > 0.0:
        e0 = column_enthalpy(fw, n, sv[V_SH_MASS])
        n, st = _add_snow(
            fw,
            iw,
            n,
            transport,
            p[P_WIND_PACKED_DENSITY_KG_M3],
            ta,
            now_s,
            si[J_SNOW_EV],
            p,
            cap,
            _RG,
            p[P_WIND_PACKED_GRAIN_MM],
            0.0,
            FLAG_WIND_PACKED,
        )
        status |= st
        e_mass += column_enthalpy(fw, n, sv[V_SH_MASS]) - e0
        acc[A_WIND_IN] = transport
    elif transport < 0.0:
        e0 = column_enthalpy(fw, n, sv[V_SH_MASS])
        n, taken = _wind_erode(fw, iw, n, -transport, ustar)
        e_mass += column_enthalpy(fw, n, sv[V_SH_MASS]) - e0
        acc[A_WIND_OUT] = taken
        acc[A_WIND_SHORT] = -transport - taken
    sv[V_SNOW_AGE_H] += hours
    # freezing rain on a sub-freezing snow surface: glaze
    q_extra = 0.0
    if fz > 0.0 and n > 0 and sv[V_TSURF] < T_MELT_K:
        e0 = column_enthalpy(fw, n, sv[V_SH_MASS])
        n, st, q_latent = _glaze(fw, iw, n, fz, now_s, si[J_FZ_EV], p, cap)
        status |= st
        # the water enters as ice (its enthalpy change here); the latent heat it releases is
        # a heat source at the skin (q_extra), counted once, in the surface flux
        e_mass += column_enthalpy(fw, n, sv[V_SH_MASS]) - e0
        q_extra = q_latent / dt
        if st == 0:
            acc[A_FZ] = fz
            fz = 0.0
    rain += fz
    # rain: liquid at its temperature (at least 0 degC) into the top layer
    runoff = 0.0
    rain_wetting = False
    if rain > 0.0:
        if n > 0:
            top = n - 1
            # rain arrives at its wet-bulb temperature (a falling drop's equilibrium)
            t_rain = wet_bulb_temperature_psychrometric(ta, rh, pres)
            heat = C_WATER_J_KG_K * (max(t_rain, T_MELT_K) - T_MELT_K) * rain
            h = layer_enthalpy(fw[F_ICE, top], fw[F_LIQ, top], fw[F_TEMP, top]) + heat
            ice, liq, t, extra = resolve_phase(fw[F_ICE, top] + fw[F_LIQ, top] + rain, h)
            fw[F_ICE, top] = ice
            fw[F_LIQ, top] = liq
            fw[F_TEMP, top] = t
            i = top - 1
            while extra > 0.0 and i >= 0:  # warm rain melting the whole top layer: heat moves on
                h = layer_enthalpy(fw[F_ICE, i], fw[F_LIQ, i], fw[F_TEMP, i]) + extra
                ice, liq, t, extra = resolve_phase(fw[F_ICE, i] + fw[F_LIQ, i], h)
                fw[F_ICE, i] = ice
                fw[F_LIQ, i] = liq
                fw[F_TEMP, i] = t
                i -= 1
            e_mass += heat - extra
            if extra > 0.0:
                sv[V_SOIL + N_SOIL - 1] += extra / (
                    p[P_SOIL_HEAT_CAPACITY_J_M3_K] * _SOIL_DZ[N_SOIL - 1]
                )
            acc[A_RAIN_ON_SNOW] = rain
            rain_wetting = rain >= p[P_EVENT_MIN_KG_M2]
        else:
            runoff += rain
    # surface energy balance + conduction
    q_air = specific_humidity_from_vapour_pressure(
        rh * saturation_vapour_pressure_water_buck1981(ta), pres
    )
    top_dry = n > 0 and fw[F_LIQ, n - 1] <= 0.0
    q_net, sw_snow, ground, sw_abs, lw_net, sens, lat, vap, ts = _energy_and_conduction(
        fw,
        n,
        sv,
        ta,
        q_air,
        pres,
        wind,
        sw_in,
        lw_in,
        q_extra,
        dt,
        zu,
        zt,
        p,
        wk[1],
        wk[2],
        wk[3],
        wk[4],
        wk[5],
        wk[6],
        wk[7],
        wk[8],
        wk[9],
    )
    e_flux = dt * (q_net + sw_snow + ground)
    if n > 0:
        sv[V_TSURF] = ts
    excess = _resolve_all(fw, n)
    if excess > 0.0:
        e_flux -= excess
        sv[V_SOIL + N_SOIL - 1] += excess / (p[P_SOIL_HEAT_CAPACITY_J_M3_K] * _SOIL_DZ[N_SOIL - 1])
    melting = n > 0 and fw[F_LIQ, n - 1] > 0.0 and ts >= T_MELT_K
    # melt from the surface energy balance: a melting skin with a net gain, and the sun's
    # share larger than that of all other gains on a dry surface
    surface_melt = melting and sw_abs + lw_net + sens + lat > 0.0
    solar_melt = surface_melt and top_dry and sw_abs > max(lw_net + sens + lat, 0.0)
    # deposition / sublimation; surface hoar grows from deposition under its conditions
    if n > 0:
        to_hoar = surface_hoar_forms(vap, wind_raw, ts, ta, snow, p[P_SH_WIND_MAX_M_S])
        if to_hoar and sv[V_SH_MASS] <= 0.0:
            si[J_SH_START] = now_s
        n, applied, dh = _vapour_exchange(fw, iw, n, sv, vap * dt, to_hoar)
        e_mass += dh
        if applied > 0.0:
            acc[A_DEPO] = applied
        else:
            acc[A_SUBL] = -applied
    n, out = _cleanup(fw, iw, n)
    runoff += out
    # percolation with ponding above barriers
    any_liquid = False
    for i in range(n):
        if fw[F_LIQ, i] > 0.0:
            any_liquid = True
            break
    for i in range(n if any_liquid else 0):
        wb[i] = False
        if i > 0:
            dens_dn = fw[F_ICE, i - 1] / max(fw[F_THICK, i - 1], 1e-9)
            wb[i] = is_flow_barrier(
                dens_dn,
                iw[I_CODE, i - 1] == _IF,
                fw[F_GRAIN, i],
                fw[F_GRAIN, i - 1],
                p[P_BARRIER_DENSITY_KG_M3],
                p[P_CAPILLARY_RATIO],
            )
    if any_liquid:
        runoff += percolate_column(
            n,
            fw[F_ICE],
            fw[F_LIQ],
            fw[F_TEMP],
            fw[F_THICK],
            wb,
            p[P_IRREDUCIBLE_PORE_FRAC],
            p[P_POND_PORE_FRAC],
            0.0,
        )
    acc[A_RUNOFF] = runoff
    rain_crust_event = substantial_rain(
        sv[V_RAIN_EV_KG_M2],
        sv[V_RAIN_EV_PRECIP_KG_M2],
        p[P_RAIN_CRUST_MIN_KG_M2],
        p[P_RAIN_CRUST_MIN_SHARE],
    )
    _wet_flags_and_crusts(
        fw,
        iw,
        n,
        si,
        si[J_RAIN_EV],
        rain_wetting,
        rain_crust_event,
        surface_melt,
        solar_melt,
        now_s,
        p,
    )
    _compact(fw, n, dt, p, wk[0])
    _metamorphose(fw, iw, n, sv, ts, dt, p, wk[1], wk[2], wk[3])
    # surface hoar destruction by melt or sun, and the share the wind takes: into the top layer
    if sv[V_SH_MASS] > 0.0:
        if n == 0:
            # the snow under it has melted away: the hoar leaves as melt water
            runoff += sv[V_SH_MASS]
            acc[A_RUNOFF] = runoff
            e_mass += L_FUSION_J_KG * sv[V_SH_MASS]
            sv[V_SH_MASS] = 0.0
        else:
            destroyed = surface_hoar_destroyed(melting, sw_abs, p[P_SH_DESTROY_SW_W_M2])
            survival = surface_hoar_survival(
                ustar,
                0.0,
                p[P_SH_KEEP_USTAR_M_S],
                p[P_SH_DESTROY_USTAR_M_S],
                p[P_SH_SHIELD_KG_M2],
            )
            lost = sv[V_SH_MASS] if destroyed else sv[V_SH_MASS] * (1.0 - survival)
            if sv[V_SH_MASS] - lost < 1e-9:  # no specks of hoar left behind
                lost = sv[V_SH_MASS]
            if lost > 0.0:
                e0 = column_enthalpy(fw, n, sv[V_SH_MASS])
                _hoar_into_top(fw, n, lost)
                sv[V_SH_MASS] -= lost
                e_mass += column_enthalpy(fw, n, sv[V_SH_MASS]) - e0
    if snow > 0.0 or hour_abs % 6 == 0 or n >= cap - 2:
        n = merge_pass(fw, iw, n, now_s, p[P_NEW_LAYER_MAX_M], p[P_MERGE_DEPTH_FRAC], cap - 2)
    if n > 0:
        sv[V_ALBEDO] = albedo_douville1995(
            sv[V_ALBEDO],
            melting,
            snow,
            dt,
            p[P_ALBEDO_MIN],
            p[P_ALBEDO_MAX],
            p[P_ALBEDO_DRY_DECAY_PER_DAY],
            p[P_ALBEDO_WET_EFOLD_PER_DAY],
            p[P_ALBEDO_REFRESH_PER_KG_M2],
        )
    else:
        sv[V_ALBEDO] = p[P_ALBEDO_MAX]
        sv[V_TSURF] = min(ta, T_MELT_K)
    # storage precision: these fields are kept as float32 in the state
    for k in range(N_SV):
        if k != V_SH_MASS and k != V_WIND_ERODIBLE:
            sv[k] = _f32(sv[k])
    ring_m[slot] = _f32(ring_m[slot])
    ring_d[slot] = _f32(ring_d[slot])
    # closure (in the same pass as the rounding)
    m_after, e_after = _round_and_totals(fw, n, sv[V_SH_MASS])
    gains = snow + liquid + acc[A_DEPO] + acc[A_WIND_IN]
    losses = acc[A_SUBL] + runoff + acc[A_WIND_OUT]
    acc[A_MASS_RES] = (m_after - m_before) - (gains - losses)
    if n > 0 or m_before > 0.0:
        acc[A_ENERGY_RES] = (e_after - e_before - e_mass - e_flux) / dt
    tot[0] = m_after
    tot[1] = e_after
    si[J_N] = n
    return status

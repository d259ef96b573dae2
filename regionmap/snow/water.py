"""Liquid water: enthalpy bookkeeping, melt and refreeze, retention, percolation, ponding.

A layer's state is (ice mass, liquid mass, temperature); its enthalpy relative to liquid
water at 0 degC is H = (c_i m_i + c_w m_l)(T - T_0) - L_f m_i. Phase changes follow from H
(melt when H would put dry ice above 0 degC, refreeze when a wet layer loses heat), so mass
and energy are conserved by construction. Retention is a bucket: each layer holds an
irreducible share of its pore volume and passes the rest down. Above a barrier -- an ice
layer or dense crust (impermeable), or a fine-over-coarse contrast (capillary barrier) --
the layer holds up to a larger ponding share before it overflows, mimicking the ponding that
Richards-equation models resolve (Wever et al. 2014, The Cryosphere 8, 257-274,
doi:10.5194/tc-8-257-2014; capillary barriers in snow: Avanzi et al. 2016, The Cryosphere
10, 2013-2026, doi:10.5194/tc-10-2013-2016 [mem]).
"""

from __future__ import annotations

from numba import njit

from regionmap.constants import (
    C_ICE_J_KG_K,
    C_WATER_J_KG_K,
    L_FUSION_J_KG,
    RHO_ICE_KG_M3,
    RHO_WATER_KG_M3,
    T_MELT_K,
)

__all__ = [
    "layer_enthalpy",
    "resolve_phase",
    "retention_capacity",
    "is_flow_barrier",
    "percolate_column",
]


@njit(cache=True, nogil=True, error_model="numpy")
def layer_enthalpy(ice_kg_m2, liquid_kg_m2, t_k):
    """Enthalpy of a layer relative to liquid water at 0 degC [J m-2]."""
    return (C_ICE_J_KG_K * ice_kg_m2 + C_WATER_J_KG_K * liquid_kg_m2) * (t_k - T_MELT_K) - (
        L_FUSION_J_KG * ice_kg_m2
    )


@njit(cache=True, nogil=True, error_model="numpy")
def resolve_phase(total_kg_m2, enthalpy_j_m2):
    """Split a layer's mass into ice and liquid and find its temperature from its enthalpy.

    Parameters
    ----------
    total_kg_m2 : float
        Ice plus liquid mass [kg m-2].
    enthalpy_j_m2 : float
        Enthalpy as in :func:`layer_enthalpy` [J m-2].

    Returns
    -------
    ice_kg_m2, liquid_kg_m2, t_k, excess_j_m2 : float
        Excess is heat beyond melting the whole layer (to be passed on by the caller).

    Notes
    -----
    Below -L_f M the layer is dry at T_0 + (H + L_f M)/(c_i M); between -L_f M and 0 it is
    at 0 degC with liquid (H + L_f M)/L_f. Example (Jordan 1991 bookkeeping; check value
    from the issue): 1 kg m-2 water into 20 kg m-2 ice at -10 degC ends dry at -1.96 degC.
    """
    if total_kg_m2 <= 0.0:
        return 0.0, 0.0, T_MELT_K, enthalpy_j_m2
    h_melt = -L_FUSION_J_KG * total_kg_m2
    if enthalpy_j_m2 < h_melt:
        return (
            total_kg_m2,
            0.0,
            T_MELT_K + (enthalpy_j_m2 - h_melt) / (C_ICE_J_KG_K * total_kg_m2),
            0.0,
        )
    if enthalpy_j_m2 <= 0.0:
        liquid = (enthalpy_j_m2 - h_melt) / L_FUSION_J_KG
        liquid = min(liquid, total_kg_m2)
        return total_kg_m2 - liquid, liquid, T_MELT_K, 0.0
    return 0.0, total_kg_m2, T_MELT_K, enthalpy_j_m2


@njit(cache=True, nogil=True, error_model="numpy")
def retention_capacity(ice_kg_m2, thickness_m, pore_frac):
    """Liquid water a layer holds against gravity [kg m-2]: ``pore_frac`` of its pore volume.

    The irreducible share 0.05 of the pore volume is the simple form used in bucket schemes
    (Vionnet et al. 2012, GMD 5, Sec. 3.5, recalled [mem]).
    """
    porosity = max(1.0 - ice_kg_m2 / (RHO_ICE_KG_M3 * max(thickness_m, 1e-9)), 0.0)
    return pore_frac * porosity * thickness_m * RHO_WATER_KG_M3


@njit(cache=True, nogil=True, error_model="numpy")
def is_flow_barrier(
    density_below_kg_m3,
    grain_below_is_ice,
    grain_mm_above,
    grain_mm_below,
    barrier_density_kg_m3,
    capillary_ratio,
):
    """Whether the layer below holds water back: ice layer / dense crust, or fine over coarse.

    The capillary rule: grains below at least ``capillary_ratio`` times coarser than above
    (fine-over-coarse contrast; Avanzi et al. 2016 [mem]).
    """
    if grain_below_is_ice or density_below_kg_m3 >= barrier_density_kg_m3:
        return True
    return grain_mm_below >= capillary_ratio * grain_mm_above


@njit(cache=True, nogil=True, error_model="numpy")
def percolate_column(
    n, ice, liquid, t_k, thickness_m, is_barrier_below, irreducible_frac, pond_frac, inflow_kg_m2
):
    """Route liquid water down a column of ``n`` layers (bottom first) for one step.

    Parameters
    ----------
    n : int
        Number of layers.
    ice, liquid, t_k : ndarray (>= n,) float64
        Layer ice and liquid mass [kg m-2] and temperature [K], updated in place (water
        entering a cold layer refreezes there, releasing its latent heat).
    thickness_m : ndarray (>= n,) float64
        Layer thickness [m].
    is_barrier_below : ndarray (>= n,) bool
        Whether the layer under layer i holds water back (index i refers to the upper layer).
    irreducible_frac, pond_frac : float
        Retention shares of the pore volume, normally and above a barrier [1].
    inflow_kg_m2 : float
        Water entering the top layer [kg m-2] (at 0 degC, zero enthalpy).

    Returns
    -------
    float
        Runoff leaving the base of the column [kg m-2].
    """
    flow = inflow_kg_m2
    for i in range(n - 1, -1, -1):
        if flow <= 0.0 and liquid[i] <= 0.0:
            continue  # dry and nothing arriving: nothing to route
        if flow > 0.0 or liquid[i] > 0.0:
            h = layer_enthalpy(ice[i], liquid[i], t_k[i])
            m = ice[i] + liquid[i] + flow
            ice_i, liq_i, t_i, _ = resolve_phase(m, h)
            ice[i] = ice_i
            liquid[i] = liq_i
            t_k[i] = t_i
        frac = irreducible_frac
        if i > 0 and is_barrier_below[i]:
            frac = pond_frac
        cap = retention_capacity(ice[i], thickness_m[i], frac)
        flow = 0.0
        if liquid[i] > cap:
            flow = liquid[i] - cap
            liquid[i] = cap
    return flow

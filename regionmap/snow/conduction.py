"""Heat conduction in the snow and soil column.

Effective conductivity from density (Calonne et al. 2011 or Sturm et al. 1997) and one
backward-Euler step of the 1-D heat equation on layer-centred nodes, solved with the Thomas
algorithm (tridiagonal Gaussian elimination without pivoting, stable for these diagonally
dominant systems; Press et al., Numerical Recipes, 3rd ed., Sec. 2.4), split into the
forward sweep and the back substitution so the surface balance can be solved in between.
"""

from __future__ import annotations

from numba import njit

from regionmap.constants import L_FUSION_J_KG, T_MELT_K

__all__ = [
    "conductivity_calonne2011",
    "conductivity_sturm1997",
    "snow_conductivity",
    "conduction_step_backward_euler",
    "conduction_forward_sweep",
    "conduction_back_substitution",
    "soil_heat_capacity",
]


@njit(cache=True, nogil=True, error_model="numpy", inline="always")
def conductivity_calonne2011(density_kg_m3):
    """Effective thermal conductivity of snow (Calonne et al. 2011).

    Parameters
    ----------
    density_kg_m3 : float
        Snow density [kg m-3].

    Returns
    -------
    float
        k = 2.5e-6 rho^2 - 1.23e-4 rho + 0.024 [W m-1 K-1] (Eq. 5 of [1]).

    References
    ----------
    [1] Calonne, N., Flin, F., Morin, S., Lesaffer, B., Rolland du Roscoat, S. & Geindreau, C.
        (2011), Numerical and experimental investigations of the effective thermal
        conductivity of snow, Geophys. Res. Lett. 38, L23501, doi:10.1029/2011GL049234
    """
    return 2.5e-6 * density_kg_m3 * density_kg_m3 - 1.23e-4 * density_kg_m3 + 0.024


@njit(cache=True, nogil=True, error_model="numpy", inline="always")
def conductivity_sturm1997(density_kg_m3):
    """Effective thermal conductivity of snow (Sturm et al. 1997).

    Parameters
    ----------
    density_kg_m3 : float
        Snow density [kg m-3].

    Returns
    -------
    float
        [W m-1 K-1]: 0.023 + 0.234 rho below 0.156 g cm-3, else 0.138 - 1.01 rho +
        3.233 rho^2 (rho in g cm-3; Eq. 5 of [1]).

    References
    ----------
    [1] Sturm, M., Holmgren, J., Koenig, M. & Morris, K. (1997), The thermal conductivity
        of seasonal snow, J. Glaciol. 43(143), 26-41, doi:10.3189/S0022143000002781
    """
    rho = density_kg_m3 * 1e-3
    light = 0.023 + 0.234 * rho
    dense = 0.138 - 1.01 * rho + 3.233 * rho * rho
    return light if rho < 0.156 else dense


@njit(cache=True, nogil=True, error_model="numpy", inline="always")
def snow_conductivity(model, density_kg_m3):
    """Dispatch: 0 = Calonne et al. (2011), else Sturm et al. (1997); floored at 0.02."""
    k = (
        conductivity_calonne2011(density_kg_m3)
        if model == 0
        else conductivity_sturm1997(density_kg_m3)
    )
    return max(k, 0.02)


@njit(cache=True, nogil=True, error_model="numpy")
def conduction_forward_sweep(
    m, t_k, k_w_m_k, c_j_m2_k, dz_m, source_w_m2, dt_s, k_bottom_w_m2_k, t_bottom_k, cprime, y
):
    """Assemble one backward-Euler conduction step and eliminate it from the bottom up.

    Node 0 is the deepest. For node i with heat capacity C_i [J m-2 K-1]:
    C_i (T_i' - T_i)/dt = K_{i-1/2}(T_{i-1}' - T_i') + K_{i+1/2}(T_{i+1}' - T_i') + S_i (+ G at
    the top node), with interface conductances K = 1/(dz_i/2k_i + dz_{i+1}/2k_{i+1})
    [W m-2 K-1] (harmonic mean, e.g. Patankar 1980, Numerical Heat Transfer and Fluid Flow,
    Sec. 4.2); at the base a conductance ``k_bottom_w_m2_k`` to a fixed ``t_bottom_k``.
    The Thomas forward sweep (Press et al., Numerical Recipes, Sec. 2.4) leaves the top
    equation as T_top' = y_top + G / beta_top: the whole column's response to the heat flux
    G entering its top, which the surface balance then solves for exactly.

    Returns
    -------
    beta_top : float
        [W m-2 K-1].
    y_top : float
        Top temperature at the end of the step if G = 0 [K].
    """
    beta = 0.0
    k_lo = 0.0
    r_lo = 0.5 * dz_m[0] / k_w_m_k[0]  # half-layer thermal resistance of node i
    for i in range(m):
        diag = c_j_m2_k[i] / dt_s
        rhs = diag * t_k[i] + source_w_m2[i]
        lower = 0.0
        if i > 0:
            diag += k_lo
            lower = -k_lo
        else:
            diag += k_bottom_w_m2_k
            rhs += k_bottom_w_m2_k * t_bottom_k
        upper = 0.0
        if i < m - 1:
            r_up = 0.5 * dz_m[i + 1] / k_w_m_k[i + 1]
            k_up = 1.0 / (r_lo + r_up)
            diag += k_up
            upper = -k_up
            k_lo = k_up
            r_lo = r_up
        if i == 0:
            beta = diag
            y[0] = rhs / beta
        else:
            beta = diag - lower * cprime[i - 1]
            y[i] = (rhs - lower * y[i - 1]) / beta
        cprime[i] = upper / beta
    return beta, y[m - 1]


@njit(cache=True, nogil=True, error_model="numpy")
def conduction_back_substitution(m, g_top_w_m2, beta_top, cprime, y, out):
    """Finish the step of :func:`conduction_forward_sweep` for a top heat flux G [W m-2]."""
    out[m - 1] = y[m - 1] + g_top_w_m2 / beta_top
    for i in range(m - 2, -1, -1):
        out[i] = y[i] - cprime[i] * out[i + 1]


@njit(cache=True, nogil=True, error_model="numpy")
def conduction_step_backward_euler(
    m,
    t_k,
    k_w_m_k,
    c_j_m2_k,
    dz_m,
    source_w_m2,
    dt_s,
    k_bottom_w_m2_k,
    t_bottom_k,
    a_top_w_m2,
    b_top_w_m2_k,
    cprime,
    y,
    out,
):
    """One backward-Euler conduction step with a top flux G = a + b T_top' (b <= 0).

    b = -K and a = K T_s hold the surface at T_s through conductance K; b = 0 is a fixed
    flux. See :func:`conduction_forward_sweep` for the discretisation; ``out`` receives the
    end-of-step temperatures [K].
    """
    beta, y_top = conduction_forward_sweep(
        m, t_k, k_w_m_k, c_j_m2_k, dz_m, source_w_m2, dt_s, k_bottom_w_m2_k, t_bottom_k, cprime, y
    )
    g = (a_top_w_m2 + b_top_w_m2_k * y_top) / (1.0 - b_top_w_m2_k / beta)
    conduction_back_substitution(m, g, beta, cprime, y, out)


@njit(cache=True, nogil=True, error_model="numpy")
def soil_heat_capacity(t_k, dz_m, c_soil_j_m3_k, water_kg_m3, freezing_range_k):
    """Heat capacity of a soil layer per area [J m-2 K-1], with freezing as apparent capacity.

    Within ``freezing_range_k`` below 0 degC the soil water's latent heat is spread over the
    range (apparent heat capacity method, e.g. Lunardini 1981, Heat Transfer in Cold
    Climates), which holds the ground near 0 degC under shallow snow ("zero curtain").
    """
    c = c_soil_j_m3_k * dz_m
    if T_MELT_K - freezing_range_k <= t_k <= T_MELT_K:
        c += water_kg_m3 * L_FUSION_J_KG * dz_m / freezing_range_k
    return c

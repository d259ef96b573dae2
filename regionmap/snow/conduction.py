"""Heat conduction in the snow and soil column.

Effective conductivity from density (Calonne et al. 2011 or Sturm et al. 1997) and one
backward-Euler step of the 1-D heat equation on layer-centred nodes, solved with the Thomas
algorithm (tridiagonal Gaussian elimination without pivoting, stable for these diagonally
dominant systems; Press et al., Numerical Recipes, 3rd ed., Sec. 2.4).
"""

from __future__ import annotations

from numba import njit

from regionmap.snow.constants import L_FUSION_J_KG, T_MELT_K

__all__ = [
    "conductivity_calonne2011",
    "conductivity_sturm1997",
    "snow_conductivity",
    "solve_tridiagonal",
    "conduction_step_backward_euler",
    "soil_heat_capacity",
]


@njit(cache=True, nogil=True, error_model="numpy")
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


@njit(cache=True, nogil=True, error_model="numpy")
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
    if rho < 0.156:
        return 0.023 + 0.234 * rho
    return 0.138 - 1.01 * rho + 3.233 * rho * rho


@njit(cache=True, nogil=True, error_model="numpy")
def snow_conductivity(model, density_kg_m3):
    """Dispatch: 0 = Calonne et al. (2011), else Sturm et al. (1997); floored at 0.02."""
    if model == 0:
        k = conductivity_calonne2011(density_kg_m3)
    else:
        k = conductivity_sturm1997(density_kg_m3)
    return max(k, 0.02)


@njit(cache=True, nogil=True, error_model="numpy")
def solve_tridiagonal(lower, diag, upper, rhs, n, work, out):
    """Solve a tridiagonal system in place (Thomas algorithm).

    Parameters
    ----------
    lower, diag, upper, rhs : ndarray (>= n,) float64
        Sub-diagonal (``lower[0]`` unused), diagonal, super-diagonal (``upper[n-1]``
        unused) and right-hand side.
    n : int
        Number of unknowns.
    work : ndarray (>= n,) float64
        Scratch space.
    out : ndarray (>= n,) float64
        Solution.
    """
    beta = diag[0]
    out[0] = rhs[0] / beta
    for i in range(1, n):
        work[i] = upper[i - 1] / beta
        beta = diag[i] - lower[i] * work[i]
        out[i] = (rhs[i] - lower[i] * out[i - 1]) / beta
    for i in range(n - 2, -1, -1):
        out[i] -= work[i + 1] * out[i + 1]


@njit(cache=True, nogil=True, error_model="numpy")
def conduction_step_backward_euler(m, t_k, k_w_m_k, c_j_m2_k, dz_m, source_w_m2, dt_s,
                                   k_bottom_w_m2_k, t_bottom_k, a_top_w_m2, b_top_w_m2_k,
                                   k_interface, lower, diag, upper, rhs, work, out):
    """One backward-Euler step of 1-D heat conduction on ``m`` layer-centred nodes.

    Node 0 is the deepest. For node i with heat capacity C_i [J m-2 K-1]:
    C_i (T_i' - T_i)/dt = K_{i-1/2}(T_{i-1}' - T_i') + K_{i+1/2}(T_{i+1}' - T_i') + S_i, with
    interface conductances K = 1/(dz_i/2k_i + dz_{i+1}/2k_{i+1}) [W m-2 K-1] (harmonic mean,
    e.g. Patankar 1980, Numerical Heat Transfer and Fluid Flow, Sec. 4.2). Bottom: a
    conductance ``k_bottom_w_m2_k`` to a fixed ``t_bottom_k`` (0 for an insulated base). Top:
    a flux a + b T_top' into the top node (b <= 0): b = -K and a = K T_s gives a fixed
    surface temperature T_s through conductance K; b = 0 a fixed flux.

    Parameters
    ----------
    m : int
        Active nodes.
    t_k, k_w_m_k, c_j_m2_k, dz_m, source_w_m2 : ndarray (>= m,) float64
        Temperatures at the start [K], conductivities [W m-1 K-1], heat capacities per area
        [J m-2 K-1], thicknesses [m] and absorbed sources [W m-2] of the nodes.
    k_interface, lower, diag, upper, rhs, work : ndarray (>= m,) float64
        Scratch arrays.
    out : ndarray (>= m,) float64
        Temperatures at the end of the step [K].
    """
    for i in range(m - 1):
        k_interface[i] = 1.0 / (0.5 * dz_m[i] / k_w_m_k[i] + 0.5 * dz_m[i + 1] / k_w_m_k[i + 1])
    for i in range(m):
        diag[i] = c_j_m2_k[i] / dt_s
        rhs[i] = c_j_m2_k[i] / dt_s * t_k[i] + source_w_m2[i]
        lower[i] = 0.0
        upper[i] = 0.0
    diag[0] += k_bottom_w_m2_k
    rhs[0] += k_bottom_w_m2_k * t_bottom_k
    for i in range(m - 1):
        kint = k_interface[i]
        diag[i] += kint
        diag[i + 1] += kint
        upper[i] = -kint
        lower[i + 1] = -kint
    diag[m - 1] -= b_top_w_m2_k
    rhs[m - 1] += a_top_w_m2
    solve_tridiagonal(lower, diag, upper, rhs, m, work, out)


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

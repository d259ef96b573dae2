"""Heat conduction in the snow and soil column.

Effective conductivity from density (Calonne et al. 2011 or Sturm et al. 1997) and one
backward-Euler step of the 1-D heat equation on layer-centred nodes, solved with the Thomas
algorithm (tridiagonal Gaussian elimination without pivoting, stable for these diagonally
dominant systems; Press et al., Numerical Recipes, 3rd ed., Sec. 2.4).
"""

from __future__ import annotations

from numba import njit

__all__ = [
    "conductivity_calonne2011",
    "conductivity_sturm1997",
    "snow_conductivity",
    "solve_tridiagonal",
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

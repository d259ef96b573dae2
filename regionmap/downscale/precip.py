"""Precipitation from model terrain to cell: the elevation factor."""

from __future__ import annotations

import numpy as np

__all__ = [
    "THORNTON1997_CHI_PER_KM",
    "precip_factor_thornton1997",
]

#: Monthly precipitation-elevation coefficients chi, January..December [km-1], Thornton et
#: al. (1997) as used by Liston & Elder (2006), J. Hydrometeor. 7(2), Table 1 (from memory [mem]).
THORNTON1997_CHI_PER_KM = np.array(
    [0.35, 0.35, 0.35, 0.30, 0.25, 0.20, 0.20, 0.20, 0.20, 0.25, 0.30, 0.35]
)


def precip_factor_thornton1997(
    dz_m, chi_per_km, *, bounds: tuple[float, float] = (0.5, 1.5)
) -> np.ndarray:
    """Precipitation elevation factor (Thornton et al. 1997, as in Liston & Elder 2006).

    Parameters
    ----------
    dz_m : array_like float64
        Cell elevation minus model terrain height [m].
    chi_per_km : array_like float64
        Precipitation-elevation coefficient [km-1].
    bounds : (float, float)
        Lower and upper bound of the factor itself [1].

    Returns
    -------
    ndarray float64
        f = (1 + chi dz) / (1 - chi dz), dz in km, |chi dz| capped below 1 (at 0.95),
        then clipped to ``bounds`` [1].

    References
    ----------
    Thornton, P. E., Running, S. W. & White, M. A. (1997). Generating surfaces of daily
    meteorological variables over large regions of complex terrain. J. Hydrol. 190,
    214-251, doi:10.1016/S0022-1694(96)03128-9; Liston & Elder (2006), J. Hydrometeor.
    7(2), 217-234, Eq. 33, doi:10.1175/JHM486.1.
    """
    x = np.clip(np.asarray(chi_per_km) * np.asarray(dz_m, dtype=np.float64) / 1000.0, -0.95, 0.95)
    return np.clip((1.0 + x) / (1.0 - x), bounds[0], bounds[1])

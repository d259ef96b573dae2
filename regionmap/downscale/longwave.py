"""Incoming longwave at the cell: clear-sky emissivity, carried cloud effect, terrain."""

from __future__ import annotations

import numpy as np

from regionmap.constants import STEFAN_BOLTZMANN_W_M2_K4

__all__ = [
    "emissivity_clear_sky_prata1996",
    "emissivity_clear_sky_brutsaert1975",
    "clear_sky_emissivity",
    "cloud_factor",
    "longwave_at_cell",
    "cloud_fraction_from_clearness_index",
    "emissivity_all_sky_crawford_duchon1999",
    "fill_night_forward",
]

#: Stefan-Boltzmann constant [W m-2 K-4] (exact in the 2019 SI).


def emissivity_clear_sky_prata1996(e_pa, t_k) -> np.ndarray:
    """Clear-sky atmospheric emissivity (Prata 1996).

    Parameters
    ----------
    e_pa : array_like float64
        Near-surface vapour pressure [Pa].
    t_k : array_like float64
        Near-surface air temperature [K].

    Returns
    -------
    ndarray float64
        eps = 1 - (1 + w) exp(-sqrt(1.2 + 3 w)), w = 46.5 e / T (e in hPa) the
        precipitable water [cm] (Eq. 21 with Eq. 19 of [1]) [1].

    References
    ----------
    [1] Prata, A. J. (1996). A new long-wave formula for estimating downward clear-sky
        radiation at the surface. Q. J. R. Meteorol. Soc. 122(533), 1127-1151.
        doi:10.1002/qj.49712253306
    """
    w = 46.5 * (np.asarray(e_pa) / 100.0) / np.asarray(t_k)
    return 1.0 - (1.0 + w) * np.exp(-np.sqrt(1.2 + 3.0 * w))


def emissivity_clear_sky_brutsaert1975(e_pa, t_k) -> np.ndarray:
    """Clear-sky atmospheric emissivity (Brutsaert 1975).

    Parameters
    ----------
    e_pa : array_like float64
        Near-surface vapour pressure [Pa].
    t_k : array_like float64
        Near-surface air temperature [K].

    Returns
    -------
    ndarray float64
        eps = 1.24 (e / T)^(1/7), e in hPa (Eq. 11 of [1]) [1].

    References
    ----------
    [1] Brutsaert, W. (1975). On a derivable formula for long-wave radiation from clear
        skies. Water Resour. Res. 11(5), 742-744. doi:10.1029/WR011i005p00742
    """
    return 1.24 * ((np.asarray(e_pa) / 100.0) / np.asarray(t_k)) ** (1.0 / 7.0)


def clear_sky_emissivity(e_pa, t_k, method: str) -> np.ndarray:
    """Dispatch to ``"prata1996"`` or ``"brutsaert1975"`` [1]."""
    if method == "prata1996":
        return emissivity_clear_sky_prata1996(e_pa, t_k)
    if method == "brutsaert1975":
        return emissivity_clear_sky_brutsaert1975(e_pa, t_k)
    raise ValueError(f"unknown clear-sky emissivity method {method!r}")


def cloud_factor(lw_down_w_m2, e_pa, t_k, method: str = "prata1996") -> np.ndarray:
    """The model's cloud (and all-sky) effect relative to clear sky at the grid point.

    Parameters
    ----------
    lw_down_w_m2 : array_like float64
        Model incoming longwave [W m-2].
    e_pa, t_k : array_like float64
        Vapour pressure [Pa] and air temperature [K] at the grid point.
    method : str
        Clear-sky emissivity method.

    Returns
    -------
    ndarray float64
        F = LW / (eps_clr sigma T^4) [1].
    """
    t = np.asarray(t_k)
    return np.asarray(lw_down_w_m2) / (
        clear_sky_emissivity(e_pa, t, method) * STEFAN_BOLTZMANN_W_M2_K4 * t**4
    )


def longwave_at_cell(
    all_sky_emissivity, t_k, sky_view_frac, *, terrain_emissivity: float = 0.98
) -> np.ndarray:
    """Incoming longwave at the cell: sky part weighted by sky view plus terrain emission.

    Parameters
    ----------
    all_sky_emissivity : array_like float64
        Effective sky emissivity at the cell, e.g. F x eps_clr(T_cell, e_cell); capped at
        1 [1].
    t_k : array_like float64
        Cell air temperature, also used for the surrounding terrain's surface [K].
    sky_view_frac : array_like float64
        Sky-view factor V [1].
    terrain_emissivity : float
        Emissivity of the surrounding (snow-covered) terrain [1] (common practice 0.98).

    Returns
    -------
    ndarray float64
        V min(1, eps) sigma T^4 + (1 - V) eps_t sigma T^4 [W m-2].

    Notes
    -----
    Carrying the grid point's cloud factor to the cell's temperature and humidity follows
    the approach of e.g. Liston & Elder (2006), J. Hydrometeor. 7(2), 217-234 (their cloud
    fraction applied to a clear-sky emissivity at the target elevation). Terrain at the air
    temperature is an approximation.
    """
    t = np.asarray(t_k)
    svf = np.asarray(sky_view_frac)
    blackbody = STEFAN_BOLTZMANN_W_M2_K4 * t**4
    return svf * np.minimum(all_sky_emissivity, 1.0) * blackbody + (1.0 - svf) * (
        terrain_emissivity * blackbody
    )


def cloud_fraction_from_clearness_index(kt, *, kt_clear: float = 0.75) -> np.ndarray:
    """Cloud proxy from the shortwave clearness index.

    Parameters
    ----------
    kt : array_like float64
        Clearness index, global / extraterrestrial horizontal [1].
    kt_clear : float
        Clearness index of a clear sky (common practice ~0.7-0.8) [1].

    Returns
    -------
    ndarray float64
        c = clip(1 - kt / kt_clear, 0, 1) [1], the cloud fraction of Crawford & Duchon (1999)
        with the clear-sky shortwave taken as kt_clear times the extraterrestrial value.
    """
    return np.clip(1.0 - np.asarray(kt) / kt_clear, 0.0, 1.0)


def emissivity_all_sky_crawford_duchon1999(cloud_frac, clear_sky_emissivity_frac) -> np.ndarray:
    """All-sky emissivity from a cloud fraction (Crawford & Duchon 1999).

    Parameters
    ----------
    cloud_frac : array_like float64
        Cloud fraction [1].
    clear_sky_emissivity_frac : array_like float64
        Clear-sky emissivity [1].

    Returns
    -------
    ndarray float64
        eps = c + (1 - c) eps_clr [1].

    References
    ----------
    Crawford, T. M. & Duchon, C. E. (1999). An improved parameterization for estimating
    effective atmospheric emissivity for use in calculating daytime downwelling longwave
    radiation. J. Appl. Meteorol. 38(4), 474-480, Eq. 20.
    doi:10.1175/1520-0450(1999)038<0474:AIPFEE>2.0.CO;2
    """
    c = np.asarray(cloud_frac)
    return c + (1.0 - c) * np.asarray(clear_sky_emissivity_frac)


def fill_night_forward(values: np.ndarray, valid: np.ndarray, initial: np.ndarray) -> np.ndarray:
    """Carry the last valid value forward along time (axis 1); ``initial`` before any.

    Parameters
    ----------
    values : ndarray (cell, time) float64
        Series with meaningful values only where ``valid``.
    valid : ndarray (cell, time) bool
        Where the value was observed (daylight, for a clearness-index cloud proxy).
    initial : ndarray (cell,) float64
        Value to use before the first valid step (the carry from the previous block).

    Returns
    -------
    ndarray (cell, time) float64
    """
    n_t = values.shape[1]
    idx = np.where(valid, np.arange(1, n_t + 1)[None, :], 0)
    np.maximum.accumulate(idx, axis=1, out=idx)
    padded = np.concatenate([np.asarray(initial, dtype=np.float64)[:, None], values], axis=1)
    return np.take_along_axis(padded, idx, axis=1)

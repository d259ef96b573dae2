"""Snow albedo ageing and refresh, and shortwave penetration into the pack."""

from __future__ import annotations

import math

from numba import njit

from regionmap.snow.vecmath import exp_vec

__all__ = ["albedo_douville1995", "extinction_coefficient_jordan1991", "penetration_fraction"]


@njit(cache=True, nogil=True, error_model="numpy")
def albedo_douville1995(
    albedo,
    melting,
    snowfall_kg_m2,
    dt_s,
    albedo_min,
    albedo_max,
    dry_decay_per_day,
    wet_efold_per_day,
    refresh_per_kg_m2,
):
    """One step of prognostic snow albedo (Douville, Royer & Mahfouf 1995).

    Parameters
    ----------
    albedo : float
        Albedo at the start of the step [1].
    melting : bool
        Surface melting or wet (exponential decay towards ``albedo_min``), else linear dry
        ageing.
    snowfall_kg_m2 : float
        Snowfall during the step [kg m-2]; refreshes by ``refresh_per_kg_m2`` per kg m-2.
    dt_s : float
        Step [s].
    albedo_min, albedo_max : float
        Bounds (0.5, 0.85) [1].
    dry_decay_per_day : float
        Linear dry decay (0.008 day-1).
    wet_efold_per_day : float
        Wet e-folding rate (0.24 day-1).
    refresh_per_kg_m2 : float
        Refresh per kg m-2 of snowfall (0.035: +0.35 per 10 kg m-2).

    Returns
    -------
    float
        Albedo at the end of the step [1].

    Notes
    -----
    Eqs. 3-5 of Douville et al. (1995), Clim. Dyn. 12, 21-35, doi:10.1007/BF00208760, as
    recalled [mem].
    """
    days = dt_s / 86400.0
    if melting:
        a = (albedo - albedo_min) * math.exp(-wet_efold_per_day * days) + albedo_min
    else:
        a = albedo - dry_decay_per_day * days
    a = max(a, albedo_min)
    a = a + refresh_per_kg_m2 * snowfall_kg_m2
    return min(max(a, albedo_min), albedo_max)


@njit(cache=True, nogil=True, error_model="numpy", inline="always")
def extinction_coefficient_jordan1991(density_kg_m3, grain_size_mm):
    """Bulk shortwave extinction coefficient of snow [m-1].

    beta = 3.795e-3 rho / sqrt(d), d the grain diameter [m] (Jordan 1991, CRREL SR 91-16,
    after Bohren & Barkstrom 1974, J. Geophys. Res. 79; recalled [mem]).
    """
    d_m = max(grain_size_mm, 0.05) * 1e-3
    return 3.795e-3 * density_kg_m3 / math.sqrt(d_m)


@njit(cache=True, nogil=True, error_model="numpy", inline="always")
def penetration_fraction(density_kg_m3, grain_size_mm, thickness_m):
    """Fraction of the shortwave entering a layer that is absorbed in it (Beer-Lambert)."""
    return 1.0 - exp_vec(
        -extinction_coefficient_jordan1991(density_kg_m3, grain_size_mm) * thickness_m
    )

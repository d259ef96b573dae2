"""Settlement of snow layers: overburden viscosity and destructive settling of new snow.

Anderson (1976), NOAA Tech. Rep. NWS 19, as written by Jordan (1991), CRREL Special Report
91-16, Eqs. 34-36 (recalled [mem]): eta0 = 3.6e6 N s m-2, 0.08 K-1, 0.021 m3 kg-1 for the
viscosity; 2.778e-6 s-1, 0.04 K-1, 0.046 m3 kg-1 above 100 kg m-3 and a factor 2 for wet
snow for destructive settling. Liquid water softens the overburden viscosity by
1 / (1 + 60 theta_w), theta_w the liquid volume fraction (Vionnet et al. 2012, Geosci. Model
Dev. 5, 773-791, doi:10.5194/gmd-5-773-2012, the liquid-water factor of their viscosity,
after Brun et al. 1989 [mem]).

The functions are written without branches and with :func:`regionmap.snow.vecmath.exp_vec`,
so the kernel's loop over layers vectorises.
"""

from __future__ import annotations

from numba import njit

from regionmap.constants import T_MELT_K
from regionmap.snow.vecmath import exp_vec

__all__ = [
    "viscosity_anderson1976",
    "wet_softening_vionnet2012",
    "destructive_settling_rate_anderson1976",
    "compaction_strain_rate",
]


@njit(cache=True, nogil=True, error_model="numpy", inline="always")
def viscosity_anderson1976(density_kg_m3, t_k, eta0_pa_s, c_t_per_k, c_rho_m3_kg):
    """Compactive viscosity of snow (Anderson 1976; Jordan 1991).

    Parameters
    ----------
    density_kg_m3 : float
        Layer density [kg m-3].
    t_k : float
        Layer temperature [K].
    eta0_pa_s : float
        Viscosity coefficient eta0 [N s m-2] (3.6e6 in Jordan 1991).
    c_t_per_k, c_rho_m3_kg : float
        Temperature and density coefficients (0.08 K-1 and 0.021 m3 kg-1).

    Returns
    -------
    float
        eta = eta0 exp(c_t (273.15 - T)) exp(c_rho rho) [N s m-2].
    """
    return eta0_pa_s * exp_vec(c_t_per_k * (T_MELT_K - t_k) + c_rho_m3_kg * density_kg_m3)


@njit(cache=True, nogil=True, error_model="numpy", inline="always")
def wet_softening_vionnet2012(liquid_volume_frac):
    """Factor on the viscosity of wet snow, 1 / (1 + 60 theta_w) (Vionnet et al. 2012 [mem]).

    Parameters
    ----------
    liquid_volume_frac : float
        Liquid water per layer volume, theta_w [1].

    Returns
    -------
    float
        Viscosity factor, 1 for dry snow, 0.5 at 1.7 % and 0.17 at 8 % water [1].
    """
    return 1.0 / (1.0 + 60.0 * max(liquid_volume_frac, 0.0))


@njit(cache=True, nogil=True, error_model="numpy", inline="always")
def destructive_settling_rate_anderson1976(density_kg_m3, t_k, wet, rate0_per_s, rho_d_kg_m3):
    """Destructive (metamorphic) settling of new snow (Anderson 1976; Jordan 1991, Eq. 35).

    Parameters
    ----------
    density_kg_m3 : float
        Layer density [kg m-3].
    t_k : float
        Layer temperature [K].
    wet : bool
        Liquid water present (doubles the rate, c4 = 2).
    rate0_per_s : float
        Rate coefficient (2.778e-6 s-1).
    rho_d_kg_m3 : float
        Density up to which the full rate applies (100 kg m-3).

    Returns
    -------
    float
        Magnitude of the strain rate [s-1]: c1 c3 c4 exp(-0.04 (273.15 - T)) with
        c3 = exp(-0.046 (rho - rho_d)) above rho_d.
    """
    x = -0.04 * (T_MELT_K - t_k) - 0.046 * max(density_kg_m3 - rho_d_kg_m3, 0.0)  # c3
    c4 = 2.0 if wet else 1.0
    return rate0_per_s * c4 * exp_vec(x)


@njit(cache=True, nogil=True, error_model="numpy", inline="always")
def compaction_strain_rate(
    density_kg_m3,
    t_k,
    liquid_volume_frac,
    load_pa,
    eta0_pa_s,
    c_t_per_k,
    c_rho_m3_kg,
    rate0_per_s,
    rho_d_kg_m3,
):
    """Total compaction rate -(1/dz) d(dz)/dt [s-1]: overburden load / viscosity (softened
    by liquid water) + destructive settling (doubled when wet).

    Ice layers (density above 800 kg m-3) do not compact; destructive settling is left out
    above 350 kg m-3, where its density factor c3 is below 1e-5.
    """
    eta = viscosity_anderson1976(
        min(density_kg_m3, 800.0), t_k, eta0_pa_s, c_t_per_k, c_rho_m3_kg
    ) * wet_softening_vionnet2012(liquid_volume_frac)
    destructive = destructive_settling_rate_anderson1976(
        density_kg_m3, t_k, liquid_volume_frac > 0.0, rate0_per_s, rho_d_kg_m3
    )
    # above 350 kg m-3, c3 < 1e-5: destructive settling has ended
    rate = load_pa / eta + (destructive if density_kg_m3 < 350.0 else 0.0)
    return rate if density_kg_m3 < 800.0 else 0.0

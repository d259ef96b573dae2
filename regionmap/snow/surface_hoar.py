"""Surface hoar: growth from deposition, destruction, burial.

Surface hoar grows from the positive deposition (latent) flux when the surface is colder than
the air's frost point, the sky is clear (radiative cooling: surface colder than the air) and
the wind light; deposition is largest at RH > 90 % and winds of ~0.5-3.5 m s-1 (Hachikubo
2001, Ann. Glaciol. 32, 27-31, doi:10.3189/172756401781819454). Growth = the deposition flux
itself, the mass deposited from the bulk latent flux (Hachikubo & Akitaya 1997, Ann.
Glaciol. 25, 26-32; Foehn 2001, Ann. Glaciol. 32, 73-76 [mem]).

Wind at the surface topples and breaks the crystals and blows them away. Survival is graded
by the friction velocity of the cell's own wind -- the exposure-adjusted wind carried to the
surface by the neutral log law, not the 10 m wind of a weather model's grid box -- against
the threshold friction velocity at which snow starts to drift: 0.07-0.25 m s-1 for fresh dry
snow, 0.25-1.0 m s-1 for older snow (Li & Pomeroy 1997, J. Appl. Meteorol. 36, 205-213,
doi:10.1175/1520-0450(1997)036<0205:EOTWSF>2.0.CO;2 [mem]). Buried surface hoar is
commonly preserved through storms in sheltered terrain (common practice; Feick et al. 2007,
J. Geophys. Res. 112, F02002 [mem]): the snow that buries it shields it, so the wind's hold
on a buried layer fades with the load of snow above it. Melt or strong sun destroy it.
"""

from __future__ import annotations

import math

from numba import njit

from regionmap.constants import T_MELT_K, VON_KARMAN

__all__ = [
    "surface_hoar_forms",
    "surface_hoar_destroyed",
    "surface_hoar_size_mm",
    "friction_velocity_log_law",
    "surface_hoar_survival",
]

#: von Karman constant


@njit(cache=True, nogil=True, error_model="numpy")
def surface_hoar_forms(
    vapour_flux_kg_m2_s, wind_m_s, t_surf_k, t_air_k, snowfall_kg_m2, wind_max_m_s
):
    """Formation conditions: deposition, light wind, radiatively cooled dry surface (below the
    air temperature and below 0 degC), no snowfall."""
    return (
        vapour_flux_kg_m2_s > 0.0
        and t_surf_k < T_MELT_K
        and wind_m_s <= wind_max_m_s
        and t_surf_k < t_air_k
        and snowfall_kg_m2 <= 0.0
    )


@njit(cache=True, nogil=True, error_model="numpy")
def surface_hoar_destroyed(surface_melting, sw_absorbed_w_m2, destroy_sw_w_m2):
    """Destruction of the whole layer at the surface: a melting surface, or strong sun (wind
    acts through :func:`surface_hoar_survival`)."""
    return surface_melting or sw_absorbed_w_m2 > destroy_sw_w_m2


@njit(cache=True, nogil=True, error_model="numpy")
def friction_velocity_log_law(wind_m_s, height_m, roughness_m):
    """Friction velocity of a neutral logarithmic wind profile, u* = k U(z) / ln(z / z0).

    Parameters
    ----------
    wind_m_s : float
        Wind speed at ``height_m`` above the snow [m s-1].
    height_m, roughness_m : float
        Measurement height and aerodynamic roughness length z0 [m].

    Returns
    -------
    float
        u* [m s-1]; k = 0.40 (e.g. Stull 1988, An Introduction to Boundary Layer
        Meteorology, Sect. 9.7). At 10 m over z0 = 1 mm, u* = 0.0434 U.
    """
    return VON_KARMAN * wind_m_s / math.log(height_m / roughness_m)


@njit(cache=True, nogil=True, error_model="numpy")
def surface_hoar_survival(
    ustar_m_s, load_above_kg_m2, keep_ustar_m_s, destroy_ustar_m_s, shield_kg_m2
):
    """Share of a surface-hoar layer that survives one hour of wind [1].

    Parameters
    ----------
    ustar_m_s : float
        Friction velocity of the cell's wind (:func:`friction_velocity_log_law`) [m s-1].
    load_above_kg_m2 : float
        Snow above the hoar (0 at the surface and in the hour it is buried) [kg m-2].
    keep_ustar_m_s, destroy_ustar_m_s : float
        All survives at or below ``keep``, none at or above ``destroy``, linear between:
        the range of threshold friction velocities at which snow starts to drift (Li &
        Pomeroy 1997 [mem]); the values are settings.
    shield_kg_m2 : float
        Load of burying snow from which the wind no longer reaches the hoar.

    Returns
    -------
    float
        1 - (1 - s_wind) (1 - load / shield), both factors in [0, 1].
    """
    s_wind = min(
        max((destroy_ustar_m_s - ustar_m_s) / (destroy_ustar_m_s - keep_ustar_m_s), 0.0), 1.0
    )
    exposed = 1.0 - min(max(load_above_kg_m2, 0.0) / shield_kg_m2, 1.0)
    return 1.0 - (1.0 - s_wind) * exposed


@njit(cache=True, nogil=True, error_model="numpy")
def surface_hoar_size_mm(mass_kg_m2, density_kg_m3):
    """Crystal size of a surface-hoar layer: its thickness, mass / density [mm].

    Fierz et al. (2009) give surface-hoar size as crystal length, close to the layer's
    thickness for an undisturbed layer.
    """
    return 1e3 * mass_kg_m2 / density_kg_m3

"""Surface hoar: growth from deposition, destruction, burial.

Surface hoar grows from the positive deposition (latent) flux when the surface is colder than
the air's frost point, the sky is clear (radiative cooling: surface colder than the air) and
the wind light; deposition is largest at RH > 90 % and winds of ~0.5-3.5 m s-1 (Hachikubo
2001, Ann. Glaciol. 32, 27-31, doi:10.3189/172756401781819454). Growth = the deposition flux
itself (Hachikubo & Akitaya 1997, Ann. Glaciol. 25; Foehn 2001, Ann. Glaciol. 32 [mem]).
Strong wind (~4-5 m s-1 [mem]), melt or strong sun destroy it; it is kept as a buried SH layer
only when the wind at burial was light.
"""

from __future__ import annotations

from numba import njit

__all__ = ["surface_hoar_forms", "surface_hoar_destroyed", "surface_hoar_size_mm"]


@njit(cache=True, nogil=True, error_model="numpy")
def surface_hoar_forms(
    vapour_flux_kg_m2_s, wind_m_s, t_surf_k, t_air_k, snowfall_kg_m2, wind_max_m_s
):
    """Formation conditions: deposition, light wind, radiatively cooled dry surface (below the
    air temperature and below 0 degC), no snowfall."""
    return (
        vapour_flux_kg_m2_s > 0.0
        and t_surf_k < 273.15
        and wind_m_s <= wind_max_m_s
        and t_surf_k < t_air_k
        and snowfall_kg_m2 <= 0.0
    )


@njit(cache=True, nogil=True, error_model="numpy")
def surface_hoar_destroyed(
    wind_m_s, surface_melting, sw_absorbed_w_m2, destroy_wind_m_s, destroy_sw_w_m2
):
    """Destruction: wind above ``destroy_wind_m_s``, a melting surface, or strong sun."""
    return wind_m_s > destroy_wind_m_s or surface_melting or sw_absorbed_w_m2 > destroy_sw_w_m2


@njit(cache=True, nogil=True, error_model="numpy")
def surface_hoar_size_mm(mass_kg_m2, density_kg_m3):
    """Crystal size of a surface-hoar layer: its thickness, mass / density [mm].

    Fierz et al. (2009) give surface-hoar size as crystal length, close to the layer's
    thickness for an undisturbed layer.
    """
    return 1e3 * mass_kg_m2 / density_kg_m3

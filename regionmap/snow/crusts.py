"""Crusts: melt-freeze, sun, rain and freezing-rain glaze.

Formation rules (Fierz et al. 2009 for the classes MFcr and IF; crust kinds from the
avalanche literature, Jamieson 2006, Rev. Geophys. 44, RG2001, doi:10.1029/2005RG000176):
a layer that was wet and refreezes becomes a melt-freeze crust; a *sun* crust when the
wetting came from solar input on a dry pack; a *rain* crust when rain wetted it (tagged with
the rain event's id). Freezing rain on a sub-freezing surface freezes on contact into a
glaze of ice (IF) whose thickness is the water equivalent over the density of ice. A layer
refrozen again keeps its first crust kind and formation time, so repeated melt-freeze cycles
of the same layer stay one crust.
"""

from __future__ import annotations

from numba import njit

from regionmap.snow.constants import RHO_ICE_KG_M3

__all__ = ["glaze_thickness_m", "crust_kind_on_refreeze", "counts_as_crust"]

NONE, MELT_FREEZE, SUN, RAIN, GLAZE = 0, 1, 2, 3, 4
#: layer flag bits (formation flags carried per layer)
FLAG_WET_RAIN = 1  # wetted by rain in the current wet spell
FLAG_WET_SUN = 2  # wetted by surface melt driven by sunshine on a dry pack
FLAG_WAS_WET = 4  # held more than the crust-forming liquid share in the current wet spell
FLAG_WET_MELT = 16  # wetted by melt from air warmth / longwave (melt-freeze)


@njit(cache=True, nogil=True, error_model="numpy")
def glaze_thickness_m(water_kg_m2):
    """Thickness of a glaze of freezing rain [m]: water / 917 kg m-3 (2 kg m-2 -> 2.18 mm)."""
    return water_kg_m2 / RHO_ICE_KG_M3


@njit(cache=True, nogil=True, error_model="numpy")
def crust_kind_on_refreeze(old_kind, flags):
    """Crust kind of a wet layer that has just refrozen (old kind kept: one crust per layer)."""
    if old_kind != NONE:
        return old_kind
    if flags & FLAG_WET_RAIN:
        return RAIN
    if flags & FLAG_WET_SUN and not flags & FLAG_WET_MELT:
        return SUN
    return MELT_FREEZE


@njit(cache=True, nogil=True, error_model="numpy")
def counts_as_crust(crust_kind, thickness_m, hardness_index, wet, min_thickness_m, min_hardness):
    """Whether a layer counts as a crust: a kind, dry, thick and hard enough."""
    return (
        crust_kind != NONE
        and not wet
        and thickness_m >= min_thickness_m
        and hardness_index >= min_hardness
    )

"""Crusts: melt-freeze, sun, rain and freezing-rain glaze.

Formation rules (Fierz et al. 2009 for the classes MFcr and IF and the liquid-water classes;
crust kinds from the avalanche literature, Jamieson 2006, Rev. Geophys. 44, RG2001,
doi:10.1029/2005RG000176): a layer that reached the "wet" class (>= 3 % liquid water by volume,
Fierz et al. 2009, liquid water content classes [src]) with water of a known source and then
refreezes becomes a crust -- a *sun* crust when solar input melted a dry surface, a
*melt-freeze* crust for other surface melt, a *rain* crust when a substantial rain (in amount
and as a share of its event's precipitation, :func:`substantial_rain`) wetted it (tagged with
the rain event's id). The crust is the wetted snow that a refreezing front descending from the
cold surface refreezes within a night's refreeze (:func:`refrozen_by_surface_front`); wet snow
deeper down, which refreezes days later as the front slows, or which refreezes from below or
in place under still-wet snow, becomes refrozen melt forms without a crust kind. The front is
conduction-limited: a frozen lid of conductivity k over wet snow of volumetric liquid content
theta_w, its surface dT below 0 degC, refreezes to a depth of about
sqrt(2 k dT t / (rho_w L theta_w)) after t (the quasi-steady Stefan solution; Carslaw &
Jaeger 1959, Conduction of Heat in Solids, 2nd ed., Sect. 11.2 [mem]), so a crust is
centimetres thick after a mild night and about a decimetre after a hard frost (field crusts:
millimetres to centimetres, thick ones a decimetre or two, Jamieson 2006 [mem]). Freezing
rain on a sub-freezing surface freezes on contact into a glaze of ice (IF) whose thickness is
the water equivalent over the density of ice. A layer refrozen again keeps its first crust kind
and formation time, so repeated melt-freeze cycles of the same layer stay one crust.
"""

from __future__ import annotations

from numba import njit

from regionmap.constants import RHO_ICE_KG_M3
from regionmap.snow.codes import CRUST_INDEX

__all__ = [
    "glaze_thickness_m",
    "substantial_rain",
    "crust_kind_on_refreeze",
    "refrozen_by_surface_front",
    "counts_as_crust",
]

#: crust kinds as indices of the crust table (module-level ints: constants to the compiled code)
NONE, MELT_FREEZE, SUN, RAIN, GLAZE = (
    CRUST_INDEX[kind] for kind in ("none", "melt-freeze", "sun", "rain", "glaze")
)
NO_CRUST = NONE
#: layer flag bits (formation flags carried per layer)
FLAG_WET_RAIN = 1  # wetted by rain in the current wet spell
FLAG_WET_SUN = 2  # wetted by surface melt driven by sunshine on a dry pack
FLAG_WAS_WET = 4  # held more than the crust-forming liquid share in the current wet spell
FLAG_FRONT = 8  # refrozen by the refreezing front from the surface (cleared when wet again)
FLAG_WET_MELT = 16  # wetted by melt from air warmth / longwave (melt-freeze)


@njit(cache=True, nogil=True, error_model="numpy")
def glaze_thickness_m(water_kg_m2):
    """Thickness of a glaze of freezing rain [m]: water / 917 kg m-3 (2 kg m-2 -> 2.18 mm)."""
    return water_kg_m2 / RHO_ICE_KG_M3


@njit(cache=True, nogil=True, error_model="numpy")
def substantial_rain(rain_kg_m2, precip_kg_m2, min_rain_kg_m2, min_share):
    """Whether a rain event so far can leave a rain crust: at least ``min_rain_kg_m2`` of
    rain [kg m-2] and at least ``min_share`` [1] of the event's precipitation as rain."""
    return rain_kg_m2 >= min_rain_kg_m2 and rain_kg_m2 >= min_share * max(precip_kg_m2, 1e-12)


@njit(cache=True, nogil=True, error_model="numpy")
def crust_kind_on_refreeze(old_kind, flags, rain_substantial):
    """Crust kind of a wet layer that has just refrozen (old kind kept: one crust per layer).

    Rain water of a rain event too small for a crust leaves no crust kind (:data:`NONE`)."""
    if old_kind != NONE:
        return old_kind
    if flags & FLAG_WET_RAIN:
        return RAIN if rain_substantial else NONE
    if flags & FLAG_WET_SUN and not flags & FLAG_WET_MELT:
        return SUN
    if flags & (FLAG_WET_SUN | FLAG_WET_MELT):
        return MELT_FREEZE
    return NONE


@njit(cache=True, nogil=True, error_model="numpy")
def refrozen_by_surface_front(lid_dry, since_front_start_s, window_s):
    """Whether a wet layer refreezing now is part of its crust: frozen by the front from the
    cold surface (every layer above it dry) within ``window_s`` of the front's start.

    A night's refreeze (about 12 h) makes the crust; the front's depth after a time t is
    about sqrt(2 k dT t / (rho_w L theta_w)) (Stefan, quasi-steady; Carslaw & Jaeger 1959 [mem],
    Sect. 11.2), so the window bounds the crust to the snow the first night refreezes.
    """
    return lid_dry and since_front_start_s <= window_s


@njit(cache=True, nogil=True, error_model="numpy")
def counts_as_crust(crust_kind, thickness_m, hardness_index, wet, min_thickness_m, min_hardness):
    """Whether a layer counts as a crust: a kind, dry, thick and hard enough."""
    return (
        crust_kind != NONE
        and not wet
        and thickness_m >= min_thickness_m
        and hardness_index >= min_hardness
    )

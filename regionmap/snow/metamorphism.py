"""Dry and wet metamorphism: decomposition of new snow, rounding, faceting, depth hoar,
wet grain growth, and the grain class that follows.

Each layer carries a dendricity d (1 = fresh dendrites, 0 = decomposed; Brun et al. 1992),
a facetedness f (0 = rounded, 1 = fully faceted; our state variable) and a grain size. The
faceting law is driven by the *hourly magnitude* of the temperature gradient, summed step by
step (not a daily mean: in diurnal recrystallisation the gradient reverses every day), so
near-surface facets, radiation recrystallisation and facets beside crusts come out of the same
physics. Regimes after Colbeck (1983), J. Geophys. Res. 88(C9), 5475-5482,
doi:10.1029/JC088iC09p05475: below ~10 K m-1 rounding, above ~10-20 K m-1 faceting; the
faceting rate follows Marbouty's (1980) kinetic growth factors (from 15 K m-1, strong from
~25-50 K m-1, none above 350 kg m-3). Near-surface facets form where clear nights drive
gradients of the order of 100 K m-1 through the top decimetres (Birkeland 1998, Arct. Alp.
Res. 30(2), 193-199, doi:10.2307/1552134 [mem]).

The dry-snow laws (Marbouty factors, faceting, the Arrhenius term) are inlined into the
kernel's loop over layers and use :func:`regionmap.snow.vecmath.exp_vec`, so that loop
vectorises.
"""

from __future__ import annotations

import math

from numba import njit

from regionmap.constants import T_MELT_K
from regionmap.snow.codes import GRAIN_INDEX
from regionmap.snow.vecmath import exp_vec, log_vec

__all__ = [
    "marbouty_temperature_factor",
    "marbouty_density_factor",
    "marbouty_gradient_factor",
    "grain_growth_marbouty1980",
    "grain_growth_wet_brun1989",
    "arrhenius_ratio_6000",
    "dendricity_rate_brun1992",
    "dry_dendricity_rate_brun1992",
    "facetedness_rate",
    "classify_grain",
]

# grain indices of the classification table (module-level ints: constants to the compiled code)
PP, DF, RG, RGXF, FC, FCXR, FCSF, DH, SH, MF, MFCR, IF = (
    GRAIN_INDEX[code]
    for code in ("PP", "DF", "RG", "RGxf", "FC", "FCxr", "FCsf", "DH", "SH", "MF", "MFcr", "IF")
)


@njit(cache=True, nogil=True, error_model="numpy", inline="always")
def marbouty_temperature_factor(t_k):
    """Temperature factor of kinetic grain growth, peak at -6 degC (Marbouty 1980, Fig. 8).

    Piecewise linear: 0 below -40 degC, 0.2 at -22, 1 at -6, 0.7 at 0 degC (recalled [mem]).
    Marbouty, D. (1980), J. Glaciol. 26(94), 303-312, doi:10.3189/S0022143000010844
    """
    t_c = t_k - T_MELT_K
    # every piece is evaluated and one selected: no branches, so kernel loops vectorise
    cold = (t_c + 40.0) * (0.2 / 18.0)  # constant reciprocals: multiplies vectorise faster
    mid = 0.2 + 0.05 * (t_c + 22.0)
    warm = max(1.0 - 0.05 * (t_c + 6.0), 0.7)
    return warm if t_c > -6.0 else (mid if t_c > -22.0 else (cold if t_c > -40.0 else 0.0))


@njit(cache=True, nogil=True, error_model="numpy", inline="always")
def marbouty_density_factor(density_kg_m3):
    """Density factor of kinetic growth: 1 up to 150 kg m-3, 0 from 350 (Marbouty 1980 [mem])."""
    return 1.0 if density_kg_m3 <= 150.0 else max(1.0 - (density_kg_m3 - 150.0) * 0.005, 0.0)


@njit(cache=True, nogil=True, error_model="numpy", inline="always")
def marbouty_gradient_factor(gradient_k_m):
    """Gradient factor of kinetic growth (Marbouty 1980, recalled breakpoints [mem]).

    0 below 15 K m-1, 0.1 at 25, 0.655 at 40, 1 from 50 K m-1, linear between.
    """
    g = abs(gradient_k_m)
    low = 0.01 * (g - 15.0)
    mid = 0.1 + 0.037 * (g - 25.0)
    high = 0.655 + 0.0345 * (g - 40.0)
    return (
        (0.0 if g < 15.0 else low)
        if g < 25.0
        else (mid if g < 40.0 else (high if g < 50.0 else 1.0))
    )


@njit(cache=True, nogil=True, error_model="numpy", inline="always")
def grain_growth_marbouty1980(grain_mm, t_k, density_kg_m3, gradient_k_m, dt_s, rate_m_s):
    """Kinetic (faceted) grain growth over one step [mm]: d_new = d + rate f(T) h(rho) g(G) dt.

    ``rate_m_s`` is the maximum growth rate (1.04e-9 m s-1 in Marbouty's fit as recalled
    [mem]; treated as calibrated, see SnowParams).
    """
    return grain_mm + 1e3 * rate_m_s * dt_s * marbouty_temperature_factor(t_k) * (
        marbouty_density_factor(density_kg_m3) * marbouty_gradient_factor(gradient_k_m)
    )


@njit(cache=True, nogil=True, error_model="numpy")
def grain_growth_wet_brun1989(grain_mm, liquid_mass_pct, dt_s):
    """Wet-snow grain growth: dV/dt = 1.28e-8 + 4.22e-10 theta^3 [mm3 s-1] (Brun 1989).

    theta is the liquid water content in mass percent. Brun, E. (1989), Ann. Glaciol. 13,
    22-26, doi:10.3189/S0260305500007576 (Eq. 7, recalled [mem]). Returns the new diameter
    of the equivalent sphere [mm].
    """
    v = math.pi / 6.0 * grain_mm**3
    v += (1.28e-8 + 4.22e-10 * liquid_mass_pct**3) * dt_s
    return (6.0 * v / math.pi) ** (1.0 / 3.0)


@njit(cache=True, nogil=True, error_model="numpy", inline="always")
def arrhenius_ratio_6000(t_k):
    """exp(-6000 K (1/T - 1/T0)): the temperature dependence shared by dry decomposition
    (Brun et al. 1992) and rounding (below), relative to 0 degC [1]. Computed once per layer
    and step by the kernel and handed to both rates."""
    return exp_vec(-6000.0 / t_k + 6000.0 / T_MELT_K)


#: 2e8 exp(-6000 / T0) [day-1]: the dry decomposition rate of Brun et al. (1992) at 0 degC
_DRY_DECOMPOSITION_T0_PER_DAY = 2e8 * math.exp(-6000.0 / T_MELT_K)


@njit(cache=True, nogil=True, error_model="numpy")
def dendricity_rate_brun1992(t_k, gradient_k_m, liquid_mass_pct):
    """Loss of dendricity [day-1] (Brun et al. 1992, J. Glaciol. 38(128), 13-22).

    Dry: 2e8 exp(-6000/T) max(|G|, 5)^0.4 (weak gradients use the 5 K m-1 value); wet:
    theta^3 / 16 (theta liquid mass %). Recalled [mem]. doi:10.3189/S0022143000009552
    """
    if liquid_mass_pct > 0.0:
        return max(liquid_mass_pct**3 / 16.0, _DRY_DECOMPOSITION_T0_PER_DAY)
    return dry_dendricity_rate_brun1992(arrhenius_ratio_6000(t_k), gradient_k_m)


@njit(cache=True, nogil=True, error_model="numpy", inline="always")
def dry_dendricity_rate_brun1992(arrhenius_ratio, gradient_k_m):
    """Dry branch of :func:`dendricity_rate_brun1992` from :func:`arrhenius_ratio_6000`:
    2e8 exp(-6000/T0) x ratio x max(|G|, 5)^0.4 [day-1] (= 2e8 exp(-6000/T) max(|G|, 5)^0.4).
    The power is exp(0.4 log g) from :mod:`regionmap.snow.vecmath`, so a loop over layers
    vectorises (within 2e-15 of ``g**0.4``)."""
    g = max(abs(gradient_k_m), 5.0)
    return _DRY_DECOMPOSITION_T0_PER_DAY * arrhenius_ratio * exp_vec(0.4 * log_vec(g))


@njit(cache=True, nogil=True, error_model="numpy", inline="always")
def facetedness_rate(
    t_k,
    density_kg_m3,
    gradient_k_m,
    g_round_k_m,
    facet_per_day,
    round_per_day,
    arrhenius_ratio,
):
    """Change of facetedness [day-1] under the hourly gradient magnitude.

    Faceting ``facet_per_day`` x the three factors of Marbouty's (1980) kinetic growth law
    (temperature, density, gradient: nothing below 15 K m-1, full from 50 K m-1, nothing
    above 350 kg m-3); rounding ``round_per_day`` x (1 - |G|/G_r) x exp(-6000 (1/T - 1/T0))
    below G_r (10 K m-1, Colbeck 1983); between G_r and 15 K m-1 neither. Faceting thus
    needs a strong gradient sustained over days, and near-surface layers facet under the
    strong diurnal gradients of clear nights (Birkeland 1998). The rate constants are ours.
    ``arrhenius_ratio`` is :func:`arrhenius_ratio_6000` (shared with the decomposition rate,
    so the kernel evaluates it once per layer).
    """
    g = abs(gradient_k_m)
    faceting = (
        facet_per_day
        * marbouty_temperature_factor(t_k)
        * (marbouty_density_factor(density_kg_m3) * marbouty_gradient_factor(g))
    )
    # (reciprocal of the setting: a loop invariant, hoisted out of the kernel's layer loop)
    rounding = -round_per_day * (1.0 - g * (1.0 / g_round_k_m)) * arrhenius_ratio
    return faceting if g >= g_round_k_m else rounding


@njit(cache=True, nogil=True, error_model="numpy", inline="always")
def classify_grain(old_code, dendricity, facetedness, grain_mm, wet, near_surface, dh_min_grain_mm):
    """Grain class (index into GRAIN_CODES) from the layer's microstructure state.

    Rules (Fierz et al. 2009 class definitions; thresholds ours): wet snow whose wet
    metamorphism has rounded it (dendricity <= 0.1, facetedness < 0.25) -> MF, wet snow not
    yet rounded keeps the class of its shape (a trace of water for an hour does not make
    melt forms); SH, IF stay;
    DH stays DH while dry; dendricity >= 0.5 -> PP; > 0.1 -> DF unless faceted (f >= 0.5);
    f >= 0.9 with grains >= ``dh_min_grain_mm`` -> DH; f >= 0.5 -> FC (FCsf when it formed
    in the top layers, ``near_surface``); 0.25 <= f < 0.5 -> FCxr when coming from facets,
    RGxf otherwise; else RG (MF and MFcr stay melt forms once dry, MFcr is set by crusts).
    """
    faceted = (old_code == FC) | (old_code == FCSF) | (old_code == FCXR)
    melt_form = wet & (dendricity <= 0.1) & (facetedness < 0.25)
    keeps = (old_code == IF) | ((old_code == SH) & (not melt_form))
    stays_dry = (old_code == MF) | (old_code == MFCR) | (old_code == DH)
    fc_kind = (
        FCSF
        if (old_code == FCSF) | ((not faceted) & near_surface)
        else (old_code if faceted & (old_code != FCXR) else FC)
    )
    # the dry-snow rules in order, as one chain of selects (no branches: kernel loops over
    # layers vectorise)
    dry = (
        PP
        if dendricity >= 0.5
        else (
            DF
            if (dendricity > 0.1) & (facetedness < 0.5)
            else (
                DH
                if (facetedness >= 0.9) & (grain_mm >= dh_min_grain_mm)
                else (
                    fc_kind
                    if facetedness >= 0.5
                    else ((FCXR if faceted else RGXF) if facetedness >= 0.25 else RG)
                )
            )
        )
    )
    return old_code if keeps else (MF if melt_form else (old_code if stays_dry else dry))

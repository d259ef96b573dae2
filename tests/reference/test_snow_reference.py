"""Snow-column process functions against published values (source beside each check).

Tags: [src] confirmed against the source or a standard table, [mem] recalled
from the source and not re-verified, [calc] computed from the formula as written (checks the
code against the formula), "common practice" for rules of thumb.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.special import erf

from regionmap.constants import C_ICE_J_KG_K, L_FUSION_J_KG, T_MELT_K
from regionmap.snow.compaction import (
    destructive_settling_rate_anderson1976,
    viscosity_anderson1976,
    wet_softening_vionnet2012,
)
from regionmap.snow.conduction import (
    conduction_step_backward_euler,
    conductivity_calonne2011,
    conductivity_sturm1997,
)
from regionmap.snow.crusts import glaze_thickness_m
from regionmap.snow.diagnostics import wetness_class_fierz2009
from regionmap.snow.newsnow import new_snow_density_hedstrom1998, new_snow_density_vionnet2012
from regionmap.snow.radiation import albedo_douville1995
from regionmap.snow.surface import (
    neutral_exchange_coefficient,
    stability_factor_louis1979,
)
from regionmap.snow.water import layer_enthalpy, resolve_phase


@pytest.mark.parametrize("t_c, rho", [(0.0, 119.2), (-5.0, 75.4), (-10.0, 69.0)])
def test_new_snow_density_hedstrom1998(t_c, rho):
    # Hedstrom & Pomeroy (1998), Hydrol. Process. 12, Eq. 3; values [mem]
    assert new_snow_density_hedstrom1998(T_MELT_K + t_c) == pytest.approx(rho, abs=0.05)


def test_new_snow_density_vionnet2012_wind_form():
    # Vionnet et al. (2012), GMD 5, Eq. 4: max(50, 109 + 6T + 26 sqrt(U)) [mem]; -5 degC, 4 m/s
    assert new_snow_density_vionnet2012(T_MELT_K - 5.0, 4.0) == pytest.approx(131.0, abs=1e-9)
    # the floor of 50 kg m-3 in cold calm air (same source)
    assert new_snow_density_vionnet2012(T_MELT_K - 20.0, 0.0) == 50.0
    # more wind, denser new snow (same source): the wind term must act
    assert new_snow_density_vionnet2012(T_MELT_K - 5.0, 9.0) > new_snow_density_vionnet2012(
        T_MELT_K - 5.0, 1.0
    )


@pytest.mark.parametrize(
    "rho, k_calonne, k_sturm",
    [(100.0, 0.0367, 0.0464), (250.0, 0.1495, 0.0876), (400.0, 0.3748, 0.2513)],
)
def test_conductivity_calonne2011_sturm1997(rho, k_calonne, k_sturm):
    # Calonne et al. (2011) GRL 38 Eq. 5; Sturm et al. (1997) J. Glaciol. 43 Eq. 5 [calc]
    assert conductivity_calonne2011(rho) == pytest.approx(k_calonne, abs=5e-5)
    assert conductivity_sturm1997(rho) == pytest.approx(k_sturm, abs=5e-5)


@pytest.mark.parametrize(
    "hours_, expected_c", [(6.0, (-14.78, -10.51, -6.07)), (24.0, (-17.33, -14.78, -10.51))]
)
def test_conduction_carslaw_jaeger1959_erfc(hours_, expected_c):
    # Carslaw & Jaeger (1959), Conduction of Heat in Solids, Sec. 2.4: surface step T0 -> Ts in
    # a half space, T = Ts + (T0 - Ts) erf(z / (2 sqrt(kappa t))); rho 250, k 0.1495, c 2100;
    # analytic values [calc]; the model's backward-Euler step within 0.3 K
    rho, c, dz, n = 250.0, 2100.0, 0.005, 400  # 2 m of 5 mm layers: deep enough to be a half space
    k = conductivity_calonne2011(rho)
    t = np.full(n, -5.0 + T_MELT_K)
    kk = np.full(n, k)
    cap = np.full(n, rho * c * dz)
    dzs = np.full(n, dz)
    src = np.zeros(n)
    k_top = k / (0.5 * dz)  # fixed surface temperature through the half-layer conductance
    scratch = [np.zeros(n) for _ in range(2)]
    out = np.zeros(n)
    steps = int(hours_ * 60)  # one-minute steps
    for _ in range(steps):
        conduction_step_backward_euler(
            n,
            t,
            kk,
            cap,
            dzs,
            src,
            60.0,
            0.0,
            0.0,
            k_top * (T_MELT_K - 20.0),
            -k_top,
            *scratch,
            out,
        )
        t[:] = out
    depth_centre = (np.arange(n)[::-1] + 0.5) * dz  # node 0 is the deepest
    kappa = k / (rho * c)
    for z, expect in zip((0.05, 0.10, 0.20), expected_c, strict=True):
        model = np.interp(z, depth_centre[::-1], t[::-1]) - T_MELT_K
        exact = -20.0 + 15.0 * erf(z / (2 * math.sqrt(kappa * hours_ * 3600)))
        assert exact == pytest.approx(expect, abs=0.01)  # the analytic values themselves
        assert model == pytest.approx(expect, abs=0.3)


def test_refreeze_case_of_issue4():
    # check value [calc]: 1 kg m-2 of water into 20 kg m-2 of ice at -10 degC ends at -1.96 degC
    # (energy balance with c_ice 2100, L_f 3.334e5 [calc])
    h = layer_enthalpy(20.0, 1.0, T_MELT_K)  # water at 0 degC ...
    h += C_ICE_J_KG_K * 20.0 * -10.0  # ... meets ice at -10 degC
    ice, liq, t, _ = resolve_phase(21.0, h)
    assert liq == 0.0 and ice == 21.0
    assert t - T_MELT_K == pytest.approx(-1.96, abs=0.005)


def test_melting_1kg_takes_333_4_kj():
    # latent heat of fusion 333.4 kJ/kg (standard tables)
    h0 = layer_enthalpy(1.0, 0.0, T_MELT_K)
    ice, liq, t, extra = resolve_phase(1.0, h0 + 333.4e3)
    assert liq == pytest.approx(1.0, abs=1e-12) and ice == pytest.approx(0.0, abs=1e-12)
    ice, liq, t, extra = resolve_phase(1.0, h0 + 333.4e3 - 3334.0)  # 1 % short
    assert liq == pytest.approx(0.99, abs=1e-12) and t == T_MELT_K
    assert L_FUSION_J_KG == 3.334e5


def test_glaze_thickness_is_water_over_ice_density():
    # [calc]: 2 mm water equivalent of freezing rain -> 2.18 mm of ice (917 kg m-3)
    assert glaze_thickness_m(2.0) * 1e3 == pytest.approx(2.18, abs=0.005)


@pytest.mark.parametrize("lwc, cls", [(0.0, 0), (0.02, 1), (0.05, 2), (0.10, 3), (0.20, 4)])
def test_wetness_classes_fierz2009(lwc, cls):
    # Fierz et al. (2009), International Classification for Seasonal Snow on the Ground,
    # liquid water content classes by volume: dry 0, moist 0-3, wet 3-8, very wet 8-15,
    # soaked >15 [src]
    assert wetness_class_fierz2009(lwc) == cls


def test_neutral_exchange_coefficient_2m():
    # [calc]: C_HN(2 m, z0 = z0h = 1 mm) = k^2 / ln(2000)^2 = 2.77e-3 with k = 0.40
    assert neutral_exchange_coefficient(2.0, 2.0, 1e-3, 1e-3) == pytest.approx(2.77e-3, abs=5e-6)


def test_louis1979_stable_factor():
    # Louis (1979), BLM 17: stable F_h = 1 / (1 + 15 Ri sqrt(1 + 5 Ri)) [mem]
    ri = 0.2
    assert stability_factor_louis1979(ri, 2.77e-3, 2.0, 1e-3) == pytest.approx(
        1.0 / (1.0 + 15 * ri * math.sqrt(1 + 5 * ri)), rel=1e-12
    )
    assert stability_factor_louis1979(0.0, 2.77e-3, 2.0, 1e-3) == 1.0
    assert stability_factor_louis1979(-0.5, 2.77e-3, 2.0, 1e-3) > 1.0  # unstable enhances


def test_albedo_douville1995():
    # Douville et al. (1995), Clim. Dyn. 12: dry -0.008 per day, wet e-folding 0.24 per day
    # towards 0.5, refresh with snowfall [mem]; ten daily steps
    a_dry = a_wet = 0.85
    for _ in range(10):
        a_dry = albedo_douville1995(a_dry, False, 0.0, 86400.0, 0.5, 0.85, 0.008, 0.24, 0.035)
        a_wet = albedo_douville1995(a_wet, True, 0.0, 86400.0, 0.5, 0.85, 0.008, 0.24, 0.035)
    assert a_dry == pytest.approx(0.85 - 0.08, abs=1e-12)
    assert a_wet == pytest.approx(0.35 * math.exp(-2.4) + 0.5, abs=1e-12)
    # +0.35 per 10 kg m-2 of snowfall, max 0.85 (same source)
    assert albedo_douville1995(
        0.5, False, 10.0, 3600.0, 0.5, 0.85, 0.008, 0.24, 0.035
    ) == pytest.approx(0.85, abs=1e-3)


def test_anderson1976_compaction_terms():
    # Jordan (1991) CRREL SR 91-16 Eqs. 34-36 (Anderson 1976) [mem]
    eta = viscosity_anderson1976(100.0, T_MELT_K - 5.0, 3.6e6, 0.08, 0.021)
    assert eta == pytest.approx(3.6e6 * math.exp(0.4) * math.exp(2.1), rel=1e-12)
    rate = destructive_settling_rate_anderson1976(70.0, T_MELT_K - 5.0, False, 2.778e-6, 100.0)
    assert rate == pytest.approx(2.778e-6 * math.exp(-0.2), rel=1e-12)
    wet = destructive_settling_rate_anderson1976(70.0, T_MELT_K, True, 2.778e-6, 100.0)
    assert wet == pytest.approx(2 * 2.778e-6, rel=1e-12)  # c4 = 2 when wet


def test_viscosity_constant_is_jordan1991():
    # Jordan (1991) CRREL SR 91-16, Eq. 34 (Anderson 1976) [mem]: eta0 = 3.6e6 N s m-2,
    # c5 = 0.08 K-1, c6 = 0.021 m3 kg-1
    from regionmap.snow.params import SnowParams

    p = SnowParams()
    assert (p.compaction_eta0_pa_s, p.compaction_c_t_per_k, p.compaction_c_rho_m3_kg) == (
        3.6e6,
        0.08,
        0.021,
    )


def test_wet_softening_vionnet2012():
    # Vionnet et al. (2012), GMD 5, liquid-water factor of the viscosity 1 / (1 + 60 theta_w)
    # [mem]: dry snow unchanged; 5 % water by volume -> a quarter of the dry viscosity
    assert wet_softening_vionnet2012(0.0) == 1.0
    assert wet_softening_vionnet2012(0.05) == pytest.approx(0.25, rel=1e-12)

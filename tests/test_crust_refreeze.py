"""The crust is the wet snow a refreezing front from the cold surface freezes in one night.

Reference: the one-phase Stefan problem with Neumann's exact solution (Carslaw & Jaeger
1959, Conduction of Heat in Solids, 2nd ed., Sect. 11.2 [mem]). Wet snow at 0 degC holding
theta_w of liquid water by volume under a surface held dT below 0 degC freezes to the depth
s(t) = 2 lambda sqrt(alpha t), with lambda exp(lambda^2) erf(lambda) = St / sqrt(pi),
St = C dT / (rho_w L theta_w), alpha = k / C, C the frozen lid's heat capacity per volume;
for a small St, s ~ sqrt(2 k dT t / (rho_w L theta_w)). The lid's conductivity comes from
the published regression of Calonne et al. (2011, Geophys. Res. Lett. 38, L23501,
doi:10.1029/2011GL049234, Eq. 5: k = 2.5e-6 rho^2 - 1.23e-4 rho + 0.024 W m-1 K-1), typed
here from the paper, not taken from the model.

Field: rain and melt-freeze crusts are millimetres to centimetres thick, thick ones a
decimetre or two (Jamieson 2006, Rev. Geophys. 44, RG2001, doi:10.1029/2005RG000176, and
sources therein [mem]; Fierz et al. 2009 describe melt-freeze crusts as the refrozen
surface layer of recognisable melt-freeze polycrystals).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize, special

from regionmap.snow.codes import CRUST_INDEX, GRAIN_INDEX
from regionmap.snow.column import run_columns
from regionmap.snow.crusts import FLAG_WAS_WET, FLAG_WET_MELT, FLAG_WET_RAIN
from regionmap.snow.kernel import J_N, V_SOIL, V_TSURF
from regionmap.snow.params import SnowParams
from regionmap.snow.state import SnowState
from regionmap.snow.synthetic import clear_sky_shortwave, diurnal_temperature, hours, make_forcing

START = "2026-01-10T00:00"
T0 = 273.15
RHO_W, L_F, C_ICE = 1000.0, 3.334e5, 2100.0  # CRC Handbook values of water and ice [mem]
DRY_DENSITY = 300.0  # kg m-3 of ice in the wet snow
THETA_W = 0.033  # liquid water by volume: the "wet" class, 3-8 % (Fierz et al. 2009)
LAYER_M, N_LAYERS = 0.015, 40  # 60 cm of wet snow


def _wet_pack(n_cells: int, flags: int) -> SnowState:
    """60 cm of isothermal wet snow (0 degC, THETA_W) over soil at 0 degC."""
    st = SnowState.empty(n_cells, time=START)
    k = slice(0, N_LAYERS)
    st.thickness_m[:, k] = LAYER_M
    st.ice_kg_m2[:, k] = DRY_DENSITY * LAYER_M
    st.liquid_kg_m2[:, k] = THETA_W * RHO_W * LAYER_M
    st.temperature_k[:, k] = T0
    st.grain_size_mm[:, k] = 0.8
    st.grain_code[:, k] = GRAIN_INDEX["MF"]
    st.flags[:, k] = flags
    dep = np.int32((np.datetime64(START, "s") - np.datetime64("2000-01-01", "s")).astype(int))
    st.deposition_time_s2000[:, k] = dep - 86400 * np.arange(N_LAYERS, 0, -1)
    st.formation_time_s2000[:, k] = st.deposition_time_s2000[:, k]
    st.counters[:, J_N] = N_LAYERS
    st.surface[:, V_TSURF] = T0  # the skin of a wet surface
    return st


def _frozen_depth_m(state: SnowState, c: int) -> float:
    """Depth of the refreezing front in the pack's initial geometry: the mass of the dry
    layers from the surface down, plus the frozen share of the partly frozen layer under
    them (its liquid against the wet layer below), over the frozen lid's density (Neumann's
    solution is for a rigid medium; settlement of the lid is undone this way)."""
    n = state.layer_count[c]
    ice, liq = state.ice_kg_m2[c, :n], state.liquid_kg_m2[c, :n]
    top_wet = np.nonzero(liq > 0.0)[0].max()
    mass = float(ice[top_wet + 1 :].sum())
    frozen_share = max(
        1.0 - (liq[top_wet] / ice[top_wet]) / (liq[top_wet - 1] / ice[top_wet - 1]), 0.0
    )
    mass += frozen_share * float(ice[top_wet] + liq[top_wet])
    return mass / (DRY_DENSITY + THETA_W * RHO_W)


def _calonne2011_w_m_k(rho):
    return 2.5e-6 * rho**2 - 1.23e-4 * rho + 0.024


def _neumann_depth_m(dt_k, t_s):
    rho_lid = DRY_DENSITY + THETA_W * RHO_W  # the refrozen water joins the ice
    k = _calonne2011_w_m_k(rho_lid)
    c = rho_lid * C_ICE
    latent = RHO_W * L_F * THETA_W
    st = c * dt_k / latent
    lam = optimize.brentq(
        lambda x: x * np.exp(x * x) * special.erf(x) - st / np.sqrt(np.pi), 1e-6, 5.0
    )
    return 2.0 * lam * np.sqrt(k / c * t_s)


AIR_C = (-4.0, -16.0)
CHUNK_H = 6


@pytest.fixture(scope="module")
def cold_front_run():
    """The wet pack under cold, windy, cloudless air at -4 and -16 degC, 48 h in 6 h steps:
    front depths after each chunk and the mean skin temperature so far."""
    state = _wet_pack(len(AIR_C), FLAG_WAS_WET | FLAG_WET_MELT)
    ta = np.array([T0 + a for a in AIR_C])[:, None]
    depths, ts_mean = [], []
    ts_sum = np.zeros(len(AIR_C))
    for chunk in range(48 // CHUNK_H):
        t = hours(str(state.time), CHUNK_H)
        f = make_forcing(t, len(AIR_C), t_air_k=ta, rh_frac=0.7, wind_m_s=8.0, cloud_frac=0.0)
        state, diag, _ = run_columns(state, f, SnowParams(), diag_every_h=1, with_snapshots=False)
        ts_sum += diag["surface_temperature_k"].sum(axis=1)
        ts_mean.append(ts_sum / ((chunk + 1) * CHUNK_H))
        depths.append([_frozen_depth_m(state, c) for c in range(len(AIR_C))])
    return np.array(depths), np.array(ts_mean), state


def test_refreezing_front_follows_the_stefan_solution(cold_front_run):
    # the model's front (conduction + enthalpy) against Neumann's exact solution with the
    # model's own mean skin temperature as the boundary value (quasi-steady: s^2 grows with
    # the time integral of dT), within 12 % from 12 h to 48 h
    depths, ts_mean, _ = cold_front_run
    for j, hour in enumerate(range(CHUNK_H, 49, CHUNK_H)):
        if hour < 12:
            continue
        for c in range(len(AIR_C)):
            dt_k = T0 - ts_mean[j, c]
            ref = _neumann_depth_m(dt_k, hour * 3600.0)
            assert depths[j, c] == pytest.approx(ref, rel=0.12), (AIR_C[c], hour)
    # and the square-root law: four times the time, about twice the depth
    ratio = depths[-1] / depths[1]
    assert np.all((ratio > 1.6) & (ratio < 2.5)), ratio


def test_crust_is_the_first_nights_refreeze_not_the_wet_pack(cold_front_run):
    # the crust is the snow the front froze within 12 h (a night), not all 60 cm of wet
    # snow: thinner than the pack and than the front after 48 h, thicker under the colder air
    depths, _, state = cold_front_run
    crust_m = []
    for c in range(len(AIR_C)):
        n = state.layer_count[c]
        is_crust = state.crust_code[c, :n] == CRUST_INDEX["melt-freeze"]
        crust_m.append(state.thickness_m[c, :n][is_crust].sum())
        # the crust sits on top, one piece
        top = np.nonzero(is_crust)[0]
        assert top.size > 0 and top.max() == n - 1
        assert np.all(np.diff(top) == 1)
        # refrozen snow under the crust: melt forms, no crust kind
        below = slice(0, top.min())
        refrozen = state.liquid_kg_m2[c, below] == 0.0
        assert np.all(state.grain_code[c, below][refrozen] == GRAIN_INDEX["MF"])
        assert np.all(state.crust_code[c, below] == 0)
    crust_m = np.array(crust_m)
    # as thick as the front after 12 h (Neumann's solution, tested above), a good deal
    # thinner than the snow refrozen by 48 h; thicker under the colder air
    assert crust_m == pytest.approx(depths[1], rel=0.2)  # depths[1]: the front at 12 h
    assert np.all(crust_m < 0.7 * depths[-1])
    assert crust_m[1] > crust_m[0]
    # in the field range of centimetres to about two decimetres (Jamieson 2006 [mem]); the
    # -16 degC night is a hard frost that freezes about 15 cm of wet snow
    assert np.all((crust_m >= 0.01) & (crust_m <= 0.2)), crust_m


def test_deep_wet_snow_refreezing_under_wet_snow_is_no_crust():
    # negative control: wet snow that refreezes from below (cold ground) under snow still
    # wet above it is not frozen by a front from the surface: no crust. The surface stays
    # wet under warm cloudy air; the soil is at -8 degC
    state = _wet_pack(1, FLAG_WAS_WET | FLAG_WET_RAIN)
    state.surface[:, V_SOIL:] = T0 - 8.0
    t = hours(START, 72)
    f = make_forcing(t, 1, t_air_k=T0 + 2.0, rh_frac=0.95, wind_m_s=2.0, cloud_frac=1.0)
    out, _, _ = run_columns(state, f, SnowParams(), diag_every_h=1, with_snapshots=False)
    n = out.layer_count[0]
    assert out.liquid_kg_m2[0, n - 1] > 0.0  # still wet on top
    assert np.any(out.liquid_kg_m2[0, :n] == 0.0)  # something refroze at the base
    assert np.all(out.crust_code[0, :n] == 0)


def test_diurnal_refreeze_crust_centimetres():
    # a spring-like week: clear days with air above 0 degC wet the surface, nights at about
    # -5 degC refreeze it. The melt-freeze crust is centimetres (Jamieson 2006 [mem])
    state = _wet_pack(1, 0)
    state.liquid_kg_m2[:] = 0.0
    state.temperature_k[:, :N_LAYERS] = T0 - 2.0
    state.grain_code[:, :N_LAYERS] = GRAIN_INDEX["RG"]
    state.surface[:, V_TSURF] = T0 - 2.0
    t = hours(START, 24 * 6)
    f = make_forcing(
        t,
        1,
        t_air_k=diurnal_temperature(t, 1.0, 6.0),
        rh_frac=0.6,
        wind_m_s=2.0,
        sw_in_w_m2=clear_sky_shortwave(t, 600.0),
        cloud_frac=0.0,
    )
    out, diag, _ = run_columns(state, f, SnowParams(), diag_every_h=1, with_snapshots=False)
    n = out.layer_count[0]
    kinds = out.crust_code[0, :n]
    crust_m = out.thickness_m[0, :n][
        np.isin(kinds, [CRUST_INDEX["sun"], CRUST_INDEX["melt-freeze"]])
    ].sum()
    assert 0.005 <= crust_m <= 0.15, crust_m

"""Mass and energy closure of the snow column, and the settlement rule of thumb."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from regionmap.constants import T_MELT_K
from regionmap.snow.column import run_columns
from regionmap.snow.kernel import J_N, V_SOIL, V_TSURF
from regionmap.snow.params import SnowParams
from regionmap.snow.state import SnowState
from regionmap.snow.synthetic import hours, make_forcing, season_forcing

START = "2025-11-01T00:00"


@pytest.fixture(scope="module")
def season():
    f = season_forcing(8, start=START, days=150, seed=11)
    s0 = SnowState.empty(8, time=START)
    s, d, _ = run_columns(s0, f, diag_every_h=1, with_snapshots=False)
    return s0, s, d


def test_mass_closure_every_step(season):
    # change in SWE = snowfall + rain + deposition - sublimation - runoff, each step,
    # to 1e-9 relative (conservation of mass; relative to the column's SWE, at least 1 kg m-2)
    _, _, d = season
    scale = np.maximum(d["swe_kg_m2"], 1.0)
    assert np.all(np.abs(d["mass_residual_kg_m2"]) <= 1e-9 * scale)


def test_mass_closure_over_the_season(season):
    s0, s, d = season
    budget = (
        d["snowfall_kg_m2"]
        + d["rain_kg_m2"]
        + d["deposition_kg_m2"]
        - d["sublimation_kg_m2"]
        - d["runoff_kg_m2"]
    ).sum(axis=1)
    change = s.swe_kg_m2() - s0.swe_kg_m2()
    assert np.all(np.abs(change - budget) <= 1e-9 * np.maximum(d["snowfall_kg_m2"].sum(1), 1.0))
    assert d["snowfall_kg_m2"].sum() > 0 and d["runoff_kg_m2"].sum() > 0  # a real season


def test_energy_closure_over_the_season(season):
    # energy closure per step, mean residual <= 0.1 W m-2 over a season (stated
    # tolerance); the residual is stored heat change minus surface, ground and mass fluxes
    _, _, d = season
    res = d["energy_residual_w_m2"].astype(np.float64)
    snow = d["swe_kg_m2"] > 0
    assert abs(res[snow].mean()) <= 0.1
    # and in every step (glaze, rain, melt-out included): the state's float32 temperatures
    # leave a few hundredths of W m-2
    assert np.abs(res[snow]).max() <= 0.1


def test_season_structure_is_plausible(season):
    # common practice: a season of storms, cold spells and a spring thaw builds tens of
    # layers, crusts and persistent layers, and melts out on the warm cells
    _, s, d = season
    assert d["layer_count"].max() <= SnowParams().max_layers
    assert d["layer_count"][:, 24 * 60 : 24 * 120].mean() >= 20
    assert d["crust_count"].max() >= 1
    assert d["pwl_present"].max() == 1
    assert np.all(np.isfinite(d["snow_depth_cm"]))


def _settling_state(t_c):
    s = SnowState.empty(1, time="2025-12-01T00:00", soil_temperature_k=T_MELT_K + t_c)
    n = 15
    s.thickness_m[0, :n] = 0.02
    s.ice_kg_m2[0, :n] = 0.02 * 70.0
    s.temperature_k[0, :n] = T_MELT_K + t_c
    s.grain_size_mm[0, :n] = 0.3
    s.dendricity[0, :n] = 1.0
    s.grain_code[0, :n] = 1
    s.counters[0, J_N] = n
    s.surface[0, V_TSURF] = T_MELT_K + t_c
    s.surface[0, V_SOIL:] = T_MELT_K + t_c
    return s


def _settled_after_a_day(t_c):
    t = hours("2025-12-01T00:00", 24)
    f = make_forcing(t, 1, t_air_k=T_MELT_K + t_c, rh_frac=0.9, wind_m_s=1.0, cloud_frac=1.0)
    p = SnowParams(deep_ground_temperature_k=T_MELT_K + t_c)
    _, d, _ = run_columns(_settling_state(t_c), f, p)
    return 1.0 - d["snow_depth_cm"][0, -1] / 30.0


def test_settlement_rule_of_thumb_new_snow_first_day():
    # common practice (McClung & Schaerer, The Avalanche Handbook): light new snow settles
    # roughly 10-35 % in its first 24 h (30 cm at 70 kg m-3 and -5 degC: ~20-25 cm), and
    # faster near 0 degC than in the cold
    settled = _settled_after_a_day(-5.0)
    assert 0.10 <= settled <= 0.35
    assert _settled_after_a_day(-1.0) > settled > _settled_after_a_day(-12.0)


def test_storm_snow_settles_10_to_30_percent_in_its_first_day():
    # common practice (McClung & Schaerer, The Avalanche Handbook; Anderson 1976): the snow
    # of an ordinary storm (30 kg m-2 in 12 h, 3 m s-1 wind, cloudy) settles about 10-30 %
    # in the day after it, at -10, -5 and -1 degC alike
    tc = np.array([-10.0, -5.0, -1.0])
    n_storm, n_after = 12, 24
    t = hours("2025-12-01T00:00", n_storm + n_after)
    pr = np.zeros((3, t.size))
    pr[:, :n_storm] = 30.0 / n_storm
    ta = np.repeat((T_MELT_K + tc)[:, None], t.size, axis=1)
    f = make_forcing(
        t,
        3,
        t_air_k=ta,
        rh_frac=0.95,
        wind_m_s=3.0,
        cloud_frac=1.0,
        precip_kg_m2=pr,
        snow_frac=1.0,
    )
    s0 = SnowState.empty(3, time="2025-12-01T00:00", soil_temperature_k=T_MELT_K - 1.0)
    _, d, _ = run_columns(s0, f, SnowParams(), diag_every_h=1)
    hs = d["snow_depth_cm"]
    settled = 1.0 - hs[:, -1] / hs[:, n_storm - 1]
    assert np.all((settled >= 0.10) & (settled <= 0.30)), settled


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    seed=st.integers(0, 2**31 - 1),
    warm=st.floats(-10.0, 8.0),
    wind=st.floats(0.0, 15.0),
    wet=st.floats(0.0, 1.0),
)
def test_random_forcing_keeps_state_physical(seed, warm, wind, wet):
    # properties: no negative masses or thicknesses, snow never above 0 degC,
    # layer count within bounds, mass closed, under random forcing
    rng = np.random.default_rng(seed)
    nt = 24 * 8
    t = hours(START, nt)
    ta = T_MELT_K + warm + rng.normal(0, 6, size=(3, nt))
    pr = rng.gamma(0.6, 2.0, size=(3, nt)) * (rng.random((3, nt)) < 0.4)
    f = make_forcing(
        t,
        3,
        t_air_k=ta,
        rh_frac=rng.uniform(0.3, 1.0, size=(3, nt)),
        wind_m_s=wind * rng.random((3, nt)),
        sw_in_w_m2=rng.uniform(0, 900, size=(3, nt)),
        cloud_frac=rng.random((3, nt)),
        precip_kg_m2=pr,
        snow_frac=rng.random((3, nt)) * (1 - wet) + (ta < T_MELT_K) * wet,
        freezing_rain_frac=(rng.random((3, nt)) < 0.05) * 1.0,
    )
    s0 = SnowState.empty(3, time=START)
    s, d, _ = run_columns(s0, f, diag_every_h=1, with_snapshots=False)
    n = s.layer_count
    assert np.all((n >= 0) & (n <= s.max_layers))
    used = np.arange(s.max_layers)[None, :] < n[:, None]
    assert np.all(s.ice_kg_m2[used] > 0) and np.all(s.liquid_kg_m2[used] >= 0)
    assert np.all(s.thickness_m[used] > 0)
    assert np.all(s.temperature_k[used] <= T_MELT_K + 1e-4)
    assert np.all(np.abs(d["mass_residual_kg_m2"]) <= 1e-9 * np.maximum(d["swe_kg_m2"], 1.0))
    assert np.all(d["snow_depth_cm"] >= 0) and np.all(d["runoff_kg_m2"] >= 0)
    assert np.all(np.isfinite(d["swe_kg_m2"]))
    assert np.all(d["status"] == 0)

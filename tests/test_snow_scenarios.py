"""Scenario tests of the snow column with designed synthetic weather.

Each scenario asserts the structure a practitioner expects from the designed weather (common
practice of snowpack observation, e.g. McClung & Schaerer, The Avalanche Handbook, and the
class definitions of Fierz et al. 2009), with controls that must find nothing.
"""

from __future__ import annotations

import numpy as np
import pytest

from regionmap.constants import T_MELT_K
from regionmap.snow.codes import CRUST_INDEX, GRAIN_INDEX
from regionmap.snow.column import run_columns
from regionmap.snow.params import SnowParams
from regionmap.snow.state import SnowState
from regionmap.snow.synthetic import clear_sky_shortwave, diurnal_temperature, hours, make_forcing

START = "2025-11-01T00:00"
DH, SH, IF, MF, MFCR = (GRAIN_INDEX[c] for c in ("DH", "SH", "IF", "MF", "MFcr"))


def _run(forcing, n_cells, **kw):
    state = SnowState.empty(n_cells, time=START)
    return run_columns(state, forcing, SnowParams(), **kw)


# ------------------------------------------------------------------ (a) depth hoar
@pytest.fixture(scope="module")
def depth_hoar_run():
    """Early snow, then four weeks of cold clear weather. Cells: shallow shaded, shallow
    sunny, 1.5 m shaded (control)."""
    n_storm, n_cold = 48, 24 * 28
    t = hours(START, n_storm + n_cold)
    ta = diurnal_temperature(t, -12.0, 5.0)
    ta[:n_storm] = T_MELT_K - 3.0
    pr = np.zeros((3, t.size))
    pr[0:2, :n_storm] = 40.0 / n_storm
    pr[2, :n_storm] = 430.0 / n_storm
    sw = np.vstack(
        [
            clear_sky_shortwave(t, 120.0),
            clear_sky_shortwave(t, 650.0),
            clear_sky_shortwave(t, 120.0),
        ]
    )
    cloud = np.where(np.arange(t.size) < n_storm, 1.0, 0.0)
    f = make_forcing(
        t,
        3,
        t_air_k=ta,
        rh_frac=0.7,
        wind_m_s=1.5,
        sw_in_w_m2=sw,
        cloud_frac=cloud,
        precip_kg_m2=pr,
        snow_frac=1.0,
    )
    return _run(f, 3, diag_every_h=24)


def test_basal_facets_turn_to_depth_hoar_shallow_shaded(depth_hoar_run):
    state, diag, snap = depth_hoar_run
    n = state.layer_count[0]
    codes = state.grain_code[0, :n]
    # common practice (Colbeck 1983; Marbouty 1980): weeks of strong gradient in a shallow,
    # low-density pack give depth hoar in its lower part, grains of 1.5 mm and more (depth
    # hoar is typically 1-5 mm, Fierz et al. 2009). The grains themselves are checked, not
    # the model's 2 cm presence flag: with the source's viscosity the base of this 20 cm pack
    # settles to 300-340 kg m-3, where faceting slows, and its depth hoar stays near 2 cm.
    assert diag["depth_hoar_thickness_cm"][0, -1] > 0
    assert DH in codes[: (n + 1) // 2], codes
    assert state.grain_size_mm[0, :n][codes == DH].max() >= 1.5
    # the gradient that drove it: daily-snapshot bulk gradient above 25 K/m for weeks
    thick = snap["thickness_m"][0]
    temp = snap["temperature_k"][0]
    cnt = snap["layer_count"][0]
    grad = np.array(
        [(temp[d, 0] - temp[d, cnt[d] - 1]) / np.nansum(thick[d]) for d in range(len(cnt))]
    )
    assert np.mean(grad[3:] > 25.0) > 0.9
    # facets first, depth hoar later (designed: cold spell starts on day 2)
    first_dh = np.argmax(diag["depth_hoar_thickness_cm"][0] > 0)
    facets = [GRAIN_INDEX[c] for c in ("FC", "FCsf", "FCxr")]
    faceted = np.isin(snap["grain_code"][0], facets).any(axis=1)
    first_facet = np.argmax(faceted)
    assert 2 <= first_facet < first_dh <= 29  # within the designed cold spell
    # negative control (e): depth hoar needs weeks of strong gradient, not days (Marbouty
    # 1980: growth of ~0.1 mm per day at best; common practice)
    assert first_dh >= 14


def test_less_depth_hoar_on_sunny_aspect(depth_hoar_run):
    state, diag, _ = depth_hoar_run
    # common practice: sunny aspects are warmer at the surface -> weaker gradients -> less DH
    assert diag["depth_hoar_thickness_cm"][1, -1] < diag["depth_hoar_thickness_cm"][0, -1]


def test_deep_pack_gets_no_basal_depth_hoar(depth_hoar_run):
    # negative control (e): a deep pack, whose base stays warm, grows no depth hoar there
    # (common practice: depth hoar is a shallow-pack layer, weak gradients in deep packs;
    # McClung & Schaerer 2006, The Avalanche Handbook, Ch. 3 [mem])
    state, diag, _ = depth_hoar_run
    n = state.layer_count[2]
    depth_cm = diag["snow_depth_cm"][2, -1]
    assert 100.0 < depth_cm < 180.0  # the designed 430 kg m-2, settled for four weeks
    # control: the same cold spell over 1.5 m of snow -> no depth hoar near the base
    z_top = np.cumsum(state.thickness_m[2, :n])
    assert not np.any(state.grain_code[2, :n][z_top < 0.5] == DH)


def test_shallow_pack_without_slab_holds_no_weak_layer_of_concern(depth_hoar_run):
    _, diag, _ = depth_hoar_run
    # the basal depth hoar of a 20 cm pack has no slab over it yet: not a weak layer of
    # concern (slab at least 18 cm, the critical depth window of Schweizer & Jamieson 2007)
    assert diag["snow_depth_cm"][0, -1] < 25.0
    assert not np.any(diag["pwl_present"][0] == 1)


# ------------------------------------------------------------------ (b) surface hoar
#: 10 m winds of the burial storm over the region: the ordinary storm winds of negative
#: control (b), 5-8 m s-1 [m s-1]
STORM_WINDS_M_S = (5.0, 6.5, 8.0)
#: the cells' wind factors: the sheltered and exposed ends of the terrain's modification of
#: a grid wind, 0.5-1.5 (Liston & Sturm 1998, J. Glaciol. 44, 498-516, Eq. 16 with
#: gamma_s + gamma_c = 1 [mem]; exposure in Winstral et al. 2002)
SHELTERED, EXPOSED = 0.5, 1.5
#: cells: calm clear nights, one per storm wind, sheltered then exposed; then the controls
#: windy nights and cloudy nights (sheltered, middle storm wind)
_BURIAL = [(w, fac) for fac in (SHELTERED, EXPOSED) for w in STORM_WINDS_M_S]
N_BURIAL = len(_BURIAL)
WINDY_NIGHTS, CLOUDY_NIGHTS = N_BURIAL, N_BURIAL + 1


@pytest.fixture(scope="module")
def surface_hoar_run():
    """Base snow, three calm clear humid nights, a storm of 30 kg m-2 in 12 h, ten cloudy
    days. Cells: the hoar buried by each storm wind in sheltered and exposed terrain; the
    controls windy clear nights and calm cloudy nights."""
    n_base, n_clear, n_storm, n_after = 24, 24 * 3, 12, 24 * 10
    nt = n_base + n_clear + n_storm + n_after
    n_cells = N_BURIAL + 2
    t = hours(START, nt)
    idx = np.arange(nt)
    clear = (idx >= n_base) & (idx < n_base + n_clear)
    storm = (idx >= n_base + n_clear) & (idx < n_base + n_clear + n_storm)
    ta = np.where(clear, diurnal_temperature(t, -8.0, 4.0), T_MELT_K - 6.0)
    pr = np.where(idx < n_base, 1.0, 0.0) + np.where(storm, 30.0 / n_storm, 0.0)
    cloudy_nights = np.arange(n_cells)[:, None] == CLOUDY_NIGHTS
    cloud = np.where(clear & ~cloudy_nights, 0.0, 1.0)
    storm_wind = np.array([w for w, _ in _BURIAL] + [6.5, 6.5])[:, None]
    factor = np.array([fac for _, fac in _BURIAL] + [SHELTERED, SHELTERED])[:, None]
    night_wind = np.where(np.arange(n_cells) == WINDY_NIGHTS, 7.0, 1.0)[:, None]
    wind = np.where(clear, night_wind, np.where(storm, storm_wind, 2.0) * factor)
    f = make_forcing(
        t,
        n_cells,
        t_air_k=ta,
        rh_frac=np.where(clear, 0.95, 0.9),
        wind_m_s=wind,
        sw_in_w_m2=np.where(clear, clear_sky_shortwave(t, 150.0), 0.0),
        cloud_frac=cloud,
        precip_kg_m2=pr,
        snow_frac=1.0,
    )
    storm_start = t[n_base + n_clear]
    return (
        _run(f, n_cells, diag_every_h=1),
        storm_start,
        n_base + n_clear,
        n_base + n_clear + n_storm,
    )


@pytest.mark.parametrize("cell", range(len(STORM_WINDS_M_S)))
def test_surface_hoar_buried_by_storm_persists(surface_hoar_run, cell):
    (state, diag, _), storm_start, i_storm, i_end = surface_hoar_run
    # negative control (b): surface hoar grown over calm clear nights and buried by a storm
    # with ordinary wind (5-8 m s-1) survives as a buried SH layer in sheltered terrain
    # (common practice; Feick et al. 2007, J. Geophys. Res. 112, F02002 [mem])
    # formation: deposition under clear calm humid nights (Hachikubo 2001) grows SH of
    # millimetres (Fierz et al. 2009: surface hoar typically 2-10 mm, up to several cm)
    assert 0.5 < diag["surface_hoar_size_mm"][cell, i_storm - 1] < 30.0
    n = state.layer_count[cell]
    sh = np.nonzero(state.grain_code[cell, :n] == SH)[0]
    assert sh.size == 1, state.grain_code[cell, :n]
    # burial time within one day of the designed storm
    formed = np.datetime64(int(state.formation_time_s2000[cell, sh[0]]) + 946684800, "s")
    assert abs(formed - storm_start) <= np.timedelta64(1, "D")
    # its event id (whole hours since 1970, the state's convention) is its growth start, in
    # the three clear nights before the storm
    grown = np.datetime64(int(state.event_id[cell, sh[0]]) * 3600, "s")
    assert storm_start - np.timedelta64(3, "D") <= grown < storm_start
    # right after the storm: a weak layer of concern under the storm snow, its depth within
    # 15 % of the storm snow above it
    storm_slab_cm = diag["snow_depth_cm"][cell, i_end] - diag["snow_depth_cm"][cell, i_storm - 1]
    assert diag["pwl_present"][cell, i_end] == 1
    assert diag["pwl_depth_cm"][cell, i_end] == pytest.approx(storm_slab_cm, rel=0.15)
    # still there 10 days later under the settled load, its crystals (mm) intact
    n_end = state.layer_count[cell]
    sh_end = state.grain_code[cell, :n_end] == SH
    assert np.sum(sh_end) == 1
    assert state.grain_size_mm[cell, :n_end][sh_end][0] >= 1.0


@pytest.mark.parametrize("cell, why", [(WINDY_NIGHTS, "windy nights"), (CLOUDY_NIGHTS, "cloudy")])
def test_no_surface_hoar_when_windy_or_cloudy(surface_hoar_run, cell, why):
    (state, diag, _), *_ = surface_hoar_run
    # control (Hachikubo 2001; common practice): wind > ~4 m/s or cloud -> no surface hoar
    n = state.layer_count[cell]
    assert not np.any(state.grain_code[cell, :n] == SH), why
    assert np.nanmax(diag["surface_hoar_size_mm"][cell]) < 0.2, why


@pytest.mark.parametrize("storm_wind", STORM_WINDS_M_S[1:])
def test_storm_wind_on_exposed_terrain_destroys_the_hoar(surface_hoar_run, storm_wind):
    (state, diag, _), _, i_storm, _ = surface_hoar_run
    # negative control (b), its other half: the same hoar under the same storm where the
    # terrain speeds the wind up (about 10-12 m s-1 at the cell, where new and older snow
    # drift: Li & Pomeroy 1997, J. Appl. Meteorol. 36, 205-213 [mem]) is not kept
    cell = _BURIAL.index((storm_wind, EXPOSED))
    assert diag["surface_hoar_size_mm"][cell, i_storm - 1] > 0.5  # it had grown
    n = state.layer_count[cell]
    assert not np.any(state.grain_code[cell, :n] == SH)


# ------------------------------------------------------------------ (c) rain crust
@pytest.fixture(scope="module")
def rain_run():
    """Cold snow, rain at +3 degC, then (cell 0) a cold snap or (cell 1, control) a pack
    made isothermal beforehand that stays warm and cloudy."""
    n_snow, n_wait, n_rain, n_after = 24, 48, 6, 24 * 3
    nt = n_snow + n_wait + n_rain + n_after
    t = hours(START, nt)
    idx = np.arange(nt)
    rain = (idx >= n_snow + n_wait) & (idx < n_snow + n_wait + n_rain)
    after = idx >= n_snow + n_wait + n_rain
    ta0 = np.where(idx < n_snow, T_MELT_K - 5.0, T_MELT_K - 8.0)
    ta0 = np.where(rain, T_MELT_K + 3.0, ta0)
    ta0 = np.where(after, diurnal_temperature(t, -12.0, 3.0), ta0)
    ta1 = np.where(idx < n_snow, T_MELT_K - 1.0, T_MELT_K + 3.0)
    pr = np.where(idx < n_snow, 2.5, 0.0) + np.where(rain, 2.0, 0.0)
    sf = np.where(rain, 0.0, 1.0)
    cloud = np.vstack([np.where(after, 0.0, 1.0), np.ones(nt)])
    f = make_forcing(
        t,
        2,
        t_air_k=np.vstack([ta0, ta1]),
        rh_frac=0.9,
        wind_m_s=2.0,
        cloud_frac=cloud,
        precip_kg_m2=pr,
        snow_frac=sf,
    )
    return _run(f, 2, diag_every_h=1), t, n_snow + n_wait + n_rain


def test_rain_crust_tagged_with_its_event(rain_run):
    (state, diag, _), t, i_rain_end = rain_run
    # rain that wets the surface and then refreezes is a rain crust (Jamieson 2006)
    assert diag["crust_count_rain"][0, -1] >= 1
    n = state.layer_count[0]
    rain_layers = np.nonzero(state.crust_code[0, :n] == CRUST_INDEX["rain"])[0]
    events = diag["event_id"][(diag["event_cell"] == 0) & (diag["event_kind"] == "rain-on-snow")]
    assert events.size == 1
    assert np.all(state.event_id[0, rain_layers] == events[0])
    # the crust appears (first refreeze) within one day of the end of the designed rain
    first = np.argmax(diag["crust_count_rain"][0] >= 1)
    assert diag["crust_count_rain"][0, first] >= 1
    assert 0 <= first - (i_rain_end - 1) <= 24
    formed = state.formation_time_s2000[0, rain_layers].astype(np.int64) + 946684800
    assert formed.min() - t[i_rain_end - 1].astype(np.int64) <= 86400
    # the rain is logged with its amount (designed 12 kg m-2)
    amount = diag["event_amount_kg_m2"][(diag["event_cell"] == 0)]
    assert amount.sum() == pytest.approx(12.0, rel=1e-9)


def test_rain_on_isothermal_pack_makes_no_crust_yet(rain_run):
    (state, diag, _), *_ = rain_run
    # control: no refreeze yet -> no crust yet; the pack is wet and isothermal
    assert np.all(diag["crust_count"][1] == 0)
    n = state.layer_count[1]
    assert np.all(state.crust_code[1, :n] == 0)
    assert diag["liquid_water_kg_m2"][1, -1] > 0.0
    assert np.all(state.temperature_k[1, :n] == pytest.approx(T_MELT_K, abs=1e-3))


# ------------------------------------------------------------------ (d) glaze
@pytest.fixture(scope="module")
def glaze_run():
    """Cold pack; then (cell 0) 2 kg m-2 of freezing rain on a -8 degC surface, or (cell 1,
    control) wet snowfall near 0 degC without a melting layer aloft."""
    n_snow, n_cold, n_ev, n_after = 24, 48, 2, 1
    nt = n_snow + n_cold + n_ev + n_after
    t = hours(START, nt)
    idx = np.arange(nt)
    ev = (idx >= n_snow + n_cold) & (idx < n_snow + n_cold + n_ev)
    ta0 = np.where(idx < n_snow, T_MELT_K - 5.0, T_MELT_K - 8.0)
    ta1 = np.where(ev, T_MELT_K + 0.5, ta0)
    pr = np.where(idx < n_snow, 2.0, 0.0) + np.where(ev, 1.0, 0.0)
    f = make_forcing(
        t,
        2,
        t_air_k=np.vstack([ta0, ta1]),
        rh_frac=0.9,
        wind_m_s=2.0,
        cloud_frac=1.0,
        precip_kg_m2=pr,
        snow_frac=np.vstack([np.where(ev, 0.0, 1.0), np.where(ev, 0.6, 1.0)]),
        freezing_rain_frac=np.vstack([np.where(ev, 1.0, 0.0), np.zeros(nt)]),
    )
    return _run(f, 2, diag_every_h=1), t, n_snow + n_cold


def test_freezing_rain_makes_glaze_of_expected_thickness(glaze_run):
    (state, diag, _), t, i_ev = glaze_run
    n = state.layer_count[0]
    glaze = np.nonzero(state.crust_code[0, :n] == CRUST_INDEX["glaze"])[0]
    assert glaze.size == 1 and state.grain_code[0, glaze[0]] == IF
    # [calc]: thickness = water / 917 -> 2 kg m-2 gives 2.18 mm; within 5 %: the
    # latent heat leaves through the surface balance, and what it cannot shed melts back
    assert state.thickness_m[0, glaze[0]] * 1e3 == pytest.approx(2.18, rel=0.05)
    assert state.thickness_m[0, glaze[0]] == pytest.approx(
        state.ice_kg_m2[0, glaze[0]] / 917.0, rel=1e-6
    )
    assert diag["crust_count_glaze"][0, -1] == 0  # thinner than the 5 mm counting minimum
    assert diag["event_kind"][diag["event_cell"] == 0].tolist() == ["freezing-rain"]
    # formed during the designed event
    formed = state.formation_time_s2000[0, glaze[0]].astype(np.int64) + 946684800
    assert t[i_ev].astype(np.int64) <= formed <= t[i_ev + 1].astype(np.int64)


def test_wet_snowfall_makes_no_glaze(glaze_run):
    (state, diag, _), *_ = glaze_run
    n = state.layer_count[1]
    # control: no melting layer aloft (freezing_rain_frac 0) -> no glaze, no ice layer
    assert not np.any(state.crust_code[1, :n] == CRUST_INDEX["glaze"])
    assert not np.any(state.grain_code[1, :n] == IF)
    assert not np.any(diag["event_kind"][diag["event_cell"] == 1] == "freezing-rain")


# ------------------------------------------------------------------ (e) spring
def test_spring_warm_up_gives_isothermal_wet_pack_and_runoff():
    n_snow, n_warm = 48, 24 * 10
    t = hours(START, n_snow + n_warm)
    idx = np.arange(t.size)
    ta = np.where(idx < n_snow, T_MELT_K - 4.0, diurnal_temperature(t, 6.0, 5.0))
    pr = np.where(idx < n_snow, 250.0 / n_snow, 0.0)
    f = make_forcing(
        t,
        1,
        t_air_k=ta,
        rh_frac=0.7,
        wind_m_s=2.0,
        sw_in_w_m2=np.where(idx < n_snow, 0.0, clear_sky_shortwave(t, 750.0, day_length_h=13)),
        cloud_frac=np.where(idx < n_snow, 1.0, 0.3),
        precip_kg_m2=pr,
        snow_frac=1.0,
    )
    state, diag, snap = _run(f, 1, diag_every_h=1, snapshot_hour_utc=16)
    n = state.layer_count[0]
    # common practice (spring snowpack): warm-up -> isothermal at 0 degC in the afternoon,
    # wet, melt forms, runoff
    k = snap["layer_count"][0, -1]
    afternoon = snap["temperature_k"][0, -1, :k]
    assert np.all(afternoon > T_MELT_K - 0.05), afternoon
    codes = state.grain_code[0, :n]
    mass = state.ice_kg_m2[0, :n]
    assert mass[(codes == MF) | (codes == MFCR)].sum() > 0.8 * mass.sum()
    assert diag["runoff_kg_m2"][0].sum() > 20.0
    assert diag["liquid_water_kg_m2"][0, -1] > 0.0
    first_runoff = np.argmax(diag["runoff_kg_m2"][0] > 0)
    assert n_snow < first_runoff < n_snow + 24 * 7  # within the designed warm spell

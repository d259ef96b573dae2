"""Negative controls for precipitation phase and crusts, through phase partition and column.

The designed weather is plain storm weather (temperatures, humidity, amounts a forecaster
would recognise), not built around the model's thresholds: the phase of each hour comes from
the downscaling's own partition (:func:`regionmap.downscale.phase.snow_fraction`), and the
outside oracle of (c) is MetPy's wet-bulb temperature (Normand's construction), never the
model's phase function. Class names and wetness classes: Fierz et al. (2009), The
International Classification for Seasonal Snow on the Ground, IHP-VII Technical Documents
in Hydrology 83, UNESCO-IHP.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from regionmap.constants import T_MELT_K
from regionmap.downscale.phase import snow_fraction
from regionmap.snow.codes import CRUST_INDEX, GRAIN_INDEX
from regionmap.snow.column import run_columns
from regionmap.snow.params import SnowParams
from regionmap.snow.state import SnowState
from regionmap.snow.synthetic import diurnal_temperature, hours, make_forcing

warnings.filterwarnings("ignore", module="metpy")

START = "2025-12-01T00:00"
MF, MFCR = GRAIN_INDEX["MF"], GRAIN_INDEX["MFcr"]
PRESSURE_PA = 80000.0


def _chain_forcing(t, ta, rh, pr, cloud):
    """Forcing whose phase is the downscaling's partition of these temperatures."""
    sf = snow_fraction("jennings2018", ta, rh, np.full(ta.shape, PRESSURE_PA))
    return make_forcing(
        t,
        ta.shape[0],
        t_air_k=ta,
        rh_frac=rh,
        pressure_pa=PRESSURE_PA,
        wind_m_s=3.0,
        cloud_frac=cloud,
        precip_kg_m2=pr,
        snow_frac=sf,
    )


def _snapshots_any(snaps, key, code):
    n = snaps["layer_count"]
    valid = np.arange(snaps[key].shape[-1])[None, None, :] < n[..., None]
    return (valid & (snaps[key] == code)).any(axis=(1, 2))


# ------------------------------------------------------------- (a) a cold storm
@pytest.fixture(scope="module")
def cold_storm_run():
    """A base of old snow, then a 36 h storm of 40 kg m-2 with near-saturated air between
    -4 and -0.3 degC (its warmest hours at -0.3 degC), then a cold, clear week."""
    n_base, n_storm, n_after = 24, 36, 24 * 7
    nt = n_base + n_storm + n_after
    t = hours(START, nt)
    idx = np.arange(nt)
    storm = (idx >= n_base) & (idx < n_base + n_storm)
    ramp = np.clip((idx - n_base) / n_storm, 0.0, 1.0)
    ta = np.where(idx < n_base, T_MELT_K - 8.0, T_MELT_K - 4.0 + 3.7 * np.sin(np.pi * ramp))
    ta = np.where(idx >= n_base + n_storm, diurnal_temperature(t, -10.0, 4.0), ta)
    rh = np.where(storm, 0.97, 0.75)
    pr = np.where(idx < n_base, 1.5, 0.0) + np.where(storm, 40.0 / n_storm, 0.0)
    cloud = np.where(idx < n_base + n_storm, 1.0, 0.0)
    f = _chain_forcing(t, ta[None, :], rh[None, :], pr[None, :], cloud[None, :])
    assert ta[storm].max() == pytest.approx(T_MELT_K - 0.3, abs=0.01)
    state = SnowState.empty(1, time=START)
    out = run_columns(state, f, SnowParams(), diag_every_h=1, snapshot_hour_utc=0)
    return f, out


def test_cold_storm_is_all_snow(cold_storm_run):
    # at -0.3 degC and 97 % RH the wet bulb is below 0 degC: no melt water reaches the
    # ground (a snowflake below 0 degC wet bulb does not melt; Matsuo & Sasyo 1981 [mem])
    f, _ = cold_storm_run
    assert np.all(f.snow_frac[f.precip_kg_m2 > 0] == 1.0)


def test_cold_storm_leaves_no_rain_crust_and_no_melt_form(cold_storm_run):
    # negative control (a): no crust of any kind, no MF or MFcr grains, at any hour
    _, (state, diag, snaps) = cold_storm_run
    assert np.all(diag["crust_count"] == 0)
    assert np.all(diag["rain_kg_m2"] == 0.0)
    assert not _snapshots_any(snaps, "crust_code", CRUST_INDEX["rain"]).any()
    assert not _snapshots_any(snaps, "grain_code", MF).any()
    assert not _snapshots_any(snaps, "grain_code", MFCR).any()
    n = state.layer_count[0]
    assert not np.isin(state.grain_code[0, :n], [MF, MFCR]).any()
    assert np.all(state.crust_code[0, :n] == 0)


# ------------------------------------------------------------- a trace of water
def test_storm_snow_touched_by_a_trace_of_rain_stays_what_it_was():
    # a storm at -2 degC with one mixed hour that brings 0.05 kg m-2 of rain (a trace, far
    # below the 3 % by volume of the "wet" class, Fierz et al. 2009): the storm snow keeps
    # its new-snow classes, no crust and no melt form (regression of the rule that a trace
    # for one hour made the layer MF for good)
    n_storm, n_after = 24, 48
    nt = n_storm + n_after
    t = hours(START, nt)
    idx = np.arange(nt)
    ta = np.where(idx < n_storm, T_MELT_K - 2.0, T_MELT_K - 6.0)
    pr = np.where(idx < n_storm, 1.0, 0.0)
    sf = np.ones(nt)
    sf[12] = 0.95
    f = make_forcing(t, 1, t_air_k=ta, rh_frac=0.9, precip_kg_m2=pr, snow_frac=sf, cloud_frac=1.0)
    state, diag, _ = run_columns(SnowState.empty(1, time=START), f, SnowParams(), diag_every_h=1)
    n = state.layer_count[0]
    assert diag["rain_kg_m2"][0].sum() == pytest.approx(0.05)
    assert np.all(state.crust_code[0, :n] == 0)
    assert not np.isin(state.grain_code[0, :n], [MF, MFCR]).any()


# ------------------------------------------------------------- (c) rain on snow
ELEVATIONS_M = np.arange(1200.0, 2601.0, 100.0)
LAPSE_K_PER_M = 0.0065  # ICAO standard atmosphere lapse rate


@pytest.fixture(scope="module")
def rain_on_snow_run():
    """Cells from 1200 to 2600 m under one air mass (standard lapse rate, RH 92 %): a cold
    storm of 30 kg m-2 builds the pack, then a warm front brings 12 h of 1.2 kg m-2 h-1
    with +4 degC at 1200 m (the freezing level near 1800 m), then a clear, cold spell."""
    n_base, n_warm, n_after = 30, 12, 24 * 4
    nt = n_base + n_warm + n_after
    t = hours(START, nt)
    idx = np.arange(nt)
    warm = (idx >= n_base) & (idx < n_base + n_warm)
    dz = ELEVATIONS_M[:, None] - ELEVATIONS_M[0]
    ta_low = np.where(warm, T_MELT_K + 4.0, T_MELT_K - 4.0)
    ta_low = np.where(idx >= n_base + n_warm, diurnal_temperature(t, -8.0, 4.0), ta_low)
    ta = ta_low[None, :] - LAPSE_K_PER_M * dz
    rh = np.where(warm | (idx < n_base), 0.92, 0.7)[None, :] * np.ones_like(ta)
    pr = (np.where(idx < n_base, 1.0, 0.0) + np.where(warm, 1.2, 0.0))[None, :] * np.ones_like(ta)
    cloud = np.where(idx < n_base + n_warm, 1.0, 0.0)[None, :] * np.ones_like(ta)
    f = _chain_forcing(t, ta, rh, pr, cloud)
    state = SnowState.empty(ELEVATIONS_M.size, time=START)
    out = run_columns(state, f, SnowParams(), diag_every_h=1, snapshot_hour_utc=0)
    return ta, rh, warm, out


def _metpy_wet_bulb_k(t_k, rh):
    import metpy.calc as mc
    from metpy.units import units

    td = mc.dewpoint_from_relative_humidity(t_k * units.K, rh)
    return mc.wet_bulb_temperature(PRESSURE_PA * units.Pa, t_k * units.K, td).to("K").m


def test_no_rain_crust_above_the_rain_snow_transition(rain_on_snow_run):
    # negative control (c): the transition from the air and wet-bulb temperatures with an
    # outside formula -- MetPy's wet bulb at the warm front, rain where it is above +1 degC
    # (the wet-bulb rain-snow threshold of about 1 degC, Ding et al. 2014, J. Hydrol. 513,
    # 154-163 [mem]) -- and no liquid at all where it stays at or below 0 degC
    ta, rh, warm, (state, _, _) = rain_on_snow_run
    tw = _metpy_wet_bulb_k(ta[:, warm].max(axis=1), rh[:, warm].max(axis=1))
    crust = np.array(
        [
            np.any(state.crust_code[c, : state.layer_count[c]] == CRUST_INDEX["rain"])
            for c in range(ta.shape[0])
        ]
    )
    transition_m = np.interp(-(T_MELT_K + 1.0), -tw, ELEVATIONS_M)  # tw falls with height
    assert ELEVATIONS_M[0] < transition_m < ELEVATIONS_M[-1]
    assert not crust[ELEVATIONS_M > transition_m + 100.0].any()
    assert not crust[tw <= T_MELT_K].any()
    # and the rain left a crust where it rained well (most cells 300 m below the transition)
    assert crust[ELEVATIONS_M < transition_m - 300.0].mean() > 0.5


def test_rain_crust_is_the_wetted_snow_not_the_storm(rain_on_snow_run):
    # a rain crust is the snow the rain wetted and refroze (Jamieson 2006, Rev. Geophys. 44,
    # RG2001 [mem]). Snow is "wet" from 3 % liquid water by volume (Fierz et al. 2009), so R
    # kg m-2 of rain can wet at most R / 30 m of snow: the crust is no thicker
    ta, _, _, (state, diag, _) = rain_on_snow_run
    rain_kg_m2 = diag["rain_kg_m2"].sum(axis=1)
    thick = np.zeros(ta.shape[0])
    for c in range(ta.shape[0]):
        n = state.layer_count[c]
        rain = state.crust_code[c, :n] == CRUST_INDEX["rain"]
        thick[c] = state.thickness_m[c, :n][rain].sum()
        assert thick[c] <= rain_kg_m2[c] / (0.03 * 1000.0), ELEVATIONS_M[c]
    assert (thick > 0).sum() >= 2

"""Wind transport scenarios on a ridge: a west-wind storm loads the lee (east) slope.

Terrain, exposure and wind at the cells come from the package's own terrain chain (a
north-south ridge, the maximum upwind slope of Winstral et al. 2002 and the exposure-scaled
wind), not from values chosen for the transport rules. Expectations are those of field
practice: wind slabs form on lee slopes below ridges while windward slopes are scoured
(McClung & Schaerer, The Avalanche Handbook, common practice), snow moves only above the
threshold of dry snow (Li & Pomeroy 1997, J. Appl. Meteorol. 36) and wet or crusted snow is
not picked up by the wind (Li & Pomeroy 1997: wet snow moved only in rare strong winds [mem]).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest

from regionmap.constants import T_MELT_K
from regionmap.downscale.wind import wind_factor_winstral_sx
from regionmap.snow.codes import CRUST_INDEX, GRAIN_INDEX
from regionmap.snow.column import run_columns
from regionmap.snow.kernel import V_WIND_ERODIBLE
from regionmap.snow.params import SnowParams
from regionmap.snow.state import SnowState
from regionmap.snow.synthetic import hours, make_forcing
from regionmap.snow.wind_transport import erodible_mass_of_columns
from regionmap.terrain.horizon import max_upwind_slope_winstral2002

START = "2026-01-10T00:00"
AREA_M2 = np.array([4.0e5, 4.0e5])  # west slope, east slope


@pytest.fixture(scope="module")
def ridge_sx_deg():
    """Sx for a west wind of the west- and east-facing slopes of a north-south ridge."""
    dx = 25.0
    x = (np.arange(80) - 40) * dx
    z = 2000.0 + 300.0 * np.exp(-((x / 250.0) ** 2))
    dem = np.repeat(z[None, :], 60, axis=0)
    sx = max_upwind_slope_winstral2002(dem, dx, dx, np.array([270.0]), 300.0)[0]
    rows = slice(20, 40)
    west = (x > -400) & (x < -50)
    east = (x > 50) & (x < 400)
    out = np.array([np.nanmean(sx[rows][:, west]), np.nanmean(sx[rows][:, east])])
    assert out[0] < 0 < out[1]  # windward exposed, lee sheltered
    return out


def _forcing(sx_cells, t_air_c, grid_wind_m_s, snow_kg_m2_h, n_h, *, rain_kg_m2_h=0.0):
    t = hours(START, n_h)
    wind = grid_wind_m_s * wind_factor_winstral_sx(sx_cells)[:, None] * np.ones((2, n_h))
    f = make_forcing(
        t,
        2,
        t_air_k=T_MELT_K + np.asarray(t_air_c, dtype=float),
        rh_frac=0.9,
        wind_m_s=wind,
        cloud_frac=1.0,
        precip_kg_m2=snow_kg_m2_h + rain_kg_m2_h,
        snow_frac=0.0 if np.all(snow_kg_m2_h == 0) else 1.0,
    )
    f.sx_deg = np.ascontiguousarray(sx_cells[:, None] * np.ones((2, n_h)))
    return f


def _run(forcing, state=None, params=None):
    state = (
        SnowState.empty(2, time=np.datetime64(START) - np.timedelta64(1, "h"))
        if state is None
        else state
    )
    return run_columns(
        state,
        forcing,
        params or SnowParams(),
        1,
        snapshot_hour_utc=int(forcing.time[-1].astype("datetime64[h]").astype(int) % 24),
        threads=1,
        zones=(np.zeros(2, dtype=np.int64), AREA_M2),
    )


def _sum(d, name):
    return d[name].sum(axis=1)


def test_west_wind_storm_loads_the_east_lee_and_keeps_zone_mass(ridge_sx_deg):
    # a day of snowfall (1.5 kg m-2 h-1) at -8 degC with a 15 m s-1 west wind, then a day
    # of wind without snow
    n = 48
    snow = np.where(np.arange(n) < 24, 1.5, 0.0)
    state, d, snaps = _run(_forcing(ridge_sx_deg, -8.0, 15.0, snow, n))
    swe = d["swe_kg_m2"][:, -1]
    assert swe[1] > swe[0] + 2.0  # the lee gains, the windward side loses
    eroded, deposited = _sum(d, "wind_eroded_kg_m2"), _sum(d, "wind_deposited_kg_m2")
    assert eroded[0] > 0 and deposited[1] > 0 and eroded[1] == 0 and deposited[0] == 0
    # the zone's mass is unchanged by the transport: what one slope lost the other gained
    np.testing.assert_allclose(AREA_M2 @ deposited, AREA_M2 @ eroded, rtol=1e-12)
    assert np.all(_sum(d, "wind_erosion_shortfall_kg_m2") == 0.0)
    budget = _sum(d, "snowfall_kg_m2") - _sum(d, "sublimation_kg_m2") + _sum(d, "deposition_kg_m2")
    budget += deposited - eroded - _sum(d, "runoff_kg_m2")
    np.testing.assert_allclose(swe, budget, atol=1e-6)
    # the lee's deposit is marked wind-packed in its profile, the windward side has none
    used = np.arange(snaps["wind_packed"].shape[2])[None, :] < snaps["layer_count"][:, -1:]
    packed = (snaps["wind_packed"][:, -1] == 1) & used
    assert packed[1].any() and not packed[0].any()
    # and is denser than the same storm's snow on the windward slope (wind-packed snow
    # 350-400 kg m-3 against 100-300 for new and settled snow: Cuffey & Paterson 2010,
    # The Physics of Glaciers, Table 2.1 [mem])
    dens = snaps["ice_kg_m2"][:, -1] / snaps["thickness_m"][:, -1]
    assert dens[1][packed[1]].min() > dens[0][used[0]].max()


def test_calm_snowfall_moves_nothing(ridge_sx_deg):
    # negative control: 2 m s-1 is far below any dry-snow threshold (Li & Pomeroy 1997)
    _, d, snaps = _run(_forcing(ridge_sx_deg, -8.0, 2.0, 1.5, 24))
    assert np.all(_sum(d, "wind_eroded_kg_m2") == 0) and np.all(
        _sum(d, "wind_deposited_kg_m2") == 0
    )
    assert not np.any(snaps["wind_packed"] == 1)


def _settled_pack(ridge_sx_deg):
    """A pack from a calm snowfall, as the start of the wet and crusted controls."""
    state, _, _ = _run(_forcing(ridge_sx_deg, -8.0, 2.0, 1.5, 24))
    return state


def test_strong_wind_on_wet_snow_erodes_nothing(ridge_sx_deg):
    # negative control: six hours of rain at +2 degC wet the surface, then 18 m s-1 west
    # wind at +1 degC without snow: wet snow is not eroded
    state = _settled_pack(ridge_sx_deg)
    n = 30
    t_air = np.where(np.arange(n) < 6, 2.0, 1.0)
    rain = np.where(np.arange(n) < 6, 1.0, 0.0)
    f = _forcing(ridge_sx_deg, t_air, 18.0, 0.0, n, rain_kg_m2_h=rain)
    f.time = f.time + (state.time - f.time[0] + np.timedelta64(1, "h"))
    _, d, _ = _run(f, state)
    assert np.all(_sum(d, "wind_eroded_kg_m2") == 0) and np.all(
        _sum(d, "wind_deposited_kg_m2") == 0
    )


def test_strong_wind_on_a_crust_erodes_nothing(ridge_sx_deg):
    # negative control: the surface layer is a melt-freeze crust; a cold 18 m s-1 wind
    # without snow takes nothing, even when erosion is asked of the column directly
    state = _settled_pack(ridge_sx_deg)
    top = state.counters[:, 0] - 1
    cells = np.arange(2)
    state.crust_code[cells, top] = CRUST_INDEX["melt-freeze"]
    state.grain_code[cells, top] = GRAIN_INDEX["MFcr"]
    # the transport's bucket of erodible snow as a restart from this profile would set it
    state.surface[:, V_WIND_ERODIBLE] = erodible_mass_of_columns(
        state.liquid_kg_m2, state.ice_kg_m2, state.crust_code, state.grain_code, top + 1
    )
    assert np.all(state.surface[:, V_WIND_ERODIBLE] == 0)
    f = _forcing(ridge_sx_deg, -10.0, 18.0, 0.0, 24)
    f.time = f.time + (state.time - f.time[0] + np.timedelta64(1, "h"))
    _, d, _ = _run(f, state)
    assert np.all(_sum(d, "wind_eroded_kg_m2") == 0)
    assert np.all(_sum(d, "wind_deposited_kg_m2") == 0)
    asked = dataclasses.replace(f, wind_transport_kg_m2=np.full((2, 24), -0.5))
    _, d, _ = _run(asked, state)
    assert np.all(_sum(d, "wind_eroded_kg_m2") == 0)
    np.testing.assert_allclose(_sum(d, "wind_erosion_shortfall_kg_m2"), 12.0)


def test_transport_off_moves_nothing(ridge_sx_deg):
    # the setting that turns it off
    off = SnowParams(wind_transport=False)
    _, d, _ = _run(_forcing(ridge_sx_deg, -8.0, 15.0, 1.5, 24), params=off)
    assert np.all(_sum(d, "wind_eroded_kg_m2") == 0) and np.all(
        _sum(d, "wind_deposited_kg_m2") == 0
    )


def test_a_run_split_in_two_gives_the_same_transport(ridge_sx_deg):
    # the erodible snow travels with the state, so where a run is split (analysis and
    # forecast parts, restarts, saved states) does not change the transport
    n = 48
    snow = np.where(np.arange(n) < 24, 1.5, 0.0)
    f = _forcing(ridge_sx_deg, -8.0, 15.0, snow, n)
    whole, d_whole, _ = _run(f)
    half, d1, _ = _run(f.subset(steps=slice(0, 30)))
    end, d2, _ = _run(f.subset(steps=slice(30, None)), half)
    for name in ("wind_eroded_kg_m2", "wind_deposited_kg_m2", "swe_kg_m2"):
        np.testing.assert_array_equal(np.hstack([d1[name], d2[name]]), d_whole[name], err_msg=name)
    np.testing.assert_array_equal(end.surface, whole.surface)

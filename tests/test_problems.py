"""Avalanche-problem indicators: the wet-snow index against its source, the wind-slab logic on
hand-made profiles that carry the wind-deposition flag, and scenarios of the snow column with
designed weather (each with negative controls).

The scenarios are designed from the weather a practitioner would expect to produce each
problem (common practice, e.g. McClung & Schaerer, The Avalanche Handbook; the problem
definitions of Statham et al. 2018, Natural Hazards 90, doi:10.1007/s11069-017-3070-5), not
from the indicators' own thresholds.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import xarray as xr

from regionmap.constants import T_MELT_K
from regionmap.products.problems import (
    PROBLEMS,
    cell_problems,
    likelihood_class,
    lwc_index_mitterer2011,
    problem_flags,
    problem_sentences,
    problem_table,
    skier_reach,
    skier_shear_stress_fohn1987,
)
from regionmap.snow.codes import GRAIN_INDEX
from regionmap.snow.column import run_columns, snapshots_to_dataset
from regionmap.snow.params import SnowParams
from regionmap.snow.state import SnowState
from regionmap.snow.synthetic import clear_sky_shortwave, diurnal_temperature, hours, make_forcing

START = "2025-11-01T00:00"


# ------------------------------------------------------------------ helpers
def _table(n: int, slope_deg: float = 38.0) -> pd.DataFrame:
    return pd.DataFrame(
        {
            "zone": "Invented Zone",
            "band_lower_m": 2000.0,
            "band_upper_m": 2300.0,
            "aspect_sector": ["N", "E", "S", "W"][:n] if n <= 4 else "N",
            "slope_deg": slope_deg,
        },
        index=pd.RangeIndex(n, name="cell_id"),
    )


def _run_datasets(diag: dict, snaps: dict, n: int) -> tuple[xr.Dataset, xr.Dataset]:
    """cells.nc and profiles.nc content from a :func:`run_columns` result."""
    ids = np.arange(n)
    t = diag["time"]
    cells = xr.Dataset(
        coords={"cell_id": (("cell",), ids), "time": (("time",), t.astype("datetime64[ns]"))}
    )
    for name, v in diag.items():
        if isinstance(v, np.ndarray) and v.shape == (n, t.size):
            cells[name] = (("cell", "time"), v)
    prof = snapshots_to_dataset(snaps, ids).swap_dims({"day": "time"}).rename({"time": "day"})
    return cells, prof


def _problem(frame: pd.DataFrame, cell: int, problem: str) -> pd.Series:
    rows = frame[(frame["cell_id"] == cell) & (frame["problem"] == problem)]
    assert len(rows) == 1
    return rows.iloc[0]


# ------------------------------------------------------------------ reference: LWC index
def test_lwc_index_reference_mitterer2011():
    # Mitterer, Hirashima & Schweizer (2011), Ann. Glaciol. 52(58), 201-208,
    # doi:10.3189/172756411797252077: the index is the column's mean volumetric liquid water
    # content over 3 %, and 1 marks the onset of wet-snow activity (recalled from memory).
    # A 1 m column holding 30 kg m-2 of water: 0.030 m of water in 1 m = 3 % -> index 1.
    one_m = np.array([[0.4, 0.3, 0.3]])
    assert lwc_index_mitterer2011(np.array([[12.0, 9.0, 9.0]]), one_m)[0] == pytest.approx(1.0)
    # thickness-weighted mean, not the mean of layer contents: all water in a thin layer
    # (0.2 m at 7.5 % by volume, 'wet' class of Fierz et al. 2009) of a 1 m column -> 1.5 % -> 0.5
    two = np.array([[0.8, 0.2]])
    assert lwc_index_mitterer2011(np.array([[0.0, 15.0]]), two)[0] == pytest.approx(0.5)
    # dry snow -> 0; no snow -> undefined (NaN), not 0
    assert lwc_index_mitterer2011(np.zeros((1, 2)), two)[0] == 0.0
    assert np.isnan(lwc_index_mitterer2011(np.zeros((1, 2)), np.zeros((1, 2)))[0])


def test_likelihood_classes_are_the_conceptual_model_terms():
    # the terms of Statham et al. (2018); the cut points are ours (docs/outputs.md)
    got = likelihood_class([0.0, 0.2, 0.45, 0.9, np.nan])
    assert list(got) == ["unlikely", "possible", "likely", "very likely", ""]


# ------------------------------------------------------------------ wind slab on hand-made profiles
MAP_TIME = np.datetime64("2026-01-20T06:00", "s")


def _synthetic_run(layers: list[list[tuple]], *, wind_flag: bool):
    """cells.nc / profiles.nc of hand-made columns at MAP_TIME. Each layer (bottom first):
    (grain, thickness_m, density_kg_m3, grain_mm, hardness, age_days, wind_packed)."""
    n = len(layers)
    width = max(len(c) for c in layers)
    shape = (n, 1, width)
    field = {k: np.zeros(shape) for k in ("th", "ice", "gs", "hh", "dep", "wp")}
    grain = np.full(shape, "", dtype=object)
    crust = np.full(shape, "", dtype=object)
    t_s = MAP_TIME.astype(np.int64)
    for c, col in enumerate(layers):
        for k, (g, th, rho, gs, hh, age_d, wp) in enumerate(col):
            field["th"][c, 0, k] = th
            field["ice"][c, 0, k] = th * rho
            field["gs"][c, 0, k] = gs
            field["hh"][c, 0, k] = hh
            field["dep"][c, 0, k] = t_s - age_d * 86400
            field["wp"][c, 0, k] = wp
            grain[c, 0, k] = g
            crust[c, 0, k] = "none"
    dims = ("cell", "day", "layer")
    prof = xr.Dataset(
        {
            "layer_count": (("cell", "day"), np.array([[len(c)] for c in layers])),
            "thickness_m": (dims, field["th"]),
            "ice_kg_m2": (dims, field["ice"]),
            "liquid_kg_m2": (dims, np.zeros(shape)),
            "grain_size_mm": (dims, field["gs"]),
            "hardness_index": (dims, field["hh"]),
            "grain_class": (dims, grain.astype(str)),
            "crust_kind": (dims, crust.astype(str)),
            "deposition_time": (dims, field["dep"].astype(np.int64)),
            "formation_time": (dims, field["dep"].astype(np.int64)),
            "event_id": (dims, np.full(shape, -1)),
        },
        coords={"cell_id": (("cell",), np.arange(n)), "day": (("day",), [MAP_TIME])},
    )
    if wind_flag:
        prof["wind_packed"] = (dims, field["wp"].astype(np.uint8))
    times = MAP_TIME - np.arange(96, -1, -1) * np.timedelta64(3600, "s")
    zeros = np.zeros((n, times.size))
    depth = np.array([sum(layer[1] for layer in col) for col in layers]) * 100.0
    cells = xr.Dataset(
        {
            "snowfall_kg_m2": (("cell", "time"), zeros),
            "new_snow_72h_cm": (("cell", "time"), zeros),
            "snow_depth_cm": (("cell", "time"), np.repeat(depth[:, None], times.size, axis=1)),
        },
        coords={"cell_id": (("cell",), np.arange(n)), "time": (("time",), times)},
    )
    return cells, prof


OLD_BASE = [("RG", 0.6, 300.0, 0.5, 4.0, 40, 0)]
#: a buried surface hoar layer: persistent grains, soft, coarse (Fierz et al. 2009)
HOAR = ("SH", 0.01, 100.0, 6.0, 1.0, 10, 0)
#: the rounded old surface of a settled pack, no weakness
ROUNDED = ("RG", 0.05, 280.0, 0.5, 3.5, 10, 0)


def _wind_slab(age_days: float, wind_packed: int, thick_m: float = 0.30):
    """A dense, fine-grained, harder slab (wind-packed snow: 4F-1F, Fierz et al. 2009)."""
    return [("RG", thick_m / 3, 300.0, 0.3, 3.0, age_days, wind_packed)] * 3


def test_wind_slab_over_buried_surface_hoar_and_controls():
    cells, prof = _synthetic_run(
        [
            OLD_BASE + [HOAR] + _wind_slab(2, 1),  # fresh wind slab on surface hoar
            OLD_BASE + [HOAR] + _wind_slab(2, 0),  # control: same slab, not wind-deposited
            OLD_BASE + [ROUNDED] + _wind_slab(2, 1),  # control: wind slab, no weak interface
            OLD_BASE + [HOAR] + _wind_slab(20, 1),  # control: a wind slab three weeks old
            OLD_BASE + [HOAR] + _wind_slab(2, 1, thick_m=0.06),  # control: 6 cm, no slab
        ],
        wind_flag=True,
    )
    got = cell_problems(cells, prof, _table(5), [MAP_TIME])
    present = [bool(_problem(got, c, "wind_slab")["present"]) for c in range(5)]
    assert present == [True, False, False, False, False]
    first = _problem(got, 0, "wind_slab")
    assert first["assessed"]
    assert first["depth_cm"] == pytest.approx(30.0)  # the interface under the 30 cm slab


def test_wind_slab_not_assessed_without_the_flag_and_said_so():
    cells, prof = _synthetic_run([OLD_BASE + [HOAR] + _wind_slab(2, 1)], wind_flag=False)
    table = _table(1)
    got = cell_problems(cells, prof, table, [MAP_TIME])
    row = _problem(got, 0, "wind_slab")
    assert not row["assessed"] and not row["present"]
    summary = problem_table(got, table, np.ones(1))
    wind = summary[summary["problem"] == "wind_slab"]
    assert len(wind) == 2  # the group and the zone-wide row: present, never silently absent
    assert (wind["likelihood_class"] == "not assessed").all()
    assert wind["present_frac"].isna().all()
    assert wind["note"].str.contains("wind_packed").all()
    assert "wind slab not assessed" in problem_sentences(summary)["Invented Zone"]
    flags = problem_flags(got)  # the cells layer's columns: empty, not 0, when not assessed
    assert np.isnan(flags.loc[0, "wind_slab_present"])
    assert flags.loc[0, "persistent_slab_present"] in (0.0, 1.0)
    # every problem has its rows
    assert set(summary["problem"]) == set(PROBLEMS)


# ------------------------------------------------------------------ scenarios of the column
def _run(forcing, n_cells, snapshot_hour_utc=None):
    state = SnowState.empty(n_cells, time=START)
    state, diag, snaps = run_columns(
        state, forcing, SnowParams(), diag_every_h=1, snapshot_hour_utc=snapshot_hour_utc
    )
    cells, prof = _run_datasets(diag, snaps, n_cells)
    return state, cells, prof


@pytest.fixture(scope="module")
def buried_depth_hoar_run():
    """Early snow, four weeks of cold clear weather (basal facets and depth hoar in a shallow
    shaded pack), then four days of storm snow and a week of cloudy cold weather. Cells: a
    big burial (360 kg m-2, over a metre of snow) and a small one (55 kg m-2)."""
    n_early, n_cold, n_bury, n_after = 48, 24 * 28, 24 * 4, 24 * 7
    nt = n_early + n_cold + n_bury + n_after
    t = hours(START, nt)
    i = np.arange(nt)
    bury = (i >= n_early + n_cold) & (i < n_early + n_cold + n_bury)
    after = i >= n_early + n_cold + n_bury
    ta = diurnal_temperature(t, -12.0, 5.0)
    ta[:n_early] = T_MELT_K - 3.0
    ta = np.where(bury, T_MELT_K - 5.0, ta)
    ta = np.where(after, diurnal_temperature(t, -8.0, 3.0), ta)
    pr = np.zeros((2, nt))
    pr[:, :n_early] = 40.0 / n_early
    pr[0, bury] = 360.0 / n_bury
    pr[1, bury] = 55.0 / n_bury
    f = make_forcing(
        t,
        2,
        t_air_k=ta,
        rh_frac=0.7,
        wind_m_s=1.5,
        sw_in_w_m2=clear_sky_shortwave(t, 120.0),
        cloud_frac=np.where((i < n_early) | bury | after, 1.0, 0.0),
        precip_kg_m2=pr,
        snow_frac=1.0,
    )
    state, cells, prof = _run(f, 2)
    return state, cells, prof, t[-1]


def test_deep_persistent_slab_under_a_metre_not_under_40_cm(buried_depth_hoar_run):
    state, cells, prof, end = buried_depth_hoar_run
    got = cell_problems(cells, prof, _table(2), [end])
    depth_cm = cells["snow_depth_cm"].values[:, -1]
    # the designed burials: over a metre of snow in one cell, about 35 cm in the other
    assert depth_cm[0] > 110.0 and 25.0 < depth_cm[1] < 45.0
    dh = GRAIN_INDEX["DH"]
    for c in range(2):
        assert dh in state.grain_code[c, : state.layer_count[c]]  # basal depth hoar formed
    # common practice (Statham et al. 2018: deep persistent slabs release on depth hoar or
    # facets near the base, under a thick slab; skier triggering is rare below about 1 m,
    # Schweizer & Jamieson 2007's depth window): deep persistent slab under the metre of snow
    deep = _problem(got, 0, "deep_persistent_slab")
    assert deep["present"] and deep["depth_cm"] > 94.0
    # ... and the weak layer it names lies over the basal depth hoar
    n = state.layer_count[0]
    top_of_dh = np.cumsum(state.thickness_m[0, :n][::-1])[::-1] * 100.0
    assert top_of_dh[state.grain_code[0, :n] == dh].min() >= deep["depth_cm"] - 1.0
    # negative control: the same faceted base under ~35 cm is a persistent slab, not a deep one
    assert not _problem(got, 1, "deep_persistent_slab")["present"]
    shallow = _problem(got, 1, "persistent_slab")
    assert shallow["present"] and shallow["depth_cm"] < 45.0
    # negative controls: a week after the storm, in cold weather: no new snow, no wet snow
    for c in range(2):
        assert not _problem(got, c, "new_snow")["present"]
        assert not _problem(got, c, "wet_snow")["present"]


@pytest.fixture(scope="module")
def storm_then_clear_run():
    """A storm of 40 kg m-2 over 36 h at -6 degC on a settled base, then two weeks of
    clear, cold weather. One cell."""
    n_base, n_settle, n_storm, n_clear = 24, 24 * 5, 36, 24 * 14
    nt = n_base + n_settle + n_storm + n_clear
    t = hours(START, nt)
    i = np.arange(nt)
    storm = (i >= n_base + n_settle) & (i < n_base + n_settle + n_storm)
    clear = i >= n_base + n_settle + n_storm
    pr = np.where(i < n_base, 60.0 / n_base, 0.0) + np.where(storm, 40.0 / n_storm, 0.0)
    ta = np.where(clear, diurnal_temperature(t, -10.0, 5.0), T_MELT_K - 6.0)
    f = make_forcing(
        t,
        1,
        t_air_k=ta,
        rh_frac=np.where(clear, 0.6, 0.9),
        wind_m_s=2.0,
        sw_in_w_m2=np.where(clear, clear_sky_shortwave(t, 300.0), 0.0),
        cloud_frac=np.where(clear, 0.0, 1.0),
        precip_kg_m2=pr,
        snow_frac=1.0,
    )
    state, cells, prof = _run(f, 1)
    # the morning after the storm ends, and the end of the two clear weeks
    after_storm = t[n_base + n_settle + n_storm + 6]
    return cells, prof, after_storm, t[-1]


def test_new_snow_problem_after_a_storm_not_after_two_clear_weeks(storm_then_clear_run):
    cells, prof, after_storm, end = storm_then_clear_run
    # the profile snapshots are daily at the hour of the last step; use those hours
    day_hours = prof["day"].values.astype("datetime64[s]")
    t_storm = day_hours[day_hours >= after_storm][0]
    got = cell_problems(cells, prof, _table(1), [t_storm, end])
    first = got[got["valid_time"] == t_storm]
    last = got[got["valid_time"] == end]
    hn72 = cells["new_snow_72h_cm"].sel(time=t_storm).values[0]
    # 40 kg m-2 of cold storm snow is 40-55 cm fresh (new-snow densities of 70-100 kg m-3,
    # Hedstrom & Pomeroy 1998), settling by 10-30 % in a day (common practice): at least the
    # 30 cm of new snow that practitioners treat as critical even on a good bond
    assert hn72 >= 30.0
    assert _problem(first, 0, "new_snow")["present"]
    # negative control: after two clear weeks there is no new snow problem
    assert not _problem(last, 0, "new_snow")["present"]
    # negative controls: cold, dry throughout: no wet snow at either time
    assert not _problem(first, 0, "wet_snow")["present"]
    assert not _problem(last, 0, "wet_snow")["present"]


@pytest.fixture(scope="module")
def cold_spell_and_warm_up_run():
    """A 1 m pack; three weeks of cold mid-winter weather, then (second cell only) four days
    of spring warm-up: air at +4 degC on average, strong sun. Snapshots at 15 UTC, the
    afternoon of the designed days."""
    n_base, n_cold, n_warm = 48, 24 * 21, 24 * 4
    nt = n_base + n_cold + n_warm
    t = hours(START, nt)
    i = np.arange(nt)
    warm = (i >= n_base + n_cold) & (np.arange(2)[:, None] == 1)
    ta = np.where(warm, diurnal_temperature(t, 4.0, 5.0), diurnal_temperature(t, -10.0, 4.0))
    ta[:, :n_base] = T_MELT_K - 4.0
    sw = np.where(warm, clear_sky_shortwave(t, 700.0), clear_sky_shortwave(t, 250.0))
    f = make_forcing(
        t,
        2,
        t_air_k=ta,
        rh_frac=0.7,
        wind_m_s=2.0,
        sw_in_w_m2=sw,
        cloud_frac=np.where(i < n_base, 1.0, 0.2),
        precip_kg_m2=np.where(i < n_base, 250.0 / n_base, 0.0),
        snow_frac=1.0,
    )
    state, cells, prof = _run(f, 2, snapshot_hour_utc=15)
    days = prof["day"].values.astype("datetime64[s]")
    return cells, prof, days[days <= t[n_base + n_cold - 1]][-1], days[-1]


def test_no_wet_snow_in_a_cold_spell_but_after_a_warm_up(cold_spell_and_warm_up_run):
    cells, prof, t_cold, t_warm = cold_spell_and_warm_up_run
    got = cell_problems(cells, prof, _table(2), [t_cold, t_warm]).set_index(
        ["valid_time", "cell_id", "problem"]
    )
    # negative control: mid-winter cold spell -> dry snow, no wet-snow problem; the cold cell
    # stays dry to the end
    for t, c in ((t_cold, 0), (t_cold, 1), (t_warm, 0)):
        assert not got.loc[(t, c, "wet_snow"), "present"]
        assert cells["liquid_water_kg_m2"].sel(time=t).values[c] == 0.0
    # four warm, sunny days make the pack isothermal and wet: wet-snow avalanches are the
    # expected spring problem (common practice)
    assert got.loc[(t_warm, 1, "wet_snow"), "present"]
    # no slab problems in a pack without persistent grains (negative control)
    for problem in ("persistent_slab", "deep_persistent_slab", "new_snow"):
        assert not got.loc[(t_warm, 1, problem), "present"]


# ------------------------------------------------------------------ reference: skier stress
@pytest.mark.parametrize("slope_deg", [0.0, 38.0])
@pytest.mark.parametrize("depth_m", [0.3, 0.94, 1.5])
def test_skier_shear_stress_fohn1987_is_flamants_line_load(slope_deg, depth_m):
    # Analytic oracle: Flamant's solution for a line load P on an elastic half-space
    # (Timoshenko & Goodier, Theory of Elasticity, 3rd ed. 1970, §36): purely radial stress
    # sigma_r = -2 P cos(theta - beta) / (pi r), beta the load's angle from the surface
    # normal (a skier's weight on a slope of psi: beta = psi). Shear on planes parallel to
    # the surface at depth D: sigma_r sin(theta) cos(theta) with r = D / cos(theta).
    p = 780.0
    theta = np.deg2rad(np.linspace(-89.99, 89.99, 200_001))
    psi = np.deg2rad(slope_deg)
    r = depth_m / np.cos(theta)
    tau = 2 * p * np.cos(theta - psi) / (np.pi * r) * np.sin(theta) * np.cos(theta)
    assert skier_shear_stress_fohn1987(depth_m, slope_deg) == pytest.approx(
        np.abs(tau).max(), rel=1e-4
    )


def test_skier_reach_falls_as_one_over_depth_below_the_window():
    # the 1/D decay of the line-load stress above (Foehn 1987), relative to 0.94 m, the deep
    # end of the critical depth window of Schweizer & Jamieson (2007) [recalled from memory]
    got = skier_reach(np.array([20.0, 94.0, 188.0]))
    assert got == pytest.approx([1.0, 1.0, 0.5])
    ratio = skier_shear_stress_fohn1987(1.88, 38.0) / skier_shear_stress_fohn1987(0.94, 38.0)
    assert got[2] == pytest.approx(ratio, rel=1e-9)

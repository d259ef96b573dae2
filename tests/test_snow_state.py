"""Snow state: continuation bit for bit, state.nc round trip, block independence, input errors."""

from __future__ import annotations

from dataclasses import fields

import numpy as np
import pytest

from regionmap.errors import GridMismatchError, InputError
from regionmap.snow.column import run_columns, snapshots_to_dataset
from regionmap.snow.params import SnowParams
from regionmap.snow.state import SnowState
from regionmap.snow.synthetic import season_forcing

START = "2025-11-01T00:00"


@pytest.fixture(scope="module")
def forcing():
    return season_forcing(6, start=START, days=40, seed=3)


def _arrays(state):
    return {
        f.name: getattr(state, f.name)
        for f in fields(state)
        if isinstance(getattr(state, f.name), np.ndarray)
    }


def _assert_same_state(a, b):
    for name, x in _arrays(a).items():
        y = getattr(b, name)
        assert x.dtype == y.dtype, name
        assert np.array_equal(x, y, equal_nan=True), name
    assert a.time == b.time


def test_continuation_a_to_c_equals_a_to_b_to_c(forcing, tmp_path):
    # a run from A to C equals A -> B, saved, restored, then B -> C, bit for bit
    s0 = SnowState.empty(forcing.n_cells, time=START)
    full, d_full, _ = run_columns(s0, forcing, diag_every_h=24)
    k = 24 * 23 + 7  # B mid-day, in the middle of the weather
    mid, _, _ = run_columns(s0, forcing.subset(steps=slice(0, k)), diag_every_h=1)
    path = mid.save(tmp_path / "state.nc")
    restored = SnowState.load(path)
    _assert_same_state(mid, restored)
    end, d_end, _ = run_columns(restored, forcing.subset(steps=slice(k, None)), diag_every_h=1)
    _assert_same_state(full, end)
    # the diagnostics after B agree too (daily values at the same times)
    i = np.nonzero(d_full["time"] > mid.time)[0]
    j = np.searchsorted(d_end["time"], d_full["time"][i])
    for name in ("snow_depth_cm", "swe_kg_m2", "new_snow_72h_cm", "threshold_count_max"):
        assert np.array_equal(d_full[name][:, i], d_end[name][:, j], equal_nan=True), name


def test_results_do_not_depend_on_blocks_or_threads(forcing):
    s0 = SnowState.empty(forcing.n_cells, time=START)
    sub = forcing.subset(steps=slice(0, 24 * 20))
    a, da, _ = run_columns(s0, sub, threads=1, block_cells=64)
    b, db, _ = run_columns(s0, sub, threads=2, block_cells=1)
    _assert_same_state(a, b)
    for name in da:
        if isinstance(da[name], np.ndarray) and da[name].dtype != object:
            assert np.array_equal(da[name], db[name], equal_nan=True), name


def test_state_dataset_layout_and_size(forcing):
    s0 = SnowState.empty(forcing.n_cells, time=START)
    s, _, snap = run_columns(s0, forcing.subset(steps=slice(0, 24 * 30)))
    ds = s.to_dataset()
    # state.nc names and types (docs/outputs.md)
    for name in (
        "thickness_m",
        "ice_kg_m2",
        "liquid_kg_m2",
        "temperature_k",
        "grain_size_mm",
        "hardness_index",
        "grain_class",
        "crust_kind",
        "deposition_time",
        "event_id",
        "layer_count",
        "albedo",
        "snow_age_h",
        "cell_id",
    ):
        assert name in ds.variables, name
    assert ds["ice_kg_m2"].dtype == np.float64 and ds["liquid_kg_m2"].dtype == np.float64
    # whole seconds since 1970 as float64 (CF-1.8 has no 64-bit integers), NaN where unused
    dep = ds["deposition_time"].values
    assert dep.dtype == np.float64
    n_used = int(ds["layer_count"][0])
    assert (dep[0, :n_used] == np.round(dep[0, :n_used])).all() and np.isnan(dep[0, n_used:]).all()
    n = int(ds["layer_count"][0])
    assert n > 0
    assert all(
        str(c) in ("PP", "DF", "RG", "RGxf", "FC", "FCxr", "FCsf", "DH", "SH", "MF", "MFcr", "IF")
        for c in ds["grain_class"].values[0, :n]
    )
    assert all(str(c) == "" for c in ds["grain_class"].values[0, n:])
    assert ds["time"].values == np.datetime64(s.time, "ns")
    prof = snapshots_to_dataset(snap, s.cell_id)
    assert prof.sizes["day"] == 30 and "formation_time" in prof
    # target: state <= 2 KB per cell (we report the figure; 50 layers)
    assert s.nbytes_per_cell() < 3500


def test_mismatched_state_and_forcing_raise_one_clear_error(forcing):
    s0 = SnowState.empty(forcing.n_cells + 1, time=START)
    with pytest.raises(GridMismatchError, match="cells"):
        run_columns(s0, forcing)
    s0 = SnowState.empty(forcing.n_cells, 40, time=START)
    with pytest.raises(InputError, match="max_layers"):
        run_columns(s0, forcing)
    s0 = SnowState.empty(forcing.n_cells, time=START)
    with pytest.raises(InputError, match="diag_every_h"):
        run_columns(s0, forcing.subset(steps=slice(0, 25)), diag_every_h=24)


def test_non_finite_forcing_is_refused(forcing):
    f = forcing.subset(steps=slice(0, 24))
    f.wind_m_s[2, 5] = np.nan
    with pytest.raises(InputError, match="wind_m_s has 1 non-finite"):
        run_columns(SnowState.empty(f.n_cells, time=START), f)


def test_continuation_from_wrong_time_is_refused(forcing):
    s0 = SnowState.empty(forcing.n_cells, time=START)
    s, _, _ = run_columns(s0, forcing.subset(steps=slice(0, 48)))
    with pytest.raises(InputError, match="valid at"):
        run_columns(s, forcing.subset(steps=slice(72, 96)))


def test_load_rejects_a_foreign_file(tmp_path):
    import xarray as xr

    p = tmp_path / "other.nc"
    xr.Dataset({"x": ("a", np.arange(3))}).to_netcdf(p)
    with pytest.raises(InputError, match="not a regionmap snow state"):
        SnowState.load(p)
    with pytest.raises(InputError, match="not found"):
        SnowState.load(tmp_path / "missing.nc")


def test_params_reject_bad_values():
    from regionmap.errors import ConfigError

    with pytest.raises(ConfigError, match="max_layers"):
        SnowParams(max_layers=500)
    with pytest.raises(ConfigError, match="conductivity_model"):
        SnowParams(conductivity_model="other")


def _one_layer_state_file(tmp_path, **changes):
    """state.nc of two cells with one 10 cm layer each, with ``changes`` to its variables."""

    s = SnowState.empty(2, time=START)
    s.counters[:, 0] = 1
    s.thickness_m[:, 0] = 0.1
    s.ice_kg_m2[:, 0] = 20.0
    s.temperature_k[:, 0] = 265.0
    s.grain_size_mm[:, 0] = 0.3
    ds = s.to_dataset()
    for name, value in changes.items():
        if name == "time":
            ds = ds.assign_coords(time=("t", np.array(value, dtype="datetime64[ns]")))
        else:
            data = ds[name].values.copy()
            data[(1, 0) if data.ndim == 2 else 1] = value
            ds[name] = (ds[name].dims, data, ds[name].attrs)
    path = tmp_path / "state.nc"
    ds.to_netcdf(path)
    return path


@pytest.mark.parametrize(
    "changes, expect",
    [
        ({}, None),
        ({"temperature_k": np.nan}, "variable temperature_k of cell_id 1 layer 0 is nan K"),
        ({"temperature_k": 290.0}, "temperature_k of cell_id 1 layer 0 is 290 K"),
        ({"thickness_m": -0.1}, "thickness_m of cell_id 1 layer 0 is -0.1 m"),
        ({"ice_kg_m2": 1e9}, "ice_kg_m2 of cell_id 1 layer 0 is 1e+09 kg m-2"),
        ({"ice_kg_m2": 500.0}, "layer 0 of cell_id 1 has a density of 5000 kg m-3"),
        ({"soil_temperature_k": np.inf}, "soil_temperature_k of cell_id 1 is inf K"),
        ({"time": ["2026-01-01", "2026-01-02"]}, "variable time must be one valid time"),
    ],
)
def test_load_refuses_impossible_contents(tmp_path, changes, expect):
    # physical bounds: snow is never above its melting point (273.15 K) and a layer's
    # density lies below water's 1000 kg m-3 (common knowledge, not a fitted value)
    path = _one_layer_state_file(tmp_path, **changes)
    if expect is None:
        assert SnowState.load(path).layer_count.tolist() == [1, 1]
        return
    with pytest.raises(InputError) as info:
        SnowState.load(path)
    assert expect in str(info.value) and str(path) in str(info.value)


def test_take_and_put_round_trip_cells_and_named_cell_values(forcing):
    # take/put are copies by position; put back into a fresh state the parts rebuild the whole
    params = SnowParams(max_layers=20)
    state = SnowState.empty(6, params.max_layers, time=np.datetime64(START, "s"))
    stepped, _, _ = run_columns(state, forcing, params, 24, threads=1)
    part = stepped.take([1, 4])
    assert part.n_cells == 2 and np.array_equal(part.cell_id, stepped.cell_id[[1, 4]])
    part.thickness_m[:] = 0  # a copy, not a view
    assert stepped.thickness_m[1].any()
    whole = SnowState.empty(6, params.max_layers, time=np.datetime64(START, "s"))
    for lo, hi in ((0, 2), (2, 6)):
        whole.put(lo, hi, stepped.take(slice(lo, hi)))
    _assert_same_state(whole, stepped)
    # named per-cell values address the same numbers as state.nc does
    ds = stepped.to_dataset()
    for name in ("albedo", "surface_hoar_kg_m2", "rain_event_id", "layer_count"):
        assert np.array_equal(stepped.cell_value(name), ds[name].values), name
    stepped.set_cell_values([0, 2], albedo=0.6, layer_count=0)
    assert stepped.cell_value("albedo")[[0, 2]].tolist() == [0.6, 0.6]
    assert stepped.layer_count[[0, 2]].tolist() == [0, 0]
    with pytest.raises(KeyError, match="not a per-cell state value"):
        stepped.cell_value("thickness_m")

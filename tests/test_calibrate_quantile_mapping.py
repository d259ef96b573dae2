"""Empirical quantile mapping: properties from its definition, and the table file.

Properties follow from the definition x' = F_obs^-1(F_model(x)) (Panofsky & Brier 1968;
Themessl et al. 2011, Int. J. Climatol. 31, doi:10.1002/joc.2168; Gudmundsson et al. 2012,
HESS 16, doi:10.5194/hess-16-3383-2012): identity on identical samples, exact recovery of a
shift (additive) or a scale (multiplicative), monotone non-decreasing mapping, constant
correction outside the training range. Samples are random (invented).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from regionmap.downscale.quantile_mapping import (
    FORMAT_NAME,
    MIN_SAMPLES_PER_MONTH,
    apply_quantile_mapping,
    fit_quantile_mapping,
    month_index_of,
    read_qm_table,
    select_qm_table,
    write_qm_table,
)
from regionmap.errors import InputError, OutputError

seeds = st.integers(min_value=0, max_value=2**31 - 1)


def _temperature_sample(seed, n=1500):
    rng = np.random.default_rng(seed)
    month = rng.integers(0, 12, n)
    t = 265.0 + 8.0 * np.cos(2 * np.pi * month / 12) + rng.normal(0, 4, n)
    return t, month


def _precip_sample(seed, n=3000):
    rng = np.random.default_rng(seed)
    month = rng.integers(0, 3, n)  # three months only: the others are pooled
    wet = rng.random(n) < 0.35
    p = np.where(wet, rng.gamma(0.8, 2.0, n), 0.0)
    return p, month


@settings(deadline=None, max_examples=25)
@given(seed=seeds)
def test_identity_on_identical_samples_additive(seed):
    t, month = _temperature_sample(seed)
    table = fit_quantile_mapping(t, t, month, "additive", variable="air_temperature")
    np.testing.assert_allclose(apply_quantile_mapping(t, month, table), t, rtol=0, atol=1e-9)


@settings(deadline=None, max_examples=25)
@given(seed=seeds)
def test_identity_on_identical_samples_multiplicative_above_wet_threshold(seed):
    p, month = _precip_sample(seed)
    table = fit_quantile_mapping(
        p, p, month, "multiplicative", variable="precipitation", wet_threshold=0.1
    )
    out = apply_quantile_mapping(p, month, table)
    wet = p > 0.1
    np.testing.assert_allclose(out[wet], p[wet], rtol=1e-12, atol=1e-12)
    # wet-day adaptation with the observed threshold: values at or below it become dry
    assert np.all(out[~wet] == 0.0)


@settings(deadline=None, max_examples=25)
@given(seed=seeds, shift=st.floats(min_value=-10.0, max_value=10.0))
def test_exact_shift_recovered_additive(seed, shift):
    t, month = _temperature_sample(seed)
    table = fit_quantile_mapping(t, t + shift, month, "additive", variable="air_temperature")
    # inside and outside the training range (constant correction beyond the ends)
    probe = np.concatenate([t, [t.min() - 20.0, t.max() + 20.0]])
    probe_month = np.concatenate([month, [0, 11]])
    np.testing.assert_allclose(
        apply_quantile_mapping(probe, probe_month, table), probe + shift, atol=1e-9
    )


@settings(deadline=None, max_examples=25)
@given(seed=seeds, factor=st.floats(min_value=0.3, max_value=3.0))
def test_exact_scale_recovered_multiplicative(seed, factor):
    p, month = _precip_sample(seed)
    obs = p * factor
    table = fit_quantile_mapping(
        p, obs, month, "multiplicative", variable="precipitation", wet_threshold=0.1
    )
    out = apply_quantile_mapping(p, month, table)
    wet_obs = obs > 0.1
    np.testing.assert_allclose(out[wet_obs], obs[wet_obs], rtol=1e-9)
    # wet frequency matches the observed one (Gudmundsson et al. 2012, frequency adaptation)
    assert np.mean(out > 0) == pytest.approx(np.mean(wet_obs), abs=1e-12)
    # beyond the training maximum the factor stays constant
    big = apply_quantile_mapping(np.array([p.max() * 10]), np.array([0]), table)
    assert big[0] == pytest.approx(p.max() * 10 * factor, rel=1e-9)


@settings(deadline=None, max_examples=25)
@given(seed=seeds, kind=st.sampled_from(["additive", "multiplicative"]))
def test_mapping_is_monotone(seed, kind):
    rng = np.random.default_rng(seed)
    if kind == "additive":
        model, month = _temperature_sample(seed)
        obs = 1.3 * model - 80 + rng.normal(0, 3, model.size)
        probe = np.linspace(model.min() - 30, model.max() + 30, 2000)
    else:
        model, month = _precip_sample(seed)
        obs = rng.permutation(
            np.where(rng.random(model.size) < 0.3, rng.gamma(1.2, 1.5, model.size), 0.0)
        )
        probe = np.linspace(0.0, model.max() * 2, 2000)
    table = fit_quantile_mapping(model, obs, month, kind, variable="v")
    for k in range(12):
        out = apply_quantile_mapping(probe, np.full(probe.size, k), table)
        assert np.all(np.diff(out) >= -1e-12)


def test_months_without_data_use_pooled_fit():
    p, month = _precip_sample(5)
    table = fit_quantile_mapping(p, 2 * p, month, "multiplicative", variable="precipitation")
    assert list(table.pooled) == [False] * 3 + [True] * 9
    assert list(table.n_samples[3:]) == [0] * 9


def test_vectorised_broadcast_cell_time():
    t, month = _temperature_sample(1)
    table = fit_quantile_mapping(t, t + 1.5, month, "additive", variable="air_temperature")
    values = np.full((4, 6), 268.0)
    times = np.array(
        [
            "2026-01-31T23:00",
            "2026-02-01T00:00",
            "2026-03-01",
            "2026-06-01",
            "2026-11-15",
            "2026-12-31T23:00",
        ],
        dtype="datetime64[s]",
    )
    months = month_index_of(times)
    assert list(months) == [0, 1, 2, 5, 10, 11]
    out = apply_quantile_mapping(values, months, table)
    assert out.shape == (4, 6)
    np.testing.assert_allclose(out, 269.5, atol=1e-9)
    nan_in = values.copy()
    nan_in[0, 0] = np.nan
    assert np.isnan(apply_quantile_mapping(nan_in, months, table)[0, 0])


def test_too_little_data_refused_with_minimum():
    t = np.linspace(260, 270, MIN_SAMPLES_PER_MONTH - 1)
    with pytest.raises(InputError, match=f"need at least {MIN_SAMPLES_PER_MONTH} valid pairs"):
        fit_quantile_mapping(
            t, t, np.zeros(t.size, dtype=int), "additive", variable="air_temperature"
        )


def test_bad_month_index_and_kind():
    t, month = _temperature_sample(2)
    table = fit_quantile_mapping(t, t, month, "additive", variable="air_temperature")
    with pytest.raises(InputError, match="0-based"):
        apply_quantile_mapping(t[:3], np.array([1, 12, 3]), table)
    with pytest.raises(InputError, match="must be integers"):
        apply_quantile_mapping(t[:3], np.array([1.0, 2.0, 3.0]), table)
    with pytest.raises(InputError, match="'additive' or 'multiplicative'"):
        fit_quantile_mapping(t, t, month, "ratio", variable="air_temperature")


def test_table_file_round_trip_and_selection(tmp_path):
    t, month = _temperature_sample(3)
    p, pm = _precip_sample(3)
    tables = [
        fit_quantile_mapping(t, t + 1, month, "additive", variable="air_temperature"),
        fit_quantile_mapping(p, 1.5 * p, pm, "multiplicative", variable="precipitation"),
        fit_quantile_mapping(
            p, 0.5 * p, pm, "multiplicative", variable="precipitation", exposure_class="sheltered"
        ),
    ]
    path = write_qm_table(tmp_path / "qm.nc", tables)
    assert sorted(x.name for x in tmp_path.iterdir()) == ["qm.nc"]
    back = read_qm_table(path)
    assert [(b.variable, b.exposure_class) for b in back] == [
        (a.variable, a.exposure_class) for a in tables
    ]
    for a, b in zip(tables, back, strict=True):
        np.testing.assert_array_equal(a.model_quantiles, b.model_quantiles)
        np.testing.assert_array_equal(a.pooled, b.pooled)
        np.testing.assert_array_equal(
            apply_quantile_mapping(p, pm, a), apply_quantile_mapping(p, pm, b)
        )
    assert select_qm_table(back, "precipitation", "sheltered").exposure_class == "sheltered"
    assert select_qm_table(back, "precipitation", "exposed").exposure_class == "all"
    assert select_qm_table(back, "wind_speed") is None


def test_table_file_validation(tmp_path):
    import xarray as xr

    t, month = _temperature_sample(4)
    path = write_qm_table(
        tmp_path / "qm.nc",
        fit_quantile_mapping(t, t, month, "additive", variable="air_temperature"),
    )
    ds = xr.open_dataset(path).load()
    bad = ds.copy(deep=True)
    bad["obs_quantile"].values[0, 4, :] = bad["obs_quantile"].values[0, 4, ::-1]
    bad.to_netcdf(tmp_path / "bad.nc")
    with pytest.raises(InputError, match="obs_quantile decreases within month 5"):
        read_qm_table(tmp_path / "bad.nc")
    other = ds.copy()
    other.attrs["regionmap_format"] = "something else"
    other.to_netcdf(tmp_path / "other.nc")
    with pytest.raises(InputError, match=f"expected '{FORMAT_NAME}'"):
        read_qm_table(tmp_path / "other.nc")
    (tmp_path / "junk.nc").write_text("not netcdf")
    with pytest.raises(InputError, match="cannot be read as NetCDF"):
        read_qm_table(tmp_path / "junk.nc")
    with pytest.raises(InputError, match="does not exist"):
        read_qm_table(tmp_path / "none.nc")
    with pytest.raises(OutputError, match="does not exist"):
        write_qm_table(tmp_path / "no" / "qm.nc", read_qm_table(path))

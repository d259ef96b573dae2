"""Calibration of bias settings from synthetic station overlap (invented data).

The synthetic biases are known by construction: a wind factor of 0.2 at a sheltered
station, a model 2 K too cold (offset +2 K), a 1.6x precipitation over-forecast (factor
1/1.6). Acceptance: recovered within 5 % (issue checks). Gauge undercatch: the transfer
function of Kochendorfer et al. (2017b), HESS 21, doi:10.5194/hess-21-3525-2017, Eq. 4;
its coefficients are from memory [mem], so the tests check the equation's own properties
and a value computed by hand from the equation [calc], not the paper's numbers.
"""

from __future__ import annotations

import tomllib

import numpy as np
import pandas as pd
import pytest

from regionmap.downscale.settings import BiasSettings
from regionmap.errors import InputError
from regionmap.stations.calibrate import (
    KOCHENDORFER2017_COEFFICIENTS,
    MIN_PAIRS,
    bias_toml,
    calibrate,
    catch_efficiency_kochendorfer2017,
    correct_undercatch_kochendorfer2017,
    fit_factor,
    fit_offset,
)

START, HOURS = "2025-12-01T01:00", 24 * 120  # December to March


def _stations(classes=("sheltered", "exposed")):
    return pd.DataFrame(
        {
            "lon": [11.0, 11.1],
            "lat": [47.0, 47.1],
            "elevation_m": [1900.0, 2700.0],
            "exposure_class": list(classes),
        },
        index=pd.Index(["SHEL", "RIDGE"], name="id"),
    )


def _synthetic(seed=0, monthly_offsets=None):
    rng = np.random.default_rng(seed)
    time = pd.date_range(START, periods=HOURS, freq="h").to_numpy().astype("datetime64[s]")
    frames_m, frames_o = [], []
    for sid, wind_factor in (("SHEL", 0.2), ("RIDGE", 0.9)):
        t_model = 265.0 + 6.0 * np.sin(2 * np.pi * np.arange(HOURS) / 24) + rng.normal(0, 3, HOURS)
        offset = (
            2.0
            if monthly_offsets is None
            else np.asarray(monthly_offsets)[time.astype("datetime64[M]").astype(int) % 12]
        )
        t_obs = t_model + offset + rng.normal(0, 0.8, HOURS)
        w_model = rng.gamma(2.0, 3.0, HOURS)
        w_obs = wind_factor * w_model * rng.lognormal(-0.02, 0.2, HOURS)
        p_obs = np.where(rng.random(HOURS) < 0.15, rng.gamma(0.9, 1.2, HOURS), 0.0)
        p_model = 1.6 * p_obs * rng.lognormal(-0.045, 0.3, HOURS)
        index = pd.MultiIndex.from_arrays([[sid] * HOURS, time], names=["station_id", "time"])
        frames_m.append(
            pd.DataFrame(
                {"air_temperature": t_model, "wind_speed": w_model, "precipitation": p_model},
                index=index,
            )
        )
        frames_o.append(
            pd.DataFrame(
                {"air_temperature": t_obs, "wind_speed": w_obs, "precipitation": p_obs}, index=index
            )
        )
    return pd.concat(frames_m), pd.concat(frames_o)


def test_recovers_synthetic_biases_within_5_percent_issue_check():
    model, obs = _synthetic()
    result = calibrate(model, obs, _stations())
    wind = result.settings["sheltered"]["wind_speed"].values[0]
    assert wind == pytest.approx(0.2, rel=0.05)  # wind factor 0.2 at the sheltered plot
    assert result.settings["exposed"]["wind_speed"].values[0] == pytest.approx(0.9, rel=0.05)
    assert "wind_speed" not in result.settings["all"]  # not a region-wide wind factor
    assert result.settings["all"]["air_temperature"].values[0] == pytest.approx(2.0, rel=0.05)
    assert result.settings["all"]["precipitation"].values[0] == pytest.approx(1 / 1.6, rel=0.05)


def test_skill_improves_and_is_cross_validated():
    model, obs = _synthetic(1)
    result = calibrate(model, obs, _stations())
    skill = result.skill.set_index(["exposure_class", "variable", "stage"])
    raw = skill.loc[("all", "air_temperature", "raw")]
    cv = skill.loc[("all", "air_temperature", "cross_validated")]
    assert raw["bias"] == pytest.approx(-2.0, abs=0.1)
    assert abs(cv["bias"]) < 0.1 and cv["rmse"] < raw["rmse"]
    assert cv["n"] == raw["n"]  # every month predicted from the other months
    p_raw = skill.loc[("all", "precipitation", "raw")]["total_percent_difference"]
    p_cv = skill.loc[("all", "precipitation", "cross_validated")]["total_percent_difference"]
    assert p_raw == pytest.approx(60.0, abs=5.0) and abs(p_cv) < 5.0


def test_per_month_offsets_recovered_and_unfitted_months_pooled():
    offsets = np.zeros(12)
    offsets[[11, 0, 1, 2]] = [1.0, 2.0, 3.0, -1.0]
    model, obs = _synthetic(2, monthly_offsets=offsets)
    result = calibrate(model, obs, _stations(), variables=["air_temperature"], per_month=True)
    c = result.settings["all"]["air_temperature"]
    for k in (11, 0, 1, 2):
        assert c.values[k] == pytest.approx(offsets[k], abs=0.1)
    # May has no data: it takes the all-month offset, the hour-weighted mean of the months
    time = model.index.get_level_values("time").to_numpy().astype("datetime64[M]")
    pooled = np.mean(offsets[time.astype(int) % 12])
    assert c.own_fit[4] is False and c.values[4] == pytest.approx(pooled, abs=0.05)
    doc = tomllib.loads(bias_toml(result))
    assert len(doc["bias"]["air_temperature"]["offset"]) == 12
    assert BiasSettings(**doc["bias"]).air_temperature[0].offset[0] == pytest.approx(
        c.values[0], abs=1e-3
    )


def test_quantile_mapping_method_tables_and_toml():
    model, obs = _synthetic(3)
    result = calibrate(model, obs, _stations(), method="quantile_mapping")
    keys = sorted((t.variable, t.exposure_class) for t in result.qm_tables)
    assert ("wind_speed", "sheltered") in keys and ("air_temperature", "all") in keys
    doc = tomllib.loads(bias_toml(result, quantile_mapping_file="qm.nc"))
    assert doc["bias"]["quantile_mapping"] == "qm.nc"
    assert BiasSettings(**doc["bias"]).quantile_mapping.name == "qm.nc"
    skill = result.skill.set_index(["exposure_class", "variable", "stage"])
    assert abs(skill.loc[("all", "air_temperature", "cross_validated")]["bias"]) < 0.1


def test_bias_toml_parses_with_config_units():
    model, obs = _synthetic(4)
    model["relative_humidity"] = 0.80
    obs["relative_humidity"] = 0.85
    result = calibrate(model, obs, _stations())
    text = bias_toml(result)
    doc = tomllib.loads(text)  # Python's TOML parser is the oracle for valid TOML
    assert doc["bias"]["precipitation"]["factor"] == pytest.approx(1 / 1.6, rel=0.05)
    # [bias] offsets for relative humidity are in percent (config contract)
    assert doc["bias"]["relative_humidity"]["offset"] == pytest.approx(5.0, rel=1e-3)
    wind = {e["exposure"]: e["factor"] for e in doc["bias"]["wind_speed"]}
    assert wind["sheltered"] == pytest.approx(0.2, rel=0.05) and set(wind) == {
        "sheltered",
        "exposed",
    }
    assert "quantile_mapping" not in doc["bias"]
    assert "Guidance only" in text
    # the config schema (regionmap.config, extra keys forbidden) accepts what we print
    section = BiasSettings(**doc["bias"])
    assert [e.exposure for e in section.wind_speed] == ["sheltered", "exposed"]
    assert section.air_temperature[0].exposure == "all"


def test_refuses_too_little_data_and_states_minimum():
    model, obs = _synthetic(5)
    short_m = model.groupby(level=0).head(100)
    short_o = obs.groupby(level=0).head(100)
    with pytest.raises(InputError, match=f"need at least {MIN_PAIRS} matched pairs"):
        calibrate(short_m, short_o, _stations(), variables=["air_temperature"])
    dry = np.zeros(MIN_PAIRS + 10)
    with pytest.raises(InputError, match="20 observed wet intervals"):
        fit_factor(dry + 1.0, dry, variable="precipitation")


def test_exposure_class_required_for_wind():
    model, obs = _synthetic(6)
    with pytest.raises(InputError, match=r"station\(s\) \['RIDGE'\] have no exposure_class"):
        calibrate(model, obs, _stations(classes=("sheltered", "")), variables=["wind_speed"])


def test_fit_offset_and_factor_exact_on_noise_free_data():
    rng = np.random.default_rng(8)
    m = rng.gamma(2, 2, 500)
    assert fit_offset(m, m + 1.5, variable="air_temperature").values[0] == pytest.approx(1.5)
    assert fit_factor(m, 0.2 * m, variable="wind_speed").values[0] == pytest.approx(0.2)


def test_catch_efficiency_kochendorfer2017_equation_properties():
    # Eq. 4: CE = exp(-a U (1 - arctan(b T) + c)); calm wind -> CE = 1 exactly
    t = np.array([263.15, 273.15, 278.15])
    np.testing.assert_allclose(catch_efficiency_kochendorfer2017(np.zeros(3), t), 1.0)
    # CE falls with wind in snow, and wind above U_max is capped
    a, b, c, u_max = KOCHENDORFER2017_COEFFICIENTS["single_alter"]
    ce = catch_efficiency_kochendorfer2017(np.array([2.0, 5.0, u_max, 20.0]), np.full(4, 263.15))
    assert ce[0] > ce[1] > ce[2] and ce[3] == pytest.approx(ce[2])
    # [calc] by hand from Eq. 4 with the (recalled) coefficients: U = 5, T = -10 degC
    expected = np.exp(-a * 5.0 * (1.0 - np.arctan(b * -10.0) + c))
    assert ce[1] == pytest.approx(expected, rel=1e-12)
    # an unshielded gauge catches less than a single-Alter one in the same wind
    un = catch_efficiency_kochendorfer2017(5.0, 263.15, shield="unshielded")
    assert un < ce[1]


def test_undercatch_correction_restores_true_amount_and_is_used_in_calibration():
    rng = np.random.default_rng(9)
    true = rng.gamma(1.0, 1.0, 100)
    wind = rng.uniform(0, 8, 100)
    temp = rng.uniform(258, 275, 100)
    measured = true * catch_efficiency_kochendorfer2017(wind, temp)
    np.testing.assert_allclose(
        correct_undercatch_kochendorfer2017(measured, wind, temp), true, rtol=1e-12
    )
    model, obs = _synthetic(10)
    plain = calibrate(model, obs, _stations(), variables=["precipitation"])
    corrected = calibrate(
        model, obs, _stations(), variables=["precipitation"], undercatch="single_alter"
    )
    # the gauge caught too little: corrected observations need a larger factor
    assert (
        corrected.settings["all"]["precipitation"].values[0]
        > plain.settings["all"]["precipitation"].values[0]
    )
    with pytest.raises(InputError, match="needs observed wind_speed"):
        calibrate(
            model,
            obs.drop(columns="wind_speed"),
            _stations(),
            variables=["precipitation"],
            undercatch="unshielded",
        )


def test_station_without_the_variable_takes_no_part_in_its_class_fit():
    # the exposed station is a precipitation-only gauge: the wind factor is fitted for the
    # sheltered class alone, and nothing is claimed for the exposed class
    model, obs = _synthetic()
    obs = obs.copy()
    obs.loc["RIDGE", "wind_speed"] = np.nan
    result = calibrate(model, obs, _stations(), variables=["wind_speed"])
    assert result.settings["sheltered"]["wind_speed"].values[0] == pytest.approx(0.2, rel=0.05)
    assert "wind_speed" not in result.settings.get("exposed", {})

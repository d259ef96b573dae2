"""`regionmap calibrate` end to end through regionmap.stations.chain.calibrate_command.

Observations are made from the model's own (uncorrected) station series with known biases:
a +2 K warm model, a 1.6x precipitation over-forecast, and wind 5x too strong at a sheltered
plot (a factor of 0.2) but 1/1.3 too weak on an exposed crest. The command must recover them
within 5 %, print them as a [bias] section that the config accepts, and that
section applied to the same stations must remove the bias (verification by construction;
scores as in Wilks 2011, Sect. 8.3). Demo region and weather are invented.
"""

from __future__ import annotations

import tomllib

import numpy as np
import pandas as pd
import pytest
from test_verify_command import PRECIP_OVER, T_BIAS_K, scenario, synthetic_observations  # noqa: F401

from regionmap.config import config_from_dict
from regionmap.downscale.quantile_mapping import read_qm_table
from regionmap.errors import InputError
from regionmap.stations.chain import calibrate_command, verify_command


def test_calibrate_recovers_known_biases_and_the_fit_removes_them(scenario, capsys, tmp_path):
    obs = synthetic_observations(scenario.model, tmp_path, seed=11)
    text, skill = calibrate_command(
        scenario.cfg, scenario.stations_path, obs, tmp_path / "cal", region=scenario.region
    )
    bias = tomllib.loads(text)["bias"]
    # +2 K model: offset -2 K (within 5 %)
    assert bias["air_temperature"]["offset"] == pytest.approx(-T_BIAS_K, rel=0.05)
    # 1.6x over-forecast: factor 1/1.6 = 0.625 (within 5 %)
    assert bias["precipitation"]["factor"] == pytest.approx(1 / PRECIP_OVER, rel=0.05)
    # wind factors per exposure class of the stations: 0.2 sheltered, 1.3 exposed (within 5 %)
    wind = {e["exposure"]: e["factor"] for e in bias["wind_speed"]}
    assert wind["sheltered"] == pytest.approx(0.2, rel=0.05)
    assert wind["exposed"] == pytest.approx(1.3, rel=0.05)
    assert "neutral" not in wind  # no wind observed at a neutral station: nothing for those cells
    # skill before and after
    s = skill.set_index(["exposure_class", "variable", "stage"])
    assert s.loc[("all", "air_temperature", "raw"), "bias"] == pytest.approx(T_BIAS_K, abs=0.05)
    assert abs(s.loc[("all", "air_temperature", "fitted"), "bias"]) < 1e-6
    assert s.loc[("all", "precipitation", "raw"), "total_percent_difference"] == pytest.approx(
        60.0, abs=1.0
    )
    out = capsys.readouterr().out
    assert (
        "[bias]" in out
        and "cross-validated" in out
        and "Caution:" in out
        and "field observations" in out
    )
    # the printed section is valid config, and the corrected model verifies without bias
    data = scenario.cfg.model_dump(exclude={"source"}, mode="json")
    data["bias"] = bias
    cfg = config_from_dict(data, base_dir=scenario.folder)
    table = verify_command(
        cfg, scenario.stations_path, obs, tmp_path / "ver", region=scenario.region, echo=False
    )
    row = table.set_index(["station_id", "variable"])
    for sid in ("LOWPLOT", "CREST"):
        assert abs(row.loc[(sid, "air_temperature"), "bias"]) < 0.1
        assert (
            abs(row.loc[(sid, "wind_speed"), "bias"])
            < 0.05 * row.loc[(sid, "wind_speed"), "obs_mean"]
        )
    assert abs(row.loc[("LOWPLOT", "precipitation"), "total_percent_difference"]) < 5.0
    # --out holds what the help promises in scaling mode: the section, the skill table and
    # the figures (PNG signature, ISO/IEC 15948), and no quantile-mapping tables
    cal = tmp_path / "cal"
    assert tomllib.loads((cal / "bias.toml").read_text())["bias"] == bias
    written = pd.read_csv(cal / "calibration_skill.csv")
    assert len(written) == len(skill) and set(written["stage"]) == set(skill["stage"])
    figures = sorted(p.name for p in (cal / "figures").glob("*.png"))
    assert "calibration_skill.png" in figures
    assert "verification_scatter_air-temperature.png" in figures
    for name in figures:
        assert (cal / "figures" / name).read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert not (cal / "qm.nc").exists()


def test_per_month_quantile_mapping_and_undercatch(scenario, tmp_path):
    obs = synthetic_observations(scenario.model, tmp_path, seed=5)
    text, _ = calibrate_command(
        scenario.cfg,
        scenario.stations_path,
        obs,
        tmp_path / "qm",
        method="quantile_mapping",
        region=scenario.region,
        echo=False,
    )
    assert 'quantile_mapping = "' in text and (tmp_path / "qm" / "qm.nc").is_file()
    tables = read_qm_table(tmp_path / "qm" / "qm.nc")
    assert {t.variable for t in tables} >= {"air_temperature", "precipitation", "wind_speed"}
    # quantile-mapping property: a shifted sample maps by the shift; January temperature
    # quantiles of obs and model differ by -2 K (mid quantiles, the 0.3 K noise averages out)
    (t,) = [t for t in tables if t.variable == "air_temperature"]
    mid = (t.probabilities >= 0.2) & (t.probabilities <= 0.8)
    shift = t.obs_quantiles[0, mid] - t.model_quantiles[0, mid]
    assert shift.mean() == pytest.approx(-T_BIAS_K, abs=0.05)
    # each quantile within three noise standard deviations (0.3 K each): single quantiles of a
    # noisy sample scatter, the mean above carries the real check
    np.testing.assert_allclose(shift, -T_BIAS_K, atol=0.9)
    assert t.n_samples[0] > 0 and np.all(np.diff(t.obs_quantiles[0]) >= 0)  # monotone
    # Kochendorfer et al. (2017) undercatch correction raises the observed totals (CE <= 1),
    # so the fitted precipitation factor is larger than without it
    text_u, _ = calibrate_command(
        scenario.cfg,
        scenario.stations_path,
        obs,
        tmp_path / "u",
        undercatch="single_alter",
        region=scenario.region,
        echo=False,
    )
    assert tomllib.loads(text_u)["bias"]["precipitation"]["factor"] > 1 / PRECIP_OVER * 1.01


def test_too_little_data_is_refused_with_a_clear_message(scenario, tmp_path):
    obs = tmp_path / "short.csv"
    rows = ["station_id,time,air_temperature[degC]"]
    rows += [f"LOWPLOT,2026-01-09T{h:02d}:00Z,-5.0" for h in range(24)]
    obs.write_text("\n".join(rows) + "\n")
    with pytest.raises(
        InputError, match=r"too little data to fit; need at least 240 matched pairs, got 24"
    ):
        calibrate_command(
            scenario.cfg,
            scenario.stations_path,
            [obs],
            tmp_path / "c",
            region=scenario.region,
            echo=False,
        )

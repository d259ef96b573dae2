"""Matching model series to observations, the verification table and its CSV writer.

Series are invented. Expected values are exact sums of the invented inputs (arithmetic),
and the per-row scores are checked against NumPy computations on the same pairs.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from regionmap.errors import InputError, OutputError
from regionmap.stations.verify import (
    aggregate_model_to_observations,
    verification_table,
    write_verification_csv,
)


def _hourly_model(station, start, hours, **columns):
    time = pd.date_range(start, periods=hours, freq="h").to_numpy().astype("datetime64[s]")
    index = pd.MultiIndex.from_arrays([[station] * hours, time], names=["station_id", "time"])
    return pd.DataFrame(columns, index=index)


def _obs(station, times, starts, **columns):
    index = pd.MultiIndex.from_arrays(
        [[station] * len(times), np.array(times, dtype="datetime64[s]")],
        names=["station_id", "time"],
    )
    frame = pd.DataFrame(columns, index=index)
    frame["interval_start"] = np.array(starts, dtype="datetime64[s]")
    return frame


def test_daily_observations_sum_hourly_model_amounts():
    hours = 72
    model = _hourly_model(
        "A",
        "2026-01-01T01:00",
        hours,
        precipitation=np.arange(hours, dtype=float),
        air_temperature=np.linspace(260.0, 270.0, hours),
        shortwave_down=np.full(hours, 100.0),
    )
    obs = _obs(
        "A",
        ["2026-01-02T00:00", "2026-01-03T00:00", "2026-01-04T06:00"],
        ["2026-01-01T00:00", "2026-01-02T00:00", "2026-01-03T00:00"],
        precipitation=[1.0, 2.0, 3.0],
        air_temperature=[261.0, 262.0, 263.0],
        shortwave_down=[90.0, 95.0, 99.0],
    )
    out = aggregate_model_to_observations(model, obs)
    # hours 01..24 of day 1 have values 0..23 -> 276; day 2: 24..47 -> 852
    assert out["precipitation"].iloc[0] == pytest.approx(sum(range(24)))
    assert out["precipitation"].iloc[1] == pytest.approx(sum(range(24, 48)))
    # the third interval runs past the model's end: not covered -> NaN, not a partial sum
    assert np.isnan(out["precipitation"].iloc[2])
    assert out["shortwave_down"].iloc[0] == pytest.approx(100.0)
    # states are taken at the observation time: 2026-01-02T00:00 is model step 24 (index 23)
    assert out["air_temperature"].iloc[0] == pytest.approx(np.linspace(260, 270, hours)[23])


def test_model_gap_inside_interval_gives_nan():
    precip = np.ones(24)
    precip[5] = np.nan
    model = _hourly_model("A", "2026-01-01T01:00", 24, precipitation=precip)
    obs = _obs("A", ["2026-01-02T00:00"], ["2026-01-01T00:00"], precipitation=[20.0])
    assert np.isnan(aggregate_model_to_observations(model, obs)["precipitation"].iloc[0])


def test_verification_table_rows_per_station_and_variable():
    rng = np.random.default_rng(3)
    frames_m, frames_o = [], []
    for station in ("A", "B"):
        t_obs = rng.normal(265.0, 4.0, 48)
        p_obs = rng.gamma(0.5, 1.0, 48)
        frames_o.append(
            _obs(
                station,
                pd.date_range("2026-01-01T01:00", periods=48, freq="h"),
                pd.date_range("2026-01-01T00:00", periods=48, freq="h"),
                air_temperature=t_obs,
                precipitation=p_obs,
                snow_depth=np.full(48, 1.0),
            )
        )
        frames_m.append(
            _obs(
                station,
                pd.date_range("2026-01-01T01:00", periods=48, freq="h"),
                pd.date_range("2026-01-01T00:00", periods=48, freq="h"),
                air_temperature=t_obs + 2.0,
                precipitation=1.6 * p_obs,
                snow_depth=np.full(48, 1.05),
            ).drop(columns="interval_start")
        )
    obs = pd.concat(frames_o)
    obs.attrs["units"] = {"air_temperature": "K", "precipitation": "kg m-2", "snow_depth": "m"}
    model = pd.concat(frames_m)
    model.iloc[0, 0] = np.nan  # one missing model value for station A temperature
    table = verification_table(model, obs)
    assert len(table) == 6
    row = table.set_index(["station_id", "variable"]).loc[("A", "air_temperature")]
    assert row["n"] == 47 and row["bias"] == pytest.approx(2.0) and row["units"] == "K"
    assert row["rmse"] == pytest.approx(2.0) and row["r2"] == pytest.approx(1.0)
    prow = table.set_index(["station_id", "variable"]).loc[("B", "precipitation")]
    assert prow["total_ratio"] == pytest.approx(1.6)
    assert prow["total_percent_difference"] == pytest.approx(60.0)
    srow = table.set_index(["station_id", "variable"]).loc[("B", "snow_depth")]
    assert srow["presence_agreement_frac"] == 1.0 and srow["within_tolerance_frac"] == 1.0
    assert np.isnan(row["total_ratio"])


def test_verification_table_errors():
    obs = _obs("A", ["2026-01-01T01:00"], ["2026-01-01T00:00"], air_temperature=[260.0])
    model = _obs("B", ["2026-01-01T01:00"], ["2026-01-01T00:00"], air_temperature=[260.0])
    with pytest.raises(InputError, match="share no \\(station_id, time\\)"):
        verification_table(model, obs)
    with pytest.raises(InputError, match=r"not in both tables"):
        verification_table(model, obs, variables=["wind_speed"])


def test_csv_written_atomically_and_readable(tmp_path):
    table = pd.DataFrame({"station_id": ["A"], "variable": ["air_temperature"], "bias": [1.25]})
    path = write_verification_csv(table, tmp_path / "verification.csv")
    back = pd.read_csv(path)
    assert back["bias"].iloc[0] == 1.25
    assert [p.name for p in tmp_path.iterdir()] == ["verification.csv"]  # no temp left
    with pytest.raises(OutputError, match="does not exist"):
        write_verification_csv(table, tmp_path / "missing" / "v.csv")

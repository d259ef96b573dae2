"""Station metadata and observation CSV readers (format: docs/station_csv.md).

Stations and values are invented. Unit checks use definitions outside the project: the SI
definition of the kelvin scale (0 degC = 273.15 K, BIPM SI Brochure, 9th ed. 2019), the
definition 1 km h-1 = 1/3.6 m s-1, and 1 mm of water = 1 kg m-2 at the density of liquid
water 1000 kg m-3 (common hydrological convention).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from regionmap.errors import InputError
from regionmap.io.stations import read_observations, read_stations

META = """# invented stations
id,lon,lat,elevation_m,name,exposure_class,exposure_notes
PLOT1,11.2,47.1,2140,Invented plot,sheltered,"clearing, lee of a ridge"
CREST2,11.3,47.2,2890,Invented crest,Exposed,
"""

OBS_HEADER = (
    "station_id,time,air_temperature[degC],relative_humidity[%],wind_speed[km h-1],"
    "precipitation[mm],snow_depth[cm]\n"
)
OBS = (
    OBS_HEADER
    + """PLOT1,2026-01-01T00:00Z,0.0,80,36,0.0,120
PLOT1,2026-01-01T01:00Z,-5.5,,18,0.4,121

PLOT1,2026-01-01T02:00Z,-6.0,85,0,1.2,
CREST2,2026-01-01T01:00:00+01:00,-9,70,50,0,80
"""
)


def _write(tmp_path, name, text):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


@pytest.fixture
def stations(tmp_path):
    return read_stations(_write(tmp_path, "stations.csv", META))


def test_read_stations_columns_and_classes(stations):
    assert list(stations.index) == ["PLOT1", "CREST2"]
    assert stations.loc["PLOT1", "elevation_m"] == 2140.0
    assert stations.loc["CREST2", "exposure_class"] == "exposed"  # case folded
    assert stations.loc["PLOT1", "exposure_notes"] == "clearing, lee of a ridge"


def test_observations_converted_to_si_bipm_and_definitions(tmp_path, stations):
    obs = read_observations(_write(tmp_path, "obs.csv", OBS), stations)
    plot = obs.loc["PLOT1"]
    # BIPM SI Brochure (2019): T/K = t/degC + 273.15
    assert plot["air_temperature"].iloc[0] == pytest.approx(273.15, abs=1e-12)
    assert plot["air_temperature"].iloc[1] == pytest.approx(267.65, abs=1e-12)
    # definition of the km/h: 36 km h-1 = 10 m s-1
    assert plot["wind_speed"].iloc[0] == pytest.approx(10.0, rel=1e-12)
    # percent -> fraction
    assert plot["relative_humidity"].iloc[0] == pytest.approx(0.80, rel=1e-12)
    assert np.isnan(plot["relative_humidity"].iloc[1])
    # 1 mm water = 1 kg m-2 (rho_w = 1000 kg m-3, hydrological convention)
    assert plot["precipitation"].iloc[2] == pytest.approx(1.2, rel=1e-12)
    assert plot["snow_depth"].iloc[0] == pytest.approx(1.20, rel=1e-12)
    assert np.isnan(plot["snow_depth"].iloc[2])
    # an explicit +01:00 offset is converted to UTC
    crest_time = obs.loc["CREST2"].index[0]
    assert crest_time == pd.Timestamp("2026-01-01T00:00")
    assert obs.attrs["units"]["wind_speed"] == "m s-1"


def test_interval_start_previous_row_and_modal_step(tmp_path, stations):
    obs = read_observations(_write(tmp_path, "obs.csv", OBS), stations)
    start = obs.loc["PLOT1", "interval_start"].to_numpy()
    expected = np.array(
        ["2025-12-31T23:00", "2026-01-01T00:00", "2026-01-01T01:00"], dtype="datetime64[s]"
    )
    np.testing.assert_array_equal(start, expected)


def test_several_files_merge_and_mixed_variables(tmp_path, stations):
    a = _write(
        tmp_path, "a.csv", "station_id,time,air_temperature[K]\nPLOT1,2026-01-01T00:00Z,270\n"
    )
    b = _write(
        tmp_path, "b.csv", "station_id,time,shortwave_down[W m-2]\nPLOT1,2026-01-01T01:00Z,150\n"
    )
    obs = read_observations([a, b], stations)
    assert obs.shape[0] == 2
    assert np.isnan(obs["shortwave_down"].iloc[0]) and obs["shortwave_down"].iloc[1] == 150.0
    assert obs["air_temperature"].iloc[0] == 270.0


@pytest.mark.parametrize(
    ("text", "match"),
    [
        (
            "station_id,time,air_temperature[degC]\nNOPE,2026-01-01T00:00Z,1\n",
            r"obs\.csv, line 2, column 'station_id': unknown station 'NOPE'",
        ),
        (
            "station_id,time,air_temperature[degrees_frobnitz]\nPLOT1,2026-01-01T00:00Z,1\n",
            r"unknown unit 'degrees_frobnitz'",
        ),
        (
            "station_id,time,air_temperature[m s-1]\nPLOT1,2026-01-01T00:00Z,1\n",
            r"cannot be converted to 'K'",
        ),
        (
            "station_id,time,air_temp[degC]\nPLOT1,2026-01-01T00:00Z,1\n",
            r"unknown variable 'air_temp'",
        ),
        (
            "station_id,time,air_temperature\nPLOT1,2026-01-01T00:00Z,1\n",
            r"expected 'variable\[unit\]'",
        ),
        (
            "station_id,time,air_temperature[degC]\n# note\nPLOT1,15/01/2026 07:00,1\n",
            r"line 3, column 'time': expected an ISO-8601 time",
        ),
        (
            "station_id,time,air_temperature[degC]\nPLOT1,2026-01-01T00:00Z,1\nPLOT1,2026-01-01T00:00Z,2\n",
            r"two observations at 2026-01-01T00:00:00Z: .*obs\.csv line 2 and .*obs\.csv line 3",
        ),
        (
            "station_id,time,air_temperature[degC]\nPLOT1,2026-01-01T00:00Z,90\n",
            r"line 2, column 'air_temperature\[degC\]': value 90.0 is out of range",
        ),
        (
            "station_id,time,relative_humidity[1]\nPLOT1,2026-01-01T00:00Z,80\n",
            r"out of range; expected relative_humidity in \[0.0, 1.05\]",
        ),
        (
            "station_id,time,wind_speed[m s-1]\nPLOT1,2026-01-01T00:00Z,fast\n",
            r"line 2, column 'wind_speed\[m s-1\]': expected a number, got 'fast'",
        ),
        ("time,air_temperature[degC]\n2026-01-01T00:00Z,1\n", r"missing column 'station_id'"),
    ],
)
def test_observation_errors_name_file_line_column(tmp_path, stations, text, match):
    with pytest.raises(InputError, match=match):
        read_observations(_write(tmp_path, "obs.csv", text), stations)


def test_duplicate_across_files_names_both(tmp_path, stations):
    a = _write(
        tmp_path, "a.csv", "station_id,time,air_temperature[degC]\nPLOT1,2026-01-01T00:00Z,1\n"
    )
    b = _write(tmp_path, "b.csv", "station_id,time,wind_speed[m s-1]\nPLOT1,2026-01-01T00:00Z,1\n")
    with pytest.raises(InputError, match=r"a\.csv line 2 and .*b\.csv line 2"):
        read_observations([a, b], stations)


@pytest.mark.parametrize(
    ("text", "match"),
    [
        ("id,lon,lat\nA,1,2\n", r"missing column\(s\) \['elevation_m'\]"),
        ("id,lon,lat,elevation_m,colour\nA,1,2,3,red\n", r"unknown column\(s\) \['colour'\]"),
        (
            "id,lon,lat,elevation_m\nA,1,2,3\nA,1,2,4\n",
            r"line 3, column 'id': station 'A' is listed twice \(first on line 2\)",
        ),
        (
            "id,lon,lat,elevation_m\nA,1,95,3\n",
            r"line 2, column 'lat': expected a value in \[-90.0, 90.0\]",
        ),
        ("id,lon,lat,elevation_m\nA,1,2,\n", r"line 2, column 'elevation_m': a value is required"),
        (
            "id,lon,lat,elevation_m,exposure_class\nA,1,2,3,windy\n",
            r"expected one of \['sheltered', 'neutral', 'exposed'\]",
        ),
        ("id,lon,lat,elevation_m\nA B,1,2,3\n", r"may not contain spaces"),
    ],
)
def test_station_metadata_errors(tmp_path, text, match):
    with pytest.raises(InputError, match=match):
        read_stations(_write(tmp_path, "stations.csv", text))


def test_missing_file_is_input_error(tmp_path):
    with pytest.raises(InputError, match="does not exist"):
        read_stations(tmp_path / "nope.csv")

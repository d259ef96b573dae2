"""Config validation: unknown keys get the closest valid key, wrong types name key and file."""

from pathlib import Path

import pytest

from regionmap.config import config_from_dict, load_config, parse_band, parse_interval_hours
from regionmap.errors import ConfigError

REGION = {"dem": "dem.tif", "zones": "zones.geojson"}


def write(tmp_path: Path, text: str) -> Path:
    p = tmp_path / "cfg.toml"
    p.write_text(text)
    return p


def test_minimal_config_resolves_paths_relative_to_the_file(tmp_path):
    p = write(
        tmp_path, '[region]\ndem = "d/dem.tif"\nzones = "z.geojson"\n[forcing]\npath = "f/*.nc"\n'
    )
    cfg = load_config(p)
    assert cfg.region.dem == tmp_path.resolve() / "d/dem.tif"
    assert cfg.forcing.path == str(tmp_path.resolve() / "f/*.nc")
    assert cfg.output.dir == tmp_path.resolve() / "out"
    assert cfg.cells.band_step_m == 300.0 and cfg.cells.band_edges_m is None


def test_design_example_config_validates(tmp_path):
    p = write(
        tmp_path,
        """
[region]
dem = "dem.tif"
zones = "zones.geojson"
zone_field = "name"
[cells]
band_edges_m = [1200, 1500, 1800, 2100, 2400, 2700]
aspect_sectors = 8
flat_below_deg = 10
avalanche_terrain_deg = [30, 50]
[forcing]
path = "forcing.nc"
start = "2025-11-01T00:00"
end = "2026-04-30T23:00"
analysis_time = "2026-02-14T12:00"
heights_m = { wind = 10, temperature = 2 }
[forcing.variables]
air_temperature = { name = "T2M", units = "K" }
precipitation_amount = { name = "TP", units = "mm", accumulated = true }
[bias]
wind_speed = { factor = 0.5 }
precipitation = { factor = 0.85 }
air_temperature = { offset = [-0.5, -0.5, -0.3, 0, 0, 0, 0, 0, 0, 0, -0.3, -0.5] }
[output]
dir = "out"
map_time = "2026-02-15T12:00"
diagnostics_every = "1h"
local_timezone = "Etc/GMT+7"
observation_hour = 7
""",
    )
    cfg = load_config(p)
    assert cfg.bias.wind_speed[0].factor == 0.5
    assert len(cfg.bias.air_temperature[0].offset) == 12
    assert cfg.forcing.variables["precipitation_amount"].accumulated is True


@pytest.mark.parametrize(
    "data, match",
    [
        (
            {"region": {**REGION, "zone_feild": "x"}},
            r"unknown key \[region\] zone_feild; did you mean 'zone_field'",
        ),
        ({"region": REGION, "cels": {}}, r"unknown key \[cels\]; did you mean 'cells'"),
        ({"region": REGION, "bias": {"wind_speed": {"factr": 0.5}}}, r"did you mean 'factor'"),
        (
            {"region": REGION, "cells": {"aspect_sectors": 7}},
            r"\[cells\] aspect_sectors: .*4, 8 or 16",
        ),
        ({"region": REGION, "cells": {"band_edges_m": [1500, 1200]}}, r"strictly increasing"),
        (
            {"region": REGION, "bias": {"air_temperature": {"offset": [1, 2]}}},
            r"list of 12 monthly",
        ),
        (
            {"region": REGION, "bias": {"precipitation": {"factor": -1}}},
            r"factors must be positive",
        ),
        ({"region": REGION, "output": {"local_timezone": "Nowhere/Land"}}, r"IANA time-zone"),
        ({"region": REGION, "output": {"diagnostics_every": "90min"}}, r"whole number of hours"),
        ({"region": {"dem": "d.tif"}}, r"missing required key \[region\] zones"),
        ({"region": REGION, "output": {"observation_hour": 25}}, r"\[output\] observation_hour"),
        (
            {"region": REGION, "downscale": {"drift": True}},
            r"\[downscale\].*drift is no longer a setting.*\[snow\] wind_transport",
        ),
    ],
)
def test_bad_config_names_key_and_file(data, match):
    with pytest.raises(ConfigError, match=match) as info:
        config_from_dict(data, source="my.toml")
    assert str(info.value).startswith("my.toml: ")


def test_missing_and_malformed_files(tmp_path):
    with pytest.raises(ConfigError, match="does not exist"):
        load_config(tmp_path / "nope.toml")
    with pytest.raises(ConfigError, match="not valid TOML"):
        load_config(write(tmp_path, "[region\n"))


def test_band_and_interval_parsing():
    assert parse_band("2100-2400") == (2100.0, 2400.0)
    with pytest.raises(ConfigError, match="LOW-HIGH"):
        parse_band("2400-2100")
    assert parse_interval_hours("1D") == 24
    assert parse_interval_hours("3h") == 3
    assert parse_interval_hours("0h") is None

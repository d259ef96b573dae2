"""A small synthetic output folder for the figure and report tests, written with the real
writers (cells.nc / profiles.nc streaming writers, the GIS export, the rain-crust line and
the layers-of-concern summaries) on the invented cone of ``test_summaries_synth``.

Everything here is invented. The tests at the bottom check the folder reader against the
files the writers produced.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from test_summaries_synth import CRS, TRANSFORM, cone_dem, synthetic_run

from regionmap.errors import InputError
from regionmap.io.writers import write_geotiff
from regionmap.plots.outputs import RunOutputs
from regionmap.stations.verify import verification_table, write_verification_csv

MAP_TIME = "2026-01-22T12:00"


def build_output_folder(folder: Path, *, with_verification: bool = True) -> Path:
    """Write a complete small output folder into ``folder`` (its DEM beside it)."""
    from test_export import _assemble

    folder.mkdir(parents=True, exist_ok=True)
    run = synthetic_run(folder)
    _assemble(folder, run)
    run[5].close()
    run[6].close()
    dem_path = folder.parent / f"{folder.name}-dem.tif"
    write_geotiff(
        dem_path,
        cone_dem().astype(np.float32),
        transform=TRANSFORM,
        crs=CRS,
        nodata=-9999.0,
        description="elevation [m]",
    )
    run_json = {
        "program": "regionmap",
        "version": "0.1.0",
        "cell_count": int(run[2].shape[0]),
        "map_time": MAP_TIME,
        "config": {
            "region": {"dem": str(dem_path), "zones": "zones.geojson"},
            "output": {"local_timezone": "Etc/GMT+7", "observation_hour": 7},
            "cells": {"avalanche_terrain_deg": [30, 50]},
        },
        "timings_s": {"read": 0.1, "run": 1.0},
    }
    (folder / "run.json").write_text(json.dumps(run_json), encoding="utf-8")
    if with_verification:
        idx = pd.MultiIndex.from_product(
            [["ST1", "ST2"], pd.date_range("2026-01-24", periods=24, freq="h")],
            names=["station_id", "time"],
        )
        rng = np.random.default_rng(0)
        obs = pd.DataFrame({"air_temperature": 265 + rng.normal(0, 1, len(idx))}, index=idx)
        model = obs + 0.5
        write_verification_csv(
            verification_table(model, obs, units={"air_temperature": "K"}),
            folder / "verification.csv",
        )
    return folder


@pytest.fixture(scope="module")
def outputs(tmp_path_factory):
    folder = build_output_folder(tmp_path_factory.mktemp("plots") / "out")
    out = RunOutputs(folder)
    yield out
    out.close()


def test_reader_sees_the_writers_cell_table(outputs):
    # the cone of test_summaries_synth: two zones, 4 aspects, 100 m bands
    t = outputs.table
    assert outputs.zone_names == ["Zone A", "Zone B"]
    assert set(t["aspect_sector"]) == {"N", "E", "S", "W"}
    assert ((t["band_upper_m"] - t["band_lower_m"]) == 100.0).all()


def test_reader_map_time_from_run_json(outputs):
    assert outputs.map_time == np.datetime64(MAP_TIME, "s")
    assert outputs.weights[1] == "all terrain"  # the cone's 26.6° slopes hold no 30-50° terrain


def test_reader_rejects_times_outside_the_run(outputs):
    with pytest.raises(InputError, match="outside the run"):
        outputs.time_in_run("2027-01-01")
    with pytest.raises(InputError, match=r"expected an ISO-8601 time .*got 'yesterday-ish'"):
        outputs.time_in_run("yesterday-ish")


def test_reader_rejects_a_folder_without_run_json(tmp_path):
    with pytest.raises(InputError, match="run.json is missing"):
        RunOutputs(tmp_path)

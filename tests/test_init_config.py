"""`regionmap init`: a commented config from the user's own files, or a clear refusal.
Files: the small scenario of test_run (the demo DEM, one demo zone, a week of forcing)."""

from __future__ import annotations

import tomllib

import geopandas as gpd
import numpy as np
import pytest
import xarray as xr
from shapely.geometry import box
from test_run import scenario  # noqa: F401  (session fixture of the small scenario)

from regionmap.cli import main
from regionmap.config import load_config
from regionmap.errors import InputError
from regionmap.io.dem import read_dem
from regionmap.io.starter_config import band_edges_for, zone_field_of


def _init(folder, dem, zones, forcing, *extra):
    return main(
        ["init", str(folder), "--dem", str(dem), "--zones", str(zones), "--forcing", str(forcing)]
        + list(extra)
    )


def test_config_from_the_users_files_loads_and_matches_them(scenario, tmp_path, capsys):  # noqa: F811
    folder = tmp_path / "region"
    assert (
        _init(folder, scenario / "dem.tif", scenario / "zones.geojson", scenario / "forcing.nc")
        == 0
    )
    cfg = load_config(folder / "regionmap.toml")
    # band edges: round heights strictly inside the DEM's elevation range
    z = read_dem(scenario / "dem.tif").elevation_m
    edges = np.asarray(cfg.cells.band_edges_m)
    assert (edges > np.nanmin(z)).all() and (edges < np.nanmax(z)).all()
    assert len(edges) >= 3 and np.all(np.diff(edges) == edges[1] - edges[0])
    # the zone attribute, the files (relative to the config) and the forcing's period
    assert cfg.region.zone_field == "name"
    assert cfg.region.dem.resolve() == (scenario / "dem.tif").resolve()
    with xr.open_dataset(scenario / "forcing.nc") as ds:
        t = ds["time"].values.astype("datetime64[m]")
    assert np.datetime64(cfg.forcing.start, "m") == t[0]
    assert np.datetime64(cfg.forcing.end, "m") == t[-1]
    text = (folder / "regionmap.toml").read_text()
    assert "found by CF standard name" in text and "[forcing.variables]" not in text
    assert "field observations" in text  # the caution heads the file
    assert "regionmap run" in capsys.readouterr().out
    # an existing config is kept unless --force
    assert (
        _init(folder, scenario / "dem.tif", scenario / "zones.geojson", scenario / "forcing.nc")
        == 2
    )
    assert "--force" in capsys.readouterr().err
    assert (
        _init(
            folder,
            scenario / "dem.tif",
            scenario / "zones.geojson",
            scenario / "forcing.nc",
            "--force",
        )
        == 0
    )


def test_forcing_without_standard_names_gets_a_mapping_block_to_fill(scenario, tmp_path, capsys):  # noqa: F811
    with xr.open_dataset(scenario / "forcing.nc") as ds:
        plain = ds.copy()
    for v in plain.variables.values():
        v.attrs.pop("standard_name", None)
    plain.to_netcdf(tmp_path / "plain.nc")
    folder = tmp_path / "region"
    assert (
        _init(folder, scenario / "dem.tif", scenario / "zones.geojson", tmp_path / "plain.nc") == 0
    )
    text = (folder / "regionmap.toml").read_text()
    assert "NOT found by standard name" in text and "# [forcing.variables]" in text
    assert 'name = "pr"' in text  # the file's own variables, to map by hand
    tomllib.loads(text)  # still valid TOML
    err = capsys.readouterr().err
    assert "note:" in err and "air_temperature" in err


@pytest.mark.parametrize("which", ["dem", "zones", "forcing"])
def test_unreadable_file_is_refused_by_name(scenario, tmp_path, capsys, which):  # noqa: F811
    files = {
        "dem": scenario / "dem.tif",
        "zones": scenario / "zones.geojson",
        "forcing": scenario / "forcing.nc",
    }
    bad = tmp_path / f"broken_{which}{files[which].suffix}"
    bad.write_text("not a real file of this kind")
    files[which] = bad
    assert _init(tmp_path / "region", files["dem"], files["zones"], files["forcing"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("regionmap: error:") and bad.name in err[0]
    assert not (tmp_path / "region" / "regionmap.toml").exists()


def test_zone_attribute_is_the_one_that_names_every_zone_once():
    frame = gpd.GeoDataFrame(
        {
            "id": [1, 2, 3],
            "kind": ["a", "a", "b"],  # not unique
            "label": ["North", "South", "East"],
        },
        geometry=[box(0, 0, 1, 1), box(1, 0, 2, 1), box(2, 0, 3, 1)],
    )
    field, others = zone_field_of(frame, "z.gpkg")
    assert field == "label" and others == ["id", "kind"]  # text before numbers
    with pytest.raises(InputError, match="z.gpkg: no attribute names every zone once"):
        zone_field_of(frame[["kind", "geometry"]], "z.gpkg")


def test_band_edges_are_round_heights_inside_the_range():
    assert band_edges_for(1200.0, 3200.0) == [1500, 1800, 2100, 2400, 2700, 3000]
    assert band_edges_for(450.0, 1150.0) == [500, 600, 700, 800, 900, 1000, 1100]
    assert band_edges_for(1000.0, 1040.0) == [1020.0]  # one edge: two bands

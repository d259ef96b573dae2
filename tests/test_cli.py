"""CLI frame: one clear line and exit 2 for bad input, --help everywhere, the caution shown."""

import subprocess
import sys

import pytest

from regionmap import CAUTION
from regionmap.cli import build_parser, main


def test_help_carries_the_caution(capsys):
    with pytest.raises(SystemExit) as info:
        main(["--help"])
    assert info.value.code == 0
    out = " ".join(capsys.readouterr().out.split())
    assert "substitute for field observations" in out and "professional" in out


def test_every_subcommand_has_help():
    parser = build_parser()
    sub = next(a for a in parser._actions if a.dest == "command")
    for name, sp in sub.choices.items():
        assert sp.format_help(), name


def test_bad_input_is_one_line_and_exit_2(tmp_path):
    bad = tmp_path / "not_a_dem.tif"
    bad.write_text("this is not a raster")
    proc = subprocess.run(
        [sys.executable, "-m", "regionmap", "terrain", str(bad), "--out", str(tmp_path / "t")],
        capture_output=True,
        text=True,
    )
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert (
        len(lines) == 1 and lines[0].startswith("regionmap: error:") and "not_a_dem.tif" in lines[0]
    )
    assert "Traceback" not in proc.stderr
    assert not (tmp_path / "t").exists()


def test_caution_text_defers_to_professionals():
    assert "avalanche service" in CAUTION and "field observations" in CAUTION


def _dem(path, *, crs="EPSG:32632", nodata_all=False):
    import numpy as np
    import rasterio
    from affine import Affine

    z = np.full((20, 20), -9999.0 if nodata_all else 0.0, dtype="float32")
    if not nodata_all:
        z += np.add.outer(np.arange(20.0), np.arange(20.0)) * 10 + 1500
    profile = dict(
        driver="GTiff",
        width=20,
        height=20,
        count=1,
        dtype="float32",
        nodata=-9999.0,
        transform=Affine(100, 0, 600_000, 0, -100, 5_200_000),
    )
    if crs:
        profile["crs"] = crs
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(z, 1)
    return path


def _zones(path, box=(600_100, 5_198_100, 601_900, 5_199_900), geometry="polygon"):
    import geopandas as gpd
    import shapely

    geom = shapely.box(*box) if geometry == "polygon" else shapely.Point(box[0], box[1])
    gpd.GeoDataFrame({"name": ["Test Zone"]}, geometry=[geom], crs="EPSG:32632").to_file(
        path, driver="GeoJSON"
    )
    return path


@pytest.mark.parametrize(
    "case, expect",
    [
        ("dem_without_crs", "coordinate reference system"),
        ("all_nodata_dem", "nodata"),
        ("unreadable_dem", "dem.tif"),
        ("zones_miss_dem", "Test Zone"),
        ("zones_without_polygons", "polygon"),
        ("unknown_config_key", "did you mean 'zone_field'"),
        ("wrong_type", "aspect_sectors"),
        ("non_utf8_config", "line 2 is not UTF-8 text (byte 0xe9)"),
        ("number_for_a_time", "[forcing] start: expected a date-time"),
        # a time with an offset beside one without: both UTC, so the run reaches the forcing
        ("time_zone_mixed", "f.nc' does not exist"),
        ("huge_zone_coordinates", "coordinate of 1e+308 m, beyond any place on Earth"),
        ("workers_zero", "--workers: expected a whole number >= 1, got 0"),
        ("workers_negative", "--workers: expected a whole number >= 1, got -2"),
    ],
)
def test_bad_inputs_exit_2_with_one_line_and_write_nothing(tmp_path, case, expect):
    dem = tmp_path / "dem.tif"
    zones = tmp_path / "zones.geojson"
    extra = ""
    if case == "dem_without_crs":
        _dem(dem, crs=None)
    elif case == "all_nodata_dem":
        _dem(dem, nodata_all=True)
    elif case == "unreadable_dem":
        dem.write_bytes(b"\x00not a raster")
    else:
        _dem(dem)
    if case == "zones_miss_dem":
        _zones(zones, box=(700_000, 5_000_000, 701_000, 5_001_000))
    elif case == "huge_zone_coordinates":
        _zones(zones, box=(600_100, 5_198_100, 1e308, 5_199_900))
    elif case == "zones_without_polygons":
        _zones(zones, geometry="point")
    else:
        _zones(zones)
    if case == "unknown_config_key":
        extra = 'zone_feild = "name"\n'
    if case == "wrong_type":
        extra = '[cells]\naspect_sectors = "eight"\n'
    forcing = 'path = "f.nc"\n'
    if case == "number_for_a_time":
        forcing += "start = 2026\n"
    if case == "time_zone_mixed":
        forcing += "start = 2026-01-01T01:00:00+01:00\nend = 2026-01-02T00:00:00\n"
    cfg = tmp_path / "run.toml"
    cfg.write_text(
        f'[region]\ndem = "dem.tif"\nzones = "zones.geojson"\n{extra}[forcing]\n{forcing}'
    )
    if case == "non_utf8_config":
        cfg.write_bytes(b"# regionmap\n# Sch\xe9ma in Latin-1\n" + cfg.read_bytes())
    out = tmp_path / "out"
    options = {"workers_zero": ["--workers", "0"], "workers_negative": ["--workers", "-2"]}
    proc = subprocess.run(
        [sys.executable, "-m", "regionmap", "run", str(cfg), "--out", str(out)]
        + options.get(case, []),
        capture_output=True,
        text=True,
    )
    assert proc.returncode == 2, proc.stderr
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("regionmap: error:"), proc.stderr
    assert expect in lines[0]
    assert not out.exists()


def test_library_warnings_do_not_reach_the_terminal(tmp_path):
    # a raster without any georeferencing: rasterio warns (NotGeoreferencedWarning) on open;
    # the user sees only regionmap's one line
    import warnings

    import numpy as np
    import rasterio

    dem = tmp_path / "plain.tif"
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        with rasterio.open(
            dem, "w", driver="GTiff", width=20, height=20, count=1, dtype="float32"
        ) as dst:
            dst.write(np.full((20, 20), 1500.0, dtype="float32"), 1)
    base = [sys.executable, "-m", "regionmap"]
    args = ["terrain", str(dem), "--out", str(tmp_path / "t")]
    proc = subprocess.run(base + args, capture_output=True, text=True)
    assert proc.returncode == 2
    assert (
        proc.stderr.strip().splitlines() == [proc.stderr.strip().splitlines()[0]]
        and "no coordinate reference system" in proc.stderr
    )
    # -v shows them, as one log line each
    proc = subprocess.run(base + ["-v"] + args, capture_output=True, text=True)
    assert proc.returncode == 2 and "NotGeoreferencedWarning" in proc.stderr


def test_an_output_folder_that_holds_the_inputs_is_refused(tmp_path):
    # as `regionmap run DEMO/scenario/demo.toml --out DEMO`: the run would replace its inputs
    scenario = tmp_path / "scenario"
    scenario.mkdir()
    _dem(scenario / "dem.tif")
    _zones(scenario / "zones.geojson")
    cfg = scenario / "run.toml"
    cfg.write_text('[region]\ndem = "dem.tif"\nzones = "zones.geojson"\n[forcing]\npath = "f.nc"\n')
    before = sorted(p.name for p in tmp_path.rglob("*"))
    proc = subprocess.run(
        [sys.executable, "-m", "regionmap", "run", str(cfg), "--out", str(tmp_path)],
        capture_output=True,
        text=True,
    )
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and "holds this run's config" in lines[0], proc.stderr
    assert sorted(p.name for p in tmp_path.rglob("*")) == before

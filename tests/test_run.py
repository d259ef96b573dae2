"""The regional run: chunking and schedulers, continuation, rasters, interrupted runs.

A small scenario keeps these fast: the demo DEM, one demo zone, 400 m bands (45 cells) and a
week of the demo season around its rain-on-snow event.
"""

from __future__ import annotations

import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest
import rasterio
import xarray as xr

from regionmap.cli import main
from regionmap.config import load_config
from regionmap.io.outdir import MARKER_NAME
from regionmap.pipeline.execute import execute

CONFIG = """
[region]
dem = "dem.tif"
zones = "zones.geojson"
[cells]
band_step_m = {step}
[forcing]
path = "{forcing}"
start = "{start}"
end = "{end}"
[output]
dir = "out"
"""

COMPARED = (
    "snow_depth_cm",
    "swe_kg_m2",
    "crust_count",
    "pwl_depth_cm",
    "threshold_count_max",
    "liquid_water_kg_m2",
    "snowfall_kg_m2",
    "rain_kg_m2",
    "runoff_kg_m2",
)


@pytest.fixture(scope="session")
def scenario(tmp_path_factory):
    from regionmap.demo.scenario import SHIPPED_DEM, demo_zones
    from regionmap.demo.weather import write_demo_forcing
    from regionmap.io.dem import read_dem
    from regionmap.io.writers import write_geojson

    d = tmp_path_factory.mktemp("scenario")
    shutil.copyfile(SHIPPED_DEM, d / "dem.tif")
    write_geojson(d / "zones.geojson", demo_zones().iloc[[1]])
    dem = read_dem(d / "dem.tif")
    write_demo_forcing(
        d / "forcing.nc",
        dem.elevation_m,
        dem.transform,
        dem.crs,
        start="2026-01-15T01:00",
        end="2026-01-22T00:00",
    )
    write_demo_forcing(
        d / "late.nc",
        dem.elevation_m,
        dem.transform,
        dem.crs,
        start="2026-01-19T01:00",
        end="2026-01-22T00:00",
    )
    return d


def config(
    scenario: Path,
    name: str,
    *,
    step=400,
    forcing="forcing.nc",
    start="2026-01-15T01:00",
    end="2026-01-22T00:00",
):
    path = scenario / f"{name}.toml"
    path.write_text(CONFIG.format(step=step, forcing=forcing, start=start, end=end))
    return load_config(path)


def run(cfg, out: Path, **kw):
    return execute(cfg, out_dir=out, progress=False, report=False, **kw)


def read(out: Path):
    with xr.open_dataset(out / "cells.nc") as ds:
        cells = {v: ds[v].values.copy() for v in COMPARED}
        cells["time"] = ds["time"].values.copy()
    with xr.open_dataset(out / "state_end.nc") as ds:
        state = {
            v: ds[v].values.copy()
            for v in ("thickness_m", "ice_kg_m2", "liquid_kg_m2", "temperature_k")
        }
    return cells, state


def assert_same(a, b):
    for part_a, part_b in zip(a, b, strict=True):
        for name in part_a:
            np.testing.assert_array_equal(part_a[name], part_b[name], err_msg=name)


@pytest.fixture(scope="session")
def reference(scenario, tmp_path_factory):
    out = tmp_path_factory.mktemp("ref") / "out"
    outcome = run(config(scenario, "ref"), out)
    return out, outcome


def test_reference_run_writes_the_contract(reference):
    out, outcome = reference
    # the shared output-contract checker (names, shapes, conventions); figures are skipped here
    proc = subprocess.run(
        [
            sys.executable,
            str(Path(__file__).parents[2] / "shared/tools/check_outputs.py"),
            str(out),
        ],
        capture_output=True,
        text=True,
    )
    failed = [
        ln
        for ln in proc.stdout.splitlines()
        if ln.startswith("FAIL") and "report.html" not in ln and "figures" not in ln
    ]
    assert not failed, proc.stdout
    assert outcome.n_cells > 10
    # the ensemble's saved control states lived in the temporary output folder and are gone
    assert not (out / ".checkpoints").exists()
    assert ".checkpoints" not in " ".join(json.loads((out / MARKER_NAME).read_text())["files"])


@pytest.mark.parametrize("chunk_size", [1, 37])
def test_results_do_not_depend_on_chunking(scenario, reference, tmp_path, chunk_size):
    cfg = config(scenario, "ref")
    cfg = cfg.model_copy(update={"run": cfg.run.model_copy(update={"chunk_size": chunk_size})})
    run(cfg, tmp_path / "out")
    assert_same(read(reference[0]), read(tmp_path / "out"))


def test_results_do_not_depend_on_the_scheduler(scenario, reference, tmp_path):
    # a 2-process dask.distributed LocalCluster on loopback
    cfg = config(scenario, "ref")
    cfg = cfg.model_copy(update={"run": cfg.run.model_copy(update={"chunk_size": 20})})
    run(cfg, tmp_path / "out", workers=2)
    assert_same(read(reference[0]), read(tmp_path / "out"))


def test_continuation_equals_one_run(scenario, reference, tmp_path):
    first = tmp_path / "b"
    run(config(scenario, "first", end="2026-01-18T12:00"), first)
    second = tmp_path / "c"
    run(config(scenario, "ref"), second, continue_from=first / "state.nc")
    ref_cells, ref_state = read(reference[0])
    cells, state = read(second)
    n = cells["time"].size
    assert cells["time"][0] == np.datetime64("2026-01-18T13:00")
    for name in COMPARED:
        np.testing.assert_array_equal(cells[name], ref_cells[name][:, -n:], err_msg=name)
    for name in state:
        np.testing.assert_array_equal(state[name], ref_state[name], err_msg=name)


def test_continuation_mismatches_exit_2(scenario, reference, tmp_path, capsys):
    state = reference[0] / "state.nc"
    other = config(scenario, "other", step=300)
    assert (
        main(
            [
                "run",
                str(other.source),
                "--out",
                str(tmp_path / "x"),
                "--continue-from",
                str(state),
                "--quiet",
            ]
        )
        == 2
    )
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "state" in err[0] and "cells" in err[0]
    # a state valid at 2026-01-18 12:00 and forcing that starts at 2026-01-19 01:00: a gap
    early = tmp_path / "early"
    run(config(scenario, "early", end="2026-01-18T12:00"), early)
    late = config(scenario, "late", forcing="late.nc", start="2026-01-19T01:00")
    assert (
        main(
            [
                "run",
                str(late.source),
                "--out",
                str(tmp_path / "y"),
                "--continue-from",
                str(early / "state.nc"),
                "--quiet",
            ]
        )
        == 2
    )
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "gap" in err[0]
    assert not (tmp_path / "x").exists() and not (tmp_path / "y").exists()


def test_rasters_hold_their_cells_values(reference):
    out, _ = reference
    with rasterio.open(out / "maps" / "cell_id.tif") as src:
        index = src.read(1)
        nodata = src.nodata
    with rasterio.open(out / "maps" / "snow_depth_cm.tif") as src:
        depth = src.read(1, masked=True)
    map_time = np.datetime64(json.loads((out / "run.json").read_text())["period"]["map_time"])
    with xr.open_dataset(out / "cells.nc") as ds:
        last = ds["snow_depth_cm"].sel(time=map_time).values  # the rasters are at the map time
        ids = ds["cell_id"].values
    rng = np.random.default_rng(1)
    rows, cols = np.nonzero(index != nodata)
    for k in rng.choice(rows.size, 50, replace=False):
        cell = int(index[rows[k], cols[k]])
        pos = int(np.nonzero(ids == cell)[0][0])
        assert depth[rows[k], cols[k]] == pytest.approx(last[pos], abs=1e-4)


def _phase_reached(out: Path, phase: str) -> bool:
    new = list(out.parent.glob(f".{out.name}.regionmap-new-*"))
    if phase == "reading":
        return not new
    if not new:
        return False
    names = {p.name for p in new[0].iterdir()}
    if phase == "running":
        return any(n.startswith(".cells.nc") for n in names) and "state.nc" not in names
    return "state.nc" in names  # writing the products


@pytest.mark.parametrize("phase", ["reading", "running", "writing"])
def test_killed_run_keeps_the_previous_output(scenario, reference, tmp_path, phase):
    out = tmp_path / "out"
    run(config(scenario, "ref"), out)
    before = sorted(p.relative_to(out) for p in out.rglob("*"))
    proc = subprocess.Popen(
        [
            sys.executable,
            "-m",
            "regionmap",
            "run",
            str(scenario / "ref.toml"),
            "--out",
            str(out),
            "--quiet",
        ],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    deadline = time.monotonic() + 120
    time.sleep(0.5 if phase == "reading" else 0.0)
    while time.monotonic() < deadline and proc.poll() is None and not _phase_reached(out, phase):
        time.sleep(0.005)
    assert proc.poll() is None, f"the run finished before reaching the {phase} phase"
    os.kill(proc.pid, signal.SIGKILL)
    proc.wait()
    assert sorted(p.relative_to(out) for p in out.rglob("*")) == before
    xr.open_dataset(out / "cells.nc").close()
    # the next run recovers the leftovers and completes
    run(config(scenario, "ref"), out)
    assert not list(out.parent.glob(f".{out.name}.regionmap-*"))
    assert_same(read(reference[0]), read(out))


def test_restart_from_an_observed_profile_through_the_cli(scenario, reference, tmp_path):
    import json
    import shutil

    # the invented CSV profile of tests/data/profiles, re-dated into this scenario's week
    src = Path(__file__).parent / "data" / "profiles" / "winter_top_down.csv"
    profile = tmp_path / "pit.csv"
    profile.write_text(
        src.read_text().replace("# time: 2026-02-10T09:30Z", "# time: 2026-01-19T12:00Z")
    )
    with xr.open_dataset(reference[0] / "cells.nc") as ds:
        sel = (
            (ds["aspect_sector"].values == "N")
            & np.isfinite(ds["band_lower_m"].values)
            & np.isfinite(ds["band_upper_m"].values)
        )
        pos = int(np.nonzero(sel)[0][0])
        band = f"{ds['band_lower_m'].values[pos]:.0f}-{ds['band_upper_m'].values[pos]:.0f}"
        zone = str(ds["zone"].values[pos])
    out = tmp_path / "out"
    shutil.copy(scenario / "ref.toml", tmp_path / "ref.toml")
    for name in ("dem.tif", "zones.geojson", "forcing.nc"):
        (tmp_path / name).symlink_to(scenario / name)
    code = main(
        [
            "run",
            str(tmp_path / "ref.toml"),
            "--out",
            str(out),
            "--quiet",
            "--restart",
            str(profile),
            "--zone",
            zone,
            "--band",
            band,
            "--aspect",
            "N",
        ]
    )
    assert code == 0
    record = json.loads((out / "run.json").read_text())
    assert record["restarts"], "run.json lists the restarted cells"
    assert "pit.csv" in json.dumps(record["restarts"])
    with xr.open_dataset(out / "cells.nc") as ds:
        t = ds["time"].values
        k = int(np.searchsorted(t, np.datetime64("2026-01-19T13:00")))
        depth = ds["snow_depth_cm"].values[pos]
    # the profile is 100 cm deep (the file's top row); one hour later the pack has barely settled
    assert 95.0 <= depth[k] <= 100.0
    assert depth[-1] < depth[k]  # and then it evolves (settles)


def test_an_existing_cluster_via_scheduler_address(scenario, reference, tmp_path):
    # --scheduler ADDRESS joins an existing dask.distributed cluster (here one in this process)
    from distributed import LocalCluster

    with LocalCluster(
        n_workers=1,
        threads_per_worker=2,
        processes=False,
        dashboard_address=None,
        worker_dashboard_address=None,
        silence_logs=40,
    ) as cluster:
        run(config(scenario, "ref"), tmp_path / "out", scheduler=cluster.scheduler_address)
    assert_same(read(reference[0]), read(tmp_path / "out"))


def test_chunks_keep_groups_whole():
    from regionmap.pipeline.plan import chunk_ranges

    zones = np.repeat([0, 1, 2, 3], [5, 300, 20, 40])
    assert chunk_ranges(zones.size, 50, zones) == [(0, 5), (5, 305), (305, 325), (325, 365)]
    assert chunk_ranges(zones.size, 30, zones) == [(0, 5), (5, 305), (305, 325), (325, 365)]
    assert chunk_ranges(zones.size, 330, zones) == [(0, 325), (325, 365)]
    assert chunk_ranges(zones.size, 10_000, zones) == [(0, 365)]
    with pytest.raises(RuntimeError):
        chunk_ranges(4, 2, np.array([0, 1, 0, 1]))


def test_wind_transport_results_do_not_depend_on_chunking(scenario, tmp_path):
    # wind transport conserves each zone's mass hour by hour: chunks must keep zones whole
    from regionmap.demo.scenario import demo_zones
    from regionmap.io.writers import write_geojson

    write_geojson(scenario / "two_zones.geojson", demo_zones().iloc[[1, 2]])
    base = config(scenario, "transport", step=500, start="2026-01-18T01:00")
    outs = []
    for size in (1000, 7):
        cfg = base.model_copy(
            update={
                "region": base.region.model_copy(update={"zones": scenario / "two_zones.geojson"}),
                "run": base.run.model_copy(update={"chunk_size": size}),
            }
        )
        run(cfg, tmp_path / f"out{size}")
        outs.append(read(tmp_path / f"out{size}"))
    assert_same(outs[0], outs[1])


def _zones_config(scenario: Path, name: str, zones, **kw):
    """A config of the two-zone scenario with its own zones file."""
    from regionmap.io.writers import write_geojson

    write_geojson(scenario / f"{name}.geojson", zones)
    cfg = config(scenario, name, step=500, start="2026-01-18T01:00", **kw)
    text = cfg.source.read_text().replace("zones.geojson", f"{name}.geojson")
    cfg.source.write_text(text)
    return load_config(cfg.source)


def _by_identity(out: Path, names=("snow_depth_cm", "swe_kg_m2", "crust_count")):
    """cells.nc variables with rows sorted by cell identity (zone, band, aspect, class)."""
    with xr.open_dataset(out / "cells.nc") as ds:
        keys = list(
            zip(
                ds["zone"].values.astype(str),
                ds["band_lower_m"].values,
                ds["aspect_sector"].values.astype(str),
                ds["slope_class"].values,
                strict=True,
            )
        )
        order = sorted(range(len(keys)), key=keys.__getitem__)
        return [keys[k] for k in order], {v: ds[v].values[order] for v in names}


def test_continuation_matches_cells_by_identity(scenario, tmp_path, capsys):
    from regionmap.demo.scenario import demo_zones

    zones = demo_zones()
    first = _zones_config(scenario, "ab_first", zones.iloc[[1, 2]], end="2026-01-19T00:00")
    run(first, tmp_path / "first")
    state = tmp_path / "first" / "state.nc"
    same = _zones_config(scenario, "ab", zones.iloc[[1, 2]], end="2026-01-20T00:00")
    run(same, tmp_path / "same", continue_from=state)
    # the zones file reordered between the two days: each cell continues its own snowpack
    swapped = _zones_config(scenario, "ba", zones.iloc[[2, 1]], end="2026-01-20T00:00")
    run(swapped, tmp_path / "swapped", continue_from=state)
    keys_same, same_values = _by_identity(tmp_path / "same")
    keys_swapped, swapped_values = _by_identity(tmp_path / "swapped")
    assert keys_same == keys_swapped
    for name, values in same_values.items():
        np.testing.assert_array_equal(values, swapped_values[name], err_msg=name)
    with xr.open_dataset(tmp_path / "swapped" / "cells.nc") as ds:
        assert ds["zone"].values[0] == zones["name"].iloc[2]  # the new order is the file's

    # one zone edited, or one left out: refused with one line naming it, nothing written
    edited = zones.iloc[[1, 2]].copy()
    edited.loc[edited.index[1], "geometry"] = edited.geometry.iloc[1].buffer(-500)
    capsys.readouterr()
    for name, zones_now, expect in (
        ("edited", edited, f"zone {zones['name'].iloc[2]!r} has another polygon"),
        ("a_only", zones.iloc[[1]], f"the state's cell zone {zones['name'].iloc[2]!r}"),
    ):
        cfg = _zones_config(scenario, name, zones_now, end="2026-01-20T00:00")
        out = tmp_path / name
        args = ["run", str(cfg.source), "--out", str(out), "--continue-from", str(state)]
        assert main([*args, "--quiet"]) == 2
        lines = capsys.readouterr().err.strip().splitlines()
        assert len(lines) == 1 and expect in lines[0] and "state.nc" in lines[0], lines
        assert not out.exists()


def _no_space(*args, **kwargs):
    import errno

    raise OSError(errno.ENOSPC, "No space left on device")


@pytest.mark.parametrize("writer", ["cells.nc", "maps/"])
def test_a_full_disk_ends_the_run_with_one_line_and_leaves_nothing(
    scenario, tmp_path, monkeypatch, capsys, writer
):
    # a disk that fills while a writer runs: simulated where the file's bytes are written
    # (HDF5 chunks of cells.nc; GDAL's GeoTIFF writer raising its own error)
    import rasterio

    if writer == "cells.nc":
        from regionmap.io.results import CellsNcWriter

        monkeypatch.setattr(CellsNcWriter, "_store_blocks", _no_space)
    else:

        def gdal_full(self, *args, **kwargs):
            raise rasterio.errors.RasterioIOError(
                "TIFFAppendToStrip:Write error at scanline 0: No space left on device"
            )

        # GTiff files are written by a DatasetWriter, COGs by a BufferedDatasetWriter
        for writer_class in (rasterio.io.DatasetWriter, rasterio.io.BufferedDatasetWriter):
            monkeypatch.setattr(writer_class, "write", gdal_full)
    out = tmp_path / "out"
    cfg = config(scenario, "full", start="2026-01-20T01:00")
    assert main(["run", str(cfg.source), "--out", str(out), "--quiet"]) == 2
    lines = capsys.readouterr().err.strip().splitlines()
    assert len(lines) == 1, lines
    assert "no space left on device while writing" in lines[0] and writer in lines[0], lines
    assert list(tmp_path.iterdir()) == []  # no output, no half-written folder, no lock


def test_too_little_free_space_is_refused_before_the_run(scenario, tmp_path, monkeypatch, capsys):
    import shutil
    from collections import namedtuple

    usage = namedtuple("usage", "total used free")
    monkeypatch.setattr(shutil, "disk_usage", lambda path: usage(10**9, 10**9 - 10**6, 10**6))
    out = tmp_path / "out"
    cfg = config(scenario, "ref")
    assert main(["run", str(cfg.source), "--out", str(out), "--quiet"]) == 2
    lines = capsys.readouterr().err.strip().splitlines()
    assert len(lines) == 1 and "not enough free space" in lines[0] and "1 MB free" in lines[0]
    assert list(tmp_path.iterdir()) == []

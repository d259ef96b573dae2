"""The region-preparation cache: identical results, invalidated by every input that shapes
them, written atomically, bounded, and never fatal. The small scenario of test_run."""

from __future__ import annotations

import dataclasses
import json
import os
import warnings
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
import scipy.sparse as sp
from test_run import assert_same, config, read, run, scenario  # noqa: F401  (session fixture)

from regionmap.errors import RegionmapWarning
from regionmap.pipeline import cache as cache_module
from regionmap.pipeline.cache import PreparationCache
from regionmap.pipeline.region import open_grid_forcing, prepare_batch, prepare_region


def _assert_same_value(a, b, where):
    if dataclasses.is_dataclass(a) and not isinstance(a, type):
        for f in dataclasses.fields(a):
            _assert_same_value(getattr(a, f.name), getattr(b, f.name), f"{where}.{f.name}")
    elif sp.issparse(a):
        assert (a != b).nnz == 0 and a.shape == b.shape, where
    elif isinstance(a, np.ndarray):
        np.testing.assert_array_equal(a, b, err_msg=where)
    elif isinstance(a, pd.DataFrame):
        pd.testing.assert_frame_equal(pd.DataFrame(a), pd.DataFrame(b), obj=where)


def test_cached_preparation_equals_a_fresh_one(scenario, tmp_path):  # noqa: F811
    cfg = config(scenario, "cache")
    cache = PreparationCache(tmp_path / "cache")
    fresh = prepare_region(cfg)
    stored = prepare_region(cfg, cache=cache)
    loaded = prepare_region(cfg, cache=cache)
    assert "terrain" in stored.timings_s and "region_from_cache" in loaded.timings_s
    assert {p.name.split("-")[0] for p in cache.entries()} == {"region"}
    for part in ("terrain", "cells"):
        _assert_same_value(getattr(fresh, part), getattr(loaded, part), part)
    np.testing.assert_array_equal(fresh.dem.elevation_m, loaded.dem.elevation_m)
    pd.testing.assert_frame_equal(fresh.cells.table, loaded.cells.table)
    gf = open_grid_forcing(cfg)
    batch_fresh = prepare_batch(fresh, gf, cfg)
    prepare_batch(stored, gf, cfg, cache=cache)  # stores the weights
    batch_loaded = prepare_batch(loaded, gf, cfg, cache=cache)
    assert len([p for p in cache.entries() if p.name.startswith("weights-")]) == 1
    _assert_same_value(batch_fresh, batch_loaded, "batch")


def test_run_results_are_identical_with_and_without_the_cache(scenario, tmp_path, monkeypatch):  # noqa: F811
    monkeypatch.setenv("REGIONMAP_CACHE_DIR", str(tmp_path / "cache"))
    cfg = config(scenario, "cached-run")
    cache = PreparationCache(tmp_path / "cache")
    prepare_batch(prepare_region(cfg, cache=cache), open_grid_forcing(cfg), cfg, cache=cache)
    run(cfg, tmp_path / "cached")
    run(cfg, tmp_path / "uncached", use_cache=False)
    assert_same(read(tmp_path / "cached"), read(tmp_path / "uncached"))
    for name, expected in (("cached", "loaded"), ("uncached", "prepared")):
        record = json.loads((tmp_path / name / "run.json").read_text())["preparation_cache"]
        assert record["region"] == expected
    assert (
        json.loads((tmp_path / "uncached" / "run.json").read_text())["preparation_cache"]["dir"]
        is None
    )


def test_key_changes_with_every_input_that_shapes_the_preparation(scenario, tmp_path, monkeypatch):  # noqa: F811
    cfg = config(scenario, "keys")
    cache = PreparationCache(tmp_path / "cache")
    base = cache.region_key(cfg)
    assert cache.region_key(cfg) == base  # deterministic
    keys = {base}

    def differs(key):
        assert key not in keys
        keys.add(key)

    # the DEM's bytes (one pixel of one metre), the zones' bytes, under the same names
    import rasterio

    dem = tmp_path / "dem.tif"
    zones = tmp_path / "zones.geojson"
    dem.write_bytes(cfg.region.dem.read_bytes())
    zones.write_bytes(cfg.region.zones.read_bytes())
    moved = cfg.model_copy(
        update={"region": cfg.region.model_copy(update={"dem": dem, "zones": zones})}
    )
    assert cache.region_key(moved) == base  # same bytes elsewhere: same key
    with rasterio.open(dem, "r+") as src:
        z = src.read(1)
        z[10, 10] += 1.0
        src.write(z, 1)
    differs(cache.region_key(moved))
    zones.write_text(zones.read_text().replace("Yrlen Cirque", "Yrlen Basin"))
    differs(cache.region_key(moved))
    # settings, zone field, version, code
    azimuths = cfg.terrain.horizon_azimuths * 2
    terrain = cfg.terrain.model_copy(update={"horizon_azimuths": azimuths})
    differs(cache.region_key(cfg.model_copy(update={"terrain": terrain})))
    cells = cfg.cells.model_copy(update={"aspect_sectors": 4})
    differs(cache.region_key(cfg.model_copy(update={"cells": cells})))
    other_field = cfg.model_copy(
        update={"region": cfg.region.model_copy(update={"zone_field": "other"})}
    )
    differs(cache.region_key(other_field))
    monkeypatch.setattr(cache_module, "__version__", "0.0.0-other")
    differs(cache.region_key(cfg))
    monkeypatch.setattr(cache_module, "_code_fingerprint", lambda: "edited code")
    differs(cache.region_key(cfg))
    # the weights: also the forcing grid and the interpolation
    gf = open_grid_forcing(cfg)
    d = cfg.downscale
    w = cache.weights_key(base, gf, d)
    assert w != cache.weights_key(base, gf, d.model_copy(update={"interpolation": "idw"}))
    assert w != cache.weights_key("another region", gf, d)
    grid = SimpleNamespace(lon=gf.grid.lon + 0.01, lat=gf.grid.lat, crs=gf.grid.crs)
    shifted = SimpleNamespace(grid=grid, surface_altitude=gf.surface_altitude)
    assert w != cache.weights_key(base, shifted, d)


def test_unreadable_entry_is_prepared_again_and_replaced(scenario, tmp_path):  # noqa: F811
    cfg = config(scenario, "corrupt")
    cache = PreparationCache(tmp_path / "cache")
    prepare_region(cfg, cache=cache)
    (entry,) = cache.entries()
    entry.write_bytes(entry.read_bytes()[:100])  # truncated
    with pytest.warns(RegionmapWarning, match="could not be read"):
        region = prepare_region(cfg, cache=cache)
    assert "terrain" in region.timings_s  # prepared again
    assert "region_from_cache" in prepare_region(cfg, cache=cache).timings_s  # and replaced
    assert not list(entry.parent.glob(".*tmp*"))  # no temporary files left


def test_unwritable_cache_folder_warns_and_the_run_goes_on(scenario, tmp_path):  # noqa: F811
    cfg = config(scenario, "unwritable")
    blocker = tmp_path / "file"
    blocker.write_text("not a folder")
    with pytest.warns(RegionmapWarning, match="running without the cache"):
        region = prepare_region(cfg, cache=PreparationCache(blocker / "cache"))
    assert len(region.cells.table) > 0


def test_folder_is_pruned_least_recently_used_first(tmp_path):
    cache = PreparationCache(tmp_path)
    for k, age in enumerate((30, 20, 10)):  # seconds ago
        path = cache.save("region", f"k{k}", b"x" * 1000)
        t = path.stat().st_mtime - age
        os.utime(path, (t, t))
    cache.max_bytes = 2500  # room for two entries
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        cache.load("region", "k0")  # used just now: the most recent
    newest = cache.save("weights", "k3", b"y" * 1000)
    names = sorted(p.name for p in cache.entries())
    assert newest.name in names and "region-k0.pickle" in names
    assert "region-k1.pickle" not in names and "region-k2.pickle" not in names

"""Shared fixtures: the shipped demo region, its terrain and cells (built once per session)."""

from __future__ import annotations

import pytest


@pytest.fixture(scope="session")
def demo_dem():
    from regionmap.demo.scenario import SHIPPED_DEM
    from regionmap.io.dem import read_dem

    return read_dem(SHIPPED_DEM)


@pytest.fixture(scope="session")
def demo_zones(demo_dem):
    from regionmap.demo.scenario import SHIPPED_ZONES
    from regionmap.io.zones import read_zones

    return read_zones(SHIPPED_ZONES, "name", demo_dem)


@pytest.fixture(scope="session")
def demo_terrain(demo_dem):
    from regionmap.config import TerrainSettings
    from regionmap.terrain import compute_terrain

    return compute_terrain(demo_dem, TerrainSettings())


@pytest.fixture(scope="session")
def demo_cells(demo_dem, demo_terrain, demo_zones):
    from regionmap.cells import build_cells
    from regionmap.config import CellSettings

    return build_cells(
        demo_dem,
        demo_terrain,
        demo_zones,
        CellSettings(band_edges_m=(1500, 1800, 2100, 2400, 2700, 3000)),
    )


@pytest.fixture(scope="session")
def demo_run(tmp_path_factory):
    """The demo scenario run once by the whole chain (report skipped): (config, scenario
    folder, output folder)."""
    import regionmap.pipeline.ensemble
    from regionmap.config import load_config
    from regionmap.demo.scenario import build_demo_scenario
    from regionmap.pipeline.execute import execute

    root = tmp_path_factory.mktemp("demo_run")
    cfg = load_config(build_demo_scenario(root / "scenario"))
    with pytest.MonkeyPatch.context() as mp:  # the rain-crust ensemble in several cell blocks
        mp.setattr(regionmap.pipeline.ensemble, "_ENSEMBLE_BLOCK_CELLS", 200)
        execute(cfg, out_dir=root / "out", report=False, progress=False)
    return cfg, root / "scenario", root / "out"


@pytest.fixture(scope="session", autouse=True)
def _private_preparation_cache(tmp_path_factory):
    """Runs inside the tests keep their prepared regions in a cache folder of their own."""
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("REGIONMAP_CACHE_DIR", str(tmp_path_factory.mktemp("regionmap-cache")))
        yield

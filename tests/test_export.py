"""GIS export on the synthetic cone run: rasters read back with rasterio, the GeoPackage and
GeoJSON with geopandas/pyogrio (the reference readers of GDAL's formats)."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
import pytest
import rasterio
import rasterio.features
import shapely
from test_summaries_synth import CRS, TRANSFORM, cone_dem, synthetic_run

from regionmap.errors import InputError
from regionmap.io.outdir import OutputFolder
from regionmap.io.writers import write_geotiff
from regionmap.products.gis import MAP_SPECS, cells_to_raster, write_gis
from regionmap.products.rain_crust import (
    RainEvent,
    rain_crust_limits,
    rain_crust_lines,
    rain_crust_presence,
    rain_crust_sentence,
    rain_events,
    zone_rain_crust_columns,
)
from regionmap.products.summaries import layers_of_concern, summary_tables, terrain_weights_km2

MAP_TIME = "2026-01-22T12:00"
CHECKER = Path("/work/shared/tools/check_outputs.py")


class _Cells:
    """Stand-in with the documented CellSet surface (table, index, polygons())."""

    def __init__(self, table, index):
        self.table, self.index = table, index

    def polygons(self):
        shapes = rasterio.features.shapes(self.index, mask=self.index >= 0, transform=TRANSFORM)
        rec = [(int(v), shapely.geometry.shape(g)) for g, v in shapes]
        g = gpd.GeoDataFrame(
            {"cell_id": [r[0] for r in rec]}, geometry=[r[1] for r in rec], crs=CRS
        )
        return g.dissolve(by="cell_id").reset_index()[["cell_id", "geometry"]]


def _assemble(folder: Path, run):
    dem, index, table, slope, area, diag, prof = run
    cellset = _Cells(table, index)
    w = terrain_weights_km2(index, slope, area, len(table))
    tabs = summary_tables(diag, prof, table, w, map_time=MAP_TIME, local_timezone="Etc/GMT+7")
    # the cone (26.6°) has no 30-50° terrain: weight the layers over all terrain here
    loc = layers_of_concern(
        diag, prof, table, w["all_km2"].to_numpy(), time=MAP_TIME, local_timezone="Etc/GMT+7"
    )
    regions = cellset.polygons().merge(
        table[["zone", "aspect_sector"]], left_on="cell_id", right_index=True
    )
    lims, zlims = [], []
    for ev in rain_events(prof).itertuples():
        presence = rain_crust_presence(prof, event_id=ev.event_id)
        # rain share 50 % at the design's crust top, 2000 m, linear across it
        share = np.clip(0.5 + (2000.0 - table["elevation_m"].to_numpy()) / 200.0, 0.0, 1.0)
        event = RainEvent(ev.event_id, ev.event_time, presence, share)
        lims.append(rain_crust_limits(table, w["all_km2"].to_numpy(), event))
        zlims.append(rain_crust_limits(table, w["all_km2"].to_numpy(), event, by=("zone",)))
    lim = pd.concat(lims, ignore_index=True)
    lines = rain_crust_lines(lim, dem, TRANSFORM, CRS, regions)
    rc = zone_rain_crust_columns(pd.concat(zlims, ignore_index=True), rain_crust_sentence(lim))
    zone_table = tabs.zones.merge(rc, left_on="zone", right_index=True, how="left")
    zones_gdf = regions.dissolve(by="zone").reset_index()[["zone", "geometry"]]
    c = tabs.cells
    maps = {
        "depth_hoar_fraction": c["depth_hoar_present"].to_numpy(),
        "crust_count": c["crust_count"].to_numpy(),
        "new_snow_72h_cm": c["new_snow_72h_cm"].to_numpy(),
        "snow_depth_cm": c["snow_depth_cm"].to_numpy(),
        "pwl_depth_cm": c["pwl_depth_cm"].to_numpy(),
        "pwl_slab_cm": c["pwl_slab_cm"].to_numpy(),
    }
    write_gis(
        folder,
        cellset,
        zones_gdf,
        zone_table,
        c,
        lines,
        loc,
        maps,
        transform=TRANSFORM,
        crs=CRS,
        valid_time=MAP_TIME,
    )
    return table, index, maps


@pytest.fixture(scope="module")
def out(tmp_path_factory):
    base = tmp_path_factory.mktemp("export")
    run = synthetic_run(base)
    target = base / "out"
    with OutputFolder(target) as of:
        table, index, maps = _assemble(of.path, run)
        for name in ("cells.nc", "profiles.nc"):
            (base / name).replace(of.path / name)
    return target, table, index, maps


def test_rasters_on_the_dem_grid_with_cell_values(out):
    target, table, index, maps = out
    rng = np.random.default_rng(1)
    inside = np.argwhere(index >= 0)
    samples = inside[rng.choice(len(inside), 25, replace=False)]
    for name in [*maps, "cell_id"]:
        with rasterio.open(target / "maps" / f"{name}.tif") as r:
            # rasterio reads back the DEM's CRS and exact transform
            assert r.crs == rasterio.crs.CRS.from_user_input(CRS)
            assert r.transform == TRANSFORM and r.shape == index.shape
            assert r.tags()["valid_time"] == "2026-01-22T12:00:00Z"
            assert r.descriptions[0].startswith(name)
            if max(r.shape) > 256:  # COG layout: overviews down to a single 256-pixel tile
                assert r.overviews(1), "COG layout: internal overviews"
            a = r.read(1)
            nodata = r.nodata
        want = table.index.to_numpy() if name == "cell_id" else maps[name]
        for y, x in samples:
            v = want[index[y, x]]
            none = MAP_SPECS[name].none_value if name in MAP_SPECS else None
            if np.isfinite(v):
                assert a[y, x] == pytest.approx(v, rel=1e-6)
            elif none is not None:  # e.g. no weak layer: a value of its own, not nodata
                assert a[y, x] == none != nodata
            else:
                assert a[y, x] == nodata
        assert (a[index < 0] == nodata).all()
    with rasterio.open(target / "maps" / "crust_count.tif") as r:
        assert r.dtypes[0] == "uint8" and r.nodata == 255


def test_geopackage_layers_columns_and_geojson_crs(out):
    target, table, _, _ = out
    layers = {name for name, _ in pyogrio.list_layers(target / "zones.gpkg")}
    assert {"zones", "cells", "rain_crust_line", "layers_of_concern"} <= layers
    z = gpd.read_file(target / "zones.gpkg", layer="zones")
    for col in (
        "zone",
        "depth_hoar_fraction",
        "crust_count_mean",
        "new_snow_72h_cm",
        "new_snow_72h_kg_m2",
        "snow_depth_cm",
        "rain_crust_line_m",
        "is_forecast",
        "valid_time",
        "rain_crust_text",
    ):
        assert col in z.columns
    assert z.crs == CRS
    np.testing.assert_allclose(z["rain_crust_line_m"], 2000.0)  # designed crust top
    c = gpd.read_file(target / "zones.gpkg", layer="cells")
    assert set(c.geom_type) == {"MultiPolygon"} and len(c) == len(table)
    # the cell polygons' areas equal their pixel counts x 1 ha (shapely area, 100 m pixels)
    c = c.set_index("cell_id").loc[table.index]
    np.testing.assert_allclose(c.area, table["pixel_count"] * 1e4)
    rl = gpd.read_file(target / "zones.gpkg", layer="rain_crust_line")
    assert {"elevation_m", "lower_m", "upper_m", "event_time", "zone"} <= set(rl.columns) and len(
        rl
    ) > 0
    loc_csv = pd.read_csv(target / "layers_of_concern.csv")
    loc_gpkg = pyogrio.read_dataframe(target / "zones.gpkg", layer="layers_of_concern")
    assert len(loc_csv) == len(loc_gpkg) > 0 and "SH buried 2026-01-12" in set(
        loc_csv["layer_name"]
    )
    g = gpd.read_file(target / "zones.geojson")
    assert g.crs.to_epsg() == 4326  # RFC 7946
    assert g.total_bounds[0] > 14.0 and g.total_bounds[2] < 16.0  # EPSG:32633 near 15° E


def test_integer_maps_refuse_values_that_do_not_fit():
    idx = np.array([[0, 1], [-1, 1]])
    np.testing.assert_array_equal(
        cells_to_raster(np.array([3.0, np.nan]), idx, dtype="uint8", nodata=255),
        [[3, 255], [255, 255]],
    )
    with pytest.raises(InputError, match="do not fit uint8"):
        cells_to_raster(np.array([300.0, 1.0]), idx, dtype="uint8", nodata=255)


def test_output_contract_checker_on_assembled_folder(out, capsys):
    """Run the shared output-contract checker; the parts built here must pass. run.json,
    state.nc, figures and the report belong to other parts and are not assembled here."""
    if not CHECKER.exists():
        pytest.skip("shared checker not present")
    target = out[0]
    dem_path = target.parent / "dem.tif"
    write_geotiff(
        dem_path,
        cone_dem().astype("float32"),
        transform=TRANSFORM,
        crs=CRS,
        nodata=-9999.0,
        description="elevation [m]",
    )
    res = subprocess.run(
        [sys.executable, str(CHECKER), str(target), "--dem", str(dem_path)],
        capture_output=True,
        text=True,
    )
    assert "ok    rasters on the DEM's grid" in res.stdout
    lines = res.stdout.splitlines()
    failed = [ln for ln in lines if ln.startswith("FAIL")]
    others = ("run.json", "state.nc", "report", "figures")
    mine = [ln for ln in failed if not any(o in ln for o in others)]
    assert not mine, "\n".join(mine)

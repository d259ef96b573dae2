"""The invented demo region: a deterministic mountain DEM and four forecast zones.

Everything here is invented: the range, its zones and their names, and its place. The
coordinates (WGS 84 / UTM zone 30N, about 46.7 N 4.4 W) lie in the open Bay of Biscay, some
90 km from the nearest coast, where there are no mountains: they only give the invented range
a mid-latitude sun. ``DEMO_LOCATION_NOTE`` says so in the files the demo writes.

Model output is guidance for trained people and never a substitute for field
observations, the local avalanche service and professional standards.
"""

from __future__ import annotations

import os
import shutil
import tempfile
from pathlib import Path

import numpy as np

from regionmap.config import load_config
from regionmap.demo.relief import demo_relief_m
from regionmap.demo.weather import demo_variables_mapping, write_demo_events, write_demo_forcing
from regionmap.io.atomic import atomic_write_text
from regionmap.io.dem import read_dem
from regionmap.io.writers import write_geojson, write_geotiff
from regionmap.pipeline.execute import RunOutcome, execute

__all__ = [
    "DEMO_CRS",
    "DEMO_LOCATION_NOTE",
    "DEMO_ZONE_NAMES",
    "demo_elevation_m",
    "demo_transform",
    "make_demo_dem",
    "make_demo_zones",
    "run_demo",
    "SHIPPED_DEM",
    "SHIPPED_ZONES",
]

DEMO_CRS = "EPSG:32630"  # WGS 84 / UTM zone 30N; an open-sea location for an invented range
_NX = _NY = 300
_PIXEL_M = 100.0
_X0, _Y_TOP = 380_000.0, 5_190_000.0  # 46.6-46.9 N, 4.6-4.2 W: open sea, no real relief
DEMO_RELIEF_SEED = 14
DEMO_LOCATION_NOTE = (
    "invented demo data: an invented mountain range at a fictitious location (the coordinates "
    "lie in the open sea and only give the range a mid-latitude sun); invented zones and "
    "invented weather"
)
DEMO_ZONE_NAMES = ("Zelvorn Crest", "Yrlen Cirque", "Brasktal Front", "Quessa Basin")

_REPO = Path(__file__).resolve().parent.parent.parent
SHIPPED_DEM = _REPO / "dem_samples" / "demo_range.tif"
SHIPPED_ZONES = _REPO / "zones" / "demo_zones.geojson"


def demo_transform():
    from affine import Affine

    return Affine(_PIXEL_M, 0.0, _X0, 0.0, -_PIXEL_M, _Y_TOP)


def demo_elevation_m() -> np.ndarray:
    """The demo DEM (300 x 300 at 100 m), elevations 1200-3200 m, deterministic.

    An invented range synthesised by :func:`regionmap.demo.relief.demo_relief_m` (seed
    ``DEMO_RELIEF_SEED``): a main divide running WSW-ENE across the middle, branching valleys
    draining to every side, cirques below the highest summits, slopes up to a talus angle.
    """
    return demo_relief_m(DEMO_RELIEF_SEED, n=_NX, spacing_m=_PIXEL_M)


def make_demo_dem(path: str | os.PathLike) -> Path:
    """Write the demo DEM as a GeoTIFF (float32, metres, a fictitious location in EPSG:32630)."""
    z = demo_elevation_m().astype(np.float32)
    return write_geotiff(
        path,
        z,
        transform=demo_transform(),
        crs=DEMO_CRS,
        nodata=-9999.0,
        description="elevation [m] of an invented mountain range (demo data)",
        tags={
            "source": "regionmap.demo.scenario.make_demo_dem (invented terrain)",
            "units": "m",
            "comment": DEMO_LOCATION_NOTE,
        },
    )


def demo_zones():
    """The four invented demo zones as a GeoDataFrame in the DEM CRS (shared edges)."""
    import geopandas as gpd
    from shapely.geometry import Polygon

    def p(xy_km):
        return Polygon([(_X0 + 1000.0 * a, _Y_TOP - 30_000.0 + 1000.0 * b) for a, b in xy_km])

    # corners of the four zones; the boundary runs along the main ridge and a N-S line
    w, e, s, n = 1.5, 28.5, 1.5, 28.5
    mid_n = (14.5, n)
    mid_s = (15.5, s)
    west_ridge = [(w, 13.2), (6.0, 15.3), (12.0, 14.3)]
    centre = (15.0, 15.2)
    east_ridge = [(18.0, 16.2), (24.0, 14.8), (e, 16.0)]
    zones = [
        p([(w, n), mid_n, centre, *reversed(west_ridge)]),  # north-west
        p([mid_n, (e, n), *reversed(east_ridge), centre]),  # north-east (the cirque)
        p([*west_ridge, centre, mid_s, (w, s)]),  # south-west
        p([centre, *east_ridge, (e, s), mid_s]),  # south-east
    ]
    return gpd.GeoDataFrame({"name": list(DEMO_ZONE_NAMES)}, geometry=zones, crs=DEMO_CRS)


def make_demo_zones(path: str | os.PathLike) -> Path:
    """Write the demo zones as GeoJSON (EPSG:4326, attribute ``name``)."""

    # an input, not a product: full precision, so the shipped file is reproduced exactly
    return write_geojson(path, demo_zones(), coordinate_decimals=15)


#: The demo run: the season up to a mid-February analysis with a 72 h forecast after it.
DEMO_RUN = {
    "start": "2025-11-01T01:00",
    "analysis_time": "2026-02-14T23:00",
    "end": "2026-02-17T23:00",
    "local_timezone": "Etc/GMT-1",
    "band_step_m": 100,
}


def demo_config_text(
    *,
    forcing: str = "forcing.nc",
    dem: str = "demo_range.tif",
    zones: str = "demo_zones.geojson",
    out: str = "rerun",
) -> str:
    """The demo's TOML config (paths relative to the config file)."""
    r = DEMO_RUN
    return f"""# regionmap demo: an invented range, invented zones and an invented season.
# The location is fictitious: the coordinates (UTM zone 30N) lie in the open sea and only
# give the invented range a mid-latitude sun.
# Model output is guidance for trained people; field observations, the local avalanche
# service and professional standards come first.
[region]
dem = "{dem}"
zones = "{zones}"
zone_field = "name"
invented_data = true   # the report and the console say that the data are invented

[cells]
band_step_m = {r["band_step_m"]}
aspect_sectors = 8
flat_below_deg = 10
avalanche_terrain_deg = [30, 50]

[forcing]
path = "{forcing}"
start = "{r["start"]}"
end = "{r["end"]}"
analysis_time = "{r["analysis_time"]}"

[downscale]
# temperature lapse fitted to the model's own grid points each hour, so that the inversion
# under the freezing-rain episode's warm layer survives downscaling
lapse = "grid"

[output]
dir = "{out}"
diagnostics_every = "1h"
local_timezone = "{r["local_timezone"]}"
observation_hour = 7
"""


def build_demo_scenario(folder: str | os.PathLike, *, raw: bool = False) -> Path:
    """Write the demo's inputs (DEM, zones, forcing, events, config) into ``folder``.

    Returns the config path. ``raw=True`` writes the forcing in the raw, non-CF variant with
    the matching ``[forcing] variables`` mapping in the config.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    dem_path = folder / "demo_range.tif"
    if SHIPPED_DEM.is_file():  # the generator's output, checked by the tests
        shutil.copyfile(SHIPPED_DEM, dem_path)
    else:
        make_demo_dem(dem_path)
    make_demo_zones(folder / "demo_zones.geojson")
    dem = read_dem(dem_path)
    forcing = "forcing_raw.nc" if raw else "forcing.nc"
    write_demo_forcing(
        folder / forcing, dem.elevation_m, dem.transform, dem.crs, raw=raw, end=DEMO_RUN["end"]
    )
    write_demo_events(folder / "events_expected.json")
    text = demo_config_text(forcing=forcing)
    if raw:
        mapping = demo_variables_mapping()
        lines = ["", "[forcing.variables]"]
        for name, spec in mapping.items():
            items = ", ".join(
                f"{k} = {str(v).lower() if isinstance(v, bool) else repr(v)}".replace("'", '"')
                for k, v in spec.items()
            )
            lines.append(f"{name} = {{ {items} }}")
        text = text.replace("\n[output]", "\n".join(lines) + "\n\n[output]", 1)
        text = text.replace(
            'analysis_time = "', 'heights_m = { wind = 10, temperature = 2 }\nanalysis_time = "', 1
        )
    return atomic_write_text(folder / "demo.toml", text)


def run_demo(out: str | os.PathLike, progress: bool = True, use_cache: bool = True) -> RunOutcome:
    """Build the invented demo scenario and run the whole chain on it.

    The scenario's inputs are kept in ``<out>/scenario/`` so the run can be repeated with
    ``regionmap run <out>/scenario/demo.toml``.
    """
    with tempfile.TemporaryDirectory(prefix="regionmap-demo-") as tmp:
        config_path = build_demo_scenario(Path(tmp) / "scenario")
        cfg = load_config(config_path)
        return execute(
            cfg,
            out_dir=Path(out),
            progress=progress,
            extra_files={f"scenario/{p.name}": p for p in config_path.parent.iterdir()},
            use_cache=use_cache,
        )

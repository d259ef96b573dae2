"""The invented demo region: a deterministic mountain DEM and four forecast zones.

Everything here is invented. The range, its zones and their names are made up; the
coordinates (WGS 84 / UTM zone 32N) are placeholders that give the invented range a
mid-latitude position for solar geometry, not a real place.

Model output is guidance for trained people and never a substitute for field
observations, the local avalanche service and professional standards.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

__all__ = [
    "DEMO_CRS",
    "DEMO_ZONE_NAMES",
    "demo_elevation_m",
    "demo_transform",
    "make_demo_dem",
    "make_demo_zones",
    "run_demo",
    "SHIPPED_DEM",
    "SHIPPED_ZONES",
]

DEMO_CRS = "EPSG:32632"  # placeholder coordinates for an invented range
_NX = _NY = 300
_PIXEL_M = 100.0
_X0, _Y_TOP = 600_000.0, 5_210_000.0
DEMO_ZONE_NAMES = ("Zelvorn Crest", "Yrlen Cirque", "Brasktal Front", "Quessa Basin")

_REPO = Path(__file__).resolve().parent.parent.parent
SHIPPED_DEM = _REPO / "dem_samples" / "demo_range.tif"
SHIPPED_ZONES = _REPO / "zones" / "demo_zones.geojson"


def demo_transform():
    from affine import Affine

    return Affine(_PIXEL_M, 0.0, _X0, 0.0, -_PIXEL_M, _Y_TOP)


def _ridge(x, y, pts, height, half_width):
    """A ridge of given crest height above its surroundings along a polyline (km)."""
    pts = np.asarray(pts, dtype=float)
    d = np.full(x.shape, np.inf)
    for (x1, y1), (x2, y2) in zip(pts[:-1], pts[1:]):
        vx, vy = x2 - x1, y2 - y1
        t = np.clip(((x - x1) * vx + (y - y1) * vy) / (vx * vx + vy * vy), 0.0, 1.0)
        d = np.minimum(d, np.hypot(x - (x1 + t * vx), y - (y1 + t * vy)))
    return height * np.exp(-((d / half_width) ** 2))


def demo_elevation_m() -> np.ndarray:
    """The demo DEM (300 x 300 at 100 m), elevations 1200–3200 m, deterministic.

    A curved main ridge running WSW–ENE, side ridges running N–S, NW–SE and NE–SW, a few
    summits, a deep north-facing cirque cut into the main ridge, and a fixed sum of
    sinusoids as texture (no random numbers, so every platform builds the same grid).
    """
    x1 = (np.arange(_NX) + 0.5) * _PIXEL_M / 1000.0  # km east of the west edge
    y1 = 30.0 - (np.arange(_NY) + 0.5) * _PIXEL_M / 1000.0  # km north of the south edge
    x, y = np.meshgrid(x1, y1)
    h = 0.015 * (x + y)  # gentle rise to the north-east
    main = [(0.0, 13.0), (6.0, 15.5), (12.0, 14.5), (18.0, 16.5), (24.0, 15.0), (30.0, 17.0)]
    h = h + _ridge(x, y, main, 1.55, 2.0)
    h = h + _ridge(x, y, [(6.0, 15.5), (5.5, 22.0), (7.0, 28.0)], 1.0, 1.3)  # N-S spur
    h = h + _ridge(x, y, [(21.0, 15.8), (25.0, 10.0), (28.5, 4.0)], 1.05, 1.3)  # NW-SE spur
    h = h + _ridge(x, y, [(12.0, 14.5), (8.5, 9.0), (4.0, 3.0)], 0.9, 1.3)  # NE-SW spur
    h = h + _ridge(x, y, [(24.0, 15.0), (26.0, 22.0), (23.0, 27.5)], 0.8, 1.2)  # northern spur
    for px, py, ph, pw in [
        (18.0, 16.3, 0.55, 1.3),
        (6.0, 15.7, 0.35, 1.0),
        (26.0, 21.5, 0.3, 1.1),
        (9.5, 6.0, 0.25, 1.2),
    ]:
        h = h + ph * np.exp(-(((x - px) ** 2 + (y - py) ** 2) / pw**2))
    # north-facing cirque: a bowl on the north flank of the main ridge below the summit
    cx, cy = 18.0, 18.3
    r = np.hypot((x - cx) / 1.6, (y - cy) / 1.9)
    h = h - 0.75 * np.exp(-(r**4))
    # side valleys and ribs cut into the flanks (stronger where the terrain is high)
    texture = (
        0.20 * np.sin(2.1 * x + 0.7) * np.cos(1.7 * y + 0.3)
        + 0.12 * np.sin(3.9 * x - 2.3 * y + 1.1)
        + 0.07 * np.cos(6.3 * x + 5.1 * y + 2.0)
        + 0.04 * np.sin(9.7 * x - 8.3 * y + 0.4)
    )
    h = h + texture * (0.35 + h / 2.0)
    return 1200.0 + 2000.0 * (h - h.min()) / (h.max() - h.min())


def make_demo_dem(path: str | os.PathLike) -> Path:
    """Write the demo DEM as a GeoTIFF (float32, metres, EPSG:32632 placeholder coordinates)."""
    from regionmap.io.writers import write_geotiff

    z = demo_elevation_m().astype(np.float32)
    return write_geotiff(
        path,
        z,
        transform=demo_transform(),
        crs=DEMO_CRS,
        nodata=-9999.0,
        description="elevation [m] of an invented mountain range (demo data)",
        tags={"source": "regionmap.demo.scenario.make_demo_dem (invented terrain)", "units": "m"},
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
    from regionmap.io.writers import write_geojson

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
# Model output is guidance for trained people; field observations, the local avalanche
# service and professional standards come first.
[region]
dem = "{dem}"
zones = "{zones}"
zone_field = "name"

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
    from regionmap.demo.weather import demo_variables_mapping, write_demo_events, write_demo_forcing
    from regionmap.io.atomic import atomic_write_text
    from regionmap.io.dem import read_dem

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    dem_path = make_demo_dem(folder / "demo_range.tif")
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


def run_demo(out: str | os.PathLike, progress: bool = True) -> int:
    """Build the invented demo scenario and run the whole chain on it.

    The scenario's inputs are kept in ``<out>/scenario/`` so the run can be repeated with
    ``regionmap run <out>/scenario/demo.toml``. Prints the per-zone table with the rain-crust
    sentences and the caution; returns the exit status (0).
    """
    import tempfile

    from regionmap.cli import print_outcome
    from regionmap.config import load_config
    from regionmap.pipeline.execute import execute

    with tempfile.TemporaryDirectory(prefix="regionmap-demo-") as tmp:
        config_path = build_demo_scenario(Path(tmp) / "scenario")
        cfg = load_config(config_path)
        outcome = execute(
            cfg,
            out_dir=Path(out),
            progress=progress,
            extra_files={f"scenario/{p.name}": p for p in config_path.parent.iterdir()},
        )
    print_outcome(outcome)
    return 0

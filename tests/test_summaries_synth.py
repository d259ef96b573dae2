"""Builders of a small synthetic run (DEM, cells, cells.nc, profiles.nc) for the tests of
summaries, the rain-crust line and the GIS export. No tests here; everything is invented.

The terrain is a cone: elevation falls 50 m per 100 m pixel away from a summit at 2500 m
(slope 26.6°), so every aspect has every elevation band; elevation bands are 100 m.
Two zones split the cone west / east.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import xarray as xr
from affine import Affine

from regionmap.io.results import CellsNcWriter, ProfilesNcWriter
from regionmap.pipeline.execute import LAYER_VARS as RUNNER_LAYER_VARS

CRS = "EPSG:32633"
PIXEL_M = 100.0
N = 61
TRANSFORM = Affine(PIXEL_M, 0.0, 500_000.0, 0.0, -PIXEL_M, 5_200_000.0)
BAND_M = 100.0
SECTORS4 = np.array(["N", "E", "S", "W"])


def cone_dem() -> np.ndarray:
    """(y, x) elevation [m]: 2500 m summit at the centre, 50 m drop per pixel of distance."""
    yy, xx = np.mgrid[0:N, 0:N].astype(np.float64)
    c = (N - 1) / 2
    dist = np.hypot(yy - c, xx - c)
    return 2500.0 - 50.0 * dist


def build_cells(dem: np.ndarray):
    """Return (index (y, x) int32, table DataFrame, slope_deg (y, x), pixel_area_m2 (y, x)).

    Cells are zone × 100 m band × 4 aspects; every pixel of the cone has a slope of
    atan(50/100) = 26.6°, so avalanche-terrain weights are set per cell in the tests.
    """
    yy, xx = np.mgrid[0:N, 0:N].astype(np.float64)
    c = (N - 1) / 2
    inside = (np.hypot(yy - c, xx - c) <= c) & (np.hypot(yy - c, xx - c) > 0.5)
    # facing direction: away from the summit; 0 = north (row index grows southward)
    aspect = np.degrees(np.arctan2(xx - c, -(yy - c))) % 360.0
    sector = SECTORS4[(((aspect + 45.0) % 360.0) // 90.0).astype(int)]
    zone = np.where(xx < c, "Zone A", "Zone B")
    band_lo = np.floor(dem / BAND_M) * BAND_M
    key = pd.DataFrame(
        {"zone": zone[inside], "band_lower_m": band_lo[inside], "aspect_sector": sector[inside]}
    )
    codes, uniq = pd.factorize(pd.MultiIndex.from_frame(key), sort=True)
    index = np.full(dem.shape, -1, dtype=np.int32)
    index[inside] = codes
    n = len(uniq)
    count = np.bincount(codes, minlength=n)
    elev = np.bincount(codes, weights=dem[inside], minlength=n) / count
    x = TRANSFORM.c + (xx + 0.5) * PIXEL_M
    y = TRANSFORM.f - (yy + 0.5) * PIXEL_M
    table = pd.DataFrame(
        {
            "zone": uniq.get_level_values(0).to_numpy(object),
            "band_lower_m": uniq.get_level_values(1).to_numpy(np.float64),
            "aspect_sector": uniq.get_level_values(2).to_numpy(object),
        }
    )
    table["band_upper_m"] = table["band_lower_m"] + BAND_M
    table["slope_class"] = 0
    table["pixel_count"] = count
    table["area_km2"] = count * PIXEL_M**2 * 1e-6
    table["elevation_m"] = elev
    table["slope_deg"] = np.degrees(np.arctan(50.0 / 100.0))
    table["aspect_deg"] = table["aspect_sector"].map({"N": 0.0, "E": 90.0, "S": 180.0, "W": 270.0})
    table["sky_view_frac"] = 0.9
    table["x"] = np.bincount(codes, weights=x[inside], minlength=n) / count
    table["y"] = np.bincount(codes, weights=y[inside], minlength=n) / count
    table["lon"] = 15.0
    table["lat"] = 46.9
    table["small"] = False
    table.index = pd.RangeIndex(n, name="cell_id")
    slope = np.full(dem.shape, np.degrees(np.arctan(0.5)))
    return index, table, slope, np.full(dem.shape, PIXEL_M**2)


TIMES = (
    pd.date_range("2026-01-10T01:00", "2026-01-25T00:00", freq="h")
    .to_numpy()
    .astype("datetime64[s]")
)
DAYS = (
    pd.date_range("2026-01-10T12:00", "2026-01-24T12:00", freq="D")
    .to_numpy()
    .astype("datetime64[s]")
)


def _sec(t: str) -> np.int64:
    return np.datetime64(t, "s").astype(np.int64)


def write_cells_nc(
    path, table: pd.DataFrame, *, snowfall_kg_m2_h: float = 1.0, analysis_index: int | None = None
):
    """cells.nc with hourly diagnostics: snow depth grows with elevation, constant snowfall."""
    n, t = len(table), TIMES.size
    elev = table["elevation_m"].to_numpy()[:, None] * np.ones((1, t))
    fc = np.zeros(t, bool) if analysis_index is None else (np.arange(t) > analysis_index)
    w = CellsNcWriter(path, table, TIMES, TIMES - np.timedelta64(3600, "s"), fc)
    diag = {
        "snow_depth_cm": np.clip((elev - 1300.0) / 5.0, 0.0, None),
        "swe_kg_m2": np.clip((elev - 1300.0) / 2.0, 0.0, None),
        "new_snow_24h_cm": np.full((n, t), 24.0),
        "new_snow_72h_cm": np.full((n, t), 60.0),
        "new_snow_72h_kg_m2": np.full((n, t), 72.0),
        "crust_count": np.where(elev > 1400, 1, 0) + np.where(elev > 2000, 1, 0),
        "depth_hoar_present": (elev >= 1800).astype(int),
        "pwl_present": (elev >= 1800).astype(int),
        "pwl_depth_cm": np.where(elev >= 1800, 50.0, np.nan),
        "threshold_count_max": np.where(elev >= 2000, 5.0, 3.0),
        "liquid_water_kg_m2": np.zeros((n, t)),
        "snowfall_kg_m2": np.full((n, t), snowfall_kg_m2_h),
        "rain_kg_m2": np.zeros((n, t)),
        "runoff_kg_m2": np.zeros((n, t)),
        "sublimation_kg_m2": np.zeros((n, t)),
    }
    w.write_chunk(np.arange(n), diag)
    return w.close()


LAYER_VARS = {
    "thickness_m": ("f8", {"units": "m"}),
    "ice_kg_m2": ("f8", {"units": "kg m-2"}),
    "liquid_kg_m2": ("f8", {"units": "kg m-2"}),
    "temperature_k": ("f4", {"units": "K"}),
    "grain_size_mm": ("f4", {"units": "mm"}),
    "hardness_index": ("f4", {"units": "1"}),
    # the fixed-width character variables the runner writes (regionmap.pipeline.execute.LAYER_VARS)
    "grain_class": (RUNNER_LAYER_VARS["grain_class"][0], {}),
    "crust_kind": (RUNNER_LAYER_VARS["crust_kind"][0], {}),
    "deposition_time": ("i8", {"units": "seconds since 1970-01-01"}),
    "formation_time": ("i8", {"units": "seconds since 1970-01-01"}),
    "event_id": ("i4", {}),
}

#: designed layers: bottom DH (cells >= 1800 m), a rain crust of the rain event that began
#: 2026-01-20T10Z (event id = its start hour since 1970, as the column model tags it), formed
#: 2026-01-20T12Z on cells with crust_elev_lo <= elevation < crust_elev_hi, buried SH under a
#: storm whose region-wide window began 2026-01-13T01Z and that reached the cells
#: 2026-01-13T03Z (= 2026-01-12 20:00 at UTC-7; cells above ``late_storm_above_m`` 8 h later,
#: 2026-01-13 04:00 local), and new snow on top.
#: Grains and hardness make the SH (and the DH joined to it) a weak layer of concern by the
#: six criteria of Schweizer & Jamieson (2007): 6 mm surface hoar of hardness F under 30 cm
#: of 1F storm snow of 0.5 mm grains, 32 cm deep, scores 6 of 6 (persistent; >= 1.25 mm;
#: <= 1.3; grain-size difference 5.5 >= 0.75 mm; hardness difference 2 >= 1.7; 18-94 cm).
SH_BURIAL = "2026-01-13T03:00"
STORM_EVENT_ID = int(np.datetime64("2026-01-13T01:00", "h").astype(np.int64))
RAIN_FORMED = "2026-01-20T12:00"
RAIN_EVENT_ID = int(np.datetime64("2026-01-20T10:00", "h").astype(np.int64))


def layer_fields(
    table: pd.DataFrame,
    *,
    crust_lo_m=1400.0,
    crust_hi_m=2000.0,
    days=DAYS,
    late_storm_above_m=np.inf,
):
    """(cell, day, layer) fields for :data:`LAYER_VARS`, bottom first, 4 slots."""
    n, nd, nl = len(table), len(days), 4
    elev = table["elevation_m"].to_numpy()
    grain = np.full((n, nd, nl), "", dtype=object)
    crust = np.full((n, nd, nl), "none", dtype=object)
    thick = np.zeros((n, nd, nl))
    dep = np.zeros((n, nd, nl), np.int64)
    form = np.zeros((n, nd, nl), np.int64)
    event = np.full((n, nd, nl), -1, np.int32)
    # slot 0: old snow, DH above 1800 m; slot 1: SH (buried by slot 2); slot 2: storm snow;
    # slot 3: rain crust where designed, else rounded grains
    dh = elev >= 1800
    grain[:, :, 0] = np.where(dh, "DH", "RG")[:, None]
    thick[:, :, 0] = 0.4
    dep[:, :, 0] = _sec("2025-11-20T00:00")
    form[:, :, 0] = _sec("2025-12-01T06:00")
    grain[:, :, 1] = "SH"
    thick[:, :, 1] = 0.01
    dep[:, :, 1] = form[:, :, 1] = _sec("2026-01-11T08:00")
    grain[:, :, 2] = "DF"
    thick[:, :, 2] = 0.3
    late = np.where(elev >= late_storm_above_m, 8 * 3600, 0)[:, None]
    dep[:, :, 2] = form[:, :, 2] = _sec(SH_BURIAL) + late
    event[:, :, 2] = STORM_EVENT_ID
    rc = (elev >= crust_lo_m) & (elev < crust_hi_m)
    grain[:, :, 3] = np.where(rc, "MFcr", "RG")[:, None]
    crust[:, :, 3] = np.where(rc, "rain", "none")[:, None]
    event[:, :, 3] = np.where(rc, RAIN_EVENT_ID, -1)[:, None]
    thick[:, :, 3] = 0.02
    dep[:, :, 3] = _sec("2026-01-19T00:00")
    form[:, :, 3] = np.where(rc, _sec(RAIN_FORMED), _sec("2026-01-19T00:00"))[:, None]
    density = np.array([300.0, 100.0, 150.0, 600.0])
    grain_mm = np.zeros((n, nd, nl))
    hardness = np.zeros((n, nd, nl))
    grain_mm[:, :, 0], hardness[:, :, 0] = (
        np.where(dh, 3.0, 0.5)[:, None],
        np.where(dh, 1, 3)[:, None],
    )
    grain_mm[:, :, 1], hardness[:, :, 1] = 6.0, 1.0
    grain_mm[:, :, 2], hardness[:, :, 2] = 0.5, 3.0
    grain_mm[:, :, 3], hardness[:, :, 3] = (
        np.where(rc, 1.0, 0.5)[:, None],
        np.where(rc, 5, 3)[:, None],
    )
    count = np.full((n, nd), nl)
    # before the SH was buried only slots 0-1 exist; before the crust formed slots 0-2
    count[:, days < np.datetime64(SH_BURIAL)] = 2
    count[:, (days >= np.datetime64(SH_BURIAL)) & (days < np.datetime64(RAIN_FORMED))] = 3
    fields = {
        "thickness_m": thick,
        "ice_kg_m2": thick * density,
        "liquid_kg_m2": np.zeros_like(thick),
        "temperature_k": np.full(thick.shape, 268.0),
        "grain_size_mm": grain_mm,
        "hardness_index": hardness,
        "grain_class": grain,
        "crust_kind": crust,
        "deposition_time": dep,
        "formation_time": form,
        "event_id": event,
    }
    return count, fields


def write_profiles_nc(path, table: pd.DataFrame, **kw):
    count, fields = layer_fields(table, **kw)
    w = ProfilesNcWriter(path, table, DAYS, 4, LAYER_VARS)
    w.write_chunk(np.arange(len(table)), count, fields)
    return w.close()


def synthetic_run(tmp_path, **kw):
    """Write cells.nc and profiles.nc; return (dem, index, table, slope, area, diag, profiles)."""
    dem = cone_dem()
    index, table, slope, area = build_cells(dem)
    write_cells_nc(tmp_path / "cells.nc", table)
    write_profiles_nc(tmp_path / "profiles.nc", table, **kw)
    diag = xr.open_dataset(tmp_path / "cells.nc")
    prof = xr.open_dataset(tmp_path / "profiles.nc")
    return dem, index, table, slope, area, diag, prof

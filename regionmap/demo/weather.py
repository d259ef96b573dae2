"""The demo season's weather: a small, deterministic coarse-grid weather generator.

Everything here is invented: an NWP-like season over the demo DEM on a 3 km grid
with smoothed model terrain, hourly from November to April, with designed events whose
expected answers are written beside the forcing by :func:`write_demo_events`. It is demo and
test data, not a climate of any real place.

Internal consistency, by construction:

* 2 m temperature follows one vertical profile per hour (a lapse rate, an inversion during
  the freezing-rain episode) evaluated at the model terrain, plus a diurnal cycle damped by
  cloud; the pressure-level temperatures come from the same profile without the diurnal part;
* one cloud fraction drives both radiation streams: shortwave is the interval mean of a
  clear-sky beam (solar geometry of :mod:`regionmap.downscale.solar`) reduced by the Kasten &
  Czeplak (1980) cloud factor; longwave is Prata (1996) clear-sky emissivity raised by cloud
  after Crawford & Duchon (1999);
* storms arrive on south-westerlies that veer to north-west behind the front, with the
  temperature dropping, and precipitation rising with model terrain on the windward side.

Model output and this demo are guidance for trained people, never a substitute for field
observations, the local avalanche service and professional standards.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

import numpy as np
import xarray as xr
from scipy import ndimage

from regionmap.constants import (
    GRAVITY_M_S2,
    ICAO_LAPSE_RATE_K_M,
    ICAO_PRESSURE_EXPONENT,
    ICAO_PRESSURE_PA,
    ICAO_TEMPERATURE_K,
    STEFAN_BOLTZMANN_W_M2_K4,
    ZERO_CELSIUS_K,
)
from regionmap.downscale import longwave as _lw
from regionmap.downscale import solar as _solar
from regionmap.downscale import thermo as _thermo
from regionmap.errors import InputError
from regionmap.io.units import components_from_wind
from regionmap.io.writers import write_netcdf

__all__ = [
    "DEMO_EVENTS",
    "demo_events",
    "demo_variables_mapping",
    "write_demo_events",
    "write_demo_forcing",
    "PRESSURE_LEVELS_HPA",
]

Z_REF_M = 2000.0  # reference height of the synoptic series [m]
PRESSURE_LEVELS_HPA = np.array([900.0, 850.0, 800.0, 750.0, 700.0, 650.0, 600.0, 500.0])
FREEZING_LEVEL_ROS_M = 2200.0
# Freezing-rain episode profile (height m, temperature degC): sub-freezing air below 2200 m,
# a warm layer 2200-3000 m peaking at +3 degC, then a normal lapse above.
FZRA_PROFILE = (
    (0.0, -4.0),
    (2000.0, -0.8),
    (2200.0, 0.0),
    (2600.0, 3.0),
    (3000.0, 0.0),
    (3500.0, -3.25),
    (9000.0, -39.0),
)

DEMO_EVENTS = [
    {
        "id": "early_snow",
        "kind": "storm",
        "start": "2025-11-02T06:00",
        "end": "2025-11-03T18:00",
        "t_ref_c": -7.0,
        "precip_kg_m2_h": 1.1,
        "wind_m_s": 8.0,
        "note": "first snow of the season down to the valleys: a shallow early pack of 20-40 cm",
    },
    {
        "id": "cold_clear_spell",
        "kind": "clear",
        "start": "2025-11-03T18:00",
        "end": "2025-11-30T00:00",
        "t_ref_c": -10.0,
        "rh": 0.45,
        "wind_m_s": 4.0,
        "note": "almost four weeks of cold clear sky over the thin early pack: strong gradients, "
        "basal faceting, depth hoar (it takes weeks)",
    },
    {
        "id": "surface_hoar_nights",
        "kind": "clear_humid_calm",
        "start": "2025-12-16T12:00",
        "end": "2025-12-21T12:00",
        "t_ref_c": -6.0,
        "rh": 0.85,
        "wind_m_s": 1.0,
        "note": "calm clear humid nights: surface hoar growth",
    },
    {
        "id": "burial_storm",
        "kind": "storm",
        "start": "2025-12-21T12:00",
        "end": "2025-12-23T18:00",
        "t_ref_c": -7.0,
        "precip_kg_m2_h": 2.8,
        "wind_m_s": 7.0,
        "note": "a storm with ordinary wind buries the surface hoar: kept in sheltered terrain, "
        "blown away where the terrain is exposed; enough snow that windward slopes the wind "
        "scours still hold 50 cm when the rain comes",
    },
    {
        "id": "rain_on_snow",
        "kind": "warm_storm",
        "start": "2026-01-17T00:00",
        "end": "2026-01-20T00:00",
        "t_ref_c": 0.0065 * (FREEZING_LEVEL_ROS_M - Z_REF_M),
        "precip_kg_m2_h": 0.2,
        "wind_m_s": 3.0,
        "dir_deg": 200.0,
        "shape": "plateau",
        "note": "three days of light rain below the freezing level onto the snowpack (warm "
        "sector, steady freezing level)",
    },
    {
        "id": "cold_snap",
        "kind": "clear",
        "start": "2026-01-20T00:00",
        "end": "2026-01-25T00:00",
        "t_ref_c": -16.0,
        "rh": 0.5,
        "wind_m_s": 6.0,
        "note": "refreezes the wetted snow: rain crust",
    },
    {
        "id": "freezing_rain",
        "kind": "warm_layer_aloft",
        "start": "2026-02-11T06:00",
        "end": "2026-02-11T20:00",
        "precip_kg_m2_h": 0.9,
        "note": "warm layer aloft over sub-freezing surface air",
    },
    {
        "id": "spring_warmup",
        "kind": "warming",
        "start": "2026-04-01T00:00",
        "end": "2026-04-30T23:00",
        "t_ref_c": 6.0,
        "rh": 0.5,
        "note": "clear, warming spring: melt-freeze cycles",
    },
]
#: Background storms before spring are at most this warm at Z_REF_M [degC], so that they snow
#: down to the valleys: before April the only rain comes from the designed events.
BACKGROUND_STORM_MAX_T_REF_C = -6.5
_RAMP_S = 6 * 3600


def _hours(e) -> float:
    return float((np.datetime64(e["end"]) - np.datetime64(e["start"])) / np.timedelta64(1, "h"))


def jennings2018_t50_c(rh_frac: float) -> float:
    """Air temperature [degC] of 50 % snow in the Jennings et al. (2018) bivariate logistic
    model (Nature Communications 9, 1148, doi:10.1038/s41467-018-03629-7, Table 2:
    a = -10.04, b = 1.41 K-1, g = 0.09 %-1), used here only to state the design's expected
    rain-snow transition in the events file."""
    return (10.04 - 0.09 * 100.0 * rh_frac) / 1.41


def demo_events() -> dict:
    """The designed events and their expected answers (what :func:`write_demo_events` writes).

    The expectations follow from the design (the event definitions above and common practice),
    not from a model run: a shallow early pack under four weeks of cold clear sky facets (depth
    hoar on shaded aspects); calm clear humid nights grow surface hoar that a storm with
    ordinary wind buries, keeping it in sheltered terrain (common practice); a long light rain
    below the freezing level onto a pack of well over 50 cm, followed by a cold snap, leaves a
    rain crust below the rain-snow transition, which sits below the freezing level; a warm layer
    aloft over sub-freezing surface air gives a glaze below the warm layer's base.
    """
    ev = {e["id"]: e for e in DEMO_EVENTS}
    ros = ev["rain_on_snow"]
    ros_peak = (
        np.datetime64(ros["start"]) + (np.datetime64(ros["end"]) - np.datetime64(ros["start"])) / 2
    )
    ros_rain_h = _hours(ros) - _RAMP_S / 3600.0  # plateau with half-weight ramps at both ends
    storm_rh = 0.97
    transition_m = FREEZING_LEVEL_ROS_M - jennings2018_t50_c(storm_rh) / 0.0065
    return {
        "description": "Invented demo season (regionmap) over an invented range at a fictitious "
        "location (the coordinates lie in the open sea). Model output is guidance for trained "
        "people, never a substitute for field observations, the local avalanche "
        "service and professional standards.",
        "events": DEMO_EVENTS,
        "expected": {
            "early_snow": {
                "event_time": [ev["early_snow"]["start"], ev["early_snow"]["end"]],
                "new_snow_cm": [20, 40],
                "phase": "snow at every height of the range",
                "note": "common practice: a shallow pack (a few tens of cm) facets fastest",
            },
            "no_background_rain": {
                "before": "2026-04-01T00:00",
                "rain_only_in": ["rain_on_snow", "freezing_rain"],
                "note": "background storms before April are at most "
                f"{BACKGROUND_STORM_MAX_T_REF_C} "
                f"degC at {Z_REF_M:.0f} m and snow down to the valleys",
            },
            "basal_faceting": {
                "formed_between": [ev["early_snow"]["start"], ev["cold_clear_spell"]["end"]],
                "layer": "faceted crystals / depth hoar at the base of the early snowpack (FC, DH)",
                "depth_hoar_by": ev["cold_clear_spell"]["end"],
                "elevation_m": [1500, 3200],
                "aspects": ["NW", "N", "NE"],
                "also": "faceted on other aspects; depth hoar there only high up",
                "persists": "to the analysis time above the rain-snow transition of the "
                "rain-on-snow event (below it the rain may soak the pack to the ground)",
            },
            "surface_hoar": {
                "formed_between": [
                    ev["surface_hoar_nights"]["start"],
                    ev["surface_hoar_nights"]["end"],
                ],
                "buried_at": ev["burial_storm"]["start"],
                "buried_by": ev["burial_storm"]["end"],
                "burial_wind_m_s": ev["burial_storm"]["wind_m_s"],
                "layer": "SH",
                "elevation_m": [1200, 3200],
                "aspects": "all",
                "terrain": "kept where sheltered from the storm's wind, blown away where exposed",
                "persists": "to the analysis time above the rain-snow transition of the "
                "rain-on-snow event",
            },
            "rain_crust": {
                "event_time": [ros["start"], ros["end"]],
                "peak_time": str(ros_peak.astype("datetime64[m]")),
                "freezing_level_m": FREEZING_LEVEL_ROS_M,
                "rain_kg_m2_below_freezing_level": [10, 20],
                "rain_kg_m2_design": round(ros["precip_kg_m2_h"] * ros_rain_h, 1),
                "storm_rh": storm_rh,
                "transition_m_design": round(transition_m, 0),
                "crust_below": "the rain-snow transition (snow fraction 0.5), below the "
                "freezing level",
                "snowpack_before_cm": ">= 50 at every height",
                "refrozen_by": [ev["cold_snap"]["start"], ev["cold_snap"]["end"]],
            },
            "freezing_rain": {
                "event_time": [ev["freezing_rain"]["start"], ev["freezing_rain"]["end"]],
                "warm_layer_m": [2200, 3000],
                "warm_layer_max_c": 3.0,
                "glaze_below_m": 2200,
                "rain_m": [2200, 3000],
                "snow_above_m": 3000,
                "detectable_from": "upper_air_temperature on pressure levels",
            },
            "crust_count": {
                "at": "analysis time",
                "below_m": "min(rain-snow transition of the rain-on-snow event, glaze_below_m)",
                "at_least": 2,
                "kinds": ["rain", "glaze"],
            },
            "spring_warmup": {
                "from": ev["spring_warmup"]["start"],
                "expect": "wet snow and melt-freeze crusts spreading upward",
            },
        },
    }


def write_demo_events(path, *, indent: int = 2) -> Path:
    """Write :func:`demo_events` as JSON (atomically enough for a small file) and return the
    path."""
    path = Path(path)
    tmp = path.with_name(path.name + ".tmp")
    tmp.write_text(json.dumps(demo_events(), indent=indent) + "\n", encoding="utf-8")
    os.replace(tmp, path)
    return path


def demo_variables_mapping() -> dict:
    """The ``[forcing] variables`` mapping that reads the raw (non-CF) demo variant."""
    return {
        "air_temperature": {"name": "T2M", "units": "K"},
        "dew_point_temperature": {"name": "D2M", "units": "K"},
        "eastward_wind": {"name": "U10", "units": "m s-1"},
        "northward_wind": {"name": "V10", "units": "m s-1"},
        "surface_air_pressure": {"name": "SP", "units": "Pa"},
        "integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air": {
            "name": "SSRD",
            "units": "J m-2",
            "accumulated": True,
        },
        "integral_wrt_time_of_surface_downwelling_longwave_flux_in_air": {
            "name": "STRD",
            "units": "J m-2",
            "accumulated": True,
        },
        "precipitation_amount": {"name": "TP", "units": "mm", "accumulated": True},
        "upper_air_temperature": {"name": "TPL", "units": "K"},
        "surface_geopotential": {"name": "Z", "units": "m2 s-2"},
    }


# ------------------------------------------------------------------------------- grid


def model_grid(dem_elevation_m, dem_transform, spacing_m: float = 3000.0):
    """Coarse grid around the DEM and its model terrain (block mean, then smoothed).

    Returns
    -------
    x_m (nx,), y_m (ny,) grid-point coordinates in the DEM's CRS [m], ascending;
    altitude_m (ny, nx) model terrain [m].
    """
    z = np.asarray(dem_elevation_m, dtype=np.float64)
    t = dem_transform
    if z.ndim != 2 or t.b != 0 or t.d != 0 or t.e >= 0:
        raise InputError(
            f"demo weather: the DEM must be a 2-D north-up grid; got shape {z.shape} "
            f"and transform {tuple(t)[:6]}"
        )
    left, top = t.c, t.f
    right, bottom = left + t.a * z.shape[1], top + t.e * z.shape[0]
    nx = int(np.ceil((right - left) / spacing_m)) + 2
    ny = int(np.ceil((top - bottom) / spacing_m)) + 2
    x = 0.5 * (left + right) + (np.arange(nx) - (nx - 1) / 2) * spacing_m
    y = 0.5 * (bottom + top) + (np.arange(ny) - (ny - 1) / 2) * spacing_m
    rows, cols = np.indices(z.shape)
    px, py = left + (cols + 0.5) * t.a, top + (rows + 0.5) * t.e
    j = np.clip(np.rint((px - x[0]) / spacing_m).astype(int), 0, nx - 1)
    i = np.clip(np.rint((py - y[0]) / spacing_m).astype(int), 0, ny - 1)
    ok = np.isfinite(z)
    flat = i[ok] * nx + j[ok]
    total = np.bincount(flat, weights=z[ok], minlength=ny * nx)
    count = np.bincount(flat, minlength=ny * nx)
    alt = np.where(count > 0, total / np.maximum(count, 1), np.nan).reshape(ny, nx)
    if np.all(np.isnan(alt)):
        raise InputError("demo weather: the DEM has no valid elevation")
    near = ndimage.distance_transform_edt(
        np.isnan(alt), return_distances=False, return_indices=True
    )
    alt = ndimage.uniform_filter(alt[near[0], near[1]], size=3, mode="nearest")
    return x, y, alt


# ------------------------------------------------------------------------- synoptic


def _window_weight(t_s, start, end):
    a = np.datetime64(start, "s").astype(np.int64)
    b = np.datetime64(end, "s").astype(np.int64)
    return np.clip(np.minimum(t_s - a, b - t_s) / _RAMP_S + 0.5, 0.0, 1.0), a, b


def _synoptic(t_s, seed):
    """Hourly regional series at Z_REF_M: temperature, cloud, wind, humidity, precipitation."""
    rng = np.random.default_rng(seed)
    n = t_s.size
    day = (t_s - np.datetime64("2026-01-25", "s").astype(np.int64)) / 86400.0
    t_ref = -0.5 - 5.5 * np.cos(2 * np.pi * day / 365.25)  # seasonal cycle [degC]
    for period_d, amp in ((4.3, 1.5), (7.9, 2.0), (13.1, 1.5)):
        t_ref += amp * np.sin(2 * np.pi * day / period_d + rng.uniform(0, 2 * np.pi))
    s = {
        "t_ref_c": t_ref,
        "lapse_k_m": np.full(n, 0.0065),
        "cloud": np.full(n, 0.35),
        "rh": np.full(n, 0.70),
        "wind_m_s": np.full(n, 4.0),
        "dir_deg": np.full(n, 260.0),
        "precip": np.zeros(n),
        "fzra": np.zeros(n),
        "dp_hpa": np.zeros(n),
    }

    # background storms, after the first designed snowfall and outside the designed events
    # (+- 1 day); before spring they are cold enough to snow at every height of the range
    busy = np.zeros(n, bool)
    for e in DEMO_EVENTS:
        w, a, b = _window_weight(t_s, e["start"], e["end"])
        busy |= (t_s > a - 86400) & (t_s < b + 86400) & (e["kind"] != "warming")
    first_snow = np.datetime64(DEMO_EVENTS[0]["start"], "s").astype(np.int64)
    busy |= t_s < first_snow
    spring = np.datetime64("2026-04-01", "s").astype(np.int64)
    start = t_s[0] + int(rng.uniform(1, 3) * 86400)
    storms = []
    while start < t_s[-1]:
        length = int(rng.uniform(18, 42)) * 3600
        if not busy[(t_s >= start) & (t_s <= start + length)].any():
            storms.append(
                {
                    "start": start,
                    "end": start + length,
                    "kind": "storm",
                    "t_ref_c": None,
                    "precip_kg_m2_h": rng.uniform(0.5, 1.6),
                    "t_max_c": None if start >= spring else BACKGROUND_STORM_MAX_T_REF_C,
                }
            )
        start += int(rng.uniform(4.5, 8.5) * 86400)
    storms = [st for st in storms if st["start"] < spring or rng.uniform() < 0.4]
    for st in storms + [e for e in DEMO_EVENTS if e["kind"] in ("storm", "warm_storm")]:
        _apply_storm(s, t_s, st)
    for e in DEMO_EVENTS:
        w, a, b = _window_weight(t_s, e["start"], e["end"])
        if e["kind"] in ("clear", "clear_humid_calm"):
            _blend(
                s,
                w,
                t_ref_c=e["t_ref_c"],
                cloud=0.03,
                rh=e["rh"],
                wind_m_s=e["wind_m_s"],
                precip=0.0,
                dir_deg=300.0 if e["kind"] == "clear" else 200.0,
            )
        elif e["kind"] == "warm_layer_aloft":
            _blend(
                s,
                w,
                cloud=1.0,
                rh=0.97,
                wind_m_s=3.0,
                dir_deg=200.0,
                fzra=1.0,
                precip=e["precip_kg_m2_h"]
                * np.sin(np.pi * np.clip((t_s - a) / (b - a), 0, 1)) ** 0.5,
            )
        elif e["kind"] == "warming":
            ramp = np.clip((t_s - a) / (b - a), 0, 1)
            _blend(s, w, t_ref_c=t_ref + ramp * e["t_ref_c"] + 2.0, cloud=0.2, rh=e["rh"])
    return s


def _blend(s, w, **values):
    for k, v in values.items():
        s[k] = (1 - w) * s[k] + w * v


def _apply_storm(s, t_s, st):
    """A frontal storm: SW wind veering to NW, warm before and cold after the front.

    Optional keys of ``st``: ``t_ref_c`` (a fixed temperature at Z_REF_M instead of the
    background's warm-then-cold passage), ``t_max_c`` (a cap on that passage), ``wind_m_s``
    (peak wind, default 14 m s-1), ``dir_deg`` (a fixed direction instead of the veer) and
    ``shape = "plateau"`` (steady precipitation between 6 h ramps instead of a peaked one).
    """
    a = (
        np.datetime64(st["start"], "s").astype(np.int64)
        if isinstance(st["start"], str)
        else st["start"]
    )
    b = np.datetime64(st["end"], "s").astype(np.int64) if isinstance(st["end"], str) else st["end"]
    phase = np.clip((t_s - a) / (b - a), 0.0, 1.0)
    w = np.clip(np.minimum(t_s - a, b - t_s) / _RAMP_S + 0.5, 0.0, 1.0)
    envelope = w if st.get("shape") == "plateau" else np.sin(np.pi * phase) ** 0.7
    if st["t_ref_c"] is None:
        t_storm = s["t_ref_c"] + 2.0 - 5.0 * phase
        if st.get("t_max_c") is not None:
            t_storm = np.minimum(t_storm, st["t_max_c"])
    else:
        t_storm = np.full(t_s.size, st["t_ref_c"])
    peak_wind = st.get("wind_m_s", 14.0)
    calm = min(4.0, 0.5 * peak_wind)
    direction = st.get("dir_deg", None)
    _blend(
        s,
        w,
        t_ref_c=t_storm,
        cloud=1.0,
        rh=0.97,
        wind_m_s=calm + (peak_wind - calm) * envelope,
        dir_deg=210.0 + 100.0 * phase if direction is None else np.full(t_s.size, direction),
        precip=st["precip_kg_m2_h"] * envelope,
        dp_hpa=-12.0 * envelope,
        lapse_k_m=0.0065,
    )


# ------------------------------------------------------------------------- fields


def _profile_c(z_m, s, diurnal_c=0.0):
    """Temperature [degC] at heights ``z_m`` (broadcast with time on axis 0)."""
    normal = (
        s["t_ref_c"][:, None, None] - s["lapse_k_m"][:, None, None] * (z_m - Z_REF_M) + diurnal_c
    )
    zs, ts = np.array(FZRA_PROFILE).T
    w = s["fzra"][:, None, None]
    return (1 - w) * normal + w * np.interp(z_m, zs, ts)


def _q(x, step):
    """Round to a power-of-two step: exact in binary, so the file compresses well."""
    return (np.round(np.asarray(x, dtype=np.float64) / step) * step).astype(np.float32)


def season_fields(
    dem_elevation_m,
    dem_transform,
    dem_crs,
    *,
    seed=20251101,
    start="2025-11-01",
    end="2026-04-30T23:00",
    spacing_m=3000.0,
):
    """All demo fields on the coarse grid, hourly labels from one hour before ``start``.

    Returns a dict of float64/float32 arrays (time, y, x) and the grid description.
    """
    from pyproj import CRS, Transformer

    crs = CRS.from_user_input(dem_crs)
    if not crs.is_projected:
        raise InputError(f"demo weather: the DEM CRS must be projected (metres); got {crs.name!r}")
    x, y, alt = model_grid(dem_elevation_m, dem_transform, spacing_m)
    xx, yy = np.meshgrid(x, y)
    lon, lat = Transformer.from_crs(crs, "EPSG:4326", always_xy=True).transform(xx, yy)
    t0 = np.datetime64(start, "s")
    t1 = np.datetime64(end, "s")
    if t1 <= t0:
        raise InputError(f"demo weather: end {end} must be after start {start}")
    t = np.arange(
        t0 - np.timedelta64(3600, "s"), t1 + np.timedelta64(1, "s"), np.timedelta64(3600, "s")
    )
    t_s = t.astype(np.int64)
    s = _synoptic(t_s, seed)

    solar_hour = np.mod((t_s[:, None, None] % 86400) / 3600.0 + lon[None] / 15.0, 24.0)
    # the diurnal cycle needs clear sky and no precipitation (precipitating cloud damps it)
    clear = (1.0 - s["cloud"] * 1.0)[:, None, None]
    dry = np.clip(1.0 - s["precip"] / 0.05, 0.0, 1.0)[:, None, None]
    diurnal = 4.5 * clear * dry * np.cos(2 * np.pi * (solar_hour - 15.0) / 24.0)
    t_c = _profile_c(alt[None], s, diurnal)
    t_k = t_c + ZERO_CELSIUS_K
    rh = np.clip(
        s["rh"][:, None, None] - 0.12 * clear * np.cos(2 * np.pi * (solar_hour - 15.0) / 24.0),
        0.15,
        1.0,
    )

    # heights of the pressure levels in the ICAO standard atmosphere (its pressure law inverted)
    p_ratio = PRESSURE_LEVELS_HPA / (ICAO_PRESSURE_PA / 100.0)
    z_levels = (
        ICAO_TEMPERATURE_K / ICAO_LAPSE_RATE_K_M * (1.0 - p_ratio ** (1 / ICAO_PRESSURE_EXPONENT))
    )
    upper_k = _profile_c(z_levels[None, :, None], s)[..., 0] + ZERO_CELSIUS_K  # (time, level)

    p_pa = _thermo.pressure_standard_atmosphere_icao(alt)[None] * (
        1 + s["dp_hpa"][:, None, None] / (ICAO_PRESSURE_PA / 100.0)
    )
    x_norm = (xx - xx.mean()) / max(np.ptp(xx) / 2, 1.0)
    wind_to_west = np.cos(np.radians(s["dir_deg"] - 270.0))[:, None, None]
    windward = np.clip(1.0 - 0.25 * x_norm[None] * wind_to_west, 0.5, 1.5)
    oro = np.clip(1.0 + 0.0004 * (alt - Z_REF_M), 0.4, 1.8)[None]
    precip = s["precip"][:, None, None] * oro * windward
    wind = np.clip(
        s["wind_m_s"][:, None, None] * (1.0 + 0.25 * (alt[None] - Z_REF_M) / 1000.0), 0.3, None
    )

    # shortwave: interval mean of a clear-sky beam over 6 sub-steps, cut by cloud
    sub = (np.arange(6) + 0.5) / 6.0 * 3600.0 - 3600.0
    times_sub = (t_s[:, None] + sub[None, :]).astype("datetime64[s]")
    zen, _ = _solar.solar_position_noaa(
        times_sub[..., None, None], lat[None, None], lon[None, None]
    )
    cosz = np.clip(np.cos(np.radians(zen)), 0.0, None)
    doy = (
        t_s
        - t_s.astype("datetime64[s]")
        .astype("datetime64[Y]")
        .astype("datetime64[s]")
        .astype(np.int64)
    ) / 86400.0 + 1.0
    i0 = _solar.extraterrestrial_irradiance_spencer1971(doy)[:, None, None, None]
    tau = (0.75 + 2e-5 * alt)[None, None]
    air_mass = 1.0 / np.maximum(cosz, 0.05)
    ghi_clear = (i0 * cosz * tau**air_mass).mean(axis=1)
    sw = ghi_clear * (1.0 - 0.75 * s["cloud"][:, None, None] ** 3.4)

    e_pa = rh * _thermo.saturation_vapour_pressure_water_buck1981(t_k)
    eps = _lw.emissivity_all_sky_crawford_duchon1999(
        s["cloud"][:, None, None], _lw.emissivity_clear_sky_prata1996(e_pa, t_k)
    )
    lw = eps * STEFAN_BOLTZMANN_W_M2_K4 * t_k**4

    fields = {
        "air_temperature_k": _q(t_k, 2.0**-6),
        "relative_humidity_pct": _q(100.0 * rh, 2.0**-4),
        "wind_speed_m_s": _q(wind, 2.0**-6),
        "wind_from_direction_deg": _q(
            np.broadcast_to(np.mod(s["dir_deg"], 360.0)[:, None, None], t_k.shape), 2.0**-4
        ),
        "surface_air_pressure_pa": _q(p_pa, 0.5),
        "shortwave_w_m2": _q(sw, 2.0**-3),
        "longwave_w_m2": _q(lw, 2.0**-3),
        "precipitation_kg_m2": _q(precip, 2.0**-8),
        "upper_air_temperature_k": _q(
            np.broadcast_to(
                upper_k[:, :, None, None], (t.size, PRESSURE_LEVELS_HPA.size) + alt.shape
            ),
            2.0**-6,
        ),
    }
    grid = {
        "x": x,
        "y": y,
        "altitude_m": alt.astype(np.float32),
        "lon": lon,
        "lat": lat,
        "crs": crs,
        "time": t,
    }
    return fields, grid


# -------------------------------------------------------------------------- writing


def write_demo_forcing(
    path,
    dem_elevation_m,
    dem_transform,
    dem_crs,
    *,
    seed: int = 20251101,
    start: str = "2025-11-01",
    end: str = "2026-04-30T23:00",
    raw: bool = False,
    spacing_m: float = 3000.0,
) -> Path:
    """Write the demo season's forcing over the DEM as NetCDF and return the path.

    Parameters
    ----------
    path : path — output file.
    dem_elevation_m : ndarray (y, x) — DEM elevation [m], NaN for nodata.
    dem_transform : affine.Affine — north-up DEM transform.
    dem_crs : anything ``pyproj.CRS.from_user_input`` takes — a projected CRS.
    seed : int — the background weather's random seed (the designed events do not depend on it).
    start, end : str — first and last hourly label.
    raw : bool
        False: CF-1.8 (standard names, units, ``cell_methods``, ``time_bnds``, projected x/y
        with a ``grid_mapping``). True: the same season in a raw, non-CF form (other names, no
        standard names, accumulated precipitation in mm and radiation in J m-2 since the first
        label, dew point, u/v wind, 2-D latitude/longitude, no bounds); read it with
        :func:`demo_variables_mapping`.
    spacing_m : float — grid spacing [m] (2-4 km is what the design asks).
    """
    fields, grid = season_fields(
        dem_elevation_m,
        dem_transform,
        dem_crs,
        seed=seed,
        start=start,
        end=end,
        spacing_m=spacing_m,
    )
    ds = _raw_dataset(fields, grid) if raw else _cf_dataset(fields, grid)
    ds.attrs.update(
        {
            "title": "regionmap demo season (invented data)",
            "source": f"regionmap.demo.weather, seed {seed}",
            "comment": "Invented weather over an invented range at a fictitious location (the "
            "coordinates lie in the open sea), for demonstration and tests; model output is "
            "guidance for "
            "trained people, never a substitute for field observations, the local "
            "avalanche service and professional standards.",
        }
    )
    enc = {
        name: {
            "zlib": True,
            "complevel": 6,
            "shuffle": True,
            "chunksizes": (min(744, v.shape[0]),) + v.shape[1:] if v.ndim >= 3 else v.shape,
        }
        for name, v in ds.data_vars.items()
        if v.dtype.kind == "f" and v.ndim >= 2
    }
    for name in ("time", "time_bnds"):
        if name in ds.variables:
            enc[name] = {"units": "hours since 2025-10-01 00:00:00", "dtype": "int32"}
    return write_netcdf(path, ds, encoding=enc)


def _cf_dataset(f, g) -> xr.Dataset:
    t = g["time"][1:]
    sl = slice(1, None)
    dims = ("time", "y", "x")
    gm = {"grid_mapping": "crs"}
    point = {"cell_methods": "time: point"}

    def var(key, sn, units, extra=None, coords=None):
        attrs = {"standard_name": sn, "units": units, **gm, **(extra or {})}
        if coords:
            attrs["coordinates"] = coords
        return (dims, f[key][sl], attrs)

    ds = xr.Dataset(
        {
            "tas": var("air_temperature_k", "air_temperature", "K", point, "height"),
            "hurs": var("relative_humidity_pct", "relative_humidity", "%", point, "height"),
            "wind_speed": var("wind_speed_m_s", "wind_speed", "m s-1", point, "height_wind"),
            "wind_dir": var(
                "wind_from_direction_deg", "wind_from_direction", "degree", point, "height_wind"
            ),
            "ps": var("surface_air_pressure_pa", "surface_air_pressure", "Pa", point),
            "rsds": var(
                "shortwave_w_m2",
                "surface_downwelling_shortwave_flux_in_air",
                "W m-2",
                {"cell_methods": "time: mean"},
            ),
            "rlds": var(
                "longwave_w_m2",
                "surface_downwelling_longwave_flux_in_air",
                "W m-2",
                {"cell_methods": "time: mean"},
            ),
            "pr": var(
                "precipitation_kg_m2",
                "precipitation_amount",
                "kg m-2",
                {"cell_methods": "time: sum"},
            ),
            "ta_plev": (
                ("time", "plev", "y", "x"),
                f["upper_air_temperature_k"][sl],
                {"standard_name": "air_temperature", "units": "K", **gm, **point},
            ),
            "orog": (
                ("y", "x"),
                g["altitude_m"],
                {
                    "standard_name": "surface_altitude",
                    "units": "m",
                    "long_name": "model terrain",
                    **gm,
                },
            ),
            "time_bnds": (("time", "bnds"), np.stack([g["time"][:-1], t], axis=1)),
            "crs": ((), np.int32(0), g["crs"].to_cf()),
        },
        coords={
            "time": ("time", t, {"standard_name": "time", "bounds": "time_bnds", "axis": "T"}),
            "x": (
                "x",
                g["x"],
                {"standard_name": "projection_x_coordinate", "units": "m", "axis": "X"},
            ),
            "y": (
                "y",
                g["y"],
                {"standard_name": "projection_y_coordinate", "units": "m", "axis": "Y"},
            ),
            "plev": (
                "plev",
                PRESSURE_LEVELS_HPA * 100.0,
                {"standard_name": "air_pressure", "units": "Pa", "positive": "down", "axis": "Z"},
            ),
            "height": ((), 2.0, {"standard_name": "height", "units": "m", "positive": "up"}),
            "height_wind": ((), 10.0, {"standard_name": "height", "units": "m", "positive": "up"}),
        },
        attrs={"Conventions": "CF-1.8"},
    )
    for name, h in (
        ("tas", "height"),
        ("hurs", "height"),
        ("wind_speed", "height_wind"),
        ("wind_dir", "height_wind"),
    ):
        ds[name].encoding["coordinates"] = h
        ds[name].attrs.pop("coordinates")
    return ds


def _raw_dataset(f, g) -> xr.Dataset:
    """The same season as a model's raw output might look: no CF metadata beyond units."""
    dims = ("time", "y", "x")
    u, v = (
        c.astype(np.float32)
        for c in components_from_wind(f["wind_speed_m_s"], f["wind_from_direction_deg"])
    )
    t_k = f["air_temperature_k"].astype(np.float64)
    e_pa = (
        f["relative_humidity_pct"] / 100.0 * _thermo.saturation_vapour_pressure_water_buck1981(t_k)
    )
    td = _thermo.dew_point_from_vapour_pressure_buck1981(e_pa)

    def acc(key, factor):
        a = np.cumsum(f[key][1:].astype(np.float64) * factor, axis=0)
        return np.concatenate([np.zeros((1,) + a.shape[1:]), a])

    ds = xr.Dataset(
        {
            "T2M": (dims, f["air_temperature_k"], {"units": "K"}),
            "D2M": (dims, td.astype(np.float32), {"units": "K"}),
            "U10": (dims, u, {"units": "m s-1"}),
            "V10": (dims, v, {"units": "m s-1"}),
            "SP": (dims, f["surface_air_pressure_pa"], {"units": "Pa"}),
            "SSRD": (
                dims,
                acc("shortwave_w_m2", 3600.0),
                {"units": "J m-2", "comment": "accumulated since the first time"},
            ),
            "STRD": (
                dims,
                acc("longwave_w_m2", 3600.0),
                {"units": "J m-2", "comment": "accumulated since the first time"},
            ),
            "TP": (
                dims,
                acc("precipitation_kg_m2", 1.0),
                {"units": "mm", "comment": "accumulated since the first time"},
            ),
            "TPL": (("time", "lev", "y", "x"), f["upper_air_temperature_k"], {"units": "K"}),
            "Z": (
                ("y", "x"),
                (g["altitude_m"].astype(np.float64) * GRAVITY_M_S2).astype(np.float32),
                {"units": "m2 s-2"},
            ),
            "lat2d": (("y", "x"), g["lat"], {"units": "degrees_north"}),
            "lon2d": (("y", "x"), g["lon"], {"units": "degrees_east"}),
        },
        coords={"time": ("time", g["time"]), "lev": ("lev", PRESSURE_LEVELS_HPA, {"units": "hPa"})},
    )
    return ds

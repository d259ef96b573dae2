"""Synthetic hourly forcing for exercising the snow column (tests, benchmarks, demos).

Invented weather only: a diurnal temperature wave, a clear-sky shortwave bell, longwave from
a clear-sky emissivity (Brutsaert 1975) raised by cloud, and precipitation series the caller
designs. Nothing here stands for a real place.
"""

from __future__ import annotations

import numpy as np

from regionmap.constants import STEFAN_BOLTZMANN_W_M2_K4, T_MELT_K
from regionmap.downscale.thermo import saturation_vapour_pressure_water_buck1981
from regionmap.downscale.types import CellForcing

__all__ = [
    "hours",
    "diurnal_temperature",
    "clear_sky_shortwave",
    "longwave_brutsaert1975",
    "make_forcing",
]


def hours(start: str, n_hours: int) -> np.ndarray:
    """Interval-end times: ``start`` + 1 h, + 2 h, ... (datetime64[s])."""
    return np.datetime64(start, "s") + np.arange(1, n_hours + 1) * np.timedelta64(3600, "s")


def _hour_of_day(time: np.ndarray) -> np.ndarray:
    return ((time.astype("datetime64[s]").astype(np.int64) // 3600) % 24).astype(np.float64)


def diurnal_temperature(
    time: np.ndarray, mean_c: float, amplitude_k: float, warmest_hour: float = 14.0
) -> np.ndarray:
    """Air temperature [K] with a cosine diurnal wave peaking at ``warmest_hour`` (UTC)."""
    h = _hour_of_day(time)
    return T_MELT_K + mean_c + amplitude_k * np.cos(2 * np.pi * (h - warmest_hour) / 24.0)


def clear_sky_shortwave(
    time: np.ndarray, peak_w_m2: float, noon_hour: float = 12.0, day_length_h: float = 9.0
) -> np.ndarray:
    """Incoming shortwave [W m-2]: a half-sine bell of ``day_length_h`` centred on noon."""
    h = _hour_of_day(time) - 0.5  # mid-interval
    x = (h - (noon_hour - day_length_h / 2)) / day_length_h
    return np.where((x > 0) & (x < 1), peak_w_m2 * np.sin(np.pi * np.clip(x, 0, 1)), 0.0)


def longwave_brutsaert1975(t_air_k, rh_frac, cloud_frac=0.0):
    """Incoming longwave [W m-2]: Brutsaert (1975) clear-sky emissivity, cloud-weighted.

    eps_clr = 1.24 (e/T)^(1/7), e in hPa (Brutsaert 1975, Water Resour. Res. 11(5), 742-744,
    doi:10.1029/WR011i005p00742); eps = eps_clr (1 - c) + c for cloud fraction c (a simple
    weighting of ours).
    """
    t_air_k = np.asarray(t_air_k, dtype=np.float64)
    e_hpa = np.asarray(rh_frac) * saturation_vapour_pressure_water_buck1981(t_air_k) / 100.0
    eps = 1.24 * (e_hpa / t_air_k) ** (1.0 / 7.0)
    eps = eps * (1.0 - cloud_frac) + cloud_frac
    return eps * STEFAN_BOLTZMANN_W_M2_K4 * t_air_k**4


def make_forcing(
    time: np.ndarray,
    n_cells: int = 1,
    *,
    t_air_k,
    rh_frac=0.8,
    pressure_pa=80000.0,
    wind_m_s=2.0,
    sw_in_w_m2=0.0,
    lw_in_w_m2=None,
    cloud_frac=0.0,
    precip_kg_m2=0.0,
    snow_frac=None,
    freezing_rain_frac=0.0,
    wind_height_m=10.0,
    temp_height_m=2.0,
) -> CellForcing:
    """A :class:`CellForcing` from scalars, (time,) or (cell, time) series.

    ``lw_in_w_m2`` None: :func:`longwave_brutsaert1975` with ``cloud_frac``; ``snow_frac``
    None: all snow at or below +0.5 degC air temperature, all rain above +2 degC, linear
    between (a simple rule of ours for designed test weather).
    """
    nt = time.size

    def b(v):
        return np.ascontiguousarray(np.broadcast_to(np.asarray(v, dtype=np.float64), (n_cells, nt)))

    ta = b(t_air_k)
    rh = b(rh_frac)
    if lw_in_w_m2 is None:
        lw = longwave_brutsaert1975(ta, rh, b(cloud_frac))
    else:
        lw = b(lw_in_w_m2)
    if snow_frac is None:
        sf = np.clip((T_MELT_K + 2.0 - ta) / 1.5, 0.0, 1.0)
    else:
        sf = b(snow_frac)
    return CellForcing(
        time=time,
        t_air_k=ta,
        rh_frac=rh,
        pressure_pa=b(pressure_pa),
        wind_m_s=b(wind_m_s),
        sw_in_w_m2=b(sw_in_w_m2),
        lw_in_w_m2=lw,
        precip_kg_m2=b(precip_kg_m2),
        snow_frac=sf,
        freezing_rain_frac=b(freezing_rain_frac),
        wind_height_m=wind_height_m,
        temp_height_m=temp_height_m,
    )


def season_forcing(
    n_cells: int, start: str = "2025-11-01T00:00", days: int = 150, seed: int = 0
) -> CellForcing:
    """An invented season of hourly weather for ``n_cells`` cells (tests and benchmarks).

    A seasonal temperature cycle (coldest in mid-season, warming to a spring thaw), day-to-day
    weather regimes drawn at random (storms with snow or rain, clear cold spells, cloudy
    mild spells, occasional freezing rain), a per-cell elevation-like offset and a per-cell
    sun factor (shaded to sunny aspects). Deterministic for a given ``seed``.
    """
    rng = np.random.default_rng(seed)
    nt = days * 24
    t = hours(start, nt)
    day = np.arange(nt) / 24.0
    season = (
        -4.0
        - 8.0 * np.sin(np.pi * np.clip(day / (0.8 * days), 0, 1))
        + 14.0 * np.clip((day - 0.8 * days) / (0.2 * days), 0, 1)
    )
    n_days = days
    regime = rng.choice(
        4, size=n_days, p=[0.3, 0.3, 0.3, 0.1]
    )  # 0 storm, 1 clear, 2 cloudy, 3 mixed
    reg_h = np.repeat(regime, 24)
    offset = rng.uniform(-4.0, 3.0, size=(n_cells, 1))
    sun = rng.uniform(0.2, 1.0, size=(n_cells, 1))
    ta = (
        T_MELT_K
        + season[None, :]
        + offset
        + np.where(reg_h == 1, 5.0, 2.0)[None, :]
        * np.cos(
            2 * np.pi * (((t.astype("datetime64[s]").astype(np.int64) // 3600) % 24) - 14) / 24.0
        )[None, :]
    )
    ta = ta + np.where(reg_h == 2, 2.0, 0.0)[None, :]
    storm_rate = rng.gamma(2.0, 0.25, size=n_days)  # kg m-2 h-1
    pr = np.where(reg_h == 0, np.repeat(storm_rate, 24), 0.0)[None, :] * np.ones((n_cells, 1))
    pr = pr * rng.uniform(0.7, 1.3, size=(n_cells, 1))
    cloud = np.where(reg_h == 1, 0.0, np.where(reg_h == 3, 0.5, 1.0))
    fz = np.where((reg_h == 0) & (np.repeat(rng.random(n_days), 24) < 0.05), 0.8, 0.0)
    sw_peak = 200.0 + 500.0 * np.clip(day / days, 0, 1)
    sw = (
        clear_sky_shortwave(t, 1.0)[None, :] * sw_peak[None, :] * (1.0 - 0.7 * cloud)[None, :] * sun
    )
    wind = np.where(reg_h == 0, 6.0, np.where(reg_h == 1, 1.5, 3.0))[None, :] * rng.uniform(
        0.5, 1.5, size=(n_cells, 1)
    )
    return make_forcing(
        t,
        n_cells,
        t_air_k=ta,
        rh_frac=np.where(reg_h == 1, 0.7, 0.9),
        wind_m_s=wind,
        sw_in_w_m2=sw,
        cloud_frac=cloud,
        precip_kg_m2=pr,
        freezing_rain_frac=fz * np.ones((n_cells, 1)),
    )

"""Settings of the downscaling: the ``[downscale]`` and ``[bias]`` sections of the config."""

from __future__ import annotations

import math
from pathlib import Path
from typing import Annotated, ClassVar, Literal

from pydantic import Field, field_validator, model_validator

from regionmap.settings import Settings

__all__ = ["DownscaleSettings", "BiasSettings", "BiasEntry", "BIAS_VARIABLES"]

#: The variables ``[bias]`` corrects (keys of the section).
BIAS_VARIABLES = (
    "air_temperature",
    "relative_humidity",
    "wind_speed",
    "precipitation",
    "shortwave_down",
    "longwave_down",
)


def _bounds(value: tuple[float, float], name: str) -> None:
    lo, hi = value
    if not lo < hi:
        raise ValueError(f"{name} must be (low, high) with low < high, got {[lo, hi]}")


class DownscaleSettings(Settings):
    """Options of :func:`regionmap.downscale.pipeline.downscale_cells` (``[downscale]``).

    Attributes
    ----------
    interpolation : "bilinear" (grid-index space) or "idw" (4 surrounding points).
    lapse : "monthly" (Kunkel 1989 via Liston & Elder 2006, hemisphere-aware), "fixed"
        (``lapse_rate_k_per_km``) or "grid" (fitted to neighbouring grid points each step,
        monthly where the fit is poor).
    lapse_rate_k_per_km : fixed temperature lapse rate [K km-1].
    grid_lapse_radius : half width of the fitting block [grid points].
    grid_lapse_bounds_k_per_km : (strongest inversion, steepest lapse) [K km-1].
    grid_lapse_min_r2 : minimum R^2 of the fit [1].
    grid_lapse_min_range_m : minimum height spread of the block [m].
    pressure : "hypsometric" from the grid pressure, or "standard_atmosphere".
    precip_elevation : "thornton1997" elevation factor or "none".
    precip_chi_per_km : fixed coefficient chi [km-1]; None = the monthly table.
    precip_coefficient_scale : multiplier on chi; default 0.5 because a 2-4 km model
        already resolves much of the orographic enhancement (judgement, tune per model) [1].
    precip_factor_bounds : bounds of the factor itself [1].
    phase : "jennings2018", "wet_bulb" or "air_temperature" threshold.
    phase_threshold_c, phase_half_width_k : threshold methods' 50 % point [degC] and
        half width of the linear transition [K] (0 = step).
    solar_substeps : sub-steps per hour for the interval-mean sun geometry.
    terrain_albedo_frac : albedo of surrounding terrain for reflected shortwave [1].
    longwave : clear-sky emissivity, "prata1996" or "brutsaert1975".
    terrain_emissivity : emissivity of surrounding terrain [1].
    kt_clear : clearness index of a clear sky for the cloud proxy [1].
    cloud_proxy_min_cos_zenith : interval-mean cos(zenith) below which the clearness index
        is not used and the last daytime cloud fraction is carried [1].
    cloud_frac_without_daylight : cloud fraction used before any daylight in a run [1].
    wind : "winstral", "liston_sturm" or "none".
    wind_sx_coef_per_deg : speed reduction per degree of Sx shelter [deg-1].
    wind_factor_bounds : bounds of the wind-speed factor [1].
    liston_sturm_slope_ref_deg : slope mapped to the largest slope term [deg].
    chunk_cells : cells per chunk (bounds memory).
    time_block_h : hours read per block.
    """

    section: ClassVar[str] = "downscale"

    interpolation: Literal["bilinear", "idw"] = "bilinear"
    lapse: Literal["monthly", "fixed", "grid"] = "monthly"
    lapse_rate_k_per_km: Annotated[float, Field(ge=0, le=12)] = 6.5
    grid_lapse_radius: Annotated[int, Field(ge=1)] = 2
    grid_lapse_bounds_k_per_km: tuple[float, float] = (-15.0, 9.8)
    grid_lapse_min_r2: Annotated[float, Field(ge=0, le=1)] = 0.5
    grid_lapse_min_range_m: Annotated[float, Field(ge=0)] = 150.0
    pressure: Literal["hypsometric", "standard_atmosphere"] = "hypsometric"
    precip_elevation: Literal["thornton1997", "none"] = "thornton1997"
    precip_chi_per_km: float | None = None
    precip_coefficient_scale: Annotated[float, Field(ge=0, le=1)] = 0.5
    precip_factor_bounds: tuple[float, float] = (0.5, 1.5)
    phase: Literal["jennings2018", "wet_bulb", "air_temperature"] = "jennings2018"
    phase_threshold_c: Annotated[float, Field(ge=-3, le=4)] = 1.0
    phase_half_width_k: Annotated[float, Field(ge=0)] = 0.0
    solar_substeps: Annotated[int, Field(ge=1)] = 12
    terrain_albedo_frac: Annotated[float, Field(ge=0, le=1)] = 0.6
    longwave: Literal["prata1996", "brutsaert1975"] = "prata1996"
    terrain_emissivity: Annotated[float, Field(ge=0, le=1)] = 0.98
    kt_clear: Annotated[float, Field(gt=0, le=1)] = 0.75
    cloud_proxy_min_cos_zenith: Annotated[float, Field(ge=0, le=1)] = 0.1
    cloud_frac_without_daylight: Annotated[float, Field(ge=0, le=1)] = 0.5
    wind: Literal["winstral", "liston_sturm", "none"] = "winstral"
    wind_sx_coef_per_deg: float = 0.025
    wind_factor_bounds: tuple[float, float] = (0.4, 1.3)
    liston_sturm_slope_ref_deg: Annotated[float, Field(gt=0, le=90)] = 45.0
    chunk_cells: Annotated[int, Field(ge=1)] = 1000
    time_block_h: Annotated[int, Field(ge=1)] = 168

    @model_validator(mode="before")
    @classmethod
    def _drift_superseded(cls, data):
        if isinstance(data, dict) and "drift" in data:
            raise ValueError(
                "drift is no longer a setting: the snow column's wind transport ([snow] "
                "wind_transport, on by default) moves snow from exposed to sheltered cells and "
                "keeps each zone's mass; remove 'drift' from [downscale]"
            )
        return data

    @model_validator(mode="after")
    def _check_bounds(self):
        lo, hi = self.precip_factor_bounds
        if not (0 < lo <= 1 <= hi):
            raise ValueError(
                f"precip_factor_bounds must satisfy 0 < low <= 1 <= high, got {[lo, hi]}"
            )
        for name in ("wind_factor_bounds", "grid_lapse_bounds_k_per_km"):
            _bounds(getattr(self, name), name)
        return self


def _scalar_or_monthly(value):
    """A number, or a list of 12 numbers (January … December)."""
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, (int, float, list, tuple)):
        raise ValueError(f"expected a number or a list of 12 monthly numbers, got {value!r}")
    if isinstance(value, (list, tuple)):
        if len(value) != 12 or not all(
            isinstance(x, (int, float)) and not isinstance(x, bool) for x in value
        ):
            raise ValueError(
                f"expected a number or a list of 12 monthly numbers (Jan…Dec), got {value!r}"
            )
        return [float(x) for x in value]
    return float(value)


class BiasEntry(Settings):
    """One correction: ``factor`` multiplies, ``offset`` adds (canonical units: K, %,
    m s-1, W m-2, kg m-2), a number or 12 monthly values, optionally only for cells of one
    wind-exposure class."""

    section: ClassVar[str] = "bias"

    factor: float | list[float] | None = None
    offset: float | list[float] | None = None
    exposure: Literal["all", "sheltered", "neutral", "exposed"] = "all"

    @field_validator("factor", "offset", mode="before")
    @classmethod
    def _monthly(cls, v):
        return _scalar_or_monthly(v)

    @field_validator("factor")
    @classmethod
    def _positive(cls, v):
        values = v if isinstance(v, list) else [v]
        if v is not None and any(not (x > 0 and math.isfinite(x)) for x in values):
            raise ValueError(f"factors must be positive, got {v}")
        return v


def _as_entry_list(value):
    if value is None:
        return []
    return [value] if isinstance(value, (dict, BiasEntry)) else value


class BiasSettings(Settings):
    """The ``[bias]`` section: per-variable corrections, each key one table or a list of
    tables (one per exposure class; a cell takes the entry of its class, else the one for
    all cells), and a quantile-mapping table file applied after them. Temperature and
    humidity corrections come before phase and longwave."""

    section: ClassVar[str] = "bias"

    air_temperature: list[BiasEntry] = Field(default_factory=list)
    relative_humidity: list[BiasEntry] = Field(default_factory=list)
    wind_speed: list[BiasEntry] = Field(default_factory=list)
    precipitation: list[BiasEntry] = Field(default_factory=list)
    shortwave_down: list[BiasEntry] = Field(default_factory=list)
    longwave_down: list[BiasEntry] = Field(default_factory=list)
    quantile_mapping: Path | None = None

    @field_validator(*BIAS_VARIABLES, mode="before")
    @classmethod
    def _entries(cls, v):
        return _as_entry_list(v)

"""Settings of the downscaling (the integrator maps ``[downscale]`` and ``[bias]`` onto them)."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal

from regionmap.errors import ConfigError

__all__ = ["DownscaleSettings"]

_CHOICES = {
    "interpolation": ("bilinear", "idw"),
    "lapse": ("monthly", "fixed", "grid"),
    "pressure": ("hypsometric", "standard_atmosphere"),
    "precip_elevation": ("thornton1997", "none"),
    "phase": ("jennings2018", "wet_bulb", "air_temperature"),
    "longwave_clear_sky": ("prata1996", "brutsaert1975"),
    "wind": ("winstral", "liston_sturm", "both", "none"),
}


@dataclass
class DownscaleSettings:
    """Options of :func:`regionmap.downscale.pipeline.downscale_cells`.

    Attributes
    ----------
    interpolation : "bilinear" (grid-index space) or "idw" (4 surrounding points).
    lapse : "monthly" (Kunkel 1989 via Liston & Elder 2006, hemisphere-aware), "fixed"
        (``lapse_fixed_k_per_km``) or "grid" (fitted to neighbouring grid points each step,
        monthly where the fit is poor).
    lapse_fixed_k_per_km : fixed temperature lapse rate [K km-1].
    grid_lapse_radius : half width of the fitting block [grid points].
    grid_lapse_bounds_k_per_km : (strongest inversion, steepest lapse) [K km-1].
    grid_lapse_min_r2 : minimum R^2 of the fit [1].
    grid_lapse_min_range_m : minimum height spread of the block [m].
    pressure : "hypsometric" from the grid pressure, or "standard_atmosphere".
    precip_elevation : "thornton1997" elevation factor or "none".
    precip_chi_per_km : fixed coefficient chi [km-1]; None = the monthly table.
    precip_chi_scale : multiplier on chi; default 0.5 because a 2-4 km model already
        resolves much of the orographic enhancement (judgement, tune per model) [1].
    precip_factor_bounds : bounds of the factor itself [1].
    drift : exposure-based redistribution conserving each zone's total (pass whole zones).
    drift_coef_per_deg, drift_bounds : raw factor clip(1 + k Sx) [deg-1], [1].
    phase : "jennings2018", "wet_bulb" or "air_temperature" threshold.
    phase_threshold_c, phase_half_width_k : threshold methods' 50 % point [degC] and
        half width of the linear transition [K] (0 = step).
    solar_substeps : sub-steps per hour for the interval-mean sun geometry.
    terrain_albedo_frac : albedo of surrounding terrain for reflected shortwave [1].
    longwave_clear_sky : "prata1996" or "brutsaert1975".
    terrain_emissivity : emissivity of surrounding terrain [1].
    kt_clear : clearness index of a clear sky for the cloud proxy [1].
    cloud_proxy_min_cos_zenith : interval-mean cos(zenith) below which the clearness index
        is not used and the last daytime cloud fraction is carried [1].
    cloud_frac_without_daylight : cloud fraction used before any daylight in a run [1].
    wind : "winstral", "liston_sturm", "both" or "none".
    wind_sx_coef_per_deg : speed reduction per degree of Sx shelter [deg-1].
    wind_factor_bounds : bounds of the wind-speed factor [1].
    liston_sturm_slope_ref_deg : slope mapped to the largest slope term [deg].
    bias : {variable: {"offset": x | [12], "factor": x | [12]} or a list of such with
        ``"exposure"`` (``all``, ``sheltered``, ``neutral``, ``exposed``)} in canonical units
        (K, %, m s-1, W m-2, kg m-2, Pa); variables as in ``[bias]``. A cell takes the entry of
        its exposure class, else the one for all cells. Temperature and humidity corrections
        are applied before phase and longwave.
    quantile_tables : QuantileMappingTable objects to apply (after offsets/factors).
    chunk_cells : cells per chunk (bounds memory).
    time_block_h : hours read per block.
    """

    interpolation: Literal["bilinear", "idw"] = "bilinear"
    lapse: Literal["monthly", "fixed", "grid"] = "monthly"
    lapse_fixed_k_per_km: float = 6.5
    grid_lapse_radius: int = 2
    grid_lapse_bounds_k_per_km: tuple[float, float] = (-15.0, 9.8)
    grid_lapse_min_r2: float = 0.5
    grid_lapse_min_range_m: float = 150.0
    pressure: Literal["hypsometric", "standard_atmosphere"] = "hypsometric"
    precip_elevation: Literal["thornton1997", "none"] = "thornton1997"
    precip_chi_per_km: float | None = None
    precip_chi_scale: float = 0.5
    precip_factor_bounds: tuple[float, float] = (0.5, 1.5)
    drift: bool = False
    drift_coef_per_deg: float = 0.02
    drift_bounds: tuple[float, float] = (0.5, 1.5)
    phase: Literal["jennings2018", "wet_bulb", "air_temperature"] = "jennings2018"
    phase_threshold_c: float = 1.0
    phase_half_width_k: float = 0.0
    solar_substeps: int = 12
    terrain_albedo_frac: float = 0.6
    longwave_clear_sky: Literal["prata1996", "brutsaert1975"] = "prata1996"
    terrain_emissivity: float = 0.98
    kt_clear: float = 0.75
    cloud_proxy_min_cos_zenith: float = 0.1
    cloud_frac_without_daylight: float = 0.5
    wind: Literal["winstral", "liston_sturm", "both", "none"] = "winstral"
    wind_sx_coef_per_deg: float = 0.025
    wind_factor_bounds: tuple[float, float] = (0.4, 1.3)
    liston_sturm_slope_ref_deg: float = 45.0
    bias: dict = field(default_factory=dict)
    quantile_tables: list = field(default_factory=list)
    chunk_cells: int = 1000
    time_block_h: int = 168

    def __post_init__(self) -> None:
        for key, allowed in _CHOICES.items():
            value = getattr(self, key)
            if value not in allowed:
                raise ConfigError(
                    f"[downscale] {key}: expected one of {', '.join(map(repr, allowed))}, "
                    f"got {value!r}"
                )
        for key in (
            "precip_factor_bounds",
            "drift_bounds",
            "wind_factor_bounds",
            "grid_lapse_bounds_k_per_km",
        ):
            lo, hi = getattr(self, key)
            if not lo < hi:
                raise ConfigError(
                    f"[downscale] {key}: expected (low, high) with low < high, got {(lo, hi)}"
                )
        if self.solar_substeps < 1 or self.chunk_cells < 1 or self.time_block_h < 1:
            raise ConfigError(
                "[downscale] solar_substeps, chunk_cells and time_block_h must be >= 1, got "
                f"{self.solar_substeps}, {self.chunk_cells}, {self.time_block_h}"
            )
        for key, entries in self.bias.items():
            for corr in [entries] if isinstance(entries, dict) else entries:
                self._check_bias_entry(key, corr)

    @staticmethod
    def _check_bias_entry(key: str, corr) -> None:
        if not isinstance(corr, dict) or not set(corr) <= {"offset", "factor", "exposure"}:
            raise ConfigError(
                f"[bias] {key}: expected {{offset = x}} and/or {{factor = x}} (a number or "
                f"12 monthly values), optionally with exposure = <class>, got {corr!r}"
            )
        for kind, value in corr.items():
            if kind == "exposure":
                continue
            n = len(value) if isinstance(value, (list, tuple)) else 1
            if n not in (1, 12):
                raise ConfigError(
                    f"[bias] {key}.{kind}: expected a number or a list of 12 (January.."
                    f"December), got {n} values"
                )

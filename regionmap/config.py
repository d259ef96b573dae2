"""TOML configuration → validated settings.

Each section of the file is the settings object of its stage (``[terrain]`` →
:class:`TerrainSettings`, ``[cells]`` → :class:`CellSettings`, ``[downscale]`` and ``[bias]``
→ :mod:`regionmap.downscale.settings`, ``[snow]`` → :class:`regionmap.snow.params.SnowParams`),
with the same option names and one default each. Unknown keys are errors that name the
closest valid key; wrong types and ranges name the key, the file and what was expected;
paths are resolved relative to the config file.
"""

from __future__ import annotations

import datetime as dt
import re
import tomllib
import zoneinfo
from itertools import pairwise
from pathlib import Path
from typing import Annotated, Any, ClassVar, Literal, TypeVar

import numpy as np
from pydantic import (
    AfterValidator,
    BaseModel,
    BeforeValidator,
    Field,
    ValidationError,
    field_validator,
    model_validator,
)

from regionmap.downscale.settings import BiasSettings, DownscaleSettings
from regionmap.errors import ConfigError
from regionmap.settings import Settings, validation_message
from regionmap.snow.params import SnowParams

__all__ = ["Config", "load_config", "parse_band", "config_from_dict"]


def _time_input(value):
    """A TOML date-time, a local date, or an ISO 8601 text; numbers are refused (pydantic
    would read them as seconds since 1970)."""
    if isinstance(value, dt.datetime | str):
        return value
    if isinstance(value, dt.date):
        return dt.datetime(value.year, value.month, value.day)
    raise ValueError(f"expected a date-time such as 2026-01-15T00:00 (UTC), got {value!r}")


def _as_utc(value: dt.datetime) -> dt.datetime:
    """Times with an offset are converted to UTC; times without one are taken as UTC. Both
    come back without a time zone, so they compare with each other."""
    if value.tzinfo is not None:
        value = value.astimezone(dt.UTC).replace(tzinfo=None)
    return value


#: A time in the config: UTC unless it carries an offset (then converted to UTC).
UtcTime = Annotated[dt.datetime, BeforeValidator(_time_input), AfterValidator(_as_utc)]


class RegionSection(Settings):
    section: ClassVar[str] = "region"

    dem: Path
    zones: Path
    zone_field: str = "name"
    zone_layer: str | None = None
    #: the inputs are invented (demo data): run.json, the report and the console say so
    invented_data: bool = False


class CellSettings(Settings):
    """How pixels are grouped into cells (``[cells]``).

    Attributes
    ----------
    band_edges_m : tuple of float or None
        Band edges [m]; bands are open-ended below the first and above the last edge.
    band_step_m : float or None
        Alternative to ``band_edges_m``: edges every ``band_step_m`` metres (multiples of
        it); 300 m unless ``band_edges_m`` is given (then None).
    aspect_sectors : int
        4, 8 or 16 aspect sectors, the first centred on north.
    flat_below_deg : float
        Pixels with a slope below this [deg] form the ``flat`` sector.
    slope_classes_deg : tuple of float
        Optional slope-class edges [deg]; class k spans [edge k-1, edge k).
    avalanche_terrain_deg : (low, high)
        Slopes the summaries weight as avalanche terrain [deg] (30-50 by default, common
        practice).
    sun_azimuth_step_deg, sun_elevation_step_deg : float
        Resolution of the sunlit-fraction table: azimuths 0, step, … < 360 and elevations
        0, step, … ≤ 90 [deg].
    small_below_pixels : int
        Cells with fewer pixels are flagged ``small`` (kept, never dropped).
    """

    section: ClassVar[str] = "cells"

    band_edges_m: tuple[float, ...] | None = None
    band_step_m: Annotated[float, Field(gt=0)] | None = 300.0
    aspect_sectors: Literal[4, 8, 16] = 8
    flat_below_deg: Annotated[float, Field(ge=0, lt=90)] = 10.0
    slope_classes_deg: tuple[Annotated[float, Field(gt=0, lt=90)], ...] = ()
    avalanche_terrain_deg: tuple[
        Annotated[float, Field(ge=0, le=90)], Annotated[float, Field(ge=0, le=90)]
    ] = (30.0, 50.0)
    sun_azimuth_step_deg: Annotated[float, Field(gt=0, le=90)] = 10.0
    sun_elevation_step_deg: Annotated[float, Field(gt=0, le=45)] = 5.0
    small_below_pixels: Annotated[int, Field(ge=0)] = 25

    @model_validator(mode="before")
    @classmethod
    def _edges_or_step(cls, data):
        if isinstance(data, dict) and data.get("band_edges_m") is not None:
            if data.get("band_step_m") is not None:
                raise ValueError("give either band_edges_m or band_step_m, not both")
            data = {**data, "band_step_m": None}
        return data

    @model_validator(mode="after")
    def _bands(self):
        if self.band_edges_m is None and self.band_step_m is None:
            raise ValueError("give band_edges_m or band_step_m")
        if self.band_edges_m is not None:
            edges = self.band_edges_m
            if len(edges) < 1 or any(b <= a for a, b in pairwise(edges)):
                raise ValueError(f"band_edges_m must be strictly increasing, got {list(edges)}")
        s = self.slope_classes_deg
        if any(b <= a for a, b in pairwise(s)):
            raise ValueError(f"slope_classes_deg must be strictly increasing, got {list(s)}")
        lo, hi = self.avalanche_terrain_deg
        if hi <= lo:
            raise ValueError(
                f"avalanche_terrain_deg must be [low, high] with low < high, got {[lo, hi]}"
            )
        return self


class VariableMapping(Settings):
    section: ClassVar[str] = "forcing.variables"

    """One ``[forcing.variables]`` entry (see ``regionmap.io.forcing_mapping``): the file
    variable, or several summed; units, interval kind, accumulation, mixing ratio and the
    cosine/sine variables that rotate grid-relative winds, where the file does not say."""

    name: str | Annotated[list[str], Field(min_length=1)]
    units: str | None = None
    kind: Literal["instantaneous", "mean", "sum"] | None = None
    accumulated: bool = False
    mixing_ratio: bool = False
    rotation: tuple[str, str] | None = None


class HeightsSection(Settings):
    section: ClassVar[str] = "forcing.heights_m"

    wind: Annotated[float, Field(gt=0, le=200)] | None = None
    temperature: Annotated[float, Field(gt=0, le=200)] | None = None


class ForcingSection(Settings):
    section: ClassVar[str] = "forcing"

    path: str
    start: UtcTime | None = None
    end: UtcTime | None = None
    analysis_time: UtcTime | None = None
    variables: dict[str, VariableMapping] = Field(default_factory=dict)
    heights_m: HeightsSection = HeightsSection()
    static: Path | None = None

    @model_validator(mode="after")
    def _times(self):
        if self.start and self.end and self.end <= self.start:
            raise ValueError(f"end ({self.end}) must be after start ({self.start})")
        return self


class OutputSection(Settings):
    section: ClassVar[str] = "output"

    dir: Path = Path("out")
    map_time: UtcTime | None = None
    diagnostics_every: str = "1h"
    local_timezone: str = "UTC"
    observation_hour: Annotated[int, Field(ge=0, le=23)] = 7

    @field_validator("diagnostics_every")
    @classmethod
    def _every(cls, v: str) -> str:
        if parse_interval_hours(v) is None:
            raise ValueError(f"expected a whole number of hours like '1h', '3h' or '1D', got {v!r}")
        return v

    @field_validator("local_timezone")
    @classmethod
    def _tz(cls, v: str) -> str:
        try:
            zoneinfo.ZoneInfo(v)
        except (zoneinfo.ZoneInfoNotFoundError, ValueError):
            raise ValueError(
                f"expected an IANA time-zone name such as 'Etc/GMT+7' or 'UTC', got {v!r}"
            ) from None
        return v

    @property
    def diagnostics_every_h(self) -> int:
        hours = parse_interval_hours(self.diagnostics_every)
        if hours is None:  # the validator refuses such values
            raise ConfigError(f"[output] diagnostics_every = {self.diagnostics_every!r}")
        return hours


class TerrainSettings(Settings):
    """Terrain-analysis options (``[terrain]``).

    Attributes
    ----------
    horizon_azimuths : int
        Horizon azimuths, equally spaced from north.
    horizon_distance_m : float
        Horizon search distance [m].
    exposure_directions : int
        Wind-direction sectors for Sx, equally spaced from north.
    exposure_distance_m : float
        Upwind search distance d_max for Sx [m] (300 m, common later practice [mem]).
    curvature_length_m : float
        Curvature length scale η [m].
    earth_curvature : bool
        Lower distant terrain by d²/2R in the horizon scan.
    """

    section: ClassVar[str] = "terrain"

    horizon_azimuths: Annotated[int, Field(ge=4, le=72)] = 16
    horizon_distance_m: Annotated[float, Field(gt=0, le=50_000)] = 5000.0
    exposure_directions: Annotated[int, Field(ge=4, le=36)] = 8
    exposure_distance_m: Annotated[float, Field(gt=0, le=5000)] = 300.0
    curvature_length_m: Annotated[float, Field(gt=0)] = 500.0
    earth_curvature: bool = True

    @property
    def horizon_azimuths_deg(self) -> np.ndarray:
        return np.arange(self.horizon_azimuths) * (360.0 / self.horizon_azimuths)

    @property
    def exposure_directions_deg(self) -> np.ndarray:
        return np.arange(self.exposure_directions) * (360.0 / self.exposure_directions)


class RunSection(Settings):
    section: ClassVar[str] = "run"

    #: cells per task; a task holds ~1.3 MB per cell of a season's hourly diagnostics and
    #: daily profiles, and a multiple of 256 fills whole chunks of cells.nc (whose
    #: compression then runs outside the HDF5 lock: io.results)
    chunk_size: Annotated[int, Field(ge=1, le=100_000)] = 256
    #: where prepared regions (terrain, cells, weights) are kept between runs; default
    #: $REGIONMAP_CACHE_DIR, else $XDG_CACHE_HOME/regionmap, else ~/.cache/regionmap
    cache_dir: Path | None = None

    @field_validator("cache_dir")
    @classmethod
    def _home(cls, v):
        return None if v is None else v.expanduser()


class StationsSection(Settings):
    section: ClassVar[str] = "stations"

    stations: Path
    observations: list[Path]


class RestartEntry(Settings):
    section: ClassVar[str] = "restart"

    profile: Path
    time: UtcTime | None = None
    zone: str
    bands: list[str]
    aspects: list[str]

    @field_validator("bands")
    @classmethod
    def _bands(cls, v):
        for b in v:
            parse_band(b)
        return v


class Config(Settings):
    region: RegionSection
    cells: CellSettings = CellSettings()
    forcing: ForcingSection | None = None
    bias: BiasSettings = BiasSettings()
    output: OutputSection = OutputSection()
    terrain: TerrainSettings = TerrainSettings()
    downscale: DownscaleSettings = DownscaleSettings()
    snow: SnowParams = SnowParams()
    run: RunSection = RunSection()
    stations: StationsSection | None = None
    restart: list[RestartEntry] = Field(default_factory=list)

    source: Path | None = Field(default=None, exclude=True)


_BAND = re.compile(r"^\s*(\d+(?:\.\d+)?)\s*-\s*(\d+(?:\.\d+)?)\s*$")


def parse_band(text: str) -> tuple[float, float]:
    """Parse an elevation band written ``LOW-HIGH`` in metres (``"2100-2400"``).

    Raises
    ------
    ConfigError
        When the text is not two increasing numbers joined by a hyphen.
    """
    m = _BAND.match(str(text))
    if not m or float(m.group(2)) <= float(m.group(1)):
        raise ConfigError(
            f"band {text!r}: expected LOW-HIGH in metres with LOW < HIGH, e.g. '2100-2400'"
        )
    return float(m.group(1)), float(m.group(2))


def parse_interval_hours(text: str) -> int | None:
    """``'1h'`` → 1, ``'3h'`` → 3, ``'1D'`` → 24; None when not a whole number of hours."""
    m = re.fullmatch(r"\s*(\d+)\s*([hHdD])\s*", str(text))
    if not m or int(m.group(1)) == 0:
        return None
    return int(m.group(1)) * (24 if m.group(2) in "dD" else 1)


_M = TypeVar("_M", bound=BaseModel)


def _resolve_paths(model: _M, base: Path) -> _M:
    updates: dict[str, Any] = {}
    for name, value in model:
        if isinstance(value, Path) and name != "source":
            updates[name] = value if value.is_absolute() else (base / value)
        elif isinstance(value, BaseModel):
            updates[name] = _resolve_paths(value, base)
        elif isinstance(value, list) and value and isinstance(value[0], (BaseModel, Path)):
            updates[name] = [
                _resolve_paths(v, base)
                if isinstance(v, BaseModel)
                else (v if v.is_absolute() else base / v)
                for v in value
            ]
    return model.model_copy(update=updates) if updates else model


def config_from_dict(
    data: dict, *, source: str = "<config>", base_dir: Path | None = None
) -> Config:
    """Validate a config mapping; relative paths are taken relative to ``base_dir``."""
    try:
        cfg = Config.model_validate(data)
    except ValidationError as exc:
        raise ConfigError(validation_message(exc, Config, source=source)) from None
    except ValueError as exc:  # raised by our own helpers inside validators
        raise ConfigError(f"{source}: {exc}") from None
    base = (base_dir or Path.cwd()).resolve()
    cfg = _resolve_paths(cfg, base)
    if cfg.forcing is not None and not Path(cfg.forcing.path).is_absolute():
        cfg = cfg.model_copy(
            update={
                "forcing": cfg.forcing.model_copy(update={"path": str(base / cfg.forcing.path)})
            }
        )
    return cfg.model_copy(update={"source": Path(source) if source != "<config>" else None})


def load_config(path: str | Path) -> Config:
    """Read and validate a TOML config file.

    Raises
    ------
    ConfigError
        When the file is missing, is not valid TOML, or fails validation; the message names
        the file and the offending key.
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise ConfigError(f"config file {p} does not exist") from None
    except UnicodeDecodeError as exc:
        line = p.read_bytes()[: exc.start].count(b"\n") + 1
        raise ConfigError(
            f"{p}: line {line} is not UTF-8 text (byte 0x{exc.object[exc.start]:02x}); TOML "
            "files are UTF-8: save the file as UTF-8"
        ) from None
    except OSError as exc:
        raise ConfigError(f"cannot read config file {p}: {exc.strerror}") from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ConfigError(f"{p}: not valid TOML: {exc}") from None
    return config_from_dict(data, source=str(p), base_dir=p.resolve().parent)

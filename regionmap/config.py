"""TOML configuration → validated settings.

Unknown keys are errors that name the closest valid key; wrong types
and ranges name the key, the file and what was expected; paths are resolved relative to the
config file.
"""

from __future__ import annotations

import datetime as dt
import difflib
import math
import re
import tomllib
import zoneinfo
from pathlib import Path
from typing import Annotated, Any, Literal

from pydantic import (
    AfterValidator,
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    ValidationError,
    field_validator,
    model_validator,
)

from regionmap.errors import ConfigError

__all__ = ["Config", "load_config", "parse_band", "config_from_dict"]

BIAS_VARIABLES = (
    "air_temperature",
    "relative_humidity",
    "wind_speed",
    "precipitation",
    "shortwave_down",
    "longwave_down",
)


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


class _Section(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class RegionSection(_Section):
    dem: Path
    zones: Path
    zone_field: str = "name"
    zone_layer: str | None = None
    #: the inputs are invented (demo data): run.json, the report and the console say so
    invented_data: bool = False


class CellsSection(_Section):
    band_edges_m: list[float] | None = None
    band_step_m: Annotated[float, Field(gt=0)] | None = None
    aspect_sectors: Literal[4, 8, 16] = 8
    flat_below_deg: Annotated[float, Field(ge=0, lt=90)] = 10.0
    slope_classes_deg: list[Annotated[float, Field(gt=0, lt=90)]] | None = None
    avalanche_terrain_deg: tuple[
        Annotated[float, Field(ge=0, le=90)], Annotated[float, Field(ge=0, le=90)]
    ] = (30.0, 50.0)

    @model_validator(mode="after")
    def _bands(self):
        if self.band_edges_m is not None and self.band_step_m is not None:
            raise ValueError("give either band_edges_m or band_step_m, not both")
        if self.band_edges_m is not None:
            edges = self.band_edges_m
            if len(edges) < 1 or any(b <= a for a, b in zip(edges, edges[1:])):
                raise ValueError(f"band_edges_m must be strictly increasing, got {edges}")
        if self.slope_classes_deg is not None:
            s = self.slope_classes_deg
            if any(b <= a for a, b in zip(s, s[1:])):
                raise ValueError(f"slope_classes_deg must be strictly increasing, got {s}")
        lo, hi = self.avalanche_terrain_deg
        if hi <= lo:
            raise ValueError(
                f"avalanche_terrain_deg must be [low, high] with low < high, got {[lo, hi]}"
            )
        return self

    @property
    def effective_band_step_m(self) -> float | None:
        if self.band_edges_m is None and self.band_step_m is None:
            return 300.0
        return self.band_step_m


class VariableMapping(_Section):
    """One ``[forcing.variables]`` entry (see ``regionmap.io.forcing_mapping``): the file
    variable, or several summed; units, interval kind, accumulation, mixing ratio and the
    cosine/sine variables that rotate grid-relative winds, where the file does not say."""

    name: str | Annotated[list[str], Field(min_length=1)]
    units: str | None = None
    kind: Literal["instantaneous", "mean", "sum"] | None = None
    accumulated: bool = False
    mixing_ratio: bool = False
    rotation: tuple[str, str] | None = None


class HeightsSection(_Section):
    wind: Annotated[float, Field(gt=0, le=200)] | None = None
    temperature: Annotated[float, Field(gt=0, le=200)] | None = None


class ForcingSection(_Section):
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


def _scalar_or_monthly(value):
    """A number, or a list of 12 numbers (January … December)."""
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, (int, float, list)):
        raise ValueError(f"expected a number or a list of 12 monthly numbers, got {value!r}")
    if isinstance(value, list):
        if len(value) != 12 or not all(
            isinstance(x, (int, float)) and not isinstance(x, bool) for x in value
        ):
            raise ValueError(
                f"expected a number or a list of 12 monthly numbers (Jan…Dec), got {value!r}"
            )
        return [float(x) for x in value]
    return float(value)


class BiasEntry(_Section):
    """One correction: ``factor`` multiplies, ``offset`` adds (canonical units), optionally
    only for cells of one wind-exposure class."""

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
    return [value] if isinstance(value, dict) else value


class BiasSection(_Section):
    """Per-variable corrections; each key takes one table or a list of tables (one per
    exposure class)."""

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


class OutputSection(_Section):
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
        return parse_interval_hours(self.diagnostics_every)


class TerrainSection(_Section):
    horizon_azimuths: Annotated[int, Field(ge=4, le=72)] = 16
    horizon_distance_m: Annotated[float, Field(gt=0, le=50_000)] = 5000.0
    exposure_directions: Annotated[int, Field(ge=4, le=36)] = 8
    exposure_distance_m: Annotated[float, Field(gt=0, le=5000)] = 300.0


class DownscaleSection(_Section):
    interpolation: Literal["bilinear", "idw"] = "bilinear"
    lapse: Literal["monthly", "fixed", "grid"] = "monthly"
    lapse_rate_k_per_km: Annotated[float, Field(ge=0, le=12)] = 6.5
    precip_coefficient_scale: Annotated[float, Field(ge=0, le=1)] = 0.5
    precip_factor_bounds: tuple[float, float] = (0.5, 1.5)
    #: zone-conserving exposure drift of precipitation; chunks then hold whole zones, so a
    #: run's memory grows with its largest zone
    drift: bool = False
    phase: Literal["jennings2018", "wet_bulb", "air_temperature"] = "jennings2018"
    phase_threshold_c: Annotated[float, Field(ge=-3, le=4)] = 1.0
    longwave: Literal["prata1996", "brutsaert1975"] = "prata1996"
    wind: Literal["winstral", "liston_sturm", "none"] = "winstral"

    @model_validator(mode="after")
    def _bounds(self):
        lo, hi = self.precip_factor_bounds
        if not (0 < lo <= 1 <= hi):
            raise ValueError(
                f"precip_factor_bounds must satisfy 0 < low <= 1 <= high, got {[lo, hi]}"
            )
        return self


class SnowSection(_Section):
    max_layers: Annotated[int, Field(ge=10, le=80)] = 50
    threshold_mode: Literal["relative", "absolute"] = "relative"
    depth_hoar_min_cm: Annotated[float, Field(ge=0, le=50)] = 2.0


class RunSection(_Section):
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


class StationsSection(_Section):
    stations: Path
    observations: list[Path]


class RestartEntry(_Section):
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


class Config(_Section):
    region: RegionSection
    cells: CellsSection = CellsSection()
    forcing: ForcingSection | None = None
    bias: BiasSection = BiasSection()
    output: OutputSection = OutputSection()
    terrain: TerrainSection = TerrainSection()
    downscale: DownscaleSection = DownscaleSection()
    snow: SnowSection = SnowSection()
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


def _model_at(loc: tuple) -> type[BaseModel] | None:
    """The pydantic model class that holds the key at ``loc`` (for closest-key hints)."""
    model: Any = Config
    dict_key = False
    for part in loc[:-1]:
        if isinstance(part, int) or dict_key:  # a list index or a key of a dict of sections
            dict_key = False
            continue
        field = (
            model.model_fields.get(part)
            if isinstance(model, type) and issubclass(model, BaseModel)
            else None
        )
        if field is None:
            return None
        model = _first_model(field.annotation)
        if model is None:
            return None
        dict_key = getattr(field.annotation, "__origin__", None) is dict
    return model


def _first_model(annotation) -> type[BaseModel] | None:
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return annotation
    for arg in getattr(annotation, "__args__", ()) or ():
        found = _first_model(arg)
        if found is not None:
            return found
    return None


def _key_name(loc: tuple) -> str:
    parts = [str(p) for p in loc if not isinstance(p, int)]
    if not parts:
        return "(top level)"
    if len(parts) == 1:
        return f"[{parts[0]}]"
    return f"[{'.'.join(parts[:-1])}] {parts[-1]}"


def _format_errors(exc: ValidationError, source: str) -> str:
    messages = []
    seen = set()
    for err in exc.errors():
        loc = tuple(err["loc"])
        key = _key_name(loc)
        if key in seen:
            continue
        seen.add(key)
        if err["type"] == "extra_forbidden":
            model = _model_at(loc)
            valid = list(model.model_fields) if model else []
            valid = [v for v in valid if v != "source"]
            close = difflib.get_close_matches(str(loc[-1]), valid, n=1, cutoff=0.5)
            hint = (
                f"; did you mean {close[0]!r}?"
                if close
                else (f"; valid keys: {', '.join(valid)}" if valid else "")
            )
            messages.append(f"unknown key {key}{hint}")
        elif err["type"] == "missing":
            messages.append(f"missing required key {key}")
        else:
            got = err.get("input")
            msg = err["msg"].removeprefix("Value error, ")
            got_text = "" if isinstance(got, dict) or " got " in msg else f" (got {got!r})"
            messages.append(f"key {key}: {msg}{got_text}")
    return f"{source}: " + "; ".join(messages)


def _resolve_paths(model: BaseModel, base: Path) -> BaseModel:
    updates = {}
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
        raise ConfigError(_format_errors(exc, source)) from None
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

"""Weather-station metadata and observation files (regionmap's own CSV formats).

The formats are documented in ``docs/station_csv.md``. Readers validate every value and raise
one :class:`~regionmap.errors.InputError` naming the file, the line and column, what was
expected and what came. Values leave the reader in canonical SI units (converted with pint):

=====================  =========  ==========================================================
column (canonical)     unit       meaning
=====================  =========  ==========================================================
air_temperature        K          air temperature at screen height
relative_humidity      1          relative humidity over water (a fraction, never percent)
wind_speed             m s-1      wind speed at the anemometer
wind_from_direction    deg        direction the wind comes from, 0 = north, clockwise
precipitation          kg m-2     amount over the interval ending at ``time``
snow_depth             m          total snow depth
new_snow_depth         m          new snow over the interval ending at ``time``
snow_water_equivalent  kg m-2     snow water equivalent of the whole snowpack
shortwave_down         W m-2      incoming shortwave (global) radiation, interval mean
=====================  =========  ==========================================================

Depths of water (``mm``) become kg m-2 through the density of liquid water, 1000 kg m-3,
written out explicitly (pint cannot convert a length to a mass per area by itself).
"""

from __future__ import annotations

import io
import re
from collections.abc import Iterable
from functools import lru_cache
from pathlib import Path

import numpy as np
import pandas as pd
import pint

from regionmap.constants import RHO_WATER_KG_M3
from regionmap.errors import InputError

__all__ = [
    "EXPOSURE_CLASSES",
    "OBSERVATION_VARIABLES",
    "CANONICAL_UNITS",
    "read_stations",
    "read_observations",
]

#: Exposure classes a station (and a cell) can carry. ``sheltered``: the site is in the lee of
#: surrounding terrain or forest for the prevailing winds; ``exposed``: ridge, crest or open
#: plateau; ``neutral``: neither. Settings fitted at a station apply to cells of its class.
EXPOSURE_CLASSES: tuple[str, ...] = ("sheltered", "neutral", "exposed")

#: Density of liquid water used to turn a depth of water into a mass per area [kg m-3].

#: Canonical unit of each observation variable.
CANONICAL_UNITS: dict[str, str] = {
    "air_temperature": "K",
    "relative_humidity": "1",
    "wind_speed": "m s-1",
    "wind_from_direction": "deg",
    "precipitation": "kg m-2",
    "snow_depth": "m",
    "new_snow_depth": "m",
    "snow_water_equivalent": "kg m-2",
    "shortwave_down": "W m-2",
}

#: Variables the observation files may hold, with the plausible range of each in canonical
#: units (values outside are rejected as errors of the file, not clipped).
OBSERVATION_VARIABLES: dict[str, tuple[float, float]] = {
    "air_temperature": (183.15, 333.15),  # -90 .. +60 degC
    "relative_humidity": (0.0, 1.05),  # sensors read a little over 100 % in fog
    "wind_speed": (0.0, 75.0),
    "wind_from_direction": (0.0, 360.0),
    "precipitation": (0.0, 500.0),
    "snow_depth": (0.0, 20.0),
    "new_snow_depth": (0.0, 5.0),
    "snow_water_equivalent": (0.0, 10000.0),
    "shortwave_down": (-20.0, 1500.0),  # small negative night offsets of pyranometers
}

# Variables whose files may give a depth of water instead of a mass per area.
_WATER_DEPTH_VARIABLES = ("precipitation", "snow_water_equivalent")

_HEADER_RE = re.compile(r"^\s*([A-Za-z_][A-Za-z0-9_]*)\s*\[\s*([^\]]*?)\s*\]\s*$")
_MISSING = {"", "nan", "NaN", "NA", "na", "-"}

_METADATA_REQUIRED = ("id", "lon", "lat", "elevation_m")
_METADATA_OPTIONAL = ("name", "exposure_class", "exposure_notes")


@lru_cache(maxsize=1)
def _ureg() -> pint.UnitRegistry:
    """A pint registry that also reads UDUNITS-style exponents (``m s-1``, ``W m-2``)."""
    return pint.UnitRegistry(preprocessors=[lambda s: re.sub(r"(?<=[A-Za-z])(-?\d+)", r"**\1", s)])


def _read_csv_lines(path: Path, what: str) -> tuple[pd.DataFrame, np.ndarray]:
    """Read a CSV with ``#`` comment lines and blank lines; return the table (all strings)
    and the 1-based file line number of each data row."""
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputError(f"{what} file {path} does not exist; check the path.") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(
            f"{what} file {path} cannot be read as UTF-8 text ({exc}); save it as a UTF-8 CSV file."
        ) from None
    lines = text.splitlines()
    keep = [i for i, line in enumerate(lines) if line.strip() and not line.lstrip().startswith("#")]
    if not keep:
        raise InputError(f"{what} file {path} has no header line; see docs/station_csv.md.")
    body = "\n".join(lines[i] for i in keep)
    try:
        table = pd.read_csv(
            io.StringIO(body), dtype=str, keep_default_na=False, skipinitialspace=True
        )
    except pd.errors.ParserError as exc:
        raise InputError(
            f"{what} file {path}: not a valid CSV table ({exc}); every line needs the same "
            "number of comma-separated fields as the header."
        ) from None
    table.columns = [str(c).strip() for c in table.columns]
    line_numbers = np.asarray(keep[1:], dtype=np.int64) + 1
    return table, line_numbers


def _parse_numbers(
    column: pd.Series, path: Path, lines: np.ndarray, name: str, *, required: bool
) -> np.ndarray:
    """Strings → float64 (NaN where missing); errors name the first bad line."""
    text = column.astype(str).str.strip()
    missing = text.isin(_MISSING).to_numpy()
    values = pd.to_numeric(text.where(~missing), errors="coerce").to_numpy(dtype=np.float64)
    bad = np.isnan(values) & ~missing
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(
            f"{path}, line {lines[i]}, column '{name}': expected a number, got "
            f"{text.iloc[i]!r} ({int(bad.sum())} such value(s) in the file); leave the field "
            "empty for a missing value."
        )
    if required and missing.any():
        i = int(np.flatnonzero(missing)[0])
        raise InputError(
            f"{path}, line {lines[i]}, column '{name}': a value is required but the field is empty."
        )
    return values


def read_stations(path: str | Path) -> pd.DataFrame:
    """Read a station metadata file.

    Parameters
    ----------
    path : str or Path
        CSV file with columns ``id, lon, lat, elevation_m`` and optionally ``name``,
        ``exposure_class`` (one of :data:`EXPOSURE_CLASSES`) and ``exposure_notes``
        (free text). Format: ``docs/station_csv.md``.

    Returns
    -------
    pandas.DataFrame
        Indexed by station ``id`` (str), columns ``lon`` [deg E], ``lat`` [deg N],
        ``elevation_m`` [m], ``name``, ``exposure_class`` (``""`` where not given),
        ``exposure_notes``. ``attrs["source"]`` holds the path.

    Raises
    ------
    InputError
        Missing or unknown columns, empty or duplicate ids, numbers that are not numbers or
        out of range, an unknown exposure class — naming the file, line and column.
    """
    path = Path(path)
    table, lines = _read_csv_lines(path, "Station metadata")
    missing = [c for c in _METADATA_REQUIRED if c not in table.columns]
    if missing:
        raise InputError(
            f"Station metadata file {path}: missing column(s) {missing}; the header must "
            f"name {list(_METADATA_REQUIRED)} (optional: {list(_METADATA_OPTIONAL)}), got "
            f"{list(table.columns)}."
        )
    unknown = [c for c in table.columns if c not in _METADATA_REQUIRED + _METADATA_OPTIONAL]
    if unknown:
        raise InputError(
            f"Station metadata file {path}: unknown column(s) {unknown}; allowed are "
            f"{list(_METADATA_REQUIRED + _METADATA_OPTIONAL)}."
        )
    if table.empty:
        raise InputError(f"Station metadata file {path} lists no station.")
    ids = table["id"].str.strip()
    empty = (ids == "").to_numpy()
    if empty.any():
        i = int(np.flatnonzero(empty)[0])
        raise InputError(f"{path}, line {lines[i]}, column 'id': the station id is empty.")
    spaced = ids.str.contains(r"\s", regex=True).to_numpy()
    if spaced.any():
        i = int(np.flatnonzero(spaced)[0])
        raise InputError(
            f"{path}, line {lines[i]}, column 'id': station ids may not contain spaces, got "
            f"{ids.iloc[i]!r}."
        )
    dup = ids.duplicated(keep="first").to_numpy()
    if dup.any():
        i = int(np.flatnonzero(dup)[0])
        first = int(np.flatnonzero((ids == ids.iloc[i]).to_numpy())[0])
        raise InputError(
            f"{path}, line {lines[i]}, column 'id': station {ids.iloc[i]!r} is listed twice "
            f"(first on line {lines[first]}); ids must be unique."
        )
    out = pd.DataFrame(index=pd.Index(ids.to_numpy(dtype=object), name="id"))
    limits = {"lon": (-180.0, 180.0), "lat": (-90.0, 90.0), "elevation_m": (-500.0, 9000.0)}
    for name, (lo, hi) in limits.items():
        values = _parse_numbers(table[name], path, lines, name, required=True)
        bad = (values < lo) | (values > hi)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(
                f"{path}, line {lines[i]}, column '{name}': expected a value in [{lo}, {hi}], "
                f"got {values[i]}."
            )
        out[name] = values
    out["name"] = table["name"].str.strip().to_numpy() if "name" in table else ""
    if "exposure_class" in table:
        cls = table["exposure_class"].str.strip().str.lower()
        bad = ~(cls.isin(EXPOSURE_CLASSES) | (cls == "")).to_numpy()
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(
                f"{path}, line {lines[i]}, column 'exposure_class': expected one of "
                f"{list(EXPOSURE_CLASSES)} or empty, got {table['exposure_class'].iloc[i]!r}."
            )
        out["exposure_class"] = cls.to_numpy()
    else:
        out["exposure_class"] = ""
    out["exposure_notes"] = (
        table["exposure_notes"].str.strip().to_numpy() if "exposure_notes" in table else ""
    )
    out.attrs["source"] = str(path)
    return out


def _parse_header(path: Path, column: str) -> tuple[str, pint.Unit]:
    """``"air_temperature[degC]"`` → (``"air_temperature"``, pint unit), validated."""
    match = _HEADER_RE.match(column)
    if match is None:
        raise InputError(
            f"Observation file {path}, header column {column!r}: expected "
            "'variable[unit]', e.g. 'air_temperature[degC]' or 'wind_speed[m s-1]'."
        )
    name, unit_text = match.group(1), match.group(2)
    if name not in OBSERVATION_VARIABLES:
        raise InputError(
            f"Observation file {path}, header column {column!r}: unknown variable {name!r}; "
            f"known are {sorted(OBSERVATION_VARIABLES)}."
        )
    if unit_text == "":
        raise InputError(
            f"Observation file {path}, header column {column!r}: the unit is empty; write it "
            f"in brackets, e.g. {name}[{CANONICAL_UNITS[name]}]."
        )
    try:
        unit = _ureg().parse_units(unit_text.replace("°", "deg"))
    except Exception:  # pint raises several unrelated types for unparsable text
        raise InputError(
            f"Observation file {path}, header column {column!r}: unknown unit {unit_text!r}; "
            f"use e.g. {CANONICAL_UNITS[name]!r}."
        ) from None
    canonical = _ureg().parse_units(CANONICAL_UNITS[name])
    ok = unit.dimensionality == canonical.dimensionality
    if name in _WATER_DEPTH_VARIABLES:
        ok = ok or unit.dimensionality == _ureg().parse_units("m").dimensionality
    if not ok:
        raise InputError(
            f"Observation file {path}, header column {column!r}: unit {unit_text!r} cannot "
            f"be converted to {CANONICAL_UNITS[name]!r} (the canonical unit of {name})."
        )
    return name, unit


def _to_canonical(values: np.ndarray, name: str, unit: pint.Unit) -> np.ndarray:
    """Convert float64 values in ``unit`` to the canonical unit of ``name``."""
    ureg = _ureg()
    quantity = ureg.Quantity(values, unit)
    if (
        name in _WATER_DEPTH_VARIABLES
        and unit.dimensionality == ureg.parse_units("m").dimensionality
    ):
        quantity = quantity * ureg.Quantity(RHO_WATER_KG_M3, "kg m-3")
    return np.asarray(quantity.to(CANONICAL_UNITS[name]).magnitude, dtype=np.float64)


def _read_one_observation_file(path: Path, station_ids: pd.Index) -> pd.DataFrame:
    table, lines = _read_csv_lines(path, "Observation")
    for required in ("station_id", "time"):
        if required not in table.columns:
            raise InputError(
                f"Observation file {path}: missing column {required!r}; the header must "
                f"start 'station_id,time,' followed by 'variable[unit]' columns, got "
                f"{list(table.columns)}."
            )
    var_columns = [c for c in table.columns if c not in ("station_id", "time")]
    if not var_columns:
        raise InputError(
            f"Observation file {path}: no variable columns; add e.g. "
            "'air_temperature[degC]' after 'station_id,time'."
        )
    parsed = [_parse_header(path, c) for c in var_columns]
    names = [p[0] for p in parsed]
    if len(set(names)) != len(names):
        dup = sorted({n for n in names if names.count(n) > 1})
        raise InputError(
            f"Observation file {path}: variable(s) {dup} appear in more than one column."
        )
    ids = table["station_id"].str.strip()
    unknown = ~ids.isin(station_ids).to_numpy()
    if unknown.any():
        i = int(np.flatnonzero(unknown)[0])
        raise InputError(
            f"{path}, line {lines[i]}, column 'station_id': unknown station {ids.iloc[i]!r}; "
            f"it must be listed in the station metadata file (known: "
            f"{sorted(station_ids)[:10]}{' …' if len(station_ids) > 10 else ''})."
        )
    time_text = table["time"].str.strip()
    times = pd.to_datetime(time_text, format="ISO8601", utc=True, errors="coerce")
    bad = times.isna().to_numpy()
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(
            f"{path}, line {lines[i]}, column 'time': expected an ISO-8601 time in UTC such "
            f"as '2026-01-15T07:00Z', got {time_text.iloc[i]!r}."
        )
    out = pd.DataFrame(
        {
            "station_id": ids.to_numpy(dtype=object),
            "time": times.dt.tz_convert(None).to_numpy(dtype="datetime64[s]"),
            "_file": str(path),
            "_line": lines,
        }
    )
    for column, (name, unit) in zip(var_columns, parsed, strict=True):
        raw = _parse_numbers(table[column], path, lines, column, required=False)
        values = _to_canonical(raw, name, unit)
        lo, hi = OBSERVATION_VARIABLES[name]
        bad = (values < lo) | (values > hi)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(
                f"{path}, line {lines[i]}, column {column!r}: value {raw[i]} is out of range; "
                f"expected {name} in [{lo}, {hi}] {CANONICAL_UNITS[name]} "
                f"({int(bad.sum())} such value(s) in the file). Check the unit in the header."
            )
        out[name] = values
    return out


def read_observations(
    paths: str | Path | Iterable[str | Path], stations: pd.DataFrame
) -> pd.DataFrame:
    """Read one or more observation files into one table in canonical SI units.

    Parameters
    ----------
    paths : path or iterable of paths
        CSV files with columns ``station_id``, ``time`` (ISO-8601 UTC) and any number of
        ``variable[unit]`` columns (see :data:`OBSERVATION_VARIABLES`). Files may hold
        different variables and stations; a (station, time) may appear in only one file.
    stations : pandas.DataFrame
        The table from :func:`read_stations`; every ``station_id`` must be in its index.

    Returns
    -------
    pandas.DataFrame
        MultiIndex (``station_id``, ``time`` datetime64[s] UTC, naive), sorted; one float64
        column per variable present in any file, canonical units (:data:`CANONICAL_UNITS`),
        NaN where not observed; plus ``interval_start`` (datetime64[s]): the start of the
        interval that an amount (``precipitation``, ``new_snow_depth``) covers — the station's
        previous row, and for its first row the time minus the station's most common step.
        ``attrs["units"]`` maps columns to units, ``attrs["sources"]`` lists the files.

    Raises
    ------
    InputError
        Unknown station, variable or unit, a bad time, a value out of range, or the same
        station and time twice (within or across files) — naming file, line and column.
    """
    if isinstance(paths, (str, Path)):
        paths = [paths]
    paths = [Path(p) for p in paths]
    if not paths:
        raise InputError("No observation file given; pass at least one CSV file.")
    frames = [_read_one_observation_file(p, stations.index) for p in paths]
    obs = pd.concat(frames, ignore_index=True, sort=False)
    dup = obs.duplicated(["station_id", "time"], keep=False).to_numpy()
    if dup.any():
        rows = obs.loc[dup].sort_values(["station_id", "time", "_file", "_line"])
        a, b = rows.iloc[0], rows.iloc[1]
        raise InputError(
            f"Station {a['station_id']!r} has two observations at "
            f"{pd.Timestamp(a['time']).isoformat()}Z: {a['_file']} line {a['_line']} and "
            f"{b['_file']} line {b['_line']}; each station and time may appear only once "
            "(merge the rows into one)."
        )
    obs = obs.drop(columns=["_file", "_line"]).sort_values(["station_id", "time"])
    obs = obs.set_index(["station_id", "time"])
    variables = [v for v in OBSERVATION_VARIABLES if v in obs.columns]
    obs = obs[variables].astype(np.float64)
    obs["interval_start"] = _interval_starts(obs.index)
    obs.attrs["units"] = {v: CANONICAL_UNITS[v] for v in variables}
    obs.attrs["sources"] = [str(p) for p in paths]
    return obs


def _interval_starts(index: pd.MultiIndex) -> np.ndarray:
    """Start of each row's interval: the previous time of the same station; for a station's
    first row its time minus the station's most common step (one hour for a single row)."""
    station = index.get_level_values("station_id").to_numpy()
    time = index.get_level_values("time").to_numpy().astype("datetime64[s]")
    start = np.empty_like(time)
    start[1:] = time[:-1]
    first = np.ones(time.size, dtype=bool)
    first[1:] = station[1:] != station[:-1]
    steps = pd.Series(time - start, index=station).where(~first)
    modal = steps.groupby(level=0).agg(
        lambda s: s.mode().iloc[0] if s.notna().any() else pd.Timedelta(hours=1)
    )
    start[first] = time[first] - modal.reindex(station[first]).to_numpy().astype("timedelta64[s]")
    return start

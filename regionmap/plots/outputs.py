"""Read a run's output folder (docs/outputs.md) for the figures and the report.

:class:`RunOutputs` opens the files lazily and once: ``run.json``, ``cells.nc``,
``profiles.nc``, ``zones.gpkg`` (layers ``zones``, ``cells``, ``rain_crust_line``),
``layers_of_concern.csv`` and ``maps/<metric>.tif``. The DEM for hillshades is not part of
the output folder; it is found through the configuration recorded in ``run.json``
(``config.region.dem``).

It also holds the catalogue of metrics the figures know (:data:`METRICS`) and the
band × aspect summaries at one time (:meth:`RunOutputs.band_aspect`).
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from functools import cached_property
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from regionmap.cells import COMPASS_16
from regionmap.errors import InputError
from regionmap.io.times import utc_datetime64
from regionmap.products.concern import DEFAULT_CRITERIA, ConcernCriteria
from regionmap.products.problems import problems_at
from regionmap.products.summaries import band_label, cell_values, observation_times, summarise

__all__ = ["Metric", "METRICS", "RunOutputs", "SECTOR_ORDER", "metric"]

#: compass sectors in clockwise order from north, then flat.
SECTOR_ORDER: tuple[str, ...] = (*COMPASS_16, "flat")


@dataclass(frozen=True)
class Metric:
    """A quantity the figures can show.

    Attributes
    ----------
    name : file-facing name (the ``maps/<name>.tif`` stem and the zones-table column).
    label : words for axis and colour-bar labels.
    units : unit as printed (after ``scale``).
    summary_column : column of :func:`regionmap.products.summaries.summarise` output.
    scale : factor from the stored value to the printed one (fractions → %).
    vmax : fixed upper end of the colour scale, or None to use the data.
    decimals : digits printed in overview cells.
    """

    name: str
    label: str
    units: str
    summary_column: str
    scale: float = 1.0
    vmax: float | None = None
    decimals: int = 0


METRICS: dict[str, Metric] = {
    m.name: m
    for m in (
        Metric(
            "depth_hoar_fraction",
            "depth-hoar presence (area share)",
            "%",
            "depth_hoar_fraction",
            100.0,
            100.0,
        ),
        Metric(
            "pwl_fraction",
            "persistent weak layer of concern (area share)",
            "%",
            "pwl_fraction",
            100.0,
            100.0,
        ),
        Metric(
            "pwl_depth_cm",
            "depth of the uppermost persistent weak layer of concern",
            "cm",
            "pwl_depth_cm",
        ),
        Metric(
            "pwl_slab_cm",
            "slab above the uppermost persistent weak layer of concern (slope-normal)",
            "cm",
            "pwl_slab_cm",
        ),
        Metric(
            "crust_count",
            "crusts and ice layers in the column",
            "count",
            "crust_count_mean",
            decimals=1,
        ),
        Metric("new_snow_24h_cm", "new snow, last observation day", "cm", "new_snow_24h_cm"),
        Metric("new_snow_72h_cm", "new snow, last three observation days", "cm", "new_snow_72h_cm"),
        Metric(
            "new_snow_72h_kg_m2",
            "snowfall water equivalent, last three observation days",
            "kg m-2",
            "new_snow_72h_kg_m2",
        ),
        Metric("snow_depth_cm", "snow depth (vertical)", "cm", "snow_depth_cm"),
        Metric(
            "threshold_count_max",
            "worst structural threshold count",
            "of 6",
            "threshold_count_max",
            vmax=6.0,
            decimals=1,
        ),
    )
}


def metric(name: str) -> Metric:
    """The :class:`Metric` called ``name``; InputError listing the known ones otherwise."""
    try:
        return METRICS[name]
    except KeyError:
        raise InputError(f"unknown metric {name!r}; expected one of {sorted(METRICS)}") from None


class RunOutputs:
    """Lazy reader of one output folder.

    Parameters
    ----------
    out_dir : the run's output folder.

    Raises
    ------
    InputError
        When the folder or ``run.json`` is missing or unreadable.
    """

    def __init__(self, out_dir):
        self.out_dir = Path(out_dir)
        if not self.out_dir.is_dir():
            raise InputError(
                f"output folder {self.out_dir} does not exist; expected the folder a "
                "regionmap run wrote (hint: regionmap demo --out DIR)"
            )
        rj = self.out_dir / "run.json"
        try:
            self.run = json.loads(rj.read_text(encoding="utf-8"))
        except FileNotFoundError:
            raise InputError(f"{rj} is missing; expected a regionmap output folder") from None
        except (OSError, json.JSONDecodeError) as exc:
            raise InputError(f"{rj}: cannot read it as JSON ({exc})") from None
        if not isinstance(self.run, dict):
            raise InputError(f"{rj}: expected a JSON object, got {type(self.run).__name__}")

    # ------------------------------------------------------------------ files
    def path(self, name: str) -> Path:
        p = self.out_dir / name
        if not p.exists():
            raise InputError(
                f"{p} is missing; expected it in a complete regionmap output folder "
                "(docs/outputs.md)"
            )
        return p

    @cached_property
    def cells(self) -> xr.Dataset:
        """``cells.nc`` opened lazily."""
        return xr.open_dataset(self.path("cells.nc"), engine="netcdf4")

    @cached_property
    def profiles(self) -> xr.Dataset:
        """``profiles.nc``, opened lazily. Its grain-class and crust-kind codes are
        fixed-width character variables; they are read as fixed-width bytes (``S4``), since
        xarray turns ``_Encoding`` text into Python strings one element at a time."""
        raw = xr.open_dataset(self.path("profiles.nc"), engine="netcdf4", decode_cf=False)
        for var in raw.variables.values():
            if var.dtype == "S1":
                var.attrs.pop("_Encoding", None)
        return xr.decode_cf(raw)

    @property
    def profile_days(self) -> np.ndarray:
        """Valid times of the daily snapshots in ``profiles.nc`` (datetime64[s])."""
        return self.profiles["day"].values.astype("datetime64[s]")

    def snapshot_position(self, t: np.datetime64) -> int:
        """Position along ``day`` of the last daily snapshot at or before ``t`` (-1: none)."""
        return int(np.searchsorted(self.profile_days, np.datetime64(t, "s"), side="right") - 1)

    def profiles_on_day(self, d: int) -> xr.Dataset:
        """``profiles.nc`` restricted to the snapshot at position ``d`` (``day`` of length 1),
        lazily: only that day is read when its values are used."""
        return self.profiles.isel(day=slice(d, d + 1))

    def profiles_from_day(self, d: int) -> xr.Dataset:
        """``profiles.nc`` from the snapshot at position ``d`` to the last one (kept for the
        next call with the same ``d``), lazily."""
        cache = self.__dict__.setdefault("_from_day", {})
        if d not in cache:
            cache[d] = self.profiles.isel(day=slice(max(d, 0), None))
        return cache[d]

    @cached_property
    def table(self) -> pd.DataFrame:
        """The cell table (``cells.nc`` variables along ``cell``), indexed by ``cell_id``."""
        ds = self.cells
        cols = [
            v
            for v in (
                "zone",
                "band_lower_m",
                "band_upper_m",
                "aspect_sector",
                "slope_class",
                "elevation_m",
                "slope_deg",
                "aspect_deg",
                "area_km2",
                "lat",
                "lon",
            )
            if v in ds.variables
        ]
        frame = pd.DataFrame({c: ds[c].values for c in cols})
        for c in ("zone", "aspect_sector"):
            if c in frame:
                frame[c] = frame[c].astype(str)
        frame.index = pd.Index(ds["cell_id"].values.astype(np.int64), name="cell_id")
        if "slope_class" not in frame:
            frame["slope_class"] = 0
        frame["band"] = band_label(frame["band_lower_m"], frame["band_upper_m"])
        return frame

    @cached_property
    def times(self) -> np.ndarray:
        return self.cells["time"].values.astype("datetime64[s]")

    @cached_property
    def is_forecast(self) -> np.ndarray:
        if "is_forecast" in self.cells.variables:
            return self.cells["is_forecast"].values.astype(bool)
        return np.zeros(self.times.size, bool)

    @cached_property
    def cell_layer(self) -> pd.DataFrame:
        """Attribute columns of the ``cells`` layer of ``zones.gpkg`` (no geometry), by
        ``cell_id``."""
        import pyogrio

        frame = pyogrio.read_dataframe(self.path("zones.gpkg"), layer="cells", read_geometry=False)
        return frame.set_index("cell_id")

    @cached_property
    def zones(self):
        """The ``zones`` layer of ``zones.gpkg`` (GeoDataFrame)."""
        import geopandas as gpd

        return gpd.read_file(self.path("zones.gpkg"), layer="zones", engine="pyogrio")

    @cached_property
    def rain_crust_lines(self):
        """The ``rain_crust_line`` layer (GeoDataFrame, may be empty)."""
        import geopandas as gpd
        import pyogrio

        path = self.path("zones.gpkg")
        if "rain_crust_line" not in [n for n, _ in pyogrio.list_layers(path)]:
            raise InputError(
                f"{path}: no layer 'rain_crust_line'; expected layers zones, cells, rain_crust_line"
            )
        return gpd.read_file(path, layer="rain_crust_line", engine="pyogrio")

    @cached_property
    def layers_of_concern(self) -> pd.DataFrame:
        """``layers_of_concern.csv``."""
        return pd.read_csv(self.path("layers_of_concern.csv"))

    @cached_property
    def problems(self) -> pd.DataFrame:
        """``problems.csv``; computed from ``cells.nc`` and ``profiles.nc``
        (:func:`regionmap.products.problems.problems_at`) for a folder written without it."""
        path = self.out_dir / "problems.csv"
        if path.is_file():
            return pd.read_csv(path, keep_default_na=False, na_values=[""])
        frame, _ = problems_at(
            self.cells,
            self.profiles,
            self.table,
            self.weights[0].to_numpy(),
            time=self.map_time,
            criteria=self.concern_criteria,
        )
        return frame

    @cached_property
    def band_aspect_table(self) -> pd.DataFrame:
        """``band_aspect.csv`` at the map time, the rows of the run's default weighting (its
        first ``terrain``; ``area_km2`` is the weighted area); computed from ``cells.nc``
        (:meth:`band_aspect`) when the folder has no such table."""
        if not (self.out_dir / "band_aspect.csv").is_file():
            return self.band_aspect().reset_index(drop=True)
        frame = pd.read_csv(self.path("band_aspect.csv"))
        if "terrain" in frame.columns and len(frame):
            frame = frame[frame["terrain"] == frame["terrain"].iloc[0]]
        return frame.reset_index(drop=True)

    @cached_property
    def new_snow_window_end(self) -> np.datetime64:
        """End of the observation days the new-snow sums at the map time cover [UTC]: the
        zones layer's ``new_snow_window_end``, else the last observation hour at or before
        the map time."""
        if "new_snow_window_end" in self.zones.columns and len(self.zones):
            value = self.zones["new_snow_window_end"].iloc[0]
            if not pd.isna(value) and str(value).strip():
                return utc_datetime64(value, "zones.gpkg new_snow_window_end")

        obs = observation_times(
            self.map_time - np.timedelta64(2, "D"),
            self.map_time,
            local_timezone=self.local_timezone,
            observation_hour=self.observation_hour,
        )
        return obs[-1] if obs.size else self.map_time

    @cached_property
    def zone_names(self) -> list[str]:
        return sorted(self.table["zone"].unique())

    # ------------------------------------------------------------------ settings
    def _config(self, *keys, default=None):
        node = self.run.get("config", {})
        for k in keys:
            if not isinstance(node, dict) or k not in node:
                return default
            node = node[k]
        return node

    @property
    def local_timezone(self) -> str:
        return self._config("output", "local_timezone", default="UTC")

    @property
    def observation_hour(self) -> int:
        return int(self._config("output", "observation_hour", default=7))

    @property
    def avalanche_terrain_deg(self) -> tuple[float, float]:
        lo, hi = self._config("cells", "avalanche_terrain_deg", default=(30.0, 50.0))
        return float(lo), float(hi)

    @cached_property
    def concern_criteria(self) -> ConcernCriteria:
        """What made a persistent layer one of concern in this run: the ``[snow]`` settings
        recorded in ``run.json`` (threshold mode, ``pwl_min_*``), the column model's
        defaults for those it does not record."""
        d = DEFAULT_CRITERIA
        mode = self._config(
            "snow", "threshold_mode", default="relative" if d.relative else "absolute"
        )
        return ConcernCriteria(
            relative=mode == "relative",
            min_depth_m=float(self._config("snow", "pwl_min_depth_m", default=d.min_depth_m)),
            min_thickness_m=float(
                self._config("snow", "pwl_min_thickness_m", default=d.min_thickness_m)
            ),
            min_grain_mm=float(self._config("snow", "pwl_min_grain_mm", default=d.min_grain_mm)),
        )

    @cached_property
    def map_time(self) -> np.datetime64:
        """The run's map time: ``run.json`` ``map_time``, else the valid time of the zones
        layer, else the last output time."""
        for value in (self.run.get("map_time"), self._config("output", "map_time")):
            if value:
                return self.time_in_run(value, what="run.json map_time")
        if "valid_time" in self.zones.columns and len(self.zones):
            return self.time_in_run(self.zones["valid_time"].iloc[0], what="zones.gpkg valid_time")
        return self.times[-1]

    @cached_property
    def analysis_time(self) -> np.datetime64 | None:
        """Last analysis time: the last output time whose forcing was not forecast (None
        when the whole run is forecast)."""
        ana = np.nonzero(~self.is_forecast)[0]
        return self.times[ana[-1]] if ana.size else None

    def time_in_run(self, value, *, what: str = "--time") -> np.datetime64:
        """Parse a time and check it lies inside the run's output times; the nearest output
        time at or before it is returned."""
        t = utc_datetime64(value, what)
        times = self.times
        if t < times[0] or t > times[-1]:
            raise InputError(
                f"{what}: {t} is outside the run ({times[0]} … {times[-1]} UTC); "
                "hint: pick a time inside the run's period"
            )
        return times[np.searchsorted(times, t, side="right") - 1]

    def forecast_at(self, t: np.datetime64) -> bool:
        return bool(self.is_forecast[np.searchsorted(self.times, t)])

    # ------------------------------------------------------------------ weights and summaries
    @cached_property
    def weights(self) -> tuple[pd.Series, str]:
        """Per-cell weights [km2] and what they are: the area in avalanche terrain when the
        ``cells`` layer carries ``avalanche_km2`` (with some > 0), else the cell area."""
        layer = self.cell_layer
        table = self.table
        if "avalanche_km2" in layer.columns:
            w = layer["avalanche_km2"].reindex(table.index).fillna(0.0)
            if (w > 0).any():
                lo, hi = self.avalanche_terrain_deg
                return w.astype(np.float64), f"avalanche terrain ({lo:g}-{hi:g}°)"
        return table["area_km2"].astype(np.float64), "all terrain"

    def band_aspect(self, time=None) -> pd.DataFrame:
        """Area-weighted summary per zone × band × aspect at ``time`` (default the map time):
        :func:`regionmap.products.summaries.summarise` rows plus ``band`` labels."""
        t = self.map_time if time is None else self.time_in_run(time)
        return self._band_aspect_at(np.datetime64(t, "s"))

    def _band_aspect_at(self, t: np.datetime64) -> pd.DataFrame:
        cache = self.__dict__.setdefault("_ba_cache", {})
        if t not in cache:
            vals = self.cell_values_at(t)
            w, _ = self.weights
            cache[t] = summarise(
                vals,
                self.table,
                w.to_numpy(),
                by=["zone", "band_lower_m", "band_upper_m", "aspect_sector"],
            )
        return cache[t]

    def cell_values_at(self, t: np.datetime64) -> pd.DataFrame:
        cache = self.__dict__.setdefault("_cv_cache", {})
        if t not in cache:
            table = self.table.drop(columns=["band"])
            d = self.snapshot_position(t)  # cell_values uses the last snapshot at or before t
            prof = self.profiles_on_day(d) if d >= 0 else self.profiles
            cache[t] = cell_values(
                self.cells,
                prof,
                table,
                [t],
                local_timezone=self.local_timezone,
                observation_hour=self.observation_hour,
                criteria=self.concern_criteria,
            )
        return cache[t]

    def check_zone(self, zone: str) -> str:
        if zone not in self.zone_names:
            raise InputError(f"unknown zone {zone!r}; this run's zones are {self.zone_names}")
        return zone

    def close(self) -> None:
        """Close the NetCDF files (they reopen lazily when needed again)."""
        for name in ("cells", "profiles"):
            if name in self.__dict__:
                self.__dict__.pop(name).close()
        self.__dict__.pop("_from_day", None)

"""State of a batch of snow columns, and its ``state.nc`` form.

In memory, layer arrays are (cell, layer) bottom first, with the precision the kernel keeps
(float64 ice and liquid mass; float32 thickness, temperature, grain size and microstructure;
int32 times in seconds since 2000-01-01 and event ids in hours since 1970). On file (CF-1.8:
no 64-bit integers), times are whole seconds since 1970 as float64 (exact; NaN in unused
slots), counters int32, and grain classes / crust kinds the code strings of
:mod:`regionmap.snow.codes`. A save/load round trip restores the state bit for bit.
"""

from __future__ import annotations

import json
import os
import tempfile
from dataclasses import dataclass, fields
from pathlib import Path

import numpy as np
import pandas as pd
import xarray as xr

from regionmap.cells import IDENTITY_COLUMNS
from regionmap.constants import RHO_WATER_KG_M3, T_MELT_K
from regionmap.errors import InputError, OutputError
from regionmap.io.atomic import is_no_space, no_space_error
from regionmap.io.results import CELL_TABLE_VARIABLES
from regionmap.io.writers import history_entry
from regionmap.snow.codes import (
    crust_codes_to_strings,
    crust_strings_to_codes,
    grain_codes_to_strings,
    grain_strings_to_codes,
)
from regionmap.snow.containers import EPOCH_2000_S
from regionmap.snow.diagnostics import layer_hardness_array
from regionmap.snow.kernel import (
    J_FRONT_START,
    J_FZ_EV,
    J_N,
    J_RAIN_EV,
    J_SH_START,
    J_SNOW_EV,
    N_SI,
    N_SV,
    RING_H,
    V_ALBEDO,
    V_FZ_GAP_H,
    V_RAIN_EV_KG_M2,
    V_RAIN_EV_PRECIP_KG_M2,
    V_RAIN_GAP_H,
    V_SH_MASS,
    V_SNOW_AGE_H,
    V_SNOW_GAP_H,
    V_SOIL,
    V_TSURF,
    V_WIND_ERODIBLE,
)
from regionmap.snow.params import N_SOIL, SOIL_THICKNESS_M

__all__ = ["SnowState", "LAYER_FIELDS", "load_state_with_identity"]

#: (name, in-memory dtype) of the (cell, layer) arrays
LAYER_FIELDS: tuple[tuple[str, type], ...] = (
    ("thickness_m", np.float32),
    ("ice_kg_m2", np.float64),
    ("liquid_kg_m2", np.float64),
    ("temperature_k", np.float32),
    ("grain_size_mm", np.float32),
    ("dendricity", np.float32),
    ("facetedness", np.float32),
    ("grain_code", np.int8),
    ("crust_code", np.int8),
    ("flags", np.int8),
    ("deposition_time_s2000", np.int32),
    ("formation_time_s2000", np.int32),
    ("event_id", np.int32),
)
_CELL_FLOAT = (
    ("albedo", V_ALBEDO, "1", "snow surface albedo"),
    ("surface_temperature_k", V_TSURF, "K", "snow surface (skin) temperature"),
    ("surface_hoar_kg_m2", V_SH_MASS, "kg m-2", "surface hoar on the surface, not yet buried"),
    ("snow_age_h", V_SNOW_AGE_H, "h", "hours since the last snowfall"),
    ("hours_since_snowfall", V_SNOW_GAP_H, "h", "dry hours since snowfall (event gap)"),
    ("hours_since_rain", V_RAIN_GAP_H, "h", "dry hours since rain (event gap)"),
    ("hours_since_freezing_rain", V_FZ_GAP_H, "h", "dry hours since freezing rain"),
    ("rain_event_rain_kg_m2", V_RAIN_EV_KG_M2, "kg m-2", "rain of the current rain event"),
    (
        "rain_event_precipitation_kg_m2",
        V_RAIN_EV_PRECIP_KG_M2,
        "kg m-2",
        "precipitation (all phases) of the current rain event",
    ),
    (
        "wind_erodible_kg_m2",
        V_WIND_ERODIBLE,
        "kg m-2",
        "snow the zone's wind transport counts as erodible at the cell's surface",
    ),
)
_CELL_INT = (
    ("snowfall_event_id", J_SNOW_EV, "current deposition event, start hour since 1970"),
    ("rain_event_id", J_RAIN_EV, "current rain event, start hour since 1970"),
    ("freezing_rain_event_id", J_FZ_EV, "current freezing-rain event, start hour since 1970"),
    ("surface_hoar_start_s2000", J_SH_START, "start of surface-hoar growth, s since 2000"),
    (
        "refreeze_front_start_s2000",
        J_FRONT_START,
        "start of the refreezing front from the surface that makes crusts, s since 2000",
    ),
)
#: cell variables a state written before they existed may lack, with the value that means
#: "nothing in progress" (no refreezing front open: the next refreeze starts one)
_CELL_INT_OPTIONAL = {"refreeze_front_start_s2000": 0}

_CELL_FLOAT_INDEX = {name: k for name, k, *_ in _CELL_FLOAT}
_CELL_INT_INDEX = {name: k for name, k, *_ in _CELL_INT}


@dataclass
class SnowState:
    """Snow columns of a batch of cells at one valid time.

    Attributes
    ----------
    time : numpy.datetime64
        Valid time of the state (end of the last step run).
    cell_id : ndarray (cell,) int64
    layer_count : ndarray (cell,) int32
        Active layers, bottom first; slots above are zero.
    thickness_m ... event_id : ndarray (cell, layer)
        See :data:`LAYER_FIELDS`. ``grain_code`` / ``crust_code`` index
        :data:`regionmap.snow.codes.GRAIN_CODES` / ``CRUST_KINDS``; ``flags`` the formation
        flags of :mod:`regionmap.snow.crusts`; ``event_id`` the event that made the layer
        what it is (the snowfall event, the rain event for rain-soaked layers and rain
        crusts, the freezing-rain event for a glaze, the growth start for buried SH), hours
        since 1970.
    surface : ndarray (cell, N_SV) float64
        Per-cell surface, soil and event-gap state (albedo, surface temperature,
        surface-hoar mass, snow age, gap hours, soil temperatures deepest first).
    counters : ndarray (cell, N_SI) int64
        Layer count and current event ids.
    new_snow_kg_m2, new_snow_m : ndarray (cell, 72) float32
        Hourly new-snow mass and fresh depth, slot = hour since 1970 modulo 72.
    fingerprint : str
        Settings fingerprint of the run that wrote the state ("" when fresh).
    """

    time: np.datetime64
    cell_id: np.ndarray
    thickness_m: np.ndarray
    ice_kg_m2: np.ndarray
    liquid_kg_m2: np.ndarray
    temperature_k: np.ndarray
    grain_size_mm: np.ndarray
    dendricity: np.ndarray
    facetedness: np.ndarray
    grain_code: np.ndarray
    crust_code: np.ndarray
    flags: np.ndarray
    deposition_time_s2000: np.ndarray
    formation_time_s2000: np.ndarray
    event_id: np.ndarray
    surface: np.ndarray
    counters: np.ndarray
    new_snow_kg_m2: np.ndarray
    new_snow_m: np.ndarray
    fingerprint: str = ""

    # ---------------------------------------------------------------- construction
    @classmethod
    def empty(
        cls,
        n_cells: int,
        max_layers: int = 50,
        *,
        time="2000-01-01T00:00",
        cell_id=None,
        soil_temperature_k: float = T_MELT_K,
    ) -> SnowState:
        """Snow-free cells at ``time`` with soil at ``soil_temperature_k``."""
        n = int(n_cells)
        layers = {name: np.zeros((n, max_layers), dtype=dt) for name, dt in LAYER_FIELDS}
        surface = np.zeros((n, N_SV))
        surface[:, V_ALBEDO] = 0.85
        surface[:, V_TSURF] = T_MELT_K
        surface[:, V_SNOW_GAP_H] = 1e3
        surface[:, V_RAIN_GAP_H] = 1e3
        surface[:, V_FZ_GAP_H] = 1e3
        surface[:, V_SOIL : V_SOIL + N_SOIL] = np.float32(soil_temperature_k)
        counters = np.zeros((n, N_SI), dtype=np.int64)
        ids = np.arange(n, dtype=np.int64) if cell_id is None else np.asarray(cell_id, np.int64)
        return cls(
            time=np.datetime64(time, "s"),
            cell_id=ids,
            surface=surface,
            counters=counters,
            new_snow_kg_m2=np.zeros((n, RING_H), np.float32),
            new_snow_m=np.zeros((n, RING_H), np.float32),
            **layers,
        )

    @property
    def n_cells(self) -> int:
        return self.thickness_m.shape[0]

    @property
    def max_layers(self) -> int:
        return self.thickness_m.shape[1]

    @property
    def layer_count(self) -> np.ndarray:
        return self.counters[:, J_N].astype(np.int32)

    def copy(self) -> SnowState:
        kw = {f.name: getattr(self, f.name) for f in fields(self)}
        for k, v in kw.items():
            if isinstance(v, np.ndarray):
                kw[k] = v.copy()
        return SnowState(**kw)

    def take(self, positions) -> SnowState:
        """Some cells of the state (a slice or an index array along ``cell``), copied."""
        n = self.n_cells
        kw = {}
        for f in fields(self):
            v = getattr(self, f.name)
            kw[f.name] = (
                v[positions].copy()
                if isinstance(v, np.ndarray) and v.ndim >= 1 and v.shape[0] == n
                else v
            )
        return SnowState(**kw)

    def put(self, lo: int, hi: int, part: SnowState) -> None:
        """Write the state of cells ``lo:hi`` (e.g. a chunk's) into this one; the valid time
        and fingerprint become the part's."""
        n = self.n_cells
        for f in fields(self):
            v = getattr(self, f.name)
            if isinstance(v, np.ndarray) and v.ndim >= 1 and v.shape[0] == n:
                v[lo:hi] = getattr(part, f.name)
        self.time = part.time
        self.fingerprint = part.fingerprint

    def cell_value(self, name: str) -> np.ndarray:
        """A per-cell surface or event value by its ``state.nc`` name (a view, (cell,))."""
        if name == "layer_count":
            return self.counters[:, J_N]
        if name in _CELL_FLOAT_INDEX:
            return self.surface[:, _CELL_FLOAT_INDEX[name]]
        if name in _CELL_INT_INDEX:
            return self.counters[:, _CELL_INT_INDEX[name]]
        raise KeyError(
            f"{name!r} is not a per-cell state value; expected layer_count or one of "
            f"{sorted(_CELL_FLOAT_INDEX) + sorted(_CELL_INT_INDEX)}"
        )

    def set_cell_values(self, positions, **values) -> None:
        """Set per-cell surface or event values (``state.nc`` names) of the cells at
        ``positions``."""
        for name, value in values.items():
            self.cell_value(name)[positions] = value

    def swe_kg_m2(self) -> np.ndarray:
        """Snow water equivalent per cell, surface hoar included [kg m-2]."""
        return (self.ice_kg_m2.sum(1) + self.liquid_kg_m2.sum(1)) + self.surface[:, V_SH_MASS]

    def nbytes_per_cell(self) -> float:
        total = sum(
            getattr(self, f.name).nbytes
            for f in fields(self)
            if isinstance(getattr(self, f.name), np.ndarray)
        )
        return total / max(self.n_cells, 1)

    # ---------------------------------------------------------------- state.nc
    def to_dataset(self, cells=None, region: dict | None = None) -> xr.Dataset:
        """The ``state.nc`` layout: (cell, layer) bottom first, strings for codes.

        Parameters
        ----------
        cells : pandas.DataFrame or None
            The run's cell table in the state's cell order; its :data:`IDENTITY_COLUMNS`
            are stored along ``cell`` so that a continuation can match cells by identity.
        region : dict or None
            Fingerprints of the region (``{"dem": str, "zones": {name: str}}``), stored as
            the attributes ``dem_fingerprint`` and ``zones_fingerprint`` (JSON).
        """
        n_layer = self.max_layers
        active = np.arange(n_layer)[None, :] < self.layer_count[:, None]
        dims = ("cell", "layer")

        def seconds_1970(a):
            out = (a.astype(np.int64) + EPOCH_2000_S).astype(np.float64)
            return np.where(active, out, np.nan)

        def attrs(units, long_name):
            return {"units": units, "long_name": long_name}

        ds = xr.Dataset(
            {
                "layer_count": (
                    ("cell",),
                    self.layer_count,
                    attrs("1", "active layers, bottom first"),
                ),
                "thickness_m": (dims, self.thickness_m, attrs("m", "layer thickness (vertical)")),
                "ice_kg_m2": (dims, self.ice_kg_m2, attrs("kg m-2", "ice mass of the layer")),
                "liquid_kg_m2": (
                    dims,
                    self.liquid_kg_m2,
                    attrs("kg m-2", "liquid water in the layer"),
                ),
                "temperature_k": (dims, self.temperature_k, attrs("K", "layer temperature")),
                "grain_size_mm": (dims, self.grain_size_mm, attrs("mm", "grain size")),
                "hardness_index": (
                    dims,
                    layer_hardness_array(self),
                    {
                        "units": "1",
                        "long_name": "hand hardness index F=1 ... I=6 (Fierz et al. 2009)",
                    },
                ),
                "dendricity": (
                    dims,
                    self.dendricity,
                    attrs("1", "dendricity: 1 fresh dendrites, 0 decomposed"),
                ),
                "facetedness": (
                    dims,
                    self.facetedness,
                    attrs("1", "facetedness: 0 rounded, 1 fully faceted"),
                ),
                "grain_class": (
                    dims,
                    np.where(active, grain_codes_to_strings(self.grain_code), "").astype(str),
                    {"long_name": "grain class (international classification codes)"},
                ),
                "crust_kind": (
                    dims,
                    np.where(active, crust_codes_to_strings(self.crust_code), "").astype(str),
                    {"long_name": "crust kind: none, melt-freeze, sun, rain, glaze"},
                ),
                "formation_flags": (
                    dims,
                    self.flags,
                    attrs("1", "formation flag bits (regionmap.snow.crusts)"),
                ),
                "deposition_time": (
                    dims,
                    seconds_1970(self.deposition_time_s2000),
                    attrs("seconds since 1970-01-01", "deposition time of the layer's snow"),
                ),
                "formation_time": (
                    dims,
                    seconds_1970(self.formation_time_s2000),
                    attrs("seconds since 1970-01-01", "when the layer became what it is"),
                ),
                "event_id": (
                    dims,
                    self.event_id,
                    attrs("1", "start of the forming event, whole hours since 1970-01-01T00Z"),
                ),
                "soil_temperature_k": (
                    ("cell", "soil_layer"),
                    self.surface[:, V_SOIL : V_SOIL + N_SOIL],
                    attrs("K", "soil layer temperature, deepest first"),
                ),
                "new_snow_history_kg_m2": (
                    ("cell", "ring_hour"),
                    self.new_snow_kg_m2,
                    attrs("kg m-2", "hourly new-snow mass, slot = hour since 1970 modulo 72"),
                ),
                "new_snow_history_m": (
                    ("cell", "ring_hour"),
                    self.new_snow_m,
                    attrs("m", "hourly fresh new-snow depth, slot = hour since 1970 modulo 72"),
                ),
            },
            coords={
                "cell_id": (
                    ("cell",),
                    self.cell_id.astype(np.int32),
                    attrs("1", "cell identifier"),
                ),
                "soil_thickness_m": (
                    ("soil_layer",),
                    np.array(SOIL_THICKNESS_M),
                    attrs("m", "soil layer thickness, deepest first"),
                ),
                "time": ((), self.time.astype("datetime64[ns]"), {"long_name": "valid time"}),
            },
            attrs={
                "Conventions": "CF-1.8",
                "title": "regionmap snow state",
                "history": history_entry(),
                "settings_fingerprint": self.fingerprint,
                "layer_order": "bottom first",
                "caution": "model guidance for trained people; never a substitute for field "
                "observations, the local avalanche service or professional standards",
            },
        )
        for name, k, units, long in _CELL_FLOAT:
            ds[name] = (("cell",), self.surface[:, k], {"units": units, "long_name": long})
        for name, k, long in _CELL_INT:
            ds[name] = (("cell",), self.counters[:, k].astype(np.int32), attrs("1", long))
        ds["time"].encoding.update(units="seconds since 1970-01-01", dtype="float64")
        for name in ("deposition_time", "formation_time"):
            ds[name].encoding.update(_FillValue=np.nan)
        if cells is not None:
            if len(cells) != self.n_cells:
                raise ValueError("to_dataset: the cell table does not match the state's cells")

            for name in IDENTITY_COLUMNS:
                dtype, var_attrs = CELL_TABLE_VARIABLES[name]
                values = cells[name].to_numpy()
                values = values.astype(str) if dtype == "str" else values.astype(dtype)
                ds[name] = (("cell",), values, var_attrs)
        if region is not None:
            ds.attrs["dem_fingerprint"] = region["dem"]
            ds.attrs["zones_fingerprint"] = json.dumps(region["zones"], sort_keys=True)
        return ds

    @classmethod
    def from_dataset(cls, ds: xr.Dataset, *, source: str = "state dataset") -> SnowState:
        """Rebuild a state from :meth:`to_dataset` output; raises InputError if malformed."""
        need = [
            "layer_count",
            "thickness_m",
            "ice_kg_m2",
            "liquid_kg_m2",
            "temperature_k",
            "grain_size_mm",
            "dendricity",
            "facetedness",
            "grain_class",
            "crust_kind",
            "formation_flags",
            "deposition_time",
            "formation_time",
            "event_id",
            "soil_temperature_k",
            "new_snow_history_kg_m2",
            "new_snow_history_m",
        ]
        need += [n for n, *_ in _CELL_FLOAT]
        need += [n for n, *_ in _CELL_INT if n not in _CELL_INT_OPTIONAL]
        missing = [v for v in need if v not in ds.variables]
        if missing or "time" not in ds.coords or "cell_id" not in ds.coords:
            raise InputError(
                f"{source}: not a regionmap snow state; missing variables "
                f"{missing or ['time/cell_id']}; "
                "hint: pass a state.nc written by regionmap"
            )
        if ds["time"].ndim != 0:
            raise InputError(
                f"{source}: variable time must be one valid time (a scalar), got an array of "
                f"shape {ds['time'].shape}; expected a state.nc written by regionmap"
            )
        if ds["thickness_m"].ndim != 2 or ds["cell_id"].ndim != 1:
            raise InputError(
                f"{source}: thickness_m must be (cell, layer) and cell_id (cell,), got "
                f"{ds['thickness_m'].dims} and {ds['cell_id'].dims}"
            )
        count = ds["layer_count"].values.astype(np.int64)
        n, n_layer = ds["thickness_m"].shape
        if count.min(initial=0) < 0 or count.max(initial=0) > n_layer:
            raise InputError(
                f"{source}: layer_count must be within 0..{n_layer}, got "
                f"{count.min()}..{count.max()}"
            )
        active = np.arange(n_layer)[None, :] < count[:, None]
        _check_physical(ds, active, source)
        try:
            grain = grain_strings_to_codes(np.where(active, ds["grain_class"].values, ""))
            crust = crust_strings_to_codes(np.where(active, ds["crust_kind"].values, "none"))
        except KeyError as exc:
            raise InputError(
                f"{source}: unknown grain class or crust kind {exc}; expected the "
                "codes of regionmap.snow.codes"
            ) from None

        def s2000(name):
            raw = ds[name].values
            if np.issubdtype(raw.dtype, np.datetime64):  # decoded by xarray from CF units
                raw = raw.astype("datetime64[s]").astype(np.int64)
            # unused slots (NaN / NaT) are zeroed below
            v = np.nan_to_num(raw, nan=0.0).astype(np.int64) - EPOCH_2000_S
            return np.where(active, v, 0).astype(np.int32)

        layers = {
            "thickness_m": ds["thickness_m"].values.astype(np.float32),
            "ice_kg_m2": ds["ice_kg_m2"].values.astype(np.float64),
            "liquid_kg_m2": ds["liquid_kg_m2"].values.astype(np.float64),
            "temperature_k": ds["temperature_k"].values.astype(np.float32),
            "grain_size_mm": ds["grain_size_mm"].values.astype(np.float32),
            "dendricity": ds["dendricity"].values.astype(np.float32),
            "facetedness": ds["facetedness"].values.astype(np.float32),
            "grain_code": grain.astype(np.int8),
            "crust_code": crust.astype(np.int8),
            "flags": ds["formation_flags"].values.astype(np.int8),
            "deposition_time_s2000": s2000("deposition_time"),
            "formation_time_s2000": s2000("formation_time"),
            "event_id": ds["event_id"].values.astype(np.int32),
        }
        surface = np.zeros((n, N_SV))
        for name, k, *_ in _CELL_FLOAT:
            surface[:, k] = ds[name].values
        surface[:, V_SOIL : V_SOIL + N_SOIL] = ds["soil_temperature_k"].values
        counters = np.zeros((n, N_SI), dtype=np.int64)
        counters[:, J_N] = count
        for name, k, _ in _CELL_INT:
            if name in ds.variables:
                counters[:, k] = ds[name].values
            else:
                counters[:, k] = _CELL_INT_OPTIONAL[name]
        return cls(
            time=np.datetime64(ds["time"].values, "s"),
            cell_id=ds["cell_id"].values.astype(np.int64),
            surface=surface,
            counters=counters,
            new_snow_kg_m2=ds["new_snow_history_kg_m2"].values.astype(np.float32),
            new_snow_m=ds["new_snow_history_m"].values.astype(np.float32),
            fingerprint=str(ds.attrs.get("settings_fingerprint", "")),
            **layers,
        )

    def save(self, path, *, cells=None, region: dict | None = None) -> Path:
        """Write ``state.nc`` atomically (temporary file in the same folder, then os.replace);
        ``cells`` and ``region`` as in :meth:`to_dataset`."""
        path = Path(path)
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
            fd, tmp = tempfile.mkstemp(prefix=".tmp-", suffix=".nc", dir=path.parent)
            os.close(fd)
            self.to_dataset(cells, region).to_netcdf(tmp, engine="netcdf4")
            os.replace(tmp, path)
        except OSError as exc:
            if is_no_space(exc):
                raise no_space_error(path) from None
            raise OutputError(
                f"{path}: cannot write the snow state ({exc}); hint: check the "
                "folder exists and is writable"
            ) from None
        return path

    @classmethod
    def load(cls, path) -> SnowState:
        """Read a ``state.nc`` written by :meth:`save`."""
        return load_state_with_identity(path)[0]


#: Plausible ranges of the active layers' values in a state.nc: (variable, low, high, unit,
#: what is impossible about values outside). Snow is never warmer than melting point
#: (273.15 K; a little margin for rounding); no seasonal snowpack holds a 20 m layer; a
#: layer's density lies between fresh snow's (tens of kg m-3) and water's.
_LAYER_RANGES = (
    ("temperature_k", 150.0, 273.5, "K", "snow temperature"),
    ("thickness_m", 1e-6, 20.0, "m", "layer thickness"),
    ("ice_kg_m2", 0.0, 2e4, "kg m-2", "ice mass of a layer"),
    ("liquid_kg_m2", 0.0, 2e4, "kg m-2", "liquid water of a layer"),
    ("grain_size_mm", 0.0, 100.0, "mm", "grain size"),
)
_CELL_RANGES = (
    ("soil_temperature_k", 200.0, 340.0, "K", "soil temperature"),
    ("surface_temperature_k", 150.0, 340.0, "K", "surface temperature"),
    ("albedo", 0.0, 1.0, "1", "albedo"),
    ("surface_hoar_kg_m2", 0.0, 100.0, "kg m-2", "surface-hoar mass"),
    ("new_snow_history_kg_m2", 0.0, 1e3, "kg m-2", "hourly new snow"),
    ("new_snow_history_m", 0.0, 10.0, "m", "hourly new-snow depth"),
)


def _first_bad(values: np.ndarray, low: float, high: float, mask=None):
    """Index and value of the first entry outside [low, high] or not finite (None if none)."""
    with np.errstate(invalid="ignore"):
        bad = ~(np.isfinite(values) & (values >= low) & (values <= high))
    if mask is not None:
        bad &= mask
    if not bad.any():
        return None
    where = np.unravel_index(int(np.argmax(bad)), values.shape)
    return where, values[where]


def _check_physical(ds: xr.Dataset, active: np.ndarray, source: str) -> None:
    """Refuse a state whose values cannot be physical (NaN, negative, absurd).

    Raises
    ------
    InputError
        Naming the file, the variable, the first offending cell (and layer) and the range.
    """
    ids = ds["cell_id"].values
    for name, low, high, unit, what in _LAYER_RANGES + _CELL_RANGES:
        values = np.asarray(ds[name].values, dtype=np.float64)
        found = _first_bad(values, low, high, active if values.shape == active.shape else None)
        if found is not None:
            where, value = found
            layer = f" layer {where[1]}" if values.shape == active.shape else ""
            raise InputError(
                f"{source}: variable {name} of cell_id {ids[where[0]]}{layer} is {value:g} "
                f"{unit}; a {what} must lie within {low:g}..{high:g} {unit}; the state is "
                "damaged or not written by regionmap"
            )
    mass = np.asarray(ds["ice_kg_m2"].values, float) + np.asarray(ds["liquid_kg_m2"].values, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        density = mass / np.asarray(ds["thickness_m"].values, float)
    found = _first_bad(density, 1.0, RHO_WATER_KG_M3 * 1.01, active)
    if found is not None:
        (cell, layer), value = found
        raise InputError(
            f"{source}: layer {layer} of cell_id {ids[cell]} has a density of {value:g} kg m-3 "
            "((ice_kg_m2 + liquid_kg_m2) / thickness_m); expected 1..1000 kg m-3; the state "
            "is damaged or not written by regionmap"
        )


def load_state_with_identity(path) -> tuple[SnowState, object, dict | None]:
    """Read a ``state.nc`` with the identity of its cells.

    Returns
    -------
    state : SnowState
    cells : pandas.DataFrame or None
        The :data:`IDENTITY_COLUMNS` of each cell in the state's order (None when the file
        holds none).
    region : dict or None
        ``{"dem": fingerprint, "zones": {name: fingerprint}}`` (None when absent).

    Raises
    ------
    InputError
        Missing or unreadable file, or contents that are not a valid snow state.
    """
    path = Path(path)
    if not path.is_file():
        raise InputError(
            f"{path}: snow state file not found; hint: give the state.nc of an "
            "earlier run (--continue-from)"
        )
    try:
        with xr.open_dataset(path, engine="netcdf4") as ds:
            ds.load()
    except (OSError, ValueError, RuntimeError) as exc:
        raise InputError(f"{path}: cannot read as NetCDF ({exc}); expected a state.nc") from None
    state = SnowState.from_dataset(ds, source=str(path))
    cells = None
    if all(name in ds.variables and ds[name].dims == ("cell",) for name in IDENTITY_COLUMNS):
        cells = pd.DataFrame({name: ds[name].values for name in IDENTITY_COLUMNS})
        cells["zone"] = cells["zone"].astype(str)
        cells["aspect_sector"] = cells["aspect_sector"].astype(str)
    region = None
    if "dem_fingerprint" in ds.attrs and "zones_fingerprint" in ds.attrs:
        try:
            zones = json.loads(ds.attrs["zones_fingerprint"])
        except ValueError:
            zones = None
        if not isinstance(zones, dict):
            raise InputError(f"{path}: attribute zones_fingerprint is not a JSON object")
        region = {"dem": str(ds.attrs["dem_fingerprint"]), "zones": zones}
    return state, cells, region

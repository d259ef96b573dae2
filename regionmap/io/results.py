"""Streaming writers for ``cells.nc`` (per-cell diagnostics over time) and ``profiles.nc``
(daily layer snapshots).

Both files are created up front with their full dimensions and filled chunk by chunk as the
cell chunks of a run finish, so memory holds one chunk's results at a time. The files are
written under a temporary name and renamed on :meth:`close` (see
:mod:`regionmap.io.atomic`).

A block of cells that covers whole HDF5 chunks (the run's default cell chunks do) is
compressed here, through the filters the file declares (shuffle, then deflate: HDF5 User's
Guide, "Filters"), and stored with h5py's ``write_direct_chunk``. The deflate stream comes from
ISA-L (python-isal), about 6x faster than the zlib inside HDF5 at level 1 for 2 % larger
chunks (measured on cells.nc chunks), and any zlib decoder reads it. The compression runs
outside the HDF5 lock, which the chunk tasks' forcing reads wait on; only the store holds
it. Other blocks go through HDF5's own filter pipeline. Either way the values read back are
the same.

``cells.nc`` follows the CF discrete-sampling-geometry convention for time series
(``featureType = timeSeries``, CF-1.8 §9): instance dimension ``cell`` with ``cell_id`` as the
``timeseries_id``.
"""

from __future__ import annotations

import functools
import itertools
from contextlib import ExitStack
from pathlib import Path

import h5netcdf.legacyapi
import numpy as np
import pandas as pd
from isal import isal_zlib
from xarray.backends.locks import HDF5_LOCK, NETCDFC_LOCK, CombinedLock

from regionmap import CAUTION, __version__
from regionmap.io.atomic import atomic_path, disk_errors
from regionmap.io.writers import history_entry

__all__ = [
    "DIAGNOSTICS",
    "AMOUNTS",
    "CELLS_CHUNK_CELLS",
    "PROFILES_CHUNK_CELLS",
    "CellsNcWriter",
    "ProfilesNcWriter",
]

_EPOCH = "seconds since 1970-01-01 00:00:00"
#: deflate level of the streamed files (shuffle filter before it): level 1 writes 1 024 cells of
#: cells.nc in 1.9 s against 2.2 s at level 4, for a file 3 % larger (profiles.nc: ~10 % larger)
_DEFLATE_LEVEL = 1
#: ISA-L's level for the chunks compressed here (0-3; 1 is as fast as 0 here, 18 % smaller)
_ISAL_LEVEL = 1


_NETCDF_LOCKS = CombinedLock([NETCDFC_LOCK, HDF5_LOCK])


def _hdf5_locked(method):
    """Hold the process-wide HDF5/netCDF-C locks (shared with xarray's readers): the library
    is not thread-safe, and chunk tasks read forcing files while the client writes. The locks
    go through xarray's CombinedLock, which takes them in xarray's own global order (taking
    them in another order deadlocks against a concurrent read)."""

    @functools.wraps(method)
    def wrapper(*args, **kwargs):
        with _NETCDF_LOCKS:
            return method(*args, **kwargs)

    return wrapper


_FILL_I8 = np.int8(-127)
_FILL_I16 = np.int16(-32767)

#: name → (dtype, attributes) of the per-time diagnostics (see docs/outputs.md).
DIAGNOSTICS: dict[str, tuple[str, dict]] = {
    "snow_depth_cm": (
        "f4",
        {
            "standard_name": "surface_snow_thickness",
            "units": "cm",
            "long_name": "snow depth (vertical)",
        },
    ),
    "swe_kg_m2": (
        "f4",
        {
            "standard_name": "surface_snow_amount",
            "units": "kg m-2",
            "long_name": "snow water equivalent incl. liquid water",
        },
    ),
    "new_snow_24h_cm": (
        "f4",
        {"units": "cm", "long_name": "depth of snow deposited in the last 24 h, as settled now"},
    ),
    "new_snow_72h_cm": (
        "f4",
        {"units": "cm", "long_name": "depth of snow deposited in the last 72 h, as settled now"},
    ),
    "new_snow_72h_kg_m2": (
        "f4",
        {"units": "kg m-2", "long_name": "snowfall water equivalent of the last 72 h"},
    ),
    "crust_count": (
        "i1",
        {"units": "1", "long_name": "number of crusts and ice layers in the column"},
    ),
    "depth_hoar_present": (
        "i1",
        {
            "units": "1",
            "long_name": "column holds depth hoar thicker than the threshold",
            "flag_values": np.array([0, 1], "i1"),
            "flag_meanings": "absent present",
        },
    ),
    "pwl_present": (
        "i1",
        {
            "units": "1",
            "long_name": "column holds a persistent weak layer of concern (FC, DH or SH under "
            "a slab, critical by the threshold count)",
            "flag_values": np.array([0, 1], "i1"),
            "flag_meanings": "absent present",
        },
    ),
    "pwl_depth_cm": (
        "f4",
        {
            "units": "cm",
            "long_name": "vertical depth below the surface of the top of the uppermost "
            "persistent weak layer",
        },
    ),
    "threshold_count_max": (
        "f4",
        {
            "units": "1",
            "long_name": "largest structural threshold count over the column's interfaces",
        },
    ),
    "liquid_water_kg_m2": (
        "f4",
        {"units": "kg m-2", "long_name": "liquid water held in the snowpack"},
    ),
}

#: name → (dtype, attributes) of the per-interval amounts (with ``time_bnds``).
AMOUNTS: dict[str, tuple[str, dict]] = {
    "snowfall_kg_m2": ("f4", {"standard_name": "snowfall_amount", "units": "kg m-2"}),
    "rain_kg_m2": ("f4", {"standard_name": "rainfall_amount", "units": "kg m-2"}),
    "runoff_kg_m2": (
        "f4",
        {
            "standard_name": "runoff_amount",
            "units": "kg m-2",
            "long_name": "liquid water leaving the base of the snowpack",
        },
    ),
    "sublimation_kg_m2": (
        "f4",
        {
            "standard_name": "surface_snow_sublimation_amount",
            "units": "kg m-2",
            "long_name": "net sublimation (negative: deposition)",
        },
    ),
    "wind_deposited_kg_m2": (
        "f4",
        {"units": "kg m-2", "long_name": "snow deposited by wind transport"},
    ),
    "wind_eroded_kg_m2": (
        "f4",
        {"units": "kg m-2", "long_name": "snow eroded by wind transport"},
    ),
    "wind_erosion_shortfall_kg_m2": (
        "f4",
        {
            "units": "kg m-2",
            "long_name": "erosion the zone's transport asked of this cell that its surface "
            "(wet, crusted or bonded snow) could not give; the zone gained this much",
        },
    ),
}

_FILLS = {
    "f4": np.float32(np.nan),
    "f8": np.float64(np.nan),
    "i1": _FILL_I8,
    "i2": _FILL_I16,
}
#: cells per HDF5 chunk of cells.nc (~256 cells x 744 h) and of profiles.nc
CELLS_CHUNK_CELLS = 256
PROFILES_CHUNK_CELLS = 64
#: Chunk cache of each variable of a streamed file [bytes].
_CHUNK_CACHE_BYTES = 4 * 2**20


class _StreamingNc:
    """A NetCDF-4 file written under a temporary name, renamed into place on :meth:`close`."""

    def _open(self, path) -> h5netcdf.legacyapi.Dataset:
        self.path = Path(path)
        self._stack = ExitStack()
        self._tmp = self._stack.enter_context(atomic_path(self.path))
        # h5netcdf (through h5py), not netCDF4: streaming hourly diagnostics through
        # netCDF4-python 1.7.5 grew the writing process by ~0.13 MB per cell until the end of
        # the run (measured, with its chunk cache already small), h5py by nothing.
        # Each variable gets a small chunk cache: chunks arrive once, in whole runs of
        # cells, so a cache only saves the re-read of a chunk split between two writes.
        self._nc = h5netcdf.legacyapi.Dataset(
            self._tmp, "w", rdcc_nbytes=_CHUNK_CACHE_BYTES, rdcc_nslots=521, rdcc_w0=1.0
        )
        return self._nc

    def _layout(self, name: str) -> None:
        """Record the chunking and filters of variable ``name`` (read while the file is
        created, under the HDF5 lock, so :meth:`_prepare` needs no HDF5 call)."""
        ds = self._nc.variables[name]._h5ds  # the h5py dataset under h5netcdf's variable
        deflate_only = ds.compression == "gzip" and not ds.fletcher32 and ds.scaleoffset is None
        self._layouts[name] = (
            ds,
            ds.shape,
            ds.chunks,
            ds.dtype,
            ds.shuffle,
            deflate_only,
            ds.fillvalue,
        )

    def _prepare(self, name: str, lo: int, values: np.ndarray):
        """(name, lo, values, chunks): ``chunks`` the compressed HDF5 chunks of rows
        ``lo ..`` of the variable as (offset, bytes), or None when the block does not cover
        whole chunks along its first axis (then HDF5 compresses it on :meth:`_store`)."""
        _, shape, chunks, dtype, shuffle, deflate_only, fill = self._layouts[name]
        values = np.asarray(values, dtype=dtype)
        hi = lo + values.shape[0]
        whole = (
            deflate_only
            and chunks is not None
            and values.shape[1:] == shape[1:]
            and lo % chunks[0] == 0
            and (hi % chunks[0] == 0 or hi == shape[0])
        )
        return (
            name,
            lo,
            values,
            _compressed_chunks(values, lo, chunks, fill, shuffle) if whole else None,
        )

    @_hdf5_locked
    def _store(self, prepared) -> None:
        """Write prepared blocks (:meth:`_prepare`), under the HDF5 lock."""
        with disk_errors(self.path):
            self._store_blocks(prepared)

    def _store_blocks(self, prepared) -> None:
        for name, lo, values, chunks in prepared:
            if chunks is None:
                self._nc.variables[name][lo : lo + values.shape[0]] = values
            else:
                ds = self._layouts[name][0]
                for offset, data in chunks:
                    ds.id.write_direct_chunk(offset, data)

    @staticmethod
    def _range(cell_positions) -> tuple[int, int]:
        pos = np.asarray(cell_positions)
        lo, hi = int(pos[0]), int(pos[-1]) + 1
        if hi - lo != pos.size:
            raise ValueError("cell_positions must be a contiguous range")
        return lo, hi

    @_hdf5_locked
    def close(self) -> Path:
        """Finish the file and rename it into place."""
        with disk_errors(self.path):
            self._nc.close()
            self._stack.close()
        return self.path

    @_hdf5_locked
    def abort(self) -> None:
        """Drop the partly written file, keeping any older one."""
        try:
            self._nc.close()
        finally:
            self._stack.__exit__(RuntimeError, RuntimeError("aborted"), None)


def _compressed_chunks(values: np.ndarray, lo: int, chunks: tuple, fill, shuffle: bool):
    """Every HDF5 chunk of a block that starts at row ``lo`` on a chunk boundary, as
    (chunk offset, bytes) through the shuffle filter (when set: byte k of every element
    together) and deflate (a zlib stream from ISA-L at :data:`_ISAL_LEVEL`; the level the
    dataset declares only informs readers). Chunks reaching past the block's far edge (the
    dataset's) are padded with ``fill`` to their full size, as HDF5 stores them."""
    out = []
    size = values.dtype.itemsize
    for start in itertools.product(
        *(range(0, n, c) for n, c in zip(values.shape, chunks, strict=True))
    ):
        part = values[tuple(slice(a, a + c) for a, c in zip(start, chunks, strict=True))]
        if part.shape != tuple(chunks):
            full = np.full(chunks, fill if fill is not None else 0, dtype=values.dtype)
            full[tuple(slice(0, n) for n in part.shape)] = part
            part = full
        raw = np.ascontiguousarray(part).view(np.uint8)
        if shuffle and size > 1:
            raw = raw.reshape(-1, size).T
        out.append(((lo + start[0],) + start[1:], isal_zlib.compress(raw.tobytes(), _ISAL_LEVEL)))
    return out


def _seconds(times) -> np.ndarray:
    """Whole seconds since 1970 as float64 (exact below 2**53 s; CF-1.8 §2.2 has no 64-bit
    integers)."""
    return np.asarray(times, dtype="datetime64[s]").astype(np.int64).astype(np.float64)


def _fill_for(dtype: str):
    return _FILLS.get(dtype)


#: The cell table's columns as NetCDF variables along ``cell``: name -> (dtype, attributes).
CELL_TABLE_VARIABLES = {
    "zone": ("str", {"long_name": "forecast zone"}),
    "band_lower_m": (
        "f8",
        {"units": "m", "long_name": "lower edge of the elevation band (-inf: open)"},
    ),
    "band_upper_m": (
        "f8",
        {"units": "m", "long_name": "upper edge of the elevation band (inf: open)"},
    ),
    "aspect_sector": ("str", {"long_name": "aspect sector (N, NE, ... or flat)"}),
    "slope_class": (
        "i2",
        {"units": "1", "long_name": "slope class index (0 when slopes are not split)"},
    ),
    "elevation_m": (
        "f4",
        {
            "standard_name": "surface_altitude",
            "units": "m",
            "long_name": "mean elevation of the cell",
        },
    ),
    "slope_deg": ("f4", {"units": "degree", "long_name": "mean slope angle"}),
    "aspect_deg": (
        "f4",
        {"units": "degree", "long_name": "circular-mean aspect (0 = N, clockwise)"},
    ),
    "area_km2": ("f8", {"units": "km2", "long_name": "cell area"}),
    "pixel_count": ("i4", {"units": "1", "long_name": "DEM pixels in the cell"}),
    "sky_view_frac": ("f4", {"units": "1", "long_name": "mean sky-view factor"}),
    "lat": (
        "f8",
        {
            "standard_name": "latitude",
            "units": "degrees_north",
            "long_name": "cell centroid latitude",
        },
    ),
    "lon": (
        "f8",
        {
            "standard_name": "longitude",
            "units": "degrees_east",
            "long_name": "cell centroid longitude",
        },
    ),
}


def _write_cell_table(nc, cells: pd.DataFrame) -> None:
    """The cells' identity and geometry along ``cell`` (the cell table's columns)."""
    spec = CELL_TABLE_VARIABLES
    for name, (dtype, attrs) in spec.items():
        if name not in cells.columns:
            continue
        values = cells[name].to_numpy()
        if dtype == "str":
            var = nc.createVariable(name, str, ("cell",))
            var[:] = np.asarray(values, dtype=object).astype(str)
        else:
            var = nc.createVariable(name, dtype, ("cell",))
            var[:] = np.asarray(values, dtype=dtype)
        var.attrs.update(attrs)


class CellsNcWriter(_StreamingNc):
    """Create ``cells.nc`` for a cell table and output times; fill it chunk by chunk.

    Parameters
    ----------
    path : target file (written atomically on :meth:`close`).
    cells : pandas DataFrame indexed by ``cell_id`` (the cell table of
        :class:`regionmap.cells.CellSet`).
    times : (time,) datetime64 end of each output interval [UTC].
    interval_start : (time,) datetime64 start of each output interval (``time_bnds``).
    is_forecast : (time,) bool, True where the forcing was forecast.
    extra : name → (dtype, attrs) of further (cell, time) diagnostics to store.
    global_attrs : added to the file's global attributes.
    variables : name → (dtype, attrs) replacing the diagnostics altogether (e.g. the
        per-cell forcing of ``regionmap forcing``); names in :data:`AMOUNTS` get
        ``cell_methods = "time: sum"``.
    title : the file's title.
    """

    @_hdf5_locked
    def __init__(
        self,
        path,
        cells: pd.DataFrame,
        times,
        interval_start,
        is_forecast,
        *,
        extra: dict | None = None,
        global_attrs: dict | None = None,
        variables: dict | None = None,
        title: str = "regionmap per-cell snowpack diagnostics",
    ):
        nc = self._open(path)
        self._layouts = {}
        base = {**DIAGNOSTICS, **AMOUNTS} if variables is None else dict(variables)
        self.variables = {**base, **(extra or {})}
        n_cell, n_time = len(cells), len(times)
        nc.attrs.update(
            {
                "Conventions": "CF-1.8",
                "featureType": "timeSeries",
                "title": title,
                "source": f"regionmap {__version__}",
                "caution": CAUTION,
                "history": history_entry(),
                **(global_attrs or {}),
            }
        )
        nc.createDimension("cell", n_cell)
        nc.createDimension("time", n_time)
        nc.createDimension("nv", 2)
        time = nc.createVariable("time", "f8", ("time",))
        time.attrs.update(
            {
                "standard_name": "time",
                "units": _EPOCH,
                "calendar": "standard",
                "bounds": "time_bnds",
                "axis": "T",
                "long_name": "end of the output interval",
            }
        )
        time[:] = _seconds(times)
        bnds = nc.createVariable("time_bnds", "f8", ("time", "nv"))
        # a boundary variable takes its units and meaning from ``time`` (CF-1.8 §7.1)
        bnds[:] = np.stack([_seconds(interval_start), _seconds(times)], axis=1)
        fc = nc.createVariable("is_forecast", "i1", ("time",))
        fc.attrs.update(
            {
                "long_name": "forcing at this time was forecast (after the analysis time)",
                "flag_values": np.array([0, 1], "i1"),
                "flag_meanings": "analysis forecast",
            }
        )
        fc[:] = np.asarray(is_forecast, dtype=np.int8)
        cid = nc.createVariable("cell_id", "i4", ("cell",))
        cid.attrs.update({"cf_role": "timeseries_id", "long_name": "cell identifier", "units": "1"})
        cid[:] = cells.index.to_numpy(np.int32)
        _write_cell_table(nc, cells)
        chunk_cells = max(1, min(CELLS_CHUNK_CELLS, n_cell))
        chunk_time = max(1, min(744, n_time))
        for name, (dtype, attrs) in self.variables.items():
            var = nc.createVariable(
                name,
                dtype,
                ("cell", "time"),
                zlib=True,
                complevel=_DEFLATE_LEVEL,
                shuffle=True,
                chunksizes=(chunk_cells, chunk_time),
                fill_value=_fill_for(dtype),
            )
            attrs = dict(attrs)
            if name in AMOUNTS or attrs.get("cell_methods") == "time: sum":
                attrs["cell_methods"] = "time: sum"
            attrs["coordinates"] = "cell_id lat lon elevation_m"
            var.attrs.update(attrs)
            self._layout(name)

    def write_chunk(self, cell_positions: np.ndarray, diagnostics: dict[str, np.ndarray]) -> None:
        """Write one chunk's (cell, time) arrays at the given positions along ``cell``.

        ``cell_positions`` must be a contiguous increasing range (chunks are contiguous in
        ``cell_id`` order).
        """
        lo, _ = self._range(cell_positions)
        prepared = []
        for name, (dtype, _) in self.variables.items():
            if name in diagnostics:
                values = np.asarray(diagnostics[name])
                if dtype.startswith("i"):
                    fill = _fill_for(dtype)
                    values = np.where(np.isfinite(values), values, fill).astype(dtype)
                prepared.append(self._prepare(name, lo, values))
        self._store(prepared)


class ProfilesNcWriter(_StreamingNc):
    """Create ``profiles.nc`` (dims ``cell``, ``day``, ``layer``) and fill it chunk by chunk.

    Parameters
    ----------
    path : target file.
    cells : pandas DataFrame indexed by ``cell_id`` (the cell table), written along ``cell``
        as in ``cells.nc`` so the file describes its cells by itself.
    days : (day,) datetime64 snapshot times [UTC].
    n_layers : layer slots per snapshot (bottom layer first).
    layer_vars : name → (dtype, attrs); dtype ``"S<width>"`` for the classification codes
        (stored as compressed fixed-width character arrays).
    """

    @_hdf5_locked
    def __init__(
        self,
        path,
        cells: pd.DataFrame,
        days,
        n_layers: int,
        layer_vars: dict[str, tuple[str, dict]],
    ):
        nc = self._open(path)
        self._layouts = {}
        self.layer_vars = layer_vars
        nc.attrs.update(
            {
                "Conventions": "CF-1.8",
                "title": "regionmap daily layer snapshots",
                "source": f"regionmap {__version__}",
                "caution": CAUTION,
                "history": history_entry(),
            }
        )
        nc.createDimension("cell", len(cells))
        nc.createDimension("day", len(days))
        nc.createDimension("layer", n_layers)
        cid = nc.createVariable("cell_id", "i4", ("cell",))
        cid.attrs.update({"long_name": "cell identifier (as in cells.nc)", "units": "1"})
        cid[:] = cells.index.to_numpy(np.int32)
        _write_cell_table(nc, cells)
        day = nc.createVariable("day", "f8", ("day",))
        day.attrs.update(
            {
                "standard_name": "time",
                "units": _EPOCH,
                "calendar": "standard",
                "axis": "T",
                "long_name": "time of the daily snapshot",
            }
        )
        day[:] = _seconds(days)
        layer = nc.createVariable("layer", "i2", ("layer",))
        layer.attrs.update({"units": "1", "long_name": "layer slot, 0 = bottom layer"})
        layer[:] = np.arange(n_layers, dtype=np.int16)
        chunks = (
            max(1, min(PROFILES_CHUNK_CELLS, len(cells))),
            max(1, min(31, len(days))),
            n_layers,
        )
        lc = nc.createVariable(
            "layer_count",
            "i2",
            ("cell", "day"),
            zlib=True,
            complevel=_DEFLATE_LEVEL,
            chunksizes=chunks[:2],
            fill_value=_FILL_I16,
        )
        lc.attrs.update(
            {
                "units": "1",
                "long_name": "number of layers in use (bottom first)",
                "coordinates": "cell_id lat lon elevation_m",
            }
        )
        self._layout("layer_count")
        for name, (dtype, attrs) in layer_vars.items():
            if dtype.startswith("S"):
                # fixed-width character arrays (CF §2.2) compress, unlike variable-length
                # strings; ``_Encoding`` makes netCDF4 and xarray read them back as strings
                strlen = f"{name}_strlen"
                nc.createDimension(strlen, int(dtype[1:]))
                var = nc.createVariable(
                    name,
                    "S1",
                    ("cell", "day", "layer", strlen),
                    zlib=True,
                    complevel=_DEFLATE_LEVEL,
                    chunksizes=(*chunks, int(dtype[1:])),
                )
                var.attrs.update({"_Encoding": "utf-8"})
            else:
                var = nc.createVariable(
                    name,
                    dtype,
                    ("cell", "day", "layer"),
                    zlib=True,
                    complevel=_DEFLATE_LEVEL,
                    shuffle=True,
                    chunksizes=chunks,
                    fill_value=_fill_for(dtype),
                )
            var.attrs.update(attrs)
            self._layout(name)

    def write_chunk(
        self, cell_positions: np.ndarray, layer_count: np.ndarray, fields: dict[str, np.ndarray]
    ) -> None:
        """Write one chunk's snapshots: ``layer_count`` (cell, day), fields (cell, day, layer)."""
        lo, _ = self._range(cell_positions)
        prepared = [self._prepare("layer_count", lo, np.asarray(layer_count, dtype=np.int16))]
        for name, (dtype, _) in self.layer_vars.items():
            if name in fields:
                values = np.asarray(fields[name])
                if dtype.startswith("S"):
                    text = np.ascontiguousarray(
                        values.astype(dtype)
                        if values.dtype.kind == "S"
                        else np.asarray(values, dtype=object).astype(str).astype(dtype)
                    )
                    # fixed-width bytes viewed as characters: what netCDF4.stringtochar
                    # returns, without its per-element copy
                    values = text.view("S1").reshape(*text.shape, text.dtype.itemsize)
                prepared.append(self._prepare(name, lo, values))
        self._store(prepared)

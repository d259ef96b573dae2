"""Entry point of the snow column: :func:`run_columns`.

Checks the hand-over (state, forcing, settings) in Python, then lets the compiled driver
(:func:`regionmap.snow.batch.run_cells`) step blocks of cells through the whole period on a
few threads (the kernel releases the GIL). Cells are independent, so results do not depend on
the block a cell falls in or on the number of threads.

Model output is guidance for trained people, never a substitute for field observations, the
local avalanche service or professional standards.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from itertools import pairwise

import numpy as np
import xarray as xr

from regionmap.downscale.types import CellForcing
from regionmap.errors import GridMismatchError, InputError, warn
from regionmap.snow import batch as B
from regionmap.snow.codes import crust_codes_to_strings, grain_codes_to_strings
from regionmap.snow.containers import (
    EPOCH_2000_S,
    Diagnostics,
    EventLog,
    ForcingArrays,
    Snapshots,
    StateArrays,
)
from regionmap.snow.kernel import (
    EV_FREEZING_RAIN,
    EV_RAIN_ON_SNOW,
    ST_EVENT_OVERFLOW,
    V_WIND_ERODIBLE,
)
from regionmap.snow.layering import FLAG_WIND_PACKED
from regionmap.snow.params import SnowParams
from regionmap.snow.state import SnowState
from regionmap.snow.wind_transport import zone_transport

__all__ = [
    "run_columns",
    "wind_transport_of",
    "snapshots_to_dataset",
    "DIAGNOSTICS_64",
    "DIAGNOSTICS_32",
    "EVENT_KINDS",
]

#: cells.nc names of the float64 diagnostics (mass budget), by row of
#: :attr:`Diagnostics.d64 <regionmap.snow.containers.Diagnostics.d64>`
DIAGNOSTICS_64 = {
    "swe_kg_m2": B.D64_SWE,
    "snowfall_kg_m2": B.D64_SNOW,  # interval sums from here on
    "rain_kg_m2": B.D64_RAIN,
    "runoff_kg_m2": B.D64_RUNOFF,
    "sublimation_kg_m2": B.D64_SUBL,
    "deposition_kg_m2": B.D64_DEPO,
    "mass_residual_kg_m2": B.D64_MASS_RES,
    "wind_deposited_kg_m2": B.D64_WIND_IN,
    "wind_eroded_kg_m2": B.D64_WIND_OUT,
    "wind_erosion_shortfall_kg_m2": B.D64_WIND_SHORT,
}
#: float32 diagnostics: name -> (row, dtype of the returned array)
DIAGNOSTICS_32 = {
    "snow_depth_cm": (B.D32_DEPTH_CM, np.float32),
    "new_snow_24h_cm": (B.D32_HN24_CM, np.float32),
    "new_snow_72h_cm": (B.D32_HN72_CM, np.float32),
    "new_snow_72h_kg_m2": (B.D32_HN72_KG, np.float32),
    "crust_count": (B.D32_CRUST, np.int16),
    "crust_count_melt_freeze": (B.D32_CRUST_MF, np.int16),
    "crust_count_sun": (B.D32_CRUST_SUN, np.int16),
    "crust_count_rain": (B.D32_CRUST_RAIN, np.int16),
    "crust_count_glaze": (B.D32_CRUST_GLAZE, np.int16),
    "depth_hoar_present": (B.D32_DH_PRESENT, np.int8),
    "depth_hoar_thickness_cm": (B.D32_DH_THICK_CM, np.float32),
    "pwl_present": (B.D32_PWL, np.int8),
    "pwl_depth_cm": (B.D32_PWL_DEPTH_CM, np.float32),
    "pwl_thickness_cm": (B.D32_PWL_THICK_CM, np.float32),
    "pwl_grain_size_mm": (B.D32_PWL_GRAIN_MM, np.float32),
    "pwl_grain_code": (B.D32_PWL_CODE, np.int8),
    "threshold_count_max": (B.D32_TC_MAX, np.float32),
    "threshold_depth_cm": (B.D32_TC_DEPTH_CM, np.float32),
    "liquid_water_kg_m2": (B.D32_LIQ_KG, np.float32),
    "surface_temperature_k": (B.D32_TS_K, np.float32),
    "surface_wetness_class": (B.D32_WETNESS, np.int8),
    "energy_residual_w_m2": (B.D32_ENERGY_RES, np.float32),
    "layer_count": (B.D32_LAYERS, np.int16),
    "albedo": (B.D32_ALBEDO, np.float32),
    "surface_hoar_size_mm": (B.D32_SH_MM, np.float32),
}
EVENT_KINDS = {EV_RAIN_ON_SNOW: "rain-on-snow", EV_FREEZING_RAIN: "freezing-rain"}
#: ``wind_packed`` of an unused layer slot (profiles.nc ``_FillValue``, the int8 fill)
WIND_PACKED_FILL = -127
#: CF attributes of profiles.nc ``wind_packed``
WIND_PACKED_ATTRS = {
    "units": "1",
    "long_name": "layer deposited by wind transport (wind-packed)",
    "flag_values": np.array([0, 1], dtype=np.int8),
    "flag_meanings": "not_wind_deposited wind_deposited",
}


def _check(
    state: SnowState, forcing: CellForcing, params: SnowParams, diag_every_h: int, snapshot_hour_utc
) -> None:
    if not isinstance(forcing, CellForcing):
        raise InputError(
            f"run_columns: forcing must be a CellForcing, got {type(forcing).__name__}"
        )
    if state.n_cells != forcing.n_cells:
        raise GridMismatchError(
            f"run_columns: the snow state has {state.n_cells} cells but the forcing has "
            f"{forcing.n_cells}; hint: state and forcing must cover the same cells in the same "
            "order"
        )
    if state.max_layers != params.max_layers:
        raise InputError(
            f"run_columns: state has {state.max_layers} layer slots but [snow] max_layers = "
            f"{params.max_layers}; hint: keep max_layers when continuing from a state"
        )
    if forcing.dt_s != 3600.0:
        raise InputError(f"run_columns: forcing dt_s must be 3600 (hourly), got {forcing.dt_s}")
    if forcing.n_steps == 0:
        raise InputError("run_columns: the forcing has no time steps")
    for name in (
        "t_air_k",
        "rh_frac",
        "pressure_pa",
        "wind_m_s",
        "sw_in_w_m2",
        "lw_in_w_m2",
        "precip_kg_m2",
        "snow_frac",
        "freezing_rain_frac",
    ):
        values = getattr(forcing, name)
        bad = ~np.isfinite(values)
        if bad.any():
            c, t = np.argwhere(bad)[0]
            raise InputError(
                f"run_columns: forcing variable {name} has {int(bad.sum())} non-finite values "
                f"(first at cell {c}, time {forcing.time[t]}); expected finite numbers; hint: "
                "fill gaps in the forcing before the snow column"
            )
    steps = np.diff(forcing.time.astype("datetime64[s]").astype(np.int64))
    if steps.size and np.any(steps != 3600):
        raise InputError(
            "run_columns: forcing times must be hourly without gaps; hint: the "
            "downscaling brings all forcing to hourly"
        )
    start = forcing.time[0].astype("datetime64[s]")
    expected = state.time.astype("datetime64[s]") + np.timedelta64(3600, "s")
    if state.counters[:, 0].any() and start != expected:
        raise InputError(
            f"run_columns: forcing starts at {start} but the state is valid at {state.time}; "
            f"expected the first step to end at {expected}; hint: continue from the state "
            "written at the end of the previous period"
        )
    t0 = int(forcing.time[0].astype("datetime64[s]").astype(np.int64))
    t1 = int(forcing.time[-1].astype("datetime64[s]").astype(np.int64))
    lim = EPOCH_2000_S + np.array([-(2**31) + 1, 2**31 - 1])
    if t0 < lim[0] or t1 > lim[1]:
        raise InputError(
            f"run_columns: forcing times {forcing.time[0]}..{forcing.time[-1]} outside "
            "1932-2068 (layer times are int32 seconds since 2000)"
        )
    if (
        not isinstance(diag_every_h, (int, np.integer))
        or diag_every_h < 1
        or forcing.n_steps % diag_every_h
    ):
        raise InputError(
            f"run_columns: diag_every_h must be a positive integer dividing the {forcing.n_steps} "
            f"steps, got {diag_every_h!r}"
        )
    if snapshot_hour_utc is not None and not (0 <= int(snapshot_hour_utc) <= 23):
        raise InputError(
            f"run_columns: snapshot_hour_utc must be 0..23 or None, got {snapshot_hour_utc!r}"
        )
    if state.fingerprint and state.fingerprint != params.fingerprint():
        warn(
            "run_columns: the state was written with other snow settings (fingerprint "
            f"{state.fingerprint} != {params.fingerprint()}); continuing with the new ones"
        )


def run_columns(
    state: SnowState,
    forcing: CellForcing,
    params: SnowParams | None = None,
    diag_every_h: int = 1,
    snapshot_hour_utc: int | None = None,
    *,
    with_snapshots: bool = True,
    threads: int = 2,
    block_cells: int = 64,
    zones: tuple[np.ndarray, np.ndarray] | None = None,
):
    """Step every cell of ``state`` through the forcing period.

    Parameters
    ----------
    state : SnowState
        State valid one step before the first forcing time (not modified).
    forcing : CellForcing
        Hourly forcing, same cells in the same order.
    params : SnowParams, optional
        Settings (defaults when None).
    diag_every_h : int
        Diagnostics every this many steps (must divide the number of steps).
    snapshot_hour_utc : int or None
        Hour (UTC, of the interval end) of the daily layer snapshots; None: the hour of the
        last forcing step, so the final profile is always included.
    with_snapshots : bool
        False skips the daily layer snapshots (saves memory on very large batches).
    threads, block_cells : int
        Worker threads and cells per block handed to the compiled driver.
    zones : (ndarray (cell,) int, ndarray (cell,) float) or None
        Zone of each cell and its area [m2], for wind transport between the cells of a zone
        (:func:`wind_transport_of`): all cells of each zone must be present. None: no
        transport unless the forcing carries it.

    Returns
    -------
    state : SnowState
        The state at the end of the period.
    diagnostics : dict
        ``time`` (out_time,) datetime64[s] interval ends; per-cell (cell, out_time) arrays
        named as in cells.nc plus extras (see :data:`DIAGNOSTICS_64`,
        :data:`DIAGNOSTICS_32`; interval sums: snowfall, rain, runoff, sublimation,
        deposition, mass residual; energy residual is an interval mean). New snow 24/72 h
        is the fresh depth (mass / new-snow density) and mass fallen in the last 24/72 hours;
        ``pwl_*`` describe the uppermost persistent weak layer of concern (FC, FCxr, FCsf,
        DH, SH under a slab, thick and coarse enough and critical by the threshold count:
        :mod:`regionmap.snow.diagnostics`; NaN depth/size where none); crust counts count
        contiguous runs of dry crust layers at least ``crust_min_thickness_m`` thick and
        ``crust_min_hardness`` hard; ``threshold_*`` the worst interface (NaN depth where
        no interface scores). ``status`` (cell,)
        int32 bitmask (kernel status bits); and the event log as 1-D arrays of one row per
        (event, cell): ``event_kind`` (strings), ``event_id`` (start hour since 1970),
        ``event_cell`` (cell index), ``event_first_time`` / ``event_last_time`` (interval
        ends of the first and last hour) and ``event_amount_kg_m2``.
    snapshots : dict
        ``time`` (day,) and, on (cell, day, layer): ``thickness_m``, ``ice_kg_m2``,
        ``liquid_kg_m2``, ``temperature_k``, ``grain_size_mm``, ``hardness_index``
        (float32, NaN where unused), ``grain_code``, ``crust_code`` (int8),
        ``deposition_time``, ``formation_time`` (int64 s since 1970), ``event_id``,
        ``wind_packed`` (int8: 1 deposited by wind transport, 0 not, -127 unused slot);
        ``layer_count`` (cell, day). :func:`snapshots_to_dataset` makes profiles.nc of it.
    """
    params = SnowParams() if params is None else params
    _check(
        state,
        forcing,
        params,
        int(diag_every_h) if isinstance(diag_every_h, (int, np.integer)) else diag_every_h,
        snapshot_hour_utc,
    )
    diag_every = int(diag_every_h)
    new = state.copy()
    n_cells, n_steps, cap = state.n_cells, forcing.n_steps, state.max_layers
    transport, erodible_end = wind_transport_of(state, forcing, params, zones)
    kernel_forcing = ForcingArrays.from_forcing(forcing, transport)
    snap_day = _snapshot_day_of_step(kernel_forcing.time_s, snapshot_hour_utc, with_snapshots)
    diagnostics_out = Diagnostics(
        diag_every,
        np.zeros((B.N_D64, n_cells, n_steps // diag_every)),
        np.zeros((B.N_D32, n_cells, n_steps // diag_every), dtype=np.float32),
    )
    n_days = int(snap_day.max() + 1) if with_snapshots else 0
    snapshots_out = Snapshots(
        snap_day,
        np.zeros((B.N_SF, n_cells, n_days, cap), dtype=np.float32),
        np.zeros((B.N_SI_SNAP, n_cells, n_days, cap), dtype=np.int32),
        np.zeros((n_cells, n_days), dtype=np.int32),
    )
    events = _empty_event_log(n_cells, max_events=max(4, min(n_steps // 7 + 1, 256)))
    status = np.zeros(n_cells, dtype=np.int32)
    p = params.as_array()
    state_arrays = StateArrays.from_state(new)

    def work(block: tuple[int, int]) -> None:
        B.run_cells(
            *block, kernel_forcing, p, state_arrays, diagnostics_out, snapshots_out, events, status
        )

    edges = list(range(0, n_cells, max(int(block_cells), 1))) + [n_cells]
    blocks = list(pairwise(edges))
    if threads > 1 and len(blocks) > 1:
        with ThreadPoolExecutor(max_workers=int(threads)) as pool:
            list(pool.map(work, blocks))
    else:
        for b in blocks:
            work(b)
    new.time = forcing.time[-1].astype("datetime64[s]")
    new.fingerprint = params.fingerprint()
    if erodible_end is not None:
        new.surface[:, V_WIND_ERODIBLE] = erodible_end
    if np.any(status & ST_EVENT_OVERFLOW):
        warn("run_columns: the event log overflowed for some cells; later events are missing")
    diagnostics = _diagnostics_dict(forcing.time, diagnostics_out, events, status)
    snapshots = _snapshots_dict(forcing.time, snapshots_out)
    return new, diagnostics, snapshots


def _snapshot_day_of_step(time_s: np.ndarray, snapshot_hour_utc, with_snapshots: bool):
    """(time,) int64: the snapshot written after each step (0, 1, ...), -1 for none."""
    last_hour = (time_s[-1] // 3600) % 24
    hour = last_hour if snapshot_hour_utc is None else int(snapshot_hour_utc)
    snap_day = np.full(time_s.size, -1, dtype=np.int64)
    if with_snapshots:
        is_snap = (time_s // 3600) % 24 == hour
        snap_day[is_snap] = np.arange(int(is_snap.sum()))
    return snap_day


def _empty_event_log(n_cells: int, max_events: int) -> EventLog:
    return EventLog(
        kind=np.zeros((n_cells, max_events), dtype=np.int8),
        event_id=np.zeros((n_cells, max_events), dtype=np.int64),
        first_s=np.zeros((n_cells, max_events), dtype=np.int64),
        last_s=np.zeros((n_cells, max_events), dtype=np.int64),
        amount_kg_m2=np.zeros((n_cells, max_events)),
        n_logged=np.zeros(n_cells, dtype=np.int64),
    )


def _diagnostics_dict(time, out: Diagnostics, events: EventLog, status: np.ndarray) -> dict:
    """The diagnostics and the event log as :func:`run_columns` returns them."""
    every = out.every_steps
    diagnostics: dict = {"time": time[every - 1 :: every].astype("datetime64[s]"), "status": status}
    for name, row in DIAGNOSTICS_64.items():
        diagnostics[name] = out.d64[row]
    for name, (row, dtype) in DIAGNOSTICS_32.items():
        diagnostics[name] = out.d32[row].astype(dtype) if dtype is not np.float32 else out.d32[row]
    slot_used = np.arange(events.kind.shape[1])[None, :] < events.n_logged[:, None]
    cells, slots = np.nonzero(slot_used)
    kinds = events.kind[cells, slots]
    diagnostics["event_kind"] = np.array([EVENT_KINDS[int(k)] for k in kinds], dtype=object)
    diagnostics["event_id"] = events.event_id[cells, slots]
    diagnostics["event_cell"] = cells.astype(np.int64)
    diagnostics["event_first_time"] = events.first_s[cells, slots].astype("datetime64[s]")
    diagnostics["event_last_time"] = events.last_s[cells, slots].astype("datetime64[s]")
    diagnostics["event_amount_kg_m2"] = events.amount_kg_m2[cells, slots]
    return diagnostics


def _snapshots_dict(time, out: Snapshots) -> dict:
    """The daily layer snapshots as :func:`run_columns` returns them."""
    sf_out, si_out, sn_out = out.floats, out.ints, out.layer_count
    snapshots = {
        "time": time[out.day_of_step >= 0].astype("datetime64[s]"),
        "layer_count": sn_out,
    }
    for name, row in (
        ("thickness_m", B.SF_THICK),
        ("ice_kg_m2", B.SF_ICE),
        ("liquid_kg_m2", B.SF_LIQ),
        ("temperature_k", B.SF_TEMP),
        ("grain_size_mm", B.SF_GRAIN),
        ("hardness_index", B.SF_HARD),
    ):
        snapshots[name] = sf_out[row]
    snapshots["grain_code"] = si_out[B.SI_CODE].astype(np.int8)
    snapshots["crust_code"] = si_out[B.SI_CRUST].astype(np.int8)
    used = np.arange(si_out.shape[3])[None, None, :] < sn_out[:, :, None]
    for name, row in (("deposition_time", B.SI_DEP), ("formation_time", B.SI_FORM)):
        snapshots[name] = np.where(used, si_out[row].astype(np.int64) + EPOCH_2000_S, -1)
    snapshots["event_id"] = si_out[B.SI_EVENT]
    snapshots["wind_packed"] = np.where(
        used, (si_out[B.SI_FLAGS] & FLAG_WIND_PACKED) != 0, WIND_PACKED_FILL
    ).astype(np.int8)
    return snapshots


def wind_transport_of(
    state: SnowState,
    forcing: CellForcing,
    params: SnowParams,
    zones: tuple[np.ndarray, np.ndarray] | None,
) -> tuple[np.ndarray, np.ndarray | None]:
    """Wind transport of every cell and hour [kg m-2] (positive deposited, negative erosion
    asked of the surface) and the erodible snow after it [kg m-2].

    The forcing's own transport when it carries one; else decided per zone by
    :func:`regionmap.snow.wind_transport.zone_transport` from the forcing and the erodible
    snow the state carries (``surface[:, V_WIND_ERODIBLE]``, so a run split anywhere gives
    the same transport); zeros when transport is off, without zones or without Sx in the
    forcing. The erodible snow is None when the transport was not decided here.
    """
    if forcing.wind_transport_kg_m2 is not None:
        return forcing.wind_transport_kg_m2, None
    out = np.zeros_like(forcing.precip_kg_m2)
    if not params.wind_transport or zones is None or forcing.sx_deg is None:
        return out, None
    zone_code, area_m2 = zones
    zone = np.unique(np.asarray(zone_code), return_inverse=True)[1].astype(np.int64)
    snowfall = forcing.precip_kg_m2 * forcing.snow_frac
    erodible_end = zone_transport(
        zone,
        np.ascontiguousarray(area_m2, dtype=np.float64),
        forcing.sx_deg,
        forcing.wind_m_s,
        forcing.t_air_k,
        forcing.pressure_pa,
        snowfall,
        forcing.precip_kg_m2 - snowfall,
        np.ascontiguousarray(state.surface[:, V_WIND_ERODIBLE]),
        float(forcing.wind_height_m),
        params.roughness_m,
        params.transport_fetch_m,
        params.transport_neutral_sx_deg,
        float(forcing.dt_s),
        out,
    )
    return out, erodible_end


def snapshots_to_dataset(snapshots: dict, cell_id: np.ndarray) -> xr.Dataset:
    """profiles.nc content from :func:`run_columns` snapshots (codes as strings)."""
    dims = ("cell", "day", "layer")
    used = (
        np.arange(snapshots["thickness_m"].shape[2])[None, None, :]
        < snapshots["layer_count"][:, :, None]
    )
    ds = xr.Dataset(
        coords={
            "cell_id": (("cell",), np.asarray(cell_id)),
            "time": (("day",), snapshots["time"].astype("datetime64[ns]")),
        }
    )
    ds["layer_count"] = (("cell", "day"), snapshots["layer_count"])
    for name in (
        "thickness_m",
        "ice_kg_m2",
        "liquid_kg_m2",
        "temperature_k",
        "grain_size_mm",
        "hardness_index",
    ):
        ds[name] = (dims, snapshots[name])
    ds["grain_class"] = (
        dims,
        np.where(used, grain_codes_to_strings(snapshots["grain_code"]), "").astype(str),
    )
    ds["crust_kind"] = (
        dims,
        np.where(used, crust_codes_to_strings(snapshots["crust_code"]), "").astype(str),
    )
    for name in ("deposition_time", "formation_time"):
        ds[name] = (dims, snapshots[name], {"units": "seconds since 1970-01-01"})
    ds["event_id"] = (
        dims,
        snapshots["event_id"],
        {"long_name": "start of the forming event, whole hours since 1970-01-01T00Z"},
    )
    ds["wind_packed"] = (dims, snapshots["wind_packed"], dict(WIND_PACKED_ATTRS))
    ds["wind_packed"].encoding["_FillValue"] = np.int8(WIND_PACKED_FILL)
    ds.attrs["layer_order"] = "bottom first"
    return ds

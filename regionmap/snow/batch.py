"""Batch driver of the column kernel: loops cells and steps, writes diagnostics, snapshots
and the event log (compiled; called from :func:`regionmap.snow.column.run_columns`)."""

from __future__ import annotations

import math

import numpy as np
from numba import njit

from regionmap.snow.containers import EPOCH_2000_S, Column, StepWeather, StepWork
from regionmap.snow.diagnostics import (
    N_SCRATCH_ROWS,
    N_STRUCT,
    S_CRUST,
    S_DH_THICK_M,
    S_PWL,
    S_PWL_CODE,
    S_PWL_DEPTH_M,
    S_PWL_GRAIN_MM,
    S_PWL_THICK_M,
    S_TC_DEPTH_M,
    S_TC_MAX,
    S_WETNESS,
    column_structure,
    layer_hardness,
)
from regionmap.snow.kernel import (
    A_DEPO,
    A_ENERGY_RES,
    A_FZ,
    A_MASS_RES,
    A_RAIN,
    A_RAIN_ON_SNOW,
    A_RUNOFF,
    A_SNOW,
    A_SUBL,
    A_WIND_IN,
    A_WIND_OUT,
    A_WIND_SHORT,
    EV_FREEZING_RAIN,
    EV_RAIN_ON_SNOW,
    J_FZ_EV,
    J_N,
    J_RAIN_EV,
    N_ACC,
    N_SI,
    N_SV,
    RING_H,
    ST_EVENT_OVERFLOW,
    ST_NONFINITE,
    V_ALBEDO,
    V_SH_MASS,
    V_TSURF,
    _column_mass_enthalpy,
    _step,
    column_mass,
)
from regionmap.snow.layering import (
    F_DEND,
    F_FACET,
    F_GRAIN,
    F_ICE,
    F_LIQ,
    F_ROWS,
    F_TEMP,
    F_THICK,
    I_CODE,
    I_CRUST,
    I_DEP,
    I_EVENT,
    I_FLAGS,
    I_FORM,
    I_ROWS,
)
from regionmap.snow.params import (
    N_SOIL,
    P_CRUST_MIN_HARDNESS,
    P_CRUST_MIN_THICKNESS_M,
    P_DEPTH_HOAR_MIN_CM,
    P_EVENT_MIN_KG_M2,
    P_PWL_MIN_DEPTH_M,
    P_PWL_MIN_GRAIN_MM,
    P_PWL_MIN_THICKNESS_M,
    P_SH_DENSITY_KG_M3,
    P_THRESHOLD_MODE,
)
from regionmap.snow.surface_hoar import surface_hoar_size_mm
from regionmap.snow.vecmath import padded_count

# diagnostics rows: float64 (mass budget) and float32 (the rest)
D64_SWE, D64_SNOW, D64_RAIN, D64_RUNOFF, D64_SUBL, D64_DEPO, D64_MASS_RES = range(7)
D64_WIND_IN, D64_WIND_OUT, D64_WIND_SHORT = 7, 8, 9  # wind transport
N_D64 = 10
(
    D32_DEPTH_CM,
    D32_HN24_CM,
    D32_HN72_CM,
    D32_HN72_KG,
    D32_CRUST,
    D32_DH_PRESENT,
    D32_PWL,
    D32_PWL_DEPTH_CM,
    D32_TC_MAX,
    D32_LIQ_KG,
    D32_TS_K,
    D32_WETNESS,
    D32_CRUST_MF,
    D32_CRUST_SUN,
    D32_CRUST_RAIN,
    D32_CRUST_GLAZE,
    D32_PWL_THICK_CM,
    D32_PWL_GRAIN_MM,
    D32_PWL_CODE,
    D32_TC_DEPTH_CM,
    D32_ENERGY_RES,
    D32_LAYERS,
    D32_ALBEDO,
    D32_SH_MM,
    D32_DH_THICK_CM,
) = range(25)
N_D32 = 25
# snapshot rows
SF_THICK, SF_ICE, SF_LIQ, SF_TEMP, SF_GRAIN, SF_HARD = range(6)
N_SF = 6
SI_CODE, SI_CRUST, SI_DEP, SI_FORM, SI_EVENT, SI_FLAGS = range(6)
N_SI_SNAP = 6


@njit(cache=True, nogil=True, error_model="numpy")
def _log_event(c, kind, event_id, t_label, amount, log):
    """Append to or extend the cell's event log; returns a status bit on overflow."""
    k = log.n_logged[c]
    for j in range(k - 1, -1, -1):
        if log.kind[c, j] == kind and log.event_id[c, j] == event_id:
            log.last_s[c, j] = t_label
            log.amount_kg_m2[c, j] += amount
            return 0
    if k >= log.kind.shape[1]:
        return ST_EVENT_OVERFLOW
    log.kind[c, k] = kind
    log.event_id[c, k] = event_id
    log.first_s[c, k] = t_label
    log.last_s[c, k] = t_label
    log.amount_kg_m2[c, k] = amount
    log.n_logged[c] = k + 1
    return 0


@njit(cache=True, nogil=True, error_model="numpy")
def _load_cell(state, c, col, cap):
    """Copy cell ``c`` of the batch state into the work column."""
    fw, iw = col.fw, col.iw
    for i in range(cap):
        fw[F_THICK, i] = state.thickness_m[c, i]
        fw[F_ICE, i] = state.ice_kg_m2[c, i]
        fw[F_LIQ, i] = state.liquid_kg_m2[c, i]
        fw[F_TEMP, i] = state.temperature_k[c, i]
        fw[F_GRAIN, i] = state.grain_size_mm[c, i]
        fw[F_DEND, i] = state.dendricity[c, i]
        fw[F_FACET, i] = state.facetedness[c, i]
        iw[I_CODE, i] = state.grain_code[c, i]
        iw[I_CRUST, i] = state.crust_code[c, i]
        iw[I_FLAGS, i] = state.flags[c, i]
        iw[I_DEP, i] = state.deposition_time_s2000[c, i]
        iw[I_FORM, i] = state.formation_time_s2000[c, i]
        iw[I_EVENT, i] = state.event_id[c, i]
    for k in range(N_SV):
        col.sv[k] = state.surface[c, k]
    for k in range(N_SI):
        col.si[k] = state.counters[c, k]
    for k in range(RING_H):
        col.ring_m[k] = state.new_snow_kg_m2[c, k]
        col.ring_d[k] = state.new_snow_m[c, k]


@njit(cache=True, nogil=True, error_model="numpy")
def _store_cell(col, cap, state, c):
    """Copy the work column back into cell ``c`` of the batch state (unused slots zero)."""
    fw, iw = col.fw, col.iw
    n = col.si[J_N]
    for i in range(cap):
        act = i < n
        state.thickness_m[c, i] = fw[F_THICK, i] if act else 0.0
        state.ice_kg_m2[c, i] = fw[F_ICE, i] if act else 0.0
        state.liquid_kg_m2[c, i] = fw[F_LIQ, i] if act else 0.0
        state.temperature_k[c, i] = fw[F_TEMP, i] if act else 0.0
        state.grain_size_mm[c, i] = fw[F_GRAIN, i] if act else 0.0
        state.dendricity[c, i] = fw[F_DEND, i] if act else 0.0
        state.facetedness[c, i] = fw[F_FACET, i] if act else 0.0
        state.grain_code[c, i] = iw[I_CODE, i] if act else 0
        state.crust_code[c, i] = iw[I_CRUST, i] if act else 0
        state.flags[c, i] = iw[I_FLAGS, i] if act else 0
        state.deposition_time_s2000[c, i] = iw[I_DEP, i] if act else 0
        state.formation_time_s2000[c, i] = iw[I_FORM, i] if act else 0
        state.event_id[c, i] = iw[I_EVENT, i] if act else 0
    for k in range(N_SV):
        state.surface[c, k] = col.sv[k]
    for k in range(N_SI):
        state.counters[c, k] = col.si[k]
    for k in range(RING_H):
        state.new_snow_kg_m2[c, k] = col.ring_m[k]
        state.new_snow_m[c, k] = col.ring_d[k]


@njit(cache=True, nogil=True, error_model="numpy")
def _step_weather(forcing, c, s):
    """The forcing of cell ``c`` at step ``s``, clipped to its physical range, or None when a
    value is not finite."""
    ta = forcing.t_air_k[c, s]
    rh = forcing.rh_frac[c, s]
    pres = forcing.pressure_pa[c, s]
    wind = forcing.wind_m_s[c, s]
    sw = forcing.sw_in_w_m2[c, s]
    lw = forcing.lw_in_w_m2[c, s]
    precip = forcing.precip_kg_m2[c, s]
    sf = forcing.snow_frac[c, s]
    fzf = forcing.freezing_rain_frac[c, s]
    transport = forcing.wind_transport_kg_m2[c, s]
    ok = (
        math.isfinite(ta)
        and math.isfinite(rh)
        and math.isfinite(pres)
        and math.isfinite(wind)
        and math.isfinite(sw)
        and math.isfinite(lw)
        and math.isfinite(precip)
        and math.isfinite(sf)
        and math.isfinite(fzf)
        and math.isfinite(transport)
    )
    met = StepWeather(
        ta,
        rh,
        pres,
        wind,
        max(sw, 0.0),
        lw,
        max(precip, 0.0),
        min(max(sf, 0.0), 1.0),
        min(max(fzf, 0.0), 1.0),
        transport,
        forcing.time_s[s] - EPOCH_2000_S,
        forcing.time_s[s] // 3600,
        forcing.event_hour[s],
        forcing.dt_s,
        forcing.wind_height_m,
        forcing.temp_height_m,
    )
    return ok, met


@njit(cache=True, nogil=True, error_model="numpy")
def _write_diagnostics(col, c, o, hour_abs, hard, struct, sums, every_steps, p, d64, d32):
    """Write cell ``c``'s diagnostics of output interval ``o`` (``struct`` from
    :func:`~regionmap.snow.diagnostics.column_structure`, ``sums`` the interval's fluxes)."""
    fw, sv = col.fw, col.sv
    n = col.si[J_N]
    depth = 0.0
    liq_sum = 0.0
    for i in range(n):
        depth += fw[F_THICK, i]
        liq_sum += fw[F_LIQ, i]
    d64[D64_SWE, c, o] = column_mass(fw, n, sv[V_SH_MASS])
    d64[D64_SNOW, c, o] = sums[A_SNOW]
    d64[D64_RAIN, c, o] = sums[A_RAIN]
    d64[D64_RUNOFF, c, o] = sums[A_RUNOFF]
    d64[D64_SUBL, c, o] = sums[A_SUBL]
    d64[D64_DEPO, c, o] = sums[A_DEPO]
    d64[D64_MASS_RES, c, o] = sums[A_MASS_RES]
    d64[D64_WIND_IN, c, o] = sums[A_WIND_IN]
    d64[D64_WIND_OUT, c, o] = sums[A_WIND_OUT]
    d64[D64_WIND_SHORT, c, o] = sums[A_WIND_SHORT]
    h24m = 0.0
    h24d = 0.0
    h72m = 0.0
    h72d = 0.0
    slot = hour_abs % RING_H
    for k in range(RING_H):
        age = slot - k  # hours before the current step
        if age < 0:
            age += RING_H
        h72m += col.ring_m[k]
        h72d += col.ring_d[k]
        if age < 24:
            h24m += col.ring_m[k]
            h24d += col.ring_d[k]
    pwl = struct[S_PWL] > 0
    d32[D32_DEPTH_CM, c, o] = 100.0 * depth
    d32[D32_HN24_CM, c, o] = 100.0 * h24d
    d32[D32_HN72_CM, c, o] = 100.0 * h72d
    d32[D32_HN72_KG, c, o] = h72m
    d32[D32_CRUST, c, o] = struct[S_CRUST]
    d32[D32_CRUST_MF, c, o] = struct[S_CRUST + 1]
    d32[D32_CRUST_SUN, c, o] = struct[S_CRUST + 2]
    d32[D32_CRUST_RAIN, c, o] = struct[S_CRUST + 3]
    d32[D32_CRUST_GLAZE, c, o] = struct[S_CRUST + 4]
    d32[D32_DH_THICK_CM, c, o] = 100.0 * struct[S_DH_THICK_M]
    d32[D32_DH_PRESENT, c, o] = (
        1.0 if 100.0 * struct[S_DH_THICK_M] >= p[P_DEPTH_HOAR_MIN_CM] else 0.0
    )
    d32[D32_PWL, c, o] = struct[S_PWL]
    d32[D32_PWL_DEPTH_CM, c, o] = 100.0 * struct[S_PWL_DEPTH_M] if pwl else np.nan
    d32[D32_PWL_THICK_CM, c, o] = 100.0 * struct[S_PWL_THICK_M] if pwl else np.nan
    d32[D32_PWL_GRAIN_MM, c, o] = struct[S_PWL_GRAIN_MM] if pwl else np.nan
    d32[D32_PWL_CODE, c, o] = struct[S_PWL_CODE]
    d32[D32_TC_MAX, c, o] = struct[S_TC_MAX]
    d32[D32_TC_DEPTH_CM, c, o] = 100.0 * struct[S_TC_DEPTH_M]
    d32[D32_LIQ_KG, c, o] = liq_sum
    d32[D32_TS_K, c, o] = sv[V_TSURF] if n > 0 else np.nan
    d32[D32_WETNESS, c, o] = struct[S_WETNESS]
    d32[D32_ENERGY_RES, c, o] = sums[A_ENERGY_RES] / every_steps
    d32[D32_LAYERS, c, o] = n
    d32[D32_ALBEDO, c, o] = sv[V_ALBEDO] if n > 0 else np.nan
    d32[D32_SH_MM, c, o] = surface_hoar_size_mm(sv[V_SH_MASS], p[P_SH_DENSITY_KG_M3])


@njit(cache=True, nogil=True, error_model="numpy")
def _write_snapshot(col, cap, hard, c, day, snapshots):
    """Write cell ``c``'s layers into snapshot ``day`` (unused slots NaN / 0)."""
    fw, iw = col.fw, col.iw
    n = col.si[J_N]
    sf_out, si_out = snapshots.floats, snapshots.ints
    snapshots.layer_count[c, day] = n
    for i in range(cap):
        act = i < n
        sf_out[SF_THICK, c, day, i] = fw[F_THICK, i] if act else np.nan
        sf_out[SF_ICE, c, day, i] = fw[F_ICE, i] if act else np.nan
        sf_out[SF_LIQ, c, day, i] = fw[F_LIQ, i] if act else np.nan
        sf_out[SF_TEMP, c, day, i] = fw[F_TEMP, i] if act else np.nan
        sf_out[SF_GRAIN, c, day, i] = fw[F_GRAIN, i] if act else np.nan
        sf_out[SF_HARD, c, day, i] = hard[i] if act else np.nan
        si_out[SI_CODE, c, day, i] = iw[I_CODE, i] if act else 0
        si_out[SI_CRUST, c, day, i] = iw[I_CRUST, i] if act else 0
        si_out[SI_DEP, c, day, i] = iw[I_DEP, i] if act else 0
        si_out[SI_FORM, c, day, i] = iw[I_FORM, i] if act else 0
        si_out[SI_EVENT, c, day, i] = iw[I_EVENT, i] if act else 0
        si_out[SI_FLAGS, c, day, i] = iw[I_FLAGS, i] if act else 0


@njit(cache=True, nogil=True, error_model="numpy")
def run_cells(c0, c1, forcing, p, state, diagnostics, snapshots, events, status):
    """Step cells ``c0 .. c1 - 1`` through all time steps (the kernel entry point).

    Parameters
    ----------
    c0, c1 : int
        The block of cells.
    forcing : ForcingArrays
        Hourly forcing of the batch.
    p : ndarray (N_PARAMS,) float64
        Settings (:meth:`regionmap.snow.params.SnowParams.as_array`).
    state : StateArrays
        State of the batch, updated in place.
    diagnostics : Diagnostics
        Receives the diagnostics of every output interval.
    snapshots : Snapshots
        Receives the layers after the steps whose ``day_of_step`` is not -1.
    events : EventLog
        Receives the rain-on-snow and freezing-rain events.
    status : ndarray (cell,) int32
        Receives the kernel status bits. Never raises.
    """
    cap = state.thickness_m.shape[1]
    n_steps = forcing.time_s.shape[0]
    every = diagnostics.every_steps
    width = padded_count(cap)  # room for the padded loops over layers (vecmath.padded_count)
    col = Column(
        np.zeros((F_ROWS, width)),
        np.zeros((I_ROWS, width), dtype=np.int64),
        np.zeros(N_SV),
        np.zeros(N_SI, dtype=np.int64),
        np.zeros(RING_H),
        np.zeros(RING_H),
    )
    work = StepWork(
        np.zeros((10, 2 * (cap + N_SOIL))),
        np.zeros(cap, dtype=np.bool_),
        np.zeros(N_ACC),
        np.zeros(2),
    )
    acc = work.acc
    sums = np.zeros(N_ACC)
    hard = np.zeros(width)
    scratch = np.zeros((N_SCRATCH_ROWS, cap))
    struct = np.zeros(N_STRUCT)
    relative = p[P_THRESHOLD_MODE] != 0.0  # 1: relative thresholds
    for c in range(c0, c1):
        _load_cell(state, c, col, cap)
        st = 0
        for k in range(N_ACC):
            sums[k] = 0.0
        # column mass and enthalpy of the current state, carried from step to step
        work.totals[0], work.totals[1] = _column_mass_enthalpy(
            col.fw, col.si[J_N], col.sv[V_SH_MASS]
        )
        for s in range(n_steps):
            ok, met = _step_weather(forcing, c, s)
            if ok:
                st |= _step(col, met, p, cap, work)
            else:
                st |= ST_NONFINITE
                for k in range(N_ACC):
                    acc[k] = 0.0
            for k in range(N_ACC):
                sums[k] += acc[k]
            t_label = forcing.time_s[s]
            if acc[A_RAIN_ON_SNOW] >= p[P_EVENT_MIN_KG_M2]:
                st |= _log_event(
                    c, EV_RAIN_ON_SNOW, col.si[J_RAIN_EV], t_label, acc[A_RAIN_ON_SNOW], events
                )
            if acc[A_FZ] > 0.0:
                st |= _log_event(c, EV_FREEZING_RAIN, col.si[J_FZ_EV], t_label, acc[A_FZ], events)
            n = col.si[J_N]
            last_of_interval = (s + 1) % every == 0
            day = snapshots.day_of_step[s]
            if last_of_interval or day >= 0:
                layer_hardness(col.fw, col.iw, n, hard)
            if last_of_interval:
                column_structure(
                    col.fw,
                    col.iw,
                    n,
                    hard,
                    p[P_CRUST_MIN_THICKNESS_M],
                    p[P_CRUST_MIN_HARDNESS],
                    p[P_PWL_MIN_DEPTH_M],
                    p[P_PWL_MIN_THICKNESS_M],
                    p[P_PWL_MIN_GRAIN_MM],
                    relative,
                    scratch,
                    struct,
                )
                _write_diagnostics(
                    col,
                    c,
                    s // every,
                    met.hour_abs,
                    hard,
                    struct,
                    sums,
                    every,
                    p,
                    diagnostics.d64,
                    diagnostics.d32,
                )
                for k in range(N_ACC):
                    sums[k] = 0.0
            if day >= 0:
                _write_snapshot(col, cap, hard, c, day, snapshots)
        _store_cell(col, cap, state, c)
        status[c] = st

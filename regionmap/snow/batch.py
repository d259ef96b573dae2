"""Batch driver of the column kernel: loops cells and steps, writes diagnostics, snapshots
and the event log (compiled; called from :func:`regionmap.snow.column.run_columns`)."""

from __future__ import annotations

import math

import numpy as np
from numba import njit

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
N_D64 = 7
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
SI_CODE, SI_CRUST, SI_DEP, SI_FORM, SI_EVENT = range(5)
N_SI_SNAP = 5


@njit(cache=True, nogil=True, error_model="numpy")
def _log_event(
    c, kind, event_id, t_label, amount, ev_kind, ev_id, ev_first, ev_last, ev_amount, ev_n
):
    """Append to or extend the cell's event log; returns a status bit on overflow."""
    k = ev_n[c]
    for j in range(k - 1, -1, -1):
        if ev_kind[c, j] == kind and ev_id[c, j] == event_id:
            ev_last[c, j] = t_label
            ev_amount[c, j] += amount
            return 0
    if k >= ev_kind.shape[1]:
        return ST_EVENT_OVERFLOW
    ev_kind[c, k] = kind
    ev_id[c, k] = event_id
    ev_first[c, k] = t_label
    ev_last[c, k] = t_label
    ev_amount[c, k] = amount
    ev_n[c] = k + 1
    return 0


@njit(cache=True, nogil=True, error_model="numpy")
def run_cells(
    c0,
    c1,
    time_s,
    event_hour,
    t_air,
    rh,
    pres,
    wind,
    sw,
    lw,
    precip,
    sf,
    fzf,
    dt,
    zu,
    zt,
    p,
    thick,
    ice,
    liq,
    temp,
    grain,
    dend,
    facet,
    code,
    crust,
    flags,
    dep,
    form,
    event,
    sv_all,
    si_all,
    ring_m_all,
    ring_d_all,
    diag_every,
    d64,
    d32,
    snap_day,
    sf_out,
    si_out,
    sn_out,
    ev_kind,
    ev_id,
    ev_first,
    ev_last,
    ev_amount,
    ev_n,
    status,
):
    """Step cells ``c0 .. c1 - 1`` through all time steps (the kernel entry point).

    Layer arrays are (cell, layer) bottom first; ``sv_all`` (cell, N_SV) float64 and
    ``si_all`` (cell, N_SI) int64 hold the per-cell surface and event state; ``ring_*``
    (cell, 72) the hourly new-snow mass and depth. ``time_s`` (time,) int64 are interval
    ends in seconds since 1970. Outputs: ``d64`` (N_D64, cell, out) and ``d32``
    (N_D32, cell, out) diagnostics every ``diag_every`` steps; ``snap_day`` (time,) gives the
    snapshot index written after each step (-1 none) into ``sf_out`` (N_SF, cell, day,
    layer), ``si_out`` (N_SI_SNAP, cell, day, layer) and ``sn_out`` (cell, day); the event
    log ``ev_*`` (cell, max_events); ``status`` (cell,) bitmask. Never raises.
    """
    cap = thick.shape[1]
    n_steps = time_s.shape[0]
    width = padded_count(cap)  # room for the padded loops over layers (vecmath.padded_count)
    fw = np.zeros((F_ROWS, width))
    iw = np.zeros((I_ROWS, width), dtype=np.int64)
    wk = np.zeros((10, 2 * (cap + N_SOIL)))
    wb = np.zeros(cap, dtype=np.bool_)
    sv = np.zeros(N_SV)
    si = np.zeros(N_SI, dtype=np.int64)
    ring_m = np.zeros(RING_H)
    ring_d = np.zeros(RING_H)
    acc = np.zeros(N_ACC)
    sums = np.zeros(N_ACC)
    tot = np.zeros(2)
    hard = np.zeros(width)
    scratch = np.zeros((N_SCRATCH_ROWS, cap))
    struct = np.zeros(N_STRUCT)
    relative = p[P_THRESHOLD_MODE] != 0.0  # 1: relative thresholds
    epoch = 946684800
    for c in range(c0, c1):
        for i in range(cap):
            fw[F_THICK, i] = thick[c, i]
            fw[F_ICE, i] = ice[c, i]
            fw[F_LIQ, i] = liq[c, i]
            fw[F_TEMP, i] = temp[c, i]
            fw[F_GRAIN, i] = grain[c, i]
            fw[F_DEND, i] = dend[c, i]
            fw[F_FACET, i] = facet[c, i]
            iw[I_CODE, i] = code[c, i]
            iw[I_CRUST, i] = crust[c, i]
            iw[I_FLAGS, i] = flags[c, i]
            iw[I_DEP, i] = dep[c, i]
            iw[I_FORM, i] = form[c, i]
            iw[I_EVENT, i] = event[c, i]
        for k in range(N_SV):
            sv[k] = sv_all[c, k]
        for k in range(N_SI):
            si[k] = si_all[c, k]
        for k in range(RING_H):
            ring_m[k] = ring_m_all[c, k]
            ring_d[k] = ring_d_all[c, k]
        st = 0
        for k in range(N_ACC):
            sums[k] = 0.0
        # column mass and enthalpy of the current state, carried from step to step
        tot[0], tot[1] = _column_mass_enthalpy(fw, si[J_N], sv[V_SH_MASS])
        for s in range(n_steps):
            ta = t_air[c, s]
            ok = (
                math.isfinite(ta)
                and math.isfinite(rh[c, s])
                and math.isfinite(pres[c, s])
                and math.isfinite(wind[c, s])
                and math.isfinite(sw[c, s])
                and math.isfinite(lw[c, s])
                and math.isfinite(precip[c, s])
                and math.isfinite(sf[c, s])
                and math.isfinite(fzf[c, s])
            )
            now_s = time_s[s] - epoch
            hour_abs = time_s[s] // 3600
            if ok:
                st |= _step(
                    fw,
                    iw,
                    sv,
                    si,
                    ring_m,
                    ring_d,
                    ta,
                    rh[c, s],
                    pres[c, s],
                    wind[c, s],
                    max(sw[c, s], 0.0),
                    lw[c, s],
                    max(precip[c, s], 0.0),
                    min(max(sf[c, s], 0.0), 1.0),
                    min(max(fzf[c, s], 0.0), 1.0),
                    now_s,
                    hour_abs,
                    event_hour[s],
                    dt,
                    zu,
                    zt,
                    p,
                    cap,
                    wk,
                    wb,
                    acc,
                    tot,
                )
            else:
                st |= ST_NONFINITE
                for k in range(N_ACC):
                    acc[k] = 0.0
            for k in range(N_ACC):
                sums[k] += acc[k]
            if acc[A_RAIN_ON_SNOW] >= p[P_EVENT_MIN_KG_M2]:
                st |= _log_event(
                    c,
                    EV_RAIN_ON_SNOW,
                    si[J_RAIN_EV],
                    time_s[s],
                    acc[A_RAIN_ON_SNOW],
                    ev_kind,
                    ev_id,
                    ev_first,
                    ev_last,
                    ev_amount,
                    ev_n,
                )
            if acc[A_FZ] > 0.0:
                st |= _log_event(
                    c,
                    EV_FREEZING_RAIN,
                    si[J_FZ_EV],
                    time_s[s],
                    acc[A_FZ],
                    ev_kind,
                    ev_id,
                    ev_first,
                    ev_last,
                    ev_amount,
                    ev_n,
                )
            n = si[J_N]
            last_of_interval = (s + 1) % diag_every == 0
            day = snap_day[s]
            if last_of_interval or day >= 0:
                layer_hardness(fw, iw, n, hard)
            if last_of_interval:
                o = s // diag_every
                column_structure(
                    fw,
                    iw,
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
                h24m = 0.0
                h24d = 0.0
                h72m = 0.0
                h72d = 0.0
                slot = hour_abs % RING_H
                for k in range(RING_H):
                    age = slot - k  # hours before the current step
                    if age < 0:
                        age += RING_H
                    h72m += ring_m[k]
                    h72d += ring_d[k]
                    if age < 24:
                        h24m += ring_m[k]
                        h24d += ring_d[k]
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
                d32[D32_PWL_DEPTH_CM, c, o] = (
                    100.0 * struct[S_PWL_DEPTH_M] if struct[S_PWL] > 0 else np.nan
                )
                d32[D32_PWL_THICK_CM, c, o] = (
                    100.0 * struct[S_PWL_THICK_M] if struct[S_PWL] > 0 else np.nan
                )
                d32[D32_PWL_GRAIN_MM, c, o] = (
                    struct[S_PWL_GRAIN_MM] if struct[S_PWL] > 0 else np.nan
                )
                d32[D32_PWL_CODE, c, o] = struct[S_PWL_CODE]
                d32[D32_TC_MAX, c, o] = struct[S_TC_MAX]
                d32[D32_TC_DEPTH_CM, c, o] = 100.0 * struct[S_TC_DEPTH_M]
                d32[D32_LIQ_KG, c, o] = liq_sum
                d32[D32_TS_K, c, o] = sv[V_TSURF] if n > 0 else np.nan
                d32[D32_WETNESS, c, o] = struct[S_WETNESS]
                d32[D32_ENERGY_RES, c, o] = sums[A_ENERGY_RES] / diag_every
                d32[D32_LAYERS, c, o] = n
                d32[D32_ALBEDO, c, o] = sv[V_ALBEDO] if n > 0 else np.nan
                d32[D32_SH_MM, c, o] = surface_hoar_size_mm(sv[V_SH_MASS], p[P_SH_DENSITY_KG_M3])
                for k in range(N_ACC):
                    sums[k] = 0.0
            if day >= 0:
                sn_out[c, day] = n
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
        n = si[J_N]
        for i in range(cap):
            act = i < n
            thick[c, i] = fw[F_THICK, i] if act else 0.0
            ice[c, i] = fw[F_ICE, i] if act else 0.0
            liq[c, i] = fw[F_LIQ, i] if act else 0.0
            temp[c, i] = fw[F_TEMP, i] if act else 0.0
            grain[c, i] = fw[F_GRAIN, i] if act else 0.0
            dend[c, i] = fw[F_DEND, i] if act else 0.0
            facet[c, i] = fw[F_FACET, i] if act else 0.0
            code[c, i] = iw[I_CODE, i] if act else 0
            crust[c, i] = iw[I_CRUST, i] if act else 0
            flags[c, i] = iw[I_FLAGS, i] if act else 0
            dep[c, i] = iw[I_DEP, i] if act else 0
            form[c, i] = iw[I_FORM, i] if act else 0
            event[c, i] = iw[I_EVENT, i] if act else 0
        for k in range(N_SV):
            sv_all[c, k] = sv[k]
        for k in range(N_SI):
            si_all[c, k] = si[k]
        for k in range(RING_H):
            ring_m_all[c, k] = ring_m[k]
            ring_d_all[c, k] = ring_d[k]
        status[c] = st

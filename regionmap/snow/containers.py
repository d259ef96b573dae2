"""Typed containers the compiled column kernel takes instead of loose arrays.

Each is a :class:`typing.NamedTuple`, which numba compiles as a struct of its members (an
attribute read costs nothing at run time) and whose type it can key its on-disk cache on.
The Python side (:func:`regionmap.snow.column.run_columns`) builds them from a
:class:`~regionmap.snow.state.SnowState` and a :class:`~regionmap.downscale.types.CellForcing`;
the compiled driver (:func:`regionmap.snow.batch.run_cells`) and the step
(``regionmap.snow.kernel._step``) read them.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

#: 2000-01-01T00:00Z in seconds since 1970: the origin of the layer times the kernel keeps as
#: int32 (``deposition_time_s2000``, ``formation_time_s2000``, ``StepWeather.now_s2000``).
EPOCH_2000_S = 946684800

__all__ = [
    "EPOCH_2000_S",
    "ForcingArrays",
    "StateArrays",
    "Diagnostics",
    "Snapshots",
    "EventLog",
    "Column",
    "StepWeather",
    "StepWork",
]


class ForcingArrays(NamedTuple):
    """Hourly forcing of a batch of cells; series are (cell, time) float64."""

    time_s: np.ndarray  #: (time,) int64 interval ends [s since 1970]
    event_hour: np.ndarray  #: (time,) int64 region-wide event start [h since 1970], 0 none
    t_air_k: np.ndarray
    rh_frac: np.ndarray
    pressure_pa: np.ndarray
    wind_m_s: np.ndarray
    sw_in_w_m2: np.ndarray
    lw_in_w_m2: np.ndarray
    precip_kg_m2: np.ndarray
    snow_frac: np.ndarray
    freezing_rain_frac: np.ndarray
    #: wind transport of each hour [kg m-2], positive deposited (``column.wind_transport_of``)
    wind_transport_kg_m2: np.ndarray
    dt_s: float  #: step length [s]
    wind_height_m: float  #: height of the wind above the surface [m]
    temp_height_m: float  #: height of temperature and humidity above the surface [m]

    @classmethod
    def from_forcing(cls, forcing, wind_transport_kg_m2) -> ForcingArrays:
        """The kernel's view of a :class:`~regionmap.downscale.types.CellForcing` and the
        wind transport decided for it."""
        return cls(
            time_s=forcing.time.astype("datetime64[s]").astype(np.int64),
            event_hour=forcing.event_hour,
            t_air_k=forcing.t_air_k,
            rh_frac=forcing.rh_frac,
            pressure_pa=forcing.pressure_pa,
            wind_m_s=forcing.wind_m_s,
            sw_in_w_m2=forcing.sw_in_w_m2,
            lw_in_w_m2=forcing.lw_in_w_m2,
            precip_kg_m2=forcing.precip_kg_m2,
            snow_frac=forcing.snow_frac,
            freezing_rain_frac=forcing.freezing_rain_frac,
            wind_transport_kg_m2=wind_transport_kg_m2,
            dt_s=float(forcing.dt_s),
            wind_height_m=float(forcing.wind_height_m),
            temp_height_m=float(forcing.temp_height_m),
        )


class StateArrays(NamedTuple):
    """The arrays of a :class:`~regionmap.snow.state.SnowState` (same names and meaning),
    updated in place by the kernel."""

    thickness_m: np.ndarray  #: (cell, layer) float32, bottom first
    ice_kg_m2: np.ndarray  #: (cell, layer) float64
    liquid_kg_m2: np.ndarray  #: (cell, layer) float64
    temperature_k: np.ndarray  #: (cell, layer) float32
    grain_size_mm: np.ndarray  #: (cell, layer) float32
    dendricity: np.ndarray  #: (cell, layer) float32
    facetedness: np.ndarray  #: (cell, layer) float32
    grain_code: np.ndarray  #: (cell, layer) int8
    crust_code: np.ndarray  #: (cell, layer) int8
    flags: np.ndarray  #: (cell, layer) int8
    deposition_time_s2000: np.ndarray  #: (cell, layer) int32
    formation_time_s2000: np.ndarray  #: (cell, layer) int32
    event_id: np.ndarray  #: (cell, layer) int32
    surface: np.ndarray  #: (cell, N_SV) float64 surface, soil and event-gap state
    counters: np.ndarray  #: (cell, N_SI) int64 layer count and event ids
    new_snow_kg_m2: np.ndarray  #: (cell, 72) float32 hourly new-snow mass ring
    new_snow_m: np.ndarray  #: (cell, 72) float32 hourly new-snow depth ring

    @classmethod
    def from_state(cls, state) -> StateArrays:
        """Views of the arrays of ``state`` (writes go into the state)."""
        return cls(*(getattr(state, name) for name in cls._fields))


class Diagnostics(NamedTuple):
    """Per-cell diagnostics, written every ``every_steps`` steps."""

    every_steps: int  #: steps per output interval
    d64: np.ndarray  #: (N_D64, cell, out) float64 mass budget (rows ``batch.D64_*``)
    d32: np.ndarray  #: (N_D32, cell, out) float32 the rest (rows ``batch.D32_*``)


class Snapshots(NamedTuple):
    """Daily layer snapshots."""

    day_of_step: np.ndarray  #: (time,) int64 snapshot written after each step, -1 none
    floats: np.ndarray  #: (N_SF, cell, day, layer) float32 (rows ``batch.SF_*``)
    ints: np.ndarray  #: (N_SI_SNAP, cell, day, layer) int32 (rows ``batch.SI_*``)
    layer_count: np.ndarray  #: (cell, day) int32


class EventLog(NamedTuple):
    """Rain-on-snow and freezing-rain events per cell, (cell, max_events) each."""

    kind: np.ndarray  #: int8 ``kernel.EV_*``
    event_id: np.ndarray  #: int64 start hour since 1970
    first_s: np.ndarray  #: int64 first interval end [s since 1970]
    last_s: np.ndarray  #: int64 last interval end [s since 1970]
    amount_kg_m2: np.ndarray  #: float64 amount summed over the event
    n_logged: np.ndarray  #: (cell,) int64 events logged


class Column(NamedTuple):
    """Work copy of one cell's state inside the kernel (see :mod:`regionmap.snow.layering`
    for the rows of ``fw`` and ``iw``, :mod:`regionmap.snow.kernel` for ``sv`` and ``si``)."""

    fw: np.ndarray  #: (F_ROWS, padded layers) float64 layer fields
    iw: np.ndarray  #: (I_ROWS, padded layers) int64 layer codes and times
    sv: np.ndarray  #: (N_SV,) float64 surface state
    si: np.ndarray  #: (N_SI,) int64 layer count and event ids
    ring_m: np.ndarray  #: (72,) hourly new-snow mass [kg m-2]
    ring_d: np.ndarray  #: (72,) hourly new-snow depth [m]


class StepWeather(NamedTuple):
    """Forcing of one cell over one step (scalars), with the step's time."""

    t_air_k: float
    rh_frac: float
    pressure_pa: float
    wind_m_s: float  #: before the wind floor of the bulk formulas
    sw_in_w_m2: float  #: >= 0
    lw_in_w_m2: float
    precip_kg_m2: float  #: >= 0
    snow_frac: float  #: 0..1
    freezing_rain_frac: float  #: 0..1
    wind_transport_kg_m2: float  #: positive deposited, negative erosion asked [kg m-2]
    now_s2000: int  #: interval end [s since 2000]
    hour_abs: int  #: interval end [whole hours since 1970]
    event_hour: int  #: region-wide event start [h since 1970], 0 none
    dt_s: float
    wind_height_m: float
    temp_height_m: float


class StepWork(NamedTuple):
    """Work arrays of a step, allocated once per block of cells."""

    wk: np.ndarray  #: (10, 2 * (layers + N_SOIL)) float64 conduction and metamorphism rows
    barrier: np.ndarray  #: (layers,) bool flow barriers
    acc: np.ndarray  #: (N_ACC,) the step's fluxes (rows ``kernel.A_*``), output
    totals: np.ndarray  #: (2,) column mass [kg m-2] and enthalpy [J m-2], carried over

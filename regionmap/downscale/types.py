"""Per-cell hourly forcing: the hand-over from downscaling to the snow column."""

from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np

__all__ = ["CellForcing"]

_SERIES = (
    "t_air_k",
    "rh_frac",
    "pressure_pa",
    "wind_m_s",
    "sw_in_w_m2",
    "lw_in_w_m2",
    "precip_kg_m2",
    "snow_frac",
    "freezing_rain_frac",
)
#: (cell, time) series that may be None
_OPTIONAL_SERIES = ("sx_deg", "wind_transport_kg_m2")


@dataclass
class CellForcing:
    """Hourly forcing for a batch of cells, all arrays (cell, time) float64 C-contiguous.

    Attributes
    ----------
    time : ndarray (time,) datetime64[s]
        End of each interval (CF convention: the label closes its interval).
    t_air_k : air temperature at ``temp_height_m`` [K]
    rh_frac : relative humidity over water [1]
    pressure_pa : surface air pressure [Pa]
    wind_m_s : wind speed at ``wind_height_m`` [m s-1]
    sw_in_w_m2 : incoming shortwave on the sloping cell, shaded, before albedo [W m-2]
    lw_in_w_m2 : incoming longwave, sky-view weighted plus terrain emission [W m-2]
    precip_kg_m2 : precipitation over the interval [kg m-2]
    snow_frac : solid fraction of ``precip_kg_m2`` [1]
    freezing_rain_frac : fraction of ``precip_kg_m2`` that is liquid falling from a melting
        layer aloft onto sub-freezing surface air [1]; 0 without upper-air information.
    wind_height_m, temp_height_m : measurement heights above the surface [m]
    dt_s : step length [s]
    event_hour : ndarray (time,) int64 or None
        Start (whole hours since 1970) of the region-wide precipitation window holding each
        hour, 0 outside (:func:`regionmap.downscale.events.region_event_hours`); None: none
        known, each cell's events start their own ids.
    sx_deg : ndarray (cell, time) float64 or None
        Maximum upwind slope of the cell at the hour's wind direction, positive = sheltered
        [deg] (what wind transport needs of the terrain); None when not computed.
    wind_transport_kg_m2 : ndarray (cell, time) float64 or None
        Wind transport of each hour decided for the zone
        (:func:`regionmap.snow.wind_transport.zone_transport`): positive deposited, negative
        erosion asked of the surface [kg m-2]; None: no transport.
    """

    time: np.ndarray
    t_air_k: np.ndarray
    rh_frac: np.ndarray
    pressure_pa: np.ndarray
    wind_m_s: np.ndarray
    sw_in_w_m2: np.ndarray
    lw_in_w_m2: np.ndarray
    precip_kg_m2: np.ndarray
    snow_frac: np.ndarray
    freezing_rain_frac: np.ndarray
    wind_height_m: float = 10.0
    temp_height_m: float = 2.0
    dt_s: float = 3600.0
    event_hour: np.ndarray | None = None
    sx_deg: np.ndarray | None = None
    wind_transport_kg_m2: np.ndarray | None = None

    def __post_init__(self) -> None:
        self.time = np.asarray(self.time, dtype="datetime64[s]")
        for name in _SERIES:
            setattr(self, name, np.ascontiguousarray(getattr(self, name), dtype=np.float64))
        shape = self.t_air_k.shape
        if self.event_hour is None:
            self.event_hour = np.zeros(self.time.size, dtype=np.int64)
        self.event_hour = np.ascontiguousarray(self.event_hour, dtype=np.int64)
        if self.event_hour.shape != self.time.shape:
            raise ValueError(
                f"CellForcing event_hour must be (time,) = ({self.time.size},), "
                f"got {self.event_hour.shape}"
            )
        for name in _OPTIONAL_SERIES:
            if getattr(self, name) is not None:
                setattr(self, name, np.ascontiguousarray(getattr(self, name), dtype=np.float64))
        bad = [n for n in _SERIES if getattr(self, n).shape != shape]
        bad += [
            n
            for n in _OPTIONAL_SERIES
            if getattr(self, n) is not None and getattr(self, n).shape != shape
        ]
        if len(shape) != 2 or shape[1] != self.time.size or bad:
            raise ValueError(
                f"CellForcing arrays must all be (cell, time) = (n, {self.time.size}); "
                f"t_air_k is {shape}, mismatched: {bad}"
            )

    @property
    def n_cells(self) -> int:
        return self.t_air_k.shape[0]

    @property
    def n_steps(self) -> int:
        return self.t_air_k.shape[1]

    def subset(self, cells=slice(None), steps=slice(None)) -> CellForcing:
        """A view on some cells and/or steps (arrays copied to stay C-contiguous)."""
        kw = {f.name: getattr(self, f.name) for f in fields(self)}
        kw["time"] = self.time[steps]
        kw["event_hour"] = self.event_hour[steps]
        for name in _SERIES:
            kw[name] = getattr(self, name)[cells, steps]
        for name in _OPTIONAL_SERIES:
            value = getattr(self, name)
            kw[name] = None if value is None else value[cells, steps]
        return CellForcing(**kw)

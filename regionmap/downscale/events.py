"""Region-wide precipitation events: one time window, and one id, for the whole region.

A storm, a rain spell or a freezing-rain spell is one event for every cell it touches, so its
layers carry one id everywhere and the products can name one layer per event. The windows
come from the grid forcing before any cell is simulated: the hours when precipitation falls
anywhere in the region, merged across dry spells shorter than the event gap of the column
model. A cell's event that starts inside a window takes the window's start as its id.
"""

from __future__ import annotations

import numpy as np

__all__ = ["region_event_hours", "read_region_precipitation_max"]


def region_event_hours(
    precip_max_kg_m2: np.ndarray, time: np.ndarray, *, min_kg_m2: float, gap_h: float
) -> np.ndarray:
    """Start of the region's precipitation window that holds each hour.

    Parameters
    ----------
    precip_max_kg_m2 : ndarray (time,) float64
        Largest hourly precipitation over the region's grid points [kg m-2].
    time : ndarray (time,) datetime64[s]
        Interval ends, hourly.
    min_kg_m2 : float
        Hourly amount that makes an hour wet [kg m-2].
    gap_h : float
        Dry hours that end a window [h] (the column's event gap).

    Returns
    -------
    ndarray (time,) int64
        Whole hours since 1970 of the first wet hour of the window each hour belongs to:
        from its first wet hour to ``gap_h`` hours after its last (or the next window); 0
        for hours outside every window.
    """
    p = np.asarray(precip_max_kg_m2, dtype=np.float64)
    hour = np.asarray(time, dtype="datetime64[s]").astype(np.int64) // 3600
    out = np.zeros(p.size, dtype=np.int64)
    wet = np.flatnonzero(p >= min_kg_m2)
    if wet.size == 0:
        return out
    new = np.concatenate([[True], np.diff(wet) - 1 >= gap_h])
    starts = wet[new]
    ends = np.append(wet[np.flatnonzero(new)[1:] - 1], wet[-1])
    reach = np.minimum(ends + int(np.ceil(gap_h)), np.append(starts[1:] - 1, p.size - 1))
    idx = np.arange(p.size)
    k = np.searchsorted(starts, idx, side="right") - 1
    inside = (k >= 0) & (idx <= reach[np.maximum(k, 0)])
    out[inside] = hour[starts[k[inside]]]
    return out


def read_region_precipitation_max(grid_forcing, points: np.ndarray, grid_shape, span_h: int = 744):
    """Largest hourly precipitation over some grid points, over the forcing's whole period.

    Parameters
    ----------
    grid_forcing : regionmap.io.forcing.GridForcing
    points : ndarray int64
        Flat (y * nx + x) indices of the grid points.
    grid_shape : (ny, nx)
    span_h : int
        Hours read per access.

    Returns
    -------
    ndarray (time,) float64 [kg m-2]
    """
    n_t = len(grid_forcing.time)
    nx = grid_shape[1]
    iy, ix = points // nx, points % nx
    out = np.zeros(n_t)
    for t0 in range(0, n_t, span_h):
        block = grid_forcing.read_block(["precipitation"], iy, ix, slice(t0, min(t0 + span_h, n_t)))
        out[t0 : t0 + span_h] = np.nanmax(
            np.asarray(block["precipitation"], dtype=np.float64), axis=1
        )
    return out

"""Which hours a run simulates and how its cells are cut into chunks.

Every cell is simulated independently of the others, so the results do not depend on the
chunk size, on where a cell falls in a chunk, or on the scheduler.
"""

from __future__ import annotations

from dataclasses import dataclass
from itertools import pairwise

import numpy as np

from regionmap.errors import InputError

__all__ = ["Period", "plan_period", "chunk_ranges"]


@dataclass(frozen=True)
class Period:
    """The hours a run simulates, as indices into the forcing's hourly axis.

    ``first`` is the first simulated step; ``split`` the first forecast step (== ``stop`` when
    there is no forecast part); ``stop`` one past the last step.
    """

    first: int
    split: int
    stop: int
    times: np.ndarray

    @property
    def analysis_end(self) -> np.datetime64:
        return self.times[self.split - 1]

    @property
    def has_forecast(self) -> bool:
        return self.split < self.stop


def plan_period(
    forcing_time: np.ndarray,
    *,
    state_time=None,
    analysis_time=None,
    diag_every_h: int = 1,
    where: str = "forcing",
) -> Period:
    """Which forcing hours to simulate, from the state's time and the analysis time.

    Parameters
    ----------
    forcing_time : (time,) datetime64 hourly interval ends.
    state_time : datetime64 or None — the valid time of a state to continue from; its next
        hour must be in the forcing (earlier steps are skipped), otherwise a gap is an error.
    analysis_time : datetime64 or None — later forcing is forecast.
    diag_every_h : diagnostics interval; both parts must hold whole intervals.

    Raises
    ------
    InputError
        A gap between the state and the forcing, a state past the forcing's end, or parts
        that are not whole diagnostics intervals.
    """
    t = np.asarray(forcing_time, dtype="datetime64[s]")
    first = 0
    if state_time is not None:
        next_hour = np.datetime64(state_time, "s") + np.timedelta64(3600, "s")
        if next_hour < t[0]:
            raise InputError(
                f"{where}: the state is valid at {np.datetime64(state_time, 's')} but the forcing "
                f"starts at {t[0]}: a gap of {(t[0] - next_hour).astype(int) // 3600} h. "
                "Hint: give forcing that starts at or before the state's next hour."
            )
        found = np.nonzero(t == next_hour)[0]
        if found.size == 0:
            raise InputError(
                f"{where}: the state is valid at {np.datetime64(state_time, 's')}, but the forcing "
                f"({t[0]} to {t[-1]}) has no step ending at {next_hour}"
            )
        first = int(found[0])
    stop = t.size
    split = stop
    if analysis_time is not None:
        a = np.datetime64(analysis_time, "s")
        split = int(np.searchsorted(t, a, side="right"))
        split = min(max(split, first), stop)
    for name, n in (("analysis", split - first), ("forecast", stop - split)):
        if n % diag_every_h:
            raise InputError(
                f"{where}: the {name} part has {n} hourly steps, not a whole number of "
                f"[output] diagnostics_every = {diag_every_h} h intervals. Hint: align the "
                "start, end and analysis_time with the diagnostics interval."
            )
    if split - first <= 0 and stop - split <= 0:
        raise InputError(f"{where}: no forcing steps to simulate after the state's time")
    return Period(first, split, stop, t)


def chunk_ranges(
    n_cells: int, chunk_size: int, groups: np.ndarray | None = None
) -> list[tuple[int, int]]:
    """Contiguous [lo, hi) cell-position ranges of at most ``chunk_size`` cells.

    With ``groups`` (cell,) — e.g. the zone of each cell, each group one contiguous run — a
    range never splits a group: whole groups are packed up to ``chunk_size`` cells (a larger
    group is a range of its own). Wind transport needs this: it conserves each zone's mass
    between the zone's cells, so every result then does not depend on the chunk size.
    """
    size = max(int(chunk_size), 1)
    if groups is None:
        edges = list(range(0, n_cells, size)) + [n_cells]
        return list(pairwise(edges))
    groups = np.asarray(groups)
    if n_cells == 0:
        return []
    starts = np.concatenate([[0], np.nonzero(groups[1:] != groups[:-1])[0] + 1])
    if np.unique(groups[starts]).size != starts.size:
        raise RuntimeError(
            "chunk_ranges: the cells of a group must be contiguous"
        )  # a bug, not bad input
    edges, prev = [0], 0
    for end in [*starts[1:].tolist(), n_cells]:  # the end of each group
        if end - edges[-1] > size and prev > edges[-1]:
            edges.append(prev)
        prev = end
    edges.append(n_cells)
    return list(pairwise(edges))

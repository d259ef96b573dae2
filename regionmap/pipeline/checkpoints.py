"""Control states kept on disk during a run, so that ensemble members start near their window.

The rain-crust ensemble re-simulates a few days around each rain-on-snow event with
perturbed forcing (:mod:`regionmap.products.write`). Its members must start from the control
run's state shortly before the event; stepping the control again from the season start to
get there costs as much as the run itself, once per event. Instead each chunk task saves its
state at fixed times (every :data:`CHECKPOINT_EVERY_H` hours, and at every restart) into one
``.npz`` file per chunk in a folder inside the run's temporary output folder (so an interrupted
run leaves none behind), and the ensemble starts from the latest one.

Continuing a column from a saved state is exact (bit for bit the same as one run), so the
members' results do not depend on the checkpoint interval.
"""

from __future__ import annotations

from dataclasses import dataclass, fields
from pathlib import Path

import numpy as np

from regionmap.io.atomic import disk_errors
from regionmap.snow.state import SnowState

__all__ = ["CHECKPOINT_EVERY_H", "Checkpoints", "checkpoint_times"]

#: Hours between saved control states (rounded up to whole diagnostics intervals); an
#: ensemble member then steps at most this many hours more than its own window.
CHECKPOINT_EVERY_H = 168

_ARRAYS = [f.name for f in fields(SnowState) if f.name not in ("time", "fingerprint")]


def checkpoint_times(state_time, n_steps: int, diag_every_h: int, restart_times=()) -> np.ndarray:
    """Valid times [datetime64 s] of the saved states of a run of ``n_steps`` hourly steps
    after ``state_time``: every :data:`CHECKPOINT_EVERY_H` h (whole diagnostics intervals)
    and at each restart time, strictly inside the run."""
    every = int(diag_every_h) * -(-CHECKPOINT_EVERY_H // int(diag_every_h))
    t0 = np.datetime64(state_time, "s")
    regular = t0 + np.arange(every, n_steps, every) * np.timedelta64(3600, "s")
    extra = np.asarray([np.datetime64(t, "s") for t in restart_times], dtype="datetime64[s]")
    end = t0 + np.timedelta64(3600 * n_steps, "s")
    extra = extra[(extra > t0) & (extra < end)]
    return np.unique(np.concatenate([regular, extra]))


@dataclass(frozen=True)
class Checkpoints:
    """The saved control states of one run.

    Attributes
    ----------
    folder : str
        Temporary folder holding one ``chunk-LO-HI.npz`` per chunk (cell positions lo:hi).
    times : ndarray (k,) datetime64[s]
        Valid times of the saved states (:func:`checkpoint_times`).
    """

    folder: str
    times: np.ndarray

    def save(self, lo: int, hi: int, states: dict) -> None:
        """Write the states of chunk ``lo:hi`` ({valid time: SnowState}, all of ``times``)."""
        arrays = {
            f"{k}/{name}": getattr(states[t], name)
            for k, t in enumerate(self.times)
            for name in _ARRAYS
        }
        path = Path(self.folder) / f"chunk-{lo:09d}-{hi:09d}.npz"
        tmp = path.with_name(
            "tmp-" + path.name
        )  # not matched by latest()'s "chunk-*" until complete
        with disk_errors(path):
            np.savez(tmp, **arrays)
            tmp.replace(path)

    def latest(self, not_after, positions: np.ndarray, initial: SnowState) -> SnowState:
        """The control state of the cells at ``positions`` (ascending) at the latest saved
        time not after ``not_after``; ``initial`` (the run's start state, all cells) taken at
        ``positions`` when no saved time is that early."""
        k = int(np.searchsorted(self.times, np.datetime64(not_after, "s"), side="right")) - 1
        if k < 0:
            return initial.take(positions)
        positions = np.asarray(positions, dtype=np.int64)
        parts: dict[str, list] = {name: [] for name in _ARRAYS}
        for path in sorted(Path(self.folder).glob("chunk-*.npz")):
            lo, hi = (int(s) for s in path.stem.split("-")[1:])
            mine = positions[(positions >= lo) & (positions < hi)] - lo
            if mine.size == 0:
                continue
            with np.load(path) as saved:
                for name in _ARRAYS:
                    parts[name].append(saved[f"{k}/{name}"][mine])
        kw = {name: np.concatenate(v) for name, v in parts.items()}
        if kw["cell_id"].size != positions.size:
            raise RuntimeError(
                "checkpoints: a chunk's saved states are missing"
            )  # a bug, not bad input
        return SnowState(time=self.times[k], fingerprint=initial.fingerprint, **kw)

"""Control-state checkpoints for the ensemble (regionmap.pipeline.checkpoints).

Outside reference: none is needed beyond the model itself — the property checked is
exactness. A column continued from a saved state must equal the uninterrupted run bit for
bit (continuation A -> C equals A -> B -> C), so states read back from the
checkpoints must equal states reached by stepping from the season start, and saving them
must not change the run's own results.
"""

from __future__ import annotations

from dataclasses import fields

import numpy as np

from regionmap.pipeline.checkpoints import CHECKPOINT_EVERY_H, Checkpoints, checkpoint_times
from regionmap.pipeline.restart import run_columns_with_restarts
from regionmap.snow.column import run_columns
from regionmap.snow.params import SnowParams
from regionmap.snow.state import SnowState
from regionmap.snow.synthetic import season_forcing

START = "2025-11-01T00:00"


def _assert_same_state(a: SnowState, b: SnowState) -> None:
    for f in fields(a):
        x = getattr(a, f.name)
        if isinstance(x, np.ndarray):
            assert np.array_equal(x, getattr(b, f.name), equal_nan=True), f.name
    assert a.time == b.time


def test_checkpoint_times_are_whole_intervals_inside_the_run():
    t0 = np.datetime64(START, "s")
    restart = t0 + np.timedelta64(30 * 24 * 3600, "s")
    t = checkpoint_times(t0, 40 * 24, 24, [restart, t0, t0 + np.timedelta64(99 * 24 * 3600, "s")])
    hours = (t - t0) // np.timedelta64(3600, "s")
    assert hours.tolist() == [
        168,
        336,
        504,
        672,
        720,
        840,
    ]  # weekly, plus the restart inside the run
    assert CHECKPOINT_EVERY_H == 168
    # a 5 h diagnostics interval rounds the spacing up to 170 h
    assert ((checkpoint_times(t0, 400, 5) - t0) // np.timedelta64(3600, "s")).tolist() == [170, 340]


def test_saved_states_equal_states_stepped_from_the_start(tmp_path):
    forcing = season_forcing(5, start=START, days=20, seed=7)
    s0 = SnowState.empty(forcing.n_cells, time=START)
    params = SnowParams()
    times = checkpoint_times(s0.time, forcing.time.size, 24)
    ck = Checkpoints(str(tmp_path), times)
    plain_end, plain_diag, _ = run_columns(s0, forcing, params, 24)
    for lo, hi in ((0, 2), (2, 5)):  # two chunks, as the runner's tasks save them
        kept = dict.fromkeys(times)
        end, diag, _, _ = run_columns_with_restarts(
            s0.take(slice(lo, hi)), forcing.subset(cells=slice(lo, hi)), [], params, 24, kept=kept
        )
        ck.save(lo, hi, kept)
        # saving states on the way changes nothing of the run itself
        _assert_same_state(end, plain_end.take(slice(lo, hi)))
        assert np.array_equal(diag["swe_kg_m2"], plain_diag["swe_kg_m2"][lo:hi])
    # the latest state not after day 16: day 14 (the second weekly checkpoint), cells 1 and 3
    day16 = np.datetime64(START, "s") + np.timedelta64(16 * 24 * 3600, "s")
    got = ck.latest(day16, np.array([1, 3]), s0)
    assert got.time == np.datetime64(START, "s") + np.timedelta64(14 * 24 * 3600, "s")
    stepped, _, _ = run_columns(s0, forcing.subset(steps=slice(0, 14 * 24)), params, 24)
    _assert_same_state(got, stepped.take([1, 3]))
    # before the first checkpoint, the run's start state
    _assert_same_state(ck.latest(np.datetime64(START, "s"), np.array([0, 4]), s0), s0.take([0, 4]))

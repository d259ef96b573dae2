"""Region-wide event windows: one storm has one id in every cell."""

from __future__ import annotations

import numpy as np

from regionmap.downscale.events import region_event_hours
from regionmap.snow.column import run_columns
from regionmap.snow.params import SnowParams
from regionmap.snow.state import SnowState
from regionmap.snow.synthetic import hours, make_forcing

START = "2026-01-10T00:00"


def test_windows_merge_across_short_dry_spells_and_split_at_the_gap():
    # by construction of the event gap (an event ends after 6 dry hours): wet hours 2-3 and 5
    # are one window; 12 starts a new one after exactly 6 dry hours; 20 after 7
    t = hours(START, 30)
    p = np.zeros(t.size)
    p[[2, 3, 5, 12, 20, 21]] = 1.0
    ids = region_event_hours(p, t, min_kg_m2=0.5, gap_h=6.0)
    h = t.astype(np.int64) // 3600
    assert np.all(ids[:2] == 0)
    assert np.all(ids[2:12] == h[2]) and np.all(ids[12:19] == h[12])
    assert np.all(ids[20:28] == h[20]) and np.all(ids[28:] == 0)


def test_one_rain_event_has_one_id_in_every_cell():
    # a warm front reaches the low cell first and the high cell five hours later (rain at
    # +3 degC on a cold pack); with the region's window both cells' rain and their rain
    # crusts carry the window's id, without it each cell starts its own
    nt = 24 * 4
    t = hours(START, nt)
    idx = np.arange(nt)
    ta = np.full((2, nt), 268.0)
    pr = np.zeros((2, nt))
    pr[:, :12] = 2.0  # the pack
    ta[0, 30:40], pr[0, 30:40] = 276.0, 1.5
    ta[1, 35:40], pr[1, 35:40] = 276.0, 1.5
    sf = np.where(ta > 273.15, 0.0, 1.0)
    window = region_event_hours(pr.max(axis=0), t, min_kg_m2=0.1, gap_h=6.0)
    out = {}
    for name, ev in (("region", window), ("own", None)):
        f = make_forcing(t, 2, t_air_k=ta, precip_kg_m2=pr, snow_frac=sf, cloud_frac=0.0)
        f.event_hour = np.zeros(nt, np.int64) if ev is None else ev
        _, diag, _ = run_columns(SnowState.empty(2, time=START), f, SnowParams())
        rain = diag["event_kind"] == "rain-on-snow"
        out[name] = {c: set(diag["event_id"][rain & (diag["event_cell"] == c)]) for c in (0, 1)}
    assert out["region"][0] == out["region"][1] == {int(window[30])}
    assert out["own"][0] != out["own"][1]
    assert idx[window == window[30]].min() == 30

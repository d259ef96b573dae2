"""The briefing's words: time labels (local with UTC beside), the default map time, the
one-line summaries of the layers of concern (checked against the table they are built from)
and the headline's changes."""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest

from regionmap.io.times import event_date_label, local_date_label, local_time_label
from regionmap.pipeline.execute import default_map_time
from regionmap.report.headline import (
    BAND_MIN_PRESENCE_FRAC,
    aspect_phrase,
    elevation_phrase,
    layer_lines,
)

EIGHT = ["N", "NE", "E", "SE", "S", "SW", "W", "NW"]


# --------------------------------------------------------------------------- times
def test_local_time_label_puts_utc_beside_the_local_clock():
    # Etc/GMT-1 is UTC+01:00 (POSIX sign convention of the IANA "Etc" zones)
    t = np.datetime64("2026-02-15T06:00")
    assert local_time_label(t, "Etc/GMT-1") == "Sun 15 Feb 07:00 UTC+01 (06:00 UTC)"
    # the UTC date is repeated when it differs from the local one
    t = np.datetime64("2026-02-14T23:00")
    assert (
        local_time_label(t, "Etc/GMT-1", year=True)
        == "Sun 15 Feb 2026 00:00 UTC+01 (14 Feb 23:00 UTC)"
    )
    # half-hour offsets and zones west of Greenwich (Newfoundland, UTC-03:30 in winter)
    assert local_time_label(t, "America/St_Johns") == "Sat 14 Feb 19:30 UTC-03:30 (23:00 UTC)"
    assert local_time_label(t, "UTC") == "Sat 14 Feb 23:00 UTC"


def test_local_time_label_follows_daylight_saving():
    # Central European Summer Time (UTC+02) on 2026-07-01, standard time (UTC+01) in January
    assert local_time_label(np.datetime64("2026-07-01T05:00"), "Europe/Vienna").startswith(
        "Wed 1 Jul 07:00 UTC+02"
    )
    assert local_time_label(np.datetime64("2026-01-07T06:00"), "Europe/Vienna").startswith(
        "Wed 7 Jan 07:00 UTC+01"
    )


def test_an_event_is_dated_by_its_local_start():
    # event id = start as whole hours since 1970 UTC: 2026-01-16T23:00Z is 17 Jan at UTC+01
    start_h = int(np.datetime64("2026-01-16T23:00", "h").astype(np.int64))
    assert event_date_label(start_h, "Etc/GMT-1") == "17 Jan 2026"
    assert event_date_label(start_h, "UTC") == "16 Jan 2026"
    assert local_date_label("2025-12-22") == "22 Dec"


def _hours(start: str, end: str, step_h: int = 1) -> np.ndarray:
    return np.arange(np.datetime64(start), np.datetime64(end), np.timedelta64(step_h, "h")).astype(
        "datetime64[s]"
    )


def test_default_map_time_is_the_observation_hour_of_the_analysis_day():
    times = _hours("2026-02-01T01:00", "2026-02-18T00:00")
    # analysis to 23:00 UTC = 00:00 on 15 Feb at UTC+01: the morning of 15 Feb, 07:00 local
    t = default_map_time(
        times, np.datetime64("2026-02-14T23:00"), local_timezone="Etc/GMT-1", observation_hour=7
    )
    assert t == np.datetime64("2026-02-15T06:00")
    # analysis at 13:00 local on 14 Feb (UTC-07): that day's 07:00 local, 14:00 UTC
    t = default_map_time(
        times, np.datetime64("2026-02-14T20:00"), local_timezone="Etc/GMT+7", observation_hour=7
    )
    assert t == np.datetime64("2026-02-14T14:00")
    # a run without forecast to 23:00: that day's observation hour
    t = default_map_time(times, times[-1], local_timezone="UTC", observation_hour=7)
    assert t == np.datetime64("2026-02-17T07:00")
    # the run ends before the observation hour of its last day: the run's end, the nearest
    ends_early = _hours("2026-02-01T01:00", "2026-02-13T07:00")
    t = default_map_time(ends_early, ends_early[-1], local_timezone="UTC", observation_hour=7)
    assert t == np.datetime64("2026-02-13T06:00")
    # three-hourly output: rounded down to an output time
    t = default_map_time(
        _hours("2026-02-01T03:00", "2026-02-18T00:00", 3),
        np.datetime64("2026-02-14T23:00"),
        local_timezone="Etc/GMT-1",
        observation_hour=7,
    )
    assert t == np.datetime64("2026-02-15T06:00")
    # no observation hour in the run: its end
    short = _hours("2026-02-01T01:00", "2026-02-01T05:00")
    assert default_map_time(short, short[-1], local_timezone="UTC", observation_hour=7) == short[-1]


# --------------------------------------------------------------------------- layer sentences
def test_aspect_phrase_names_runs_of_neighbouring_sectors():
    assert aspect_phrase(["N", "NE", "E"], EIGHT) == "N to E"
    assert aspect_phrase(["NW", "N", "NE"], EIGHT) == "NW to NE"  # across north
    assert aspect_phrase(["N", "NE", "S"], EIGHT) == "N to NE and S"
    assert aspect_phrase(EIGHT, EIGHT) == "all aspects"
    assert aspect_phrase(["E", "flat"], EIGHT) == "E and flat terrain"
    assert aspect_phrase(["S"], ["N", "E", "S", "W"]) == "S"


def test_elevation_phrase_with_open_bands():
    assert elevation_phrase(1700.0, 2900.0) == "1700–2900 m"
    assert elevation_phrase(-np.inf, 1500.0) == "below 1500 m"
    assert elevation_phrase(2700.0, np.inf) == "above 2700 m"


def _loc_rows(layer_id, kind, category, date, zone, cells, zone_presence):
    """Rows of a layers-of-concern table: ``cells`` = [(band_lower, aspect, presence, depth)]."""
    rows = [
        {
            "layer_id": layer_id,
            "kind": kind,
            "category": category,
            "date": date,
            "zone": zone,
            "band_lower_m": lo,
            "band_upper_m": lo + 300.0,
            "aspect_sector": aspect,
            "presence_frac": frac,
            "depth_cm": depth,
        }
        for lo, aspect, frac, depth in cells
    ]
    rows.append(
        {
            "layer_id": layer_id,
            "kind": kind,
            "category": category,
            "date": date,
            "zone": zone,
            "band_lower_m": np.nan,
            "band_upper_m": np.nan,
            "aspect_sector": "all",
            "presence_frac": zone_presence,
            "depth_cm": 110.0,
        }
    )
    return rows


def test_layer_sentence_from_the_table():
    rows = _loc_rows(
        "SH-2025-12-22",
        "SH",
        "weak layer",
        "2025-12-22",
        "Upper Vell",
        [
            (1700.0, "N", 0.8, 105.0),
            (2000.0, "NE", 0.7, 112.0),
            (2600.0, "E", 0.5, 120.0),
            (2600.0, "S", 0.05, 300.0),  # a trace below BAND_MIN_PRESENCE_FRAC: not in the extent
            (1400.0, "W", 0.0, np.nan),  # no presence
        ],
        0.6,
    )
    assert 0.05 < BAND_MIN_PRESENCE_FRAC
    lines = layer_lines(pd.DataFrame(rows))
    assert list(lines["text"]) == [
        "buried surface hoar of 22 Dec: 1700–2900 m, N to E, 105–120 cm deep, on 60 % of avalanche "
        "terrain"
    ]


def test_every_present_layer_gets_a_line_and_rain_crusts_always_lead():
    rows = []
    # twelve weak layers on much of the zone, a sun crust on 30 %, the season's rain crust on 5 %
    for k in range(12):
        rows += _loc_rows(
            f"FC-2026-01-{k + 1:02d}",
            "FC",
            "weak layer",
            f"2026-01-{k + 1:02d}",
            "Z",
            [(2000.0, "N", 0.5, 40.0)],
            0.5,
        )
    rows += _loc_rows(
        "sun-2026-02-01", "sun", "crust", "2026-02-01", "Z", [(2000.0, "S", 0.9, 5.0)], 0.3
    )
    rows += _loc_rows(
        "rain-2026-01-16", "rain", "crust", "2026-01-16", "Z", [(1400.0, "N", 0.2, 60.0)], 0.05
    )
    rows += _loc_rows(
        "glaze-2026-02-11", "glaze", "crust", "2026-02-11", "Z", [(1400.0, "N", 0.0, np.nan)], 0.0
    )
    lines = layer_lines(pd.DataFrame(rows))
    assert len(lines) == 14  # no top-N; the glaze without presence is dropped
    rain = lines[lines["kind"] == "rain"].iloc[0]
    assert rain["headline"]  # the rain crust stays in the headline though it covers 5 %
    assert (
        rain["text"]
        == "rain crust of 16 Jan: 1400–1700 m, N, 60 cm deep, on 5 % of avalanche terrain"
    )
    assert "glaze" not in set(lines["kind"])
    assert list(lines["category"]) == ["weak layer"] * 12 + ["crust"] * 2  # weak layers first


def test_layer_sentences_against_the_synthetic_run(tmp_path):
    from test_plots_synthrun import build_output_folder

    from regionmap.plots.outputs import RunOutputs

    out = RunOutputs(build_output_folder(tmp_path / "out", with_verification=False))
    try:
        loc = out.layers_of_concern
        lines = layer_lines(loc)
    finally:
        out.close()
    zone_rows = loc[(loc["aspect_sector"] == "all") & (loc["presence_frac"] > 0)]
    assert len(lines) == len(zone_rows) > 0
    parts = loc[loc["aspect_sector"] != "all"]
    for r in lines.itertuples():
        share = float(
            zone_rows.loc[
                (zone_rows["zone"] == r.zone) & (zone_rows["layer_id"] == r.layer_id),
                "presence_frac",
            ].iloc[0]
        )
        assert f"on {100 * share:.0f} % of" in r.text or (share < 0.005 and "<1 %" in r.text)
        p = parts[(parts["zone"] == r.zone) & (parts["layer_id"] == r.layer_id)]
        used = p[p["presence_frac"] >= BAND_MIN_PRESENCE_FRAC]
        used = used if len(used) else p[p["presence_frac"] > 0]
        assert elevation_phrase(used["band_lower_m"].min(), used["band_upper_m"].max()) in r.text
        m = re.search(r"(\d+)(?:–(\d+))? cm deep", r.text)
        if m:
            lo, hi = float(m.group(1)), float(m.group(2) or m.group(1))
            assert lo == pytest.approx(used["depth_cm"].min(), abs=2.5)
            assert hi == pytest.approx(used["depth_cm"].max(), abs=2.5)
    # the designed layers of the synthetic run (test_summaries_synth): buried SH of 12 Jan
    # (local, UTC-7), the rain crust of the event that began 2026-01-20
    assert lines["text"].str.startswith("buried surface hoar of 12 Jan").any()
    assert lines["text"].str.startswith("rain crust of 20 Jan").any()


# --------------------------------------------------------------------------- changes
def test_zone_changes_since_24_h_or_the_previous_run(tmp_path):
    import json

    import xarray as xr
    from test_plots_synthrun import build_output_folder

    from regionmap.plots.outputs import RunOutputs
    from regionmap.report.headline import reference_time, zone_changes

    folder = build_output_folder(tmp_path / "out", with_verification=False)
    out = RunOutputs(folder)
    try:
        since, why = reference_time(out)
        assert since == out.map_time - np.timedelta64(24, "h") and why == "24 h before"
        ch = zone_changes(out)
        # regression check against a direct sum over cells.nc: area-weighted mean snowfall in
        # (since, map time] per zone
        w = out.weights[0].reindex(out.table.index).to_numpy()
        with xr.open_dataset(folder / "cells.nc") as ds:
            sel = (ds["time"].values > since) & (ds["time"].values <= out.map_time)
            fall = ds["snowfall_kg_m2"].values[:, sel].sum(axis=1)
        for zone in out.zone_names:
            m = (out.table["zone"] == zone).to_numpy()
            want = np.sum(fall[m] * w[m]) / np.sum(w[m])
            assert ch.changes.loc[zone, "snowfall_kg_m2"] == pytest.approx(want, rel=1e-9, abs=1e-9)
        assert (ch.changes["wet_frac_now"].between(0, 1)).all()
        # a run continued from a state: compared with that state's time (the hour before its
        # first step)
        run = json.loads((folder / "run.json").read_text())
        first = str(out.times[0] + np.timedelta64(1, "h"))
        run["period"] = {"continued_from": "yesterday/state.nc", "first_step": first}
        (folder / "run.json").write_text(json.dumps(run))
    finally:
        out.close()
    again = RunOutputs(folder)
    try:
        since, why = reference_time(again)
        assert since == again.times[0] and why == "the previous run"
    finally:
        again.close()

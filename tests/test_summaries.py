"""Summaries over cells: weights, observation days, slab geometry, band transitions, layers
of concern. Each expected value is derived by hand from the synthetic run's design
(tests/test_summaries_synth.py) or from the source named beside it."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from test_summaries_synth import synthetic_run

from regionmap.errors import GridMismatchError, InputError
from regionmap.products.summaries import (
    band_transitions,
    cell_values,
    layer_summary_text,
    layers_of_concern,
    observation_times,
    observation_window_start,
    summarise,
    summary_tables,
    terrain_weights_km2,
)

MAP_TIME = "2026-01-22T12:00"


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    return synthetic_run(tmp_path_factory.mktemp("run"))


def test_terrain_weights_count_only_steep_pixels():
    # hand calculation: cell 0 has pixels of 20°, 35° and 55°, cell 1 one of 45°; 1 km2 each
    index = np.array([[0, 0, 0], [1, -1, -1]])
    slope = np.array([[20.0, 35.0, 55.0], [45.0, 40.0, np.nan]])
    w = terrain_weights_km2(index, slope, np.full((2, 3), 1e6), 3, avalanche_terrain_deg=(30, 50))
    np.testing.assert_allclose(w["avalanche_km2"], [1.0, 1.0, 0.0])
    np.testing.assert_allclose(w["all_km2"], [3.0, 1.0, 0.0])
    with pytest.raises(GridMismatchError, match="share the DEM grid"):
        terrain_weights_km2(index, slope[:, :2], np.ones((2, 3)), 2)


def test_observation_day_fixed_offset_etc_gmt_plus_7():
    # IANA tz database: "Etc/GMT+7" is UTC-7 (POSIX sign convention), so 07:00 local = 14:00 UTC
    t = observation_times("2026-01-10T00:00", "2026-01-12T23:00", local_timezone="Etc/GMT+7")
    assert [str(x) for x in t] == [
        "2026-01-10T14:00:00",
        "2026-01-11T14:00:00",
        "2026-01-12T14:00:00",
    ]


def test_observation_day_is_23_h_on_the_spring_clock_change():
    # IANA zone EST5EDT follows the US rules (Energy Policy Act of 2005): clocks go forward on
    # the second Sunday of March, 2026-03-08, 02:00 EST -> 03:00 EDT. The day ending 07:00 EDT
    # (11:00 UTC) then began 07:00 EST the day before (12:00 UTC): 23 h.
    end = observation_times("2026-03-08T00:00", "2026-03-08T23:00", local_timezone="EST5EDT")
    assert str(end[0]) == "2026-03-08T11:00:00"
    start = observation_window_start(end, 1, local_timezone="EST5EDT")
    assert str(start[0]) == "2026-03-07T12:00:00"


def test_new_snow_follows_local_observation_day(run):
    _, _, table, _, _, diag, prof = run
    # design: 1 kg m-2 of snowfall every hour. At 2026-01-22T12:00 UTC (05:00 at UTC-7) the last
    # observation day ended 2026-01-21T14:00 UTC; so 24 kg m-2 in 24 h and 72 in 72 h, and the
    # window end differs from the one a UTC day would give.
    v = cell_values(diag, prof, table, [MAP_TIME], local_timezone="Etc/GMT+7")
    assert (v["new_snow_window_end"] == np.datetime64("2026-01-21T14:00")).all()
    np.testing.assert_allclose(v["new_snow_24h_kg_m2"], 24.0)
    np.testing.assert_allclose(v["new_snow_72h_kg_m2"], 72.0)
    # the record's first interval is 00-01Z on 2026-01-10: the first day, ending 14:00Z,
    # holds only the 14 intervals that exist
    v0 = cell_values(diag, prof, table, ["2026-01-10T14:00"], local_timezone="Etc/GMT+7")
    np.testing.assert_allclose(v0["new_snow_24h_kg_m2"], 14.0)


def test_slab_thickness_is_perpendicular_to_the_slope(run):
    _, _, table, _, _, diag, prof = run
    v = cell_values(diag, prof, table, [MAP_TIME]).set_index("cell_id")
    # design at the map time: above the SH (slot 1) lie 30 cm storm snow + 2 cm crust layer;
    # slope atan(0.5) so cos = 2/sqrt(5) (trigonometry)
    np.testing.assert_allclose(v["SH_depth_cm"], 32.0)
    np.testing.assert_allclose(v["SH_slab_cm"], 32.0 * 2 / np.sqrt(5))
    # the uppermost weak layer of any family is the SH; load = 0.3*150 + 0.02*600 kg m-2
    np.testing.assert_allclose(v["pwl_load_kg_m2"], 45.0 + 12.0)
    high = table["elevation_m"] >= 1800
    np.testing.assert_allclose(v.loc[high, "DH_depth_cm"], 33.0)  # 1 + 30 + 2 cm above it
    assert v.loc[~high, "DH_present"].eq(0).all()


def test_area_weighted_fractions_and_maxima(run):
    _, _, table, _, _, diag, prof = run
    v = cell_values(diag, prof, table, [MAP_TIME])
    # weights: 2 km2 on one cell with DH, 1 km2 on one without, 0 elsewhere -> 2/3
    with_dh = int(table.index[table["elevation_m"] >= 1900][0])
    without = int(table.index[table["elevation_m"] < 1500][0])
    w = np.zeros(len(table))
    w[with_dh], w[without] = 2.0, 1.0
    table2 = table.assign(region="all")
    s = summarise(v, table2, w, by=["region"])
    assert s["depth_hoar_fraction"].iloc[0] == pytest.approx(2 / 3)
    assert s["area_km2"].iloc[0] == pytest.approx(3.0)
    # design: threshold count 5 at >= 2000 m else 3; crusts 1 above 1400 m, 2 above 2000 m
    elev = table.loc[with_dh, "elevation_m"]
    assert s["threshold_count_max_max"].iloc[0] == (5.0 if elev >= 2000 else 3.0)
    assert s["crust_count_max"].iloc[0] == (2.0 if elev > 2000 else 1.0)
    assert s["crust_count_mean"].iloc[0] == pytest.approx(
        (2 * s["crust_count_max"].iloc[0] + 0) / 3
    )


def test_band_transitions_interpolate_between_band_centres():
    # linear interpolation by hand: fractions 0, 0.2, 0.8, 1.0 at 1050..1350 m cross 0.5 at
    # 1150 + (0.5-0.2)/(0.8-0.2)*100 = 1200 m; a second group present everywhere is bounded
    f = pd.DataFrame(
        {
            "g": ["a"] * 4 + ["b"] * 3,
            "band_centre_m": [1350.0, 1050.0, 1250.0, 1150.0, 1050.0, 1150.0, 1250.0],
            "frac": [1.0, 0.0, 0.8, 0.2, 1.0, 1.0, 0.6],
        }
    )
    t = band_transitions(f, ["g"], "frac").set_index("g")
    assert t.loc["a", "lower_m"] == pytest.approx(1200.0) and t.loc["a", "lower_bound"] == ""
    assert t.loc["a", "upper_bound"] == "at_or_above"
    assert t.loc["b", "lower_bound"] == "at_or_below" and t.loc["b", "lower_m"] == 1050.0
    # upper limit between 1250 (0.6) and nothing above -> at_or_above; add a band without
    f2 = pd.concat([f, pd.DataFrame({"g": ["b"], "band_centre_m": [1350.0], "frac": [0.0]})])
    t2 = band_transitions(f2, ["g"], "frac").set_index("g")
    assert t2.loc["b", "upper_m"] == pytest.approx(1250.0 + 0.1 / 0.6 * 100.0)


def test_summary_tables_zones_columns_and_snow_line(run):
    _, index, table, slope, area, diag, prof = run
    w = terrain_weights_km2(index, slope, area, len(table))
    # the cone is 26.6° everywhere: no avalanche terrain at 30-50°, so weight the avalanche
    # variant by cells above 1500 m instead to exercise both variants
    w["avalanche_km2"] = np.where(table["elevation_m"] > 1500, w["all_km2"], 0.0)
    tabs = summary_tables(diag, prof, table, w, map_time=MAP_TIME, local_timezone="Etc/GMT+7")
    z = tabs.zones.set_index("zone")
    for col in (
        "depth_hoar_fraction",
        "crust_count_mean",
        "new_snow_72h_cm",
        "new_snow_72h_kg_m2",
        "snow_depth_cm",
        "is_forecast",
        "valid_time",
        "depth_hoar_fraction_all_terrain",
    ):
        assert col in z.columns
    assert sorted(z.index) == ["Zone A", "Zone B"]
    # design: snow depth (elev-1300)/5 cm, so snow (>= 1 cm) from 1305 m; band 1300-1400 has
    # its cell-mean elevations above that, band 1200-1300 none -> crossing between the centres
    # 1250 and 1350 m at the fraction 0.5
    line = tabs.snow_line
    assert (line["snow_line_m"] > 1250).all() and (line["snow_line_m"] <= 1350).all()
    assert "snow_line_N_m" in z.columns
    # the daily series has one row per zone, terrain and observation day (14:00 UTC days)
    days = tabs.daily["valid_time"].unique()
    assert len(days) == 15 and all(pd.Timestamp(d).hour == 14 for d in days)
    assert (tabs.band_aspect["band"].str.match(r"^\d+-\d+$")).all()
    # all-terrain DH fraction: area share of cells >= 1800 m (design), computed independently
    cells_dh = table["elevation_m"] >= 1800
    for zname, grp in table.groupby("zone"):
        share = (w.loc[grp.index, "all_km2"] * cells_dh[grp.index]).sum() / w.loc[
            grp.index, "all_km2"
        ].sum()
        assert z.loc[zname, "depth_hoar_fraction_all_terrain"] == pytest.approx(share)


def test_layers_of_concern_named_by_local_date_and_loaded(run):
    _, _, table, _, _, diag, prof = run
    w = np.asarray(table["area_km2"])
    loc = layers_of_concern(diag, prof, table, w, time=MAP_TIME, local_timezone="Etc/GMT+7")
    names = set(loc["layer_name"])
    # SH buried 2026-01-13T03Z = 2026-01-12 20:00 at UTC-7: named by the local date
    assert "SH buried 2026-01-12" in names
    # no storm id on the DH's snow: named by its formation, 2025-12-01T06Z = 2025-11-30 23:00 local
    assert "DH in snow of 2025-11-30" in names
    assert "rain crust 2026-01-20" in names
    sh = loc[(loc["layer_id"] == "SH-2026-01-12") & (loc["aspect_sector"] == "all")]
    np.testing.assert_allclose(sh["presence_frac"], 1.0)
    # load since burial: 1 kg m-2 per hour from 2026-01-13T03Z to 2026-01-22T12Z = 225 h
    np.testing.assert_allclose(sh["load_since_burial_kg_m2"], 225.0)
    np.testing.assert_allclose(sh["load_24h_kg_m2"], 24.0)
    np.testing.assert_allclose(sh["load_72h_kg_m2"], 72.0)
    rc = loc[(loc["layer_id"] == "rain-2026-01-20") & (loc["aspect_sector"] == "all")].set_index(
        "zone"
    )
    in_band = (table["elevation_m"] >= 1400) & (table["elevation_m"] < 2000)
    for zname, grp in table.groupby("zone"):
        share = (grp["area_km2"] * in_band[grp.index]).sum() / grp["area_km2"].sum()
        assert rc.loc[zname, "presence_frac"] == pytest.approx(share)
    text = layer_summary_text(loc)
    assert text.loc["Zone A"].startswith("SH buried 2026-01-12 (100 %, 32 cm)")
    # before the burial there is no buried SH
    early = layers_of_concern(
        diag, prof, table, w, time="2026-01-12T12:00", local_timezone="Etc/GMT+7"
    )
    assert not early["layer_name"].str.startswith("SH").any()


def test_missing_time_and_mismatched_cells_are_clear_errors(run):
    _, _, table, _, _, diag, prof = run
    with pytest.raises(InputError, match="no diagnostics at 2030"):
        cell_values(diag, prof, table, ["2030-01-01T00:00"])
    with pytest.raises(GridMismatchError, match="cell_id"):
        cell_values(diag, prof, table.iloc[:-1], [MAP_TIME])


def test_block_sizes_do_not_change_the_summaries(run, monkeypatch):
    """The summaries read cells.nc a block of cells and of days at a time; blocks of 3 cells
    and 4 days (several blocks on this run) give the same tables as one block."""
    import regionmap.products.summaries as summaries

    _, index, table, slope, area, diag, prof = run
    w = terrain_weights_km2(index, slope, area, len(table))
    kw = dict(local_timezone="Etc/GMT+7")
    one = summary_tables(diag, prof, table, w, map_time=MAP_TIME, **kw)
    loc_one = layers_of_concern(
        diag, prof, table, np.asarray(table["area_km2"]), time=MAP_TIME, **kw
    )
    monkeypatch.setattr(summaries, "_CELL_BLOCK", 3)
    monkeypatch.setattr(summaries, "_TIME_BLOCK", 4)
    assert len(table) > 3 * summaries._CELL_BLOCK
    many = summary_tables(diag, prof, table, w, map_time=MAP_TIME, **kw)
    loc_many = layers_of_concern(
        diag, prof, table, np.asarray(table["area_km2"]), time=MAP_TIME, **kw
    )
    pd.testing.assert_frame_equal(one.daily, many.daily)
    pd.testing.assert_frame_equal(one.zones, many.zones)
    pd.testing.assert_frame_equal(one.band_aspect, many.band_aspect)
    pd.testing.assert_frame_equal(loc_one, loc_many)
    # the hand value of the design holds with blocks too: 1 kg m-2 per hour over the 225 h
    # from the burial (2026-01-13T03Z) to the map time
    sh = loc_many[(loc_many["layer_id"] == "SH-2026-01-12") & (loc_many["aspect_sector"] == "all")]
    np.testing.assert_allclose(sh["load_since_burial_kg_m2"], 225.0)


def test_time_blocks_end_where_the_file_time_chunks_do(monkeypatch):
    """Property of the reading strategy (no outside oracle needed): every block of summary
    times lies inside one time chunk of cells.nc, so each compressed chunk is read once; it
    holds at most _TIME_BLOCK times; the blocks cover all times in order, and are the fewest
    that satisfy both."""
    import xarray as xr

    import regionmap.products.summaries as summaries

    diag = xr.Dataset({"snow_depth_cm": (("cell", "time"), np.zeros((2, 100), np.float32))})
    diag["snow_depth_cm"].encoding["chunksizes"] = (2, 24)
    pos = np.arange(5, 100, 7)
    monkeypatch.setattr(summaries, "_TIME_BLOCK", 3)
    blocks = summaries._time_blocks(diag, pos)
    np.testing.assert_array_equal(np.concatenate([pos[b] for b in blocks]), pos)
    assert all(len(pos[b]) <= 3 and len(set(pos[b] // 24)) == 1 for b in blocks)
    per_chunk = np.unique(pos // 24, return_counts=True)[1]
    assert len(blocks) == sum(-(-int(k) // 3) for k in per_chunk)
    # a dataset without chunk information (in memory) is cut by _TIME_BLOCK alone
    plain = xr.Dataset({"snow_depth_cm": (("cell", "time"), np.zeros((2, 100), np.float32))})
    assert [len(pos[b]) for b in summaries._time_blocks(plain, pos)] == [3, 3, 3, 3, 2]

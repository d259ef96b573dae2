"""The rain-crust line on the synthetic cone (tests/test_summaries_synth.py): 100 m bands, a
rain crust designed on cells with mean elevation in [1400, 2000) m.

Rain shares given to the limits are designed linear in elevation across the transition
(``_share``), so the 50 % crossing of a piecewise-linear fit lies exactly at the designed
transition; the analytic case with a transition that moves during the event is in
``test_rain_crust_line_of_a_rising_transition_analytic``."""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import rasterio.features
import shapely
import xarray as xr
from scipy.ndimage import map_coordinates
from test_summaries_synth import CRS, RAIN_EVENT_ID, RAIN_FORMED, TRANSFORM, synthetic_run

from regionmap.errors import GridMismatchError
from regionmap.products.rain_crust import (
    RainEvent,
    event_rain_share,
    forcing_rain_share,
    rain_crust_limits,
    rain_crust_lines,
    rain_crust_presence,
    rain_crust_sentence,
    rain_event_windows,
    rain_events,
    transition_elevation_isotonic,
    zone_rain_crust_columns,
)


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    return synthetic_run(tmp_path_factory.mktemp("rc"))


def _regions(index, table):
    """Cell polygons from the index raster (rasterio.features.shapes), with zone and aspect."""
    shapes = rasterio.features.shapes(index, mask=index >= 0, transform=TRANSFORM)
    rec = [(int(v), shapely.geometry.shape(g)) for g, v in shapes]
    g = gpd.GeoDataFrame({"cell_id": [r[0] for r in rec]}, geometry=[r[1] for r in rec], crs=CRS)
    g = g.dissolve(by="cell_id").join(table[["zone", "aspect_sector"]])
    return g.reset_index()


def _presence_between(table, lo, hi):
    e = table["elevation_m"].to_numpy()
    return (e >= lo) & (e < hi)


def _share(table, transition_m):
    """Rain share falling linearly from 1 to 0 over transition ± 100 m (0.5 at the
    transition); per cell, or (member, cell) for several transitions."""
    e = table["elevation_m"].to_numpy()
    t = np.asarray(transition_m, dtype=np.float64)
    return np.clip(0.5 + (t[..., None] - e) / 200.0, 0.0, 1.0)


def test_events_and_presence_from_the_profiles(run):
    _, _, table, _, _, _, prof = run
    ev = rain_events(prof)
    assert list(ev["event_id"]) == [RAIN_EVENT_ID]
    assert ev["event_time"].iloc[0] == np.datetime64(RAIN_FORMED)
    p = rain_crust_presence(prof, event_id=RAIN_EVENT_ID)
    np.testing.assert_array_equal(p, _presence_between(table, 1400, 2000))
    q = rain_crust_presence(prof, formed_between=("2026-01-20T00:00", "2026-01-21T00:00"))
    np.testing.assert_array_equal(p, q)
    # the snapshot before the event has no crust
    assert not rain_crust_presence(prof, event_id=RAIN_EVENT_ID, day="2026-01-19T12:00").any()


def test_limits_interpolate_between_100m_band_centres_with_member_range(run):
    _, _, table, _, _, _, prof = run
    w = table["area_km2"].to_numpy()
    control = rain_crust_presence(prof, event_id=RAIN_EVENT_ID)
    # members as the run would give them: crust top 100 m lower / higher, bottom likewise
    members = np.stack([_presence_between(table, 1300, 1900), _presence_between(table, 1500, 2100)])
    event = RainEvent(
        RAIN_EVENT_ID,
        np.datetime64(RAIN_FORMED),
        control,
        _share(table, 2000.0),
        members,
        _share(table, [1900.0, 2100.0]),
    )
    lim = rain_crust_limits(table, w, event)
    # the rain share is 0.5 at 2000 m by design (linear across it, so the linear fit between
    # the cells that bracket it crosses there exactly); the lower limit, from the crust's
    # presence: the 1350 m band centre has none, the 1450 m one all -> halfway, 1400 m
    np.testing.assert_allclose(lim["upper_m"], 2000.0)
    # the words, with the range (the issue's own example form)
    assert set(rain_crust_sentence(lim)) == {
        "rain crust likely between 1400 and 2000 m (upper limit 1900–2100 m) on all aspects"
    }
    np.testing.assert_allclose(lim["lower_m"], 1400.0)
    np.testing.assert_allclose(lim["upper_low_m"], 1900.0)
    np.testing.assert_allclose(lim["upper_high_m"], 2100.0)
    assert (lim["upper_low_m"] <= lim["upper_m"]).all() and (
        lim["upper_m"] <= lim["upper_high_m"]
    ).all()
    assert set(lim["upper_bound"]) == {""} and (lim["n_members"] == 2).all()
    with pytest.raises(GridMismatchError, match="member presence"):
        rain_crust_limits(
            table,
            w,
            RainEvent(
                RAIN_EVENT_ID,
                np.datetime64(RAIN_FORMED),
                control,
                _share(table, 2000.0),
                members[:, :5],
            ),
        )


def test_sentence_aggregates_agreeing_aspects(run):
    _, _, table, _, _, _, prof = run
    w = table["area_km2"].to_numpy()
    e = table["elevation_m"].to_numpy()
    north = (table["aspect_sector"] == "N").to_numpy()
    # crust from the lowest band up to 2000 m on north aspects, up to 2200 m elsewhere
    top = np.where(north, 2000.0, 2200.0)
    control = e < top
    share = np.clip(0.5 + (top - e) / 200.0, 0.0, 1.0)
    lim = rain_crust_limits(
        table, w, RainEvent(RAIN_EVENT_ID, np.datetime64(RAIN_FORMED), control, share)
    )
    text = rain_crust_sentence(lim)
    # without members there is no range to state
    assert text.loc[("Zone B", RAIN_EVENT_ID)] == (
        "rain crust likely below 2000 m on north aspects; "
        "rain crust likely below 2200 m on east and south aspects"
    )
    assert text.loc[("Zone A", RAIN_EVENT_ID)].endswith("on south and west aspects")
    same_event = RainEvent(
        RAIN_EVENT_ID, np.datetime64(RAIN_FORMED), e < 2000.0, _share(table, 2000.0)
    )
    same = rain_crust_limits(table, w, same_event)
    assert (
        rain_crust_sentence(same).loc[("Zone A", RAIN_EVENT_ID)]
        == "rain crust likely below 2000 m on all aspects"
    )
    zl = rain_crust_limits(table, w, same_event, by=("zone",))
    cols = zone_rain_crust_columns(zl, rain_crust_sentence(same))
    assert cols.loc["Zone A", "rain_crust_line_m"] == pytest.approx(2000.0)
    assert cols.loc["Zone A", "rain_crust_text"].startswith("rain crust likely below 2000 m")


def test_contour_lines_lie_on_the_dem_at_their_elevation_inside_their_zone(run):
    dem, index, table, _, _, _, prof = run
    w = table["area_km2"].to_numpy()
    lim = rain_crust_limits(
        table,
        w,
        RainEvent(
            RAIN_EVENT_ID,
            np.datetime64(RAIN_FORMED),
            rain_crust_presence(prof, event_id=RAIN_EVENT_ID),
            _share(table, 2000.0),
        ),
    )
    regions = _regions(index, table)
    lines = rain_crust_lines(lim, dem, TRANSFORM, CRS, regions)
    assert set(lines.geom_type) == {"MultiLineString"} and lines.crs == CRS
    assert {"elevation_m", "lower_m", "upper_m", "event_time", "zone", "aspect"} <= set(
        lines.columns
    )
    assert set(lines["limit"]) == {"upper", "lower"}
    zones = regions.dissolve(by="zone")
    for r in lines.itertuples():
        xy = shapely.get_coordinates(r.geometry)
        # the DEM at the vertices, bilinear (scipy.ndimage.map_coordinates, order=1), must
        # equal the line's elevation: the cone is linear along rays, so to a few metres
        col, row = ~TRANSFORM @ (xy[:, 0], xy[:, 1])
        z = map_coordinates(dem, [row - 0.5, col - 0.5], order=1)
        assert np.abs(z - r.elevation_m).max() < 10.0
        # inside the zone (shapely, with a small tolerance for the boundary)
        assert zones.loc[r.zone, "geometry"].buffer(1.0).contains(r.geometry)
    # the cone's 2000 m contour is a circle of radius 10 pixels = 1000 m: its pieces over
    # all zones and aspects add up to the circumference 2 pi 1000 m (the zone split runs
    # through the summit column, so each zone's share is only near one half)
    up = lines[lines["limit"] == "upper"]
    assert up.length.sum() == pytest.approx(2 * np.pi * 1000.0, rel=0.01)


def test_no_event_gives_an_empty_layer_that_still_writes(tmp_path):
    import affine
    import pyogrio

    from regionmap.io.writers import write_geopackage

    cols = [
        "event_id",
        "event_time",
        "zone",
        "aspect_sector",
        "upper_m",
        "upper_bound",
        "upper_low_m",
        "upper_high_m",
        "lower_m",
        "lower_bound",
        "lower_low_m",
        "lower_high_m",
        "n_members",
    ]
    lim = pd.DataFrame(columns=cols)
    regions = gpd.GeoDataFrame(
        {"zone": ["A"], "aspect_sector": ["N"]}, geometry=[shapely.box(0, 0, 1, 1)], crs=CRS
    )
    lines = rain_crust_lines(lim, np.zeros((3, 3)), affine.Affine.identity(), CRS, regions)
    assert len(lines) == 0 and lines.crs == CRS
    write_geopackage(tmp_path / "z.gpkg", {"rain_crust_line": lines})
    assert [n for n, _ in pyogrio.list_layers(tmp_path / "z.gpkg")] == ["rain_crust_line"]
    assert zone_rain_crust_columns(lim, pd.Series(dtype=object)).empty


def test_sentence_of_a_band_narrower_than_the_rounding(run):
    _, _, table, _, _, _, prof = run
    w = table["area_km2"].to_numpy()
    e = table["elevation_m"].to_numpy()
    lim = rain_crust_limits(
        table,
        w,
        RainEvent(
            RAIN_EVENT_ID,
            np.datetime64(RAIN_FORMED),
            (e > 1600.0) & (e < 2000.0),
            _share(table, 2000.0),
        ),
    )
    row = lim.iloc[[0]].copy()
    row["lower_m"], row["upper_m"], row["lower_bound"], row["upper_bound"] = 1990.0, 2010.0, "", ""
    # both limits round to 2000 m (50 m steps): one elevation, not "between 2000 and 2000 m"
    assert (
        rain_crust_sentence(row)
        .iloc[0]
        .startswith("rain crust likely in a narrow band near 2000 m")
    )


# ---------------------------------------------------------------- the line from the rain share
#: analytic event: 20 hours of 2 kg m-2 h-1 everywhere while the rain-snow transition rises
#: linearly from 1480 m at 25 m h-1 (its height in hour k, interval mid-point: 1480 + 25 (k + 0.5)).
#: Below it the hour's precipitation is rain, above it snow. A cell at height z gets rain in
#: the share (1980 - z) / 500 of the event (clipped to 0-1): 50 % at z* = 1480 + 25 * 20 / 2 =
#: 1730 m, between the cone's band centres (1650, 1750) and off every band edge.
EVENT_START = np.datetime64("2026-01-20T10:00", "s")
EVENT_HOURS = 20


def _event_cells(table, transition_at_hour):
    """cells.nc-like Dataset (cell, time) with the event's hourly rain and snowfall, a dry
    day on each side; ``transition_at_hour(k)`` [m] for hours k = 0 .. EVENT_HOURS - 1."""
    times = EVENT_START + np.arange(-24, EVENT_HOURS + 24).astype("timedelta64[h]") + 3600
    k = np.arange(times.size) - 24
    inside = (k >= 0) & (k < EVENT_HOURS)
    level = np.where(inside, transition_at_hour(np.clip(k, 0, EVENT_HOURS - 1)), -np.inf)
    z = table["elevation_m"].to_numpy()[:, None]
    precip = np.where(inside, 2.0, 0.0)[None, :] * np.ones_like(z)
    rain = np.where(z < level[None, :], precip, 0.0)
    return xr.Dataset(
        {
            "rain_kg_m2": (("cell", "time"), rain),
            "snowfall_kg_m2": (("cell", "time"), precip - rain),
        },
        coords={"time": times.astype("datetime64[ns]")},
    )


def _window():
    return EVENT_START + np.timedelta64(3600, "s"), EVENT_START + np.timedelta64(
        EVENT_HOURS * 3600, "s"
    )


def test_rain_crust_line_of_a_rising_transition_analytic(run):
    """Outside reference: the analytic 50 % height of the rising transition (module constants),
    not the model's phase function. The line resolves it to within the 25 m the transition
    moves in one hour (the shares are whole hours), far finer than the 100 m band step."""
    _, _, table, _, _, _, _ = run
    diag = _event_cells(table, lambda k: 1480.0 + 25.0 * (k + 0.5))
    share = event_rain_share(diag, *_window())
    z = table["elevation_m"].to_numpy()
    # each cell's share is the analytic one, rounded to whole hours of the 20
    expected = np.clip(np.ceil((1980.0 - z) / 25.0 - 0.5) / EVENT_HOURS, 0.0, 1.0)
    np.testing.assert_allclose(share, expected)
    event = RainEvent(
        RAIN_EVENT_ID, np.datetime64(RAIN_FORMED), _presence_between(table, 1400, 1730), share
    )
    w = table["area_km2"].to_numpy()
    lim = rain_crust_limits(table, w, event)
    assert set(lim["upper_bound"]) == {""}
    np.testing.assert_array_less(np.abs(lim["upper_m"] - 1730.0), 12.5 + 1.0)
    zone = rain_crust_limits(table, w, event, by=("zone",))
    np.testing.assert_array_less(np.abs(zone["upper_m"] - 1730.0), 12.5 + 1.0)


def test_no_rain_gives_no_line_and_all_rain_is_not_extrapolated(run, tmp_path):
    _, _, table, _, _, _, _ = run
    z = table["elevation_m"].to_numpy()
    w = table["area_km2"].to_numpy()
    # negative control (a): snow at every height (transition below every cell): no rain, so
    # no transition and no crust event at all
    snow = event_rain_share(_event_cells(table, lambda k: 0.0 * k), *_window())
    np.testing.assert_allclose(snow, 0.0)
    assert transition_elevation_isotonic(z, snow, w) == (
        pytest.approx(np.nan, nan_ok=True),
        "absent",
    )
    dry = synthetic_run(tmp_path / "dry", crust_lo_m=0.0, crust_hi_m=0.0)
    assert rain_events(dry[6]).empty
    # negative control (b): rain at every height (transition above the summit): the line is
    # above the highest cell, stated so, never a made-up elevation
    rain = event_rain_share(_event_cells(table, lambda k: 0.0 * k + 9000.0), *_window())
    np.testing.assert_allclose(rain, 1.0)
    everywhere = RainEvent(RAIN_EVENT_ID, np.datetime64(RAIN_FORMED), z >= 1400.0, rain)
    lim = rain_crust_limits(table, w, everywhere)
    assert set(lim["upper_bound"]) == {"at_or_above"}
    top = table.groupby(["zone", "aspect_sector"])["elevation_m"].max()
    np.testing.assert_allclose(
        lim.set_index(["zone", "aspect_sector"])["upper_m"],
        top[lim.set_index(["zone", "aspect_sector"]).index],
    )
    assert set(rain_crust_sentence(lim)) == {
        "rain crust likely at all elevations above 1400 m on all aspects"
    }
    zl = rain_crust_limits(table, w, everywhere, by=("zone",))
    assert zone_rain_crust_columns(zl, rain_crust_sentence(lim))["rain_crust_line_m"].isna().all()


def test_member_shares_and_windows(tmp_path):
    # the forcing's share as the column counts it: rain = precipitation x (1 - snow fraction)
    p = np.array([[1.0, 3.0, 0.0], [0.0, 0.0, 0.0]])
    sf = np.array([[0.0, 1.0, 0.5], [1.0, 1.0, 1.0]])
    np.testing.assert_allclose(forcing_rain_share(p, sf), [0.25, np.nan])
    log = tmp_path / "events.csv"
    pd.DataFrame(
        {
            "kind": ["rain-on-snow", "rain-on-snow", "freezing-rain"],
            "event_id": [7, 7, 9],
            "first_time": ["2026-01-17T02:00:00+00:00", "2026-01-17T05:00:00+01:00", "x"],
            "last_time": ["2026-01-18T21:00:00+00:00", "2026-01-19T21:00:00+00:00", "x"],
        }
    ).to_csv(log, index=False)
    assert rain_event_windows(log) == {
        7: (np.datetime64("2026-01-17T02:00"), np.datetime64("2026-01-19T21:00"))
    }
    assert rain_event_windows(tmp_path / "none.csv") == {}

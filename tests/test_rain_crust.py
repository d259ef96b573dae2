"""The rain-crust line on the synthetic cone (tests/test_summaries_synth.py): 100 m bands, a
rain crust designed on cells with mean elevation in [1400, 2000) m."""

from __future__ import annotations

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import rasterio.features
import shapely
from scipy.ndimage import map_coordinates
from test_summaries_synth import CRS, RAIN_EVENT_ID, RAIN_FORMED, TRANSFORM, synthetic_run

from regionmap.errors import GridMismatchError
from regionmap.products.rain_crust import (
    RainEvent,
    rain_crust_limits,
    rain_crust_lines,
    rain_crust_presence,
    rain_crust_sentence,
    rain_events,
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
    lim = rain_crust_limits(
        table, w, RainEvent(RAIN_EVENT_ID, np.datetime64(RAIN_FORMED), control, members)
    )
    # hand calculation: the 1900-2000 m band (centre 1950) is wholly crusted (its cells' mean
    # elevations lie below 2000 m), the 2000-2100 m band (2050) not at all: the 0.5 crossing is
    # halfway, 2000 m; likewise the lower limit between 1350 and 1450 m is 1400 m
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
            table, w, RainEvent(RAIN_EVENT_ID, np.datetime64(RAIN_FORMED), control, members[:, :5])
        )


def test_sentence_aggregates_agreeing_aspects(run):
    _, _, table, _, _, _, prof = run
    w = table["area_km2"].to_numpy()
    e = table["elevation_m"].to_numpy()
    north = (table["aspect_sector"] == "N").to_numpy()
    # crust from the lowest band up to 2000 m on north aspects, up to 2200 m elsewhere
    control = e < np.where(north, 2000.0, 2200.0)
    lim = rain_crust_limits(
        table, w, RainEvent(RAIN_EVENT_ID, np.datetime64(RAIN_FORMED), control, None)
    )
    text = rain_crust_sentence(lim)
    # without members there is no range to state
    assert text.loc[("Zone B", RAIN_EVENT_ID)] == (
        "rain crust likely below 2000 m on north aspects; "
        "rain crust likely below 2200 m on east and south aspects"
    )
    assert text.loc[("Zone A", RAIN_EVENT_ID)].endswith("on south and west aspects")
    same = rain_crust_limits(
        table, w, RainEvent(RAIN_EVENT_ID, np.datetime64(RAIN_FORMED), e < 2000.0, None)
    )
    assert (
        rain_crust_sentence(same).loc[("Zone A", RAIN_EVENT_ID)]
        == "rain crust likely below 2000 m on all aspects"
    )
    zl = rain_crust_limits(
        table,
        w,
        RainEvent(RAIN_EVENT_ID, np.datetime64(RAIN_FORMED), e < 2000.0, None),
        by=("zone",),
    )
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
        RainEvent(RAIN_EVENT_ID, np.datetime64(RAIN_FORMED), (e > 1600.0) & (e < 2000.0), None),
    )
    row = lim.iloc[[0]].copy()
    row["lower_m"], row["upper_m"], row["lower_bound"], row["upper_bound"] = 1990.0, 2010.0, "", ""
    # both limits round to 2000 m (50 m steps): one elevation, not "between 2000 and 2000 m"
    assert (
        rain_crust_sentence(row)
        .iloc[0]
        .startswith("rain crust likely in a narrow band near 2000 m")
    )

"""Figures on the synthetic output folder: the matplotlib objects are inspected (axes, labels,
units, legend entries, patch geometry), not pixels."""

from __future__ import annotations

from itertools import pairwise

import numpy as np
import pandas as pd
import pytest
from matplotlib.colors import rgb_to_hsv, to_hex, to_rgb
from test_plots_synthrun import outputs  # noqa: F401  (module fixture)

from regionmap.errors import InputError
from regionmap.plots.maps import plot_metric_map
from regionmap.plots.overview import HOLE_RINGS, overview_table, plot_overview
from regionmap.plots.profile import plot_profile, profile_command, select_cell
from regionmap.plots.style import (
    GRAIN_MAIN_COLOURS,
    METRIC_RAMP,
    OKABE_ITO,
    grain_colour,
    new_figure,
    relative_luminance,
    render_png,
    zone_slug,
)
from regionmap.plots.tracker import (
    MAX_TRACKER_LINES,
    layer_tracks,
    plot_elevation_chart,
    plot_layer_tracker,
)


# ----------------------------------------------------------------- palettes
def test_grain_palette_is_the_okabe_ito_set_okabe_ito_2008():
    # Okabe & Ito (2008) / Wong (2011) Nature Methods 8:441 publish these eight sRGB values.
    published = {
        "#000000",
        "#E69F00",
        "#56B4E9",
        "#009E73",
        "#F0E442",
        "#0072B2",
        "#D55E00",
        "#CC79A7",
    }
    assert set(OKABE_ITO.values()) == published
    assert set(GRAIN_MAIN_COLOURS.values()) == published  # one distinct colour per main class
    # the classification's eight main classes (Fierz et al. 2009) all have a colour
    assert set(GRAIN_MAIN_COLOURS) == {"PP", "DF", "RG", "FC", "DH", "SH", "MF", "IF"}
    assert grain_colour("FCxr") == grain_colour("FC") and grain_colour("MFcr") == grain_colour("MF")


def test_metric_ramp_lightness_falls_monotonically_crameri2020():
    # Crameri et al. (2020), Nat. Commun. 11:5444: a perceptually ordered sequential map has
    # monotonic lightness, which keeps it readable under colour-vision deficiency.
    lum = [relative_luminance(c) for c in METRIC_RAMP]
    assert all(a > b for a, b in pairwise(lum))


def test_metric_ramp_holds_no_danger_scale_hues_common_practice():
    # Common practice (European avalanche danger scale colours, recalled [mem]): green,
    # yellow, orange, red. Our ramp stays in blue-violet hues (200-290 deg) or near-grey.
    for c in METRIC_RAMP:
        h, s, _ = rgb_to_hsv(np.array(to_rgb(c)))
        assert s < 0.08 or 200.0 <= h * 360.0 <= 290.0, to_hex(c)


# ----------------------------------------------------------------- overview
def test_overview_puts_highest_band_in_the_centre_and_north_on_top(outputs):
    fig = plot_overview(outputs, "Zone A", "snow_depth_cm")
    ax = fig.axes[0]
    assert ax.name == "polar"
    # matplotlib polar: theta offset pi/2 puts theta=0 at the top; direction -1 = clockwise
    assert ax.get_theta_offset() == pytest.approx(np.pi / 2)
    assert ax.get_theta_direction() == -1
    # sector-rings are polygons in (theta, r) data coordinates, labelled "<band>|<sector>"
    polys = {}
    for coll in ax.collections:
        if coll.get_gid() in ("sector-rings", "no-terrain"):
            polys.update(
                {
                    url: path.vertices
                    for url, path in zip(coll.get_urls(), coll.get_paths(), strict=True)
                }
            )
    bands = (
        outputs.table[outputs.table["zone"] == "Zone A"]
        .sort_values("band_lower_m")["band"]
        .unique()
    )
    inner = {b: polys[f"{b}|N"][:, 1].min() for b in bands}
    assert inner[bands[-1]] == pytest.approx(HOLE_RINGS)  # highest band innermost
    assert polys[f"{bands[-1]}|N"][:, 1].max() == pytest.approx(HOLE_RINGS + 1.0)
    assert all(inner[a] > inner[b] for a, b in pairwise(bands))  # radius falls as elevation rises
    north = polys[f"{bands[0]}|N"][:, 0]
    assert (north.min() + north.max()) / 2 == pytest.approx(
        0.0
    )  # N sector centred on theta = 0 (the top)
    assert north.max() - north.min() == pytest.approx(np.pi / 2)  # 4 sectors of 90 deg
    east = polys[f"{bands[0]}|E"][:, 0]
    assert (east.min() + east.max()) / 2 == pytest.approx(np.pi / 2)  # E a quarter turn clockwise
    assert [t.get_text() for t in ax.get_xticklabels()] == ["N", "E", "S", "W"]
    title = fig._suptitle.get_text()
    # local time (UTC-7) with UTC beside it
    assert (
        "Zone A" in title
        and "analysis" in title
        and "Thu 22 Jan 2026 05:00 UTC-07 (12:00 UTC)" in title
    )
    cbar_ax = [a for a in fig.axes if a.get_xlabel().endswith("[cm]")]
    assert cbar_ax, "colour bar labelled with the metric's units"


def test_overview_values_match_the_table_and_csv(outputs, tmp_path):
    wide = overview_table(outputs, "Zone A", "depth_hoar_fraction")
    # synthetic design: depth hoar at and above 1800 m (test_summaries_synth.layer_fields)
    high = wide.loc[wide["band_lower_m"] >= 1800, ["N", "S", "W"]].to_numpy()
    low = wide.loc[wide["band_upper_m"] <= 1700, ["N", "S", "W"]].to_numpy()
    assert np.isfinite(high).sum() > 10 and (high[np.isfinite(high)] == 100.0).all()
    assert np.isfinite(low).sum() > 10 and (low[np.isfinite(low)] == 0.0).all()
    assert wide["E"].isna().all()  # Zone A is the western half of the cone
    assert list(wide["band_lower_m"]) == sorted(wide["band_lower_m"], reverse=True)
    fig = plot_overview(outputs, "Zone A", "depth_hoar_fraction")
    texts = {t.get_text() for t in fig.axes[0].texts}
    assert {"0", "100"} <= texts


def test_overview_rejects_unknown_zone_and_metric(outputs):
    with pytest.raises(InputError, match="unknown zone 'Nowhere'"):
        plot_overview(outputs, "Nowhere", "snow_depth_cm")
    with pytest.raises(InputError, match="unknown metric 'snow_colour'"):
        plot_overview(outputs, "Zone A", "snow_colour")


# ----------------------------------------------------------------- maps
def test_map_has_legend_colourbar_units_north_arrow_and_scale_bar(outputs):
    fig = plot_metric_map(outputs, "snow_depth_cm")
    ax = fig.axes[0]
    gids = {im.get_gid() for im in ax.images}
    assert {"hillshade", "metric"} <= gids
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert labels == ["zone boundary"]  # rain-crust lines only on request (their own map)
    assert fig.axes[1].get_ylabel() == "snow depth (vertical) [cm]"
    assert ax.get_xlabel().startswith("x [km]") and ax.get_ylabel() == "y [km]"
    assert any(t.get_gid() == "north-arrow" and t.get_text() == "N" for t in ax.texts)
    bar = [p for p in ax.patches if p.get_gid() == "scale-bar"][0]
    label = [t for t in ax.texts if t.get_gid() == "scale-bar-label"][0].get_text()
    # the DEM is 61 px x 100 m = 6.1 km wide: a 1-km bar (1/5 of the width, rounded down to 1-2-5)
    assert label == "1 km" and bar.get_width() == pytest.approx(1000.0)
    zone_names = {t.get_text() for t in ax.texts}
    assert {"Zone A", "Zone B"} <= zone_names
    assert not [t for t in ax.texts if t.get_gid() == "rain-crust-label"]


def _label_elevations(ax) -> list[float]:
    import re

    texts = [t.get_text() for t in ax.texts if t.get_gid() == "rain-crust-label"]
    assert texts and all(t.endswith(" m") for t in texts)
    return sorted(float(v) for t in texts for v in re.findall(r"\d+", t))


@pytest.mark.parametrize("which", ["metric map", "rain-crust map"])
def test_rain_crust_lines_labelled_once_per_zone_and_limit(outputs, which):
    from regionmap.plots.maps import plot_rain_crust_map, rain_crust_events

    if which == "metric map":
        fig = plot_metric_map(outputs, "crust_count", show_rain_crust=True)
    else:
        events = rain_crust_events(outputs)
        assert len(events) == 1  # one designed rain event (test_summaries_synth.layer_fields)
        fig = plot_rain_crust_map(outputs, events[0][0])
        # the event by its local start (synthetic rain began 2026-01-20T12Z, 05:00 at UTC-7)
        assert "rain of 20 Jan 2026" in fig.axes[0].get_title()
    ax = fig.axes[0]
    labels = [t.get_text() for t in ax.get_legend().get_texts()]
    assert "zone boundary" in labels
    assert any(lbl.startswith("rain-crust line, upper limit") for lbl in labels)
    # rain crust designed between 1400 and 2000 m: both limits labelled near their elevations
    elevations = _label_elevations(ax)
    assert min(elevations) == pytest.approx(1400, abs=100) and max(elevations) == pytest.approx(
        2000, abs=100
    )
    # at most one label per zone and limit (2 zones x 2 limits)
    assert len([t for t in ax.texts if t.get_gid() == "rain-crust-label"]) <= 4


def test_rain_crust_map_of_an_unknown_event_names_the_known_ones(outputs):
    from regionmap.plots.maps import plot_rain_crust_map

    with pytest.raises(InputError, match="no rain-crust line for event 12345; events with lines"):
        plot_rain_crust_map(outputs, 12345)


def test_map_of_a_missing_raster_names_the_available_ones(outputs):
    with pytest.raises(InputError, match="this run has maps for"):
        plot_metric_map(outputs, "avalanche_danger")


# ----------------------------------------------------------------- profile
def test_profile_panels_labels_and_marks(outputs):
    cid = select_cell(outputs, zone="Zone A", band="2200-2300", aspect="N")
    fig = plot_profile(outputs, cid)
    ax_h, ax_e, ax_t, ax_r, ax_w = fig.axes[:5]
    assert ax_h.get_ylabel() == "height above ground [cm]"
    # hand-hardness scale of Fierz et al. (2009): F, 4F, 1F, P, K, I at indices 1..6
    assert [t.get_text() for t in ax_h.get_xticklabels()] == ["F", "4F", "1F", "P", "K", "I"]
    assert list(ax_h.get_xticks()) == [1, 2, 3, 4, 5, 6]
    assert [a.get_xlabel() for a in (ax_e, ax_t, ax_r, ax_w)] == [
        "grain size [mm]",
        "temperature [°C]",
        "density [kg m-3]",
        "liquid water [% vol]",
    ]
    bars = sorted(
        (p for p in ax_h.patches if (p.get_gid() or "").startswith("layer-")),
        key=lambda p: p.get_y(),
    )
    # designed layers at >= 1800 m: DH 40 cm, SH 1 cm, DF 30 cm, RG 2 cm (heights in cm)
    assert [round(p.get_height(), 6) for p in bars] == [40.0, 1.0, 30.0, 2.0]
    assert to_hex(bars[0].get_facecolor()) == GRAIN_MAIN_COLOURS["DH"].lower()
    assert {t.get_text() for t in ax_h.texts} >= {"DH", "DF"}
    legend = [t.get_text() for t in fig.legends[0].get_texts()]
    assert {"DH", "SH", "DF", "RG"} <= set(legend)
    # the SH (6 mm, F) under 1F storm snow of 0.5 mm, 32 cm deep: 6 of the 6 criteria of
    # Schweizer & Jamieson (2007); it and the DH joined to it are a weak layer of concern
    assert "weak layer of concern" in legend and "persistent grains" not in legend
    assert {line.get_gid() for line in ax_h.lines} >= {"pwl-0", "pwl-1"}
    assert any(t.startswith("worst interface: threshold count") for t in legend)
    assert any(line.get_gid() == "worst-interface" for line in ax_h.lines)


def test_profile_marks_the_rain_crust(outputs):
    fig = plot_profile(outputs, zone="Zone B", band="1500-1600", aspect="S")
    legend = [t.get_text() for t in fig.legends[0].get_texts()]
    assert "crust (rain)" in legend  # designed rain crust 1400-2000 m


@pytest.mark.parametrize(
    "kw, message",
    [
        (dict(zone="Nowhere", band="1500-1600", aspect="N"), "unknown zone 'Nowhere'"),
        (dict(zone="Zone A", band="900-1000", aspect="N"), "has no band '900-1000'"),
        (dict(zone="Zone A", band="1500-1600", aspect="E"), "has no aspect 'E'"),
        (dict(zone="Zone A", band="1500-1600", aspect="N", slope_class=3), "no slope class 3"),
        (dict(cell=99999), "cell 99999 is not in this run"),
        (dict(cell=1, time="2025-06-01"), "outside the run"),
        (dict(zone="Zone A"), "give --cell ID, or all of"),
    ],
)
def test_profile_command_errors_name_what_did_not_match(outputs, kw, message):
    with pytest.raises(InputError, match=message):
        profile_command(outputs, **kw)


def test_profile_command_writes_a_png(outputs):
    drawn = profile_command(
        outputs, zone="Zone A", band="2200-2300", aspect="n", time="2026-01-15T06:00"
    )
    path = drawn.path
    assert (
        path.is_file() and path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    )  # PNG signature (ISO/IEC 15948)
    assert path.parent == outputs.out_dir / "figures"


def test_profile_command_names_the_file_after_the_snapshot_it_drew(outputs):
    """Profiles are kept once a day: a time between two snapshots draws the earlier one,
    and the file and the returned record name that snapshot, not the time asked for."""
    days = outputs.profile_days
    asked = days[3] + np.timedelta64(5, "h")
    assert asked < days[4]  # between two daily snapshots
    drawn = profile_command(outputs, cell=int(outputs.table.index[0]), time=str(asked))
    assert drawn.snapshot_utc == days[3] and drawn.asked_utc == asked
    assert drawn.path.name.endswith(pd.Timestamp(days[3]).strftime("_%Y%m%dT%H%M.png"))
    # on a snapshot, the snapshot itself
    exact = profile_command(outputs, cell=int(outputs.table.index[0]), time=str(days[2]))
    assert exact.snapshot_utc == exact.asked_utc == days[2]
    # before the first snapshot: refused, naming it
    if outputs.times[0] < days[0]:
        with pytest.raises(InputError, match="no daily snapshot at or before"):
            profile_command(outputs, cell=int(outputs.table.index[0]), time=str(outputs.times[0]))


# ----------------------------------------------------------------- tracker, elevation chart
def test_layer_tracker_depth_lines_per_band_and_new_snow_days(outputs):
    tracks = layer_tracks(outputs, "Zone A")
    assert {"SH-2026-01-12", "DH-2025-11-30", "rain-2026-01-20"} <= set(tracks["layer_id"])
    sh = tracks[tracks["layer_id"] == "SH-2026-01-12"]
    # designed: 30 cm of storm snow over the SH, 2 cm of crust/rounds on top after 2026-01-20
    assert sh.loc[sh["day"] < np.datetime64("2026-01-20T12:00"), "depth_cm"].round(6).eq(30.0).all()
    assert (
        sh.loc[sh["day"] >= np.datetime64("2026-01-20T12:00"), "depth_cm"].round(6).eq(32.0).all()
    )
    fig = plot_layer_tracker(outputs, "Zone A", "SH-2026-01-12", tracks=tracks)
    ax_d, ax_p = fig.axes[:2]
    assert ax_d.get_ylabel() == "depth below the surface [cm] (vertical)"
    assert ax_d.yaxis_inverted()
    assert ax_p.get_ylabel() == "present on [% of band area]"
    labels = [t.get_text() for t in ax_d.get_legend().get_texts()]
    # 100 m bands merged into at most MAX_TRACKER_LINES groups of whole bands, highest first
    band_lines = [lbl for lbl in labels if lbl.endswith(" m")]
    assert 1 < len(band_lines) <= MAX_TRACKER_LINES
    assert band_lines[0].endswith("-2500 m") and band_lines == sorted(band_lines, reverse=True)
    # a merged group's depth is still the designed 30 cm of storm snow over the SH
    early = [ln for ln in ax_d.lines if ln.get_label() in band_lines]
    for ln in early:
        x, y = np.asarray(ln.get_xdata()), np.asarray(ln.get_ydata(), float)
        assert np.allclose(y[x < np.datetime64("2026-01-20T12:00")], 30.0)
    # constant 1 kg m-2 h-1 snowfall in the synthetic cells.nc: 24 kg m-2 a day, every day marked
    assert any(lbl.startswith("new-snow day") for lbl in labels)
    per_band = plot_layer_tracker(outputs, "Zone A", "SH-2026-01-12", tracks=tracks, max_lines=None)
    labels = [t.get_text() for t in per_band.axes[0].get_legend().get_texts()]
    assert "2400-2500 m" in labels and "1300-1400 m" in labels


def test_layer_tracker_by_aspect_and_unknown_layer(outputs):
    fig = plot_layer_tracker(outputs, "Zone B", "DH-2025-11-30", by_aspect=True)
    labels = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    assert "2400-2500 m N" in labels and "2400-2500 m E" in labels
    with pytest.raises(InputError, match="never holds layer 'SH-1999-01-01'"):
        plot_layer_tracker(outputs, "Zone B", "SH-1999-01-01")


def test_elevation_chart_one_line_per_aspect(outputs):
    fig = plot_elevation_chart(outputs, "Zone B", "snow_depth_cm")
    ax = fig.axes[0]
    assert ax.get_xlabel() == "snow depth (vertical) [cm]"
    assert ax.get_ylabel() == "elevation [m] (band centre)"
    assert [t.get_text() for t in ax.get_legend().get_texts()] == ["N", "E", "S"]
    # synthetic design: depth = (elevation - 1300) / 5, so it rises with elevation on every aspect
    for line in ax.lines:
        x, y = np.asarray(line.get_xdata(), float), np.asarray(line.get_ydata(), float)
        assert np.all(np.diff(y) > 0) and np.all(np.diff(x) >= -1e-6)


def test_layer_tracks_of_chosen_layers_equal_the_full_tracks(outputs):
    # reading only the snapshot days from a day before the earliest layer date must not lose
    # any day of those layers (equivalence with the tracks of all days)
    ids = ["SH-2026-01-12", "rain-2026-01-20"]
    full = layer_tracks(outputs, "Zone A")
    full = (
        full[full["layer_id"].isin(ids)]
        .sort_values(["layer_id", "band", "day"])
        .reset_index(drop=True)
    )
    chosen = (
        layer_tracks(outputs, "Zone A", layer_ids=ids)
        .sort_values(["layer_id", "band", "day"])
        .reset_index(drop=True)
    )
    pd.testing.assert_frame_equal(chosen[full.columns], full)
    assert set(chosen["layer_id"]) == set(ids)


def test_zone_file_names_are_unique_per_zone():
    names = ["H West", "H-West", "h/west", "h west", "H West "]
    slugs = [zone_slug(n) for n in names]
    assert len(set(slugs)) == len(names)
    assert all(s.startswith("h-west-") for s in slugs)
    assert zone_slug("H West") == zone_slug("H West")  # stable from run to run


def test_dollar_signs_in_names_are_drawn_as_plain_text():
    # a mathtext parse of "$\\frac{$" would raise; drawn as plain text it renders
    fig = new_figure(3, 2)
    ax = fig.add_subplot()
    ax.set_title("Zone $\\frac{$ x")
    ax.set_xticks([0, 1], ["$a$", "$\\unknowncommand$"])
    png, _ = render_png(fig, dpi=50)
    assert png.startswith(b"\x89PNG")
    assert ax.title.get_parse_math() is False

"""Persistent weak layers of concern: one rule for the column's flag and every product.

Hand-made columns are judged by the six structural criteria of Schweizer & Jamieson (2007),
Cold Reg. Sci. Technol. 47, doi:10.1016/j.coldregions.2006.08.011 (thresholds as recalled
in :mod:`regionmap.snow.stability` [mem]: persistent grains, weak-layer grains >= 1.25 mm,
hardness <= 1.3, grain-size difference >= 0.75 mm, hardness difference >= 1.7, interface
18-94 cm deep; 5 of 6 critical), and by the column model's own minimum slab, thickness and
grain size (ours: 18 cm, 0.5 cm, 1 mm). Each expected flag is counted by hand in the comment
beside it. The demo check compares the products' rule with the column's ``pwl_present``.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from test_summaries_synth import synthetic_run

from regionmap.errors import InputError
from regionmap.products.concern import DEFAULT_CRITERIA, ConcernCriteria, weak_layers_of_concern
from regionmap.products.summaries import decode_snapshot, layers_of_concern
from regionmap.snow.codes import GRAIN_INDEX

ABSOLUTE = ConcernCriteria(
    relative=False,
    min_depth_m=DEFAULT_CRITERIA.min_depth_m,
    min_thickness_m=DEFAULT_CRITERIA.min_thickness_m,
    min_grain_mm=DEFAULT_CRITERIA.min_grain_mm,
)


def _column(weak="FC", weak_cm=2.0, weak_mm=2.0, weak_hardness=1.0, slab_cm=30.0):
    """Bottom first: 50 cm RG (0.5 mm, 1F), the weak layer, a slab of RG (0.5 mm, 1F)."""
    return (
        np.array([0.5, weak_cm / 100.0, slab_cm / 100.0]),
        np.array([0.5, weak_mm, 0.5]),
        np.array([3.0, weak_hardness, 3.0]),
        np.array([GRAIN_INDEX["RG"], GRAIN_INDEX[weak], GRAIN_INDEX["RG"]]),
    )


def _judge(columns, criteria=ABSOLUTE):
    th, e, h, g = (np.stack(a) for a in zip(*columns, strict=True))
    marks = weak_layers_of_concern(np.full(len(columns), 3), th, e, h, g, criteria)
    return marks[:, 1]


def test_weak_layer_of_concern_needs_all_criteria_schweizer_jamieson2007():
    flags = _judge(
        [
            # 2 cm FC of 2 mm, F, under 30 cm of 1F RG: persistent, 2 >= 1.25, 1 <= 1.3,
            # difference 1.5 mm and 2 steps, 30 cm deep: 6 of 6 -> of concern
            _column(),
            # negative control, slab: 10 cm deep is under the 18 cm slab (and outside the
            # 18-94 cm window: 5 of 6, critical, but no slab) -> not of concern
            _column(slab_cm=10.0),
            # negative control, thickness: 0.3 cm of FC is under the 0.5 cm minimum
            _column(weak_cm=0.3),
            # ... while buried surface hoar counts at any thickness (6 of 6)
            _column(weak="SH", weak_cm=0.3, weak_mm=4.0),
            # negative control, grains: 0.8 mm FC: < 1.25, difference 0.3 < 0.75 -> 4 of 6
            _column(weak_mm=0.8),
            # negative control, interface: 4F-1F (2.5) facets under 1F: hardness > 1.3 and
            # difference 0.5 < 1.7 -> 4 of 6
            _column(weak_hardness=2.5),
            # negative control, grain type: rounded grains are not persistent -> 5 of 6
            # critical interface, but no persistent layer
            _column(weak="RG"),
        ]
    )
    np.testing.assert_array_equal(flags, [True, False, False, True, False, False, False])


def test_relative_sum_marks_the_standout_layer_monti2014():
    # Monti, Schweizer & Fierz (2014), Cold Reg. Sci. Technol. 103 [mem]: each variable
    # rescaled between the column's minimum and maximum. Bottom first: DH 3 mm F, SH 6 mm F,
    # 30 cm DF 0.5 mm 1F, 2 cm crust 1 mm K. The SH|DF interface holds the column's maximum
    # of all six variables (persistent, 6 mm, F, 5.5 mm and 2 steps of difference, inside
    # the depth window): 6 of 6 -> the DH-SH run is of concern. With the slab only 10 cm
    # deep (negative control) the run lies under no slab -> not of concern.
    def col(slab_m):
        return (
            np.array([0.4, 0.01, slab_m, 0.02]),
            np.array([3.0, 6.0, 0.5, 1.0]),
            np.array([1.0, 1.0, 3.0, 5.0]),
            np.array([GRAIN_INDEX[c] for c in ("DH", "SH", "DF", "MFcr")]),
        )

    relative = ConcernCriteria(True, 0.18, 0.005, 1.0)
    th, e, h, g = (np.stack(a) for a in zip(col(0.3), col(0.08), strict=True))
    marks = weak_layers_of_concern(np.array([4, 4]), th, e, h, g, relative)
    np.testing.assert_array_equal(marks, [[True, True, False, False], [False] * 4])


def test_unused_slots_and_shape_errors():
    th, e, h, g = (np.stack(a) for a in zip(_column()))
    # only two active layers: the slab is missing, nothing is buried deep enough
    assert not weak_layers_of_concern(np.array([2]), th, e, h, g, ABSOLUTE).any()
    with pytest.raises(InputError, match="grain_size_mm has shape"):
        weak_layers_of_concern(np.array([3]), th, e[:, :2], h, g)
    with pytest.raises(InputError, match="layer_count has shape"):
        weak_layers_of_concern(np.array([3, 3]), th, e, h, g)


def test_layers_of_one_storm_merge_into_one_row(tmp_path):
    """One storm's window began 2026-01-13T01Z; it reached the cells above 1800 m eight
    hours later than the others, after local midnight (2026-01-13 04:00 at UTC-7). The
    surface hoar it buried is one layer named for the storm's start (2026-01-12 local)."""
    run = synthetic_run(tmp_path, late_storm_above_m=1800.0)
    table, diag, prof = run[2], run[5], run[6]
    loc = layers_of_concern(
        diag,
        prof,
        table,
        table["area_km2"].to_numpy(),
        time="2026-01-22T12:00",
        local_timezone="Etc/GMT+7",
    )
    sh = loc[(loc["kind"] == "SH") & (loc["aspect_sector"] == "all")]
    assert set(sh["layer_id"]) == {"SH-2026-01-12"}
    assert len(sh) == 2  # one row per zone
    np.testing.assert_allclose(sh["presence_frac"], 1.0)
    # DH and SH form one run of persistent layers; the DH is named by its own snow
    assert not loc["layer_id"].str.startswith("SH-2026-01-13").any()


def test_products_count_the_layers_the_column_flags(demo_run):
    """The column's ``pwl_present`` and the products' rule on the daily snapshots agree
    on the demo's cells: same definition, same layer fields (the snapshot and the hourly
    diagnostics of the same step)."""
    import xarray as xr

    _, _, out = demo_run
    with (
        xr.open_dataset(out / "profiles.nc") as prof,
        xr.open_dataset(out / "cells.nc") as cells,
    ):
        days = prof["day"].values
        times = cells["time"].values
        # snapshots at an output time of cells.nc, a week apart over the season
        pick = np.nonzero(np.isin(days, times))[0][::7]
        assert pick.size > 5
        snap = decode_snapshot(prof, pick)
        products = snap.of_concern(DEFAULT_CRITERIA).any(axis=2)  # (cell, day)
        column = cells["pwl_present"].sel(time=days[pick]).transpose("cell", "time").values == 1
    assert column.any()  # the season has weak layers of concern
    agree = (products == column).mean()
    assert agree == 1.0, pd.Series(
        {"disagree": int((products != column).sum()), "of": products.size}
    )

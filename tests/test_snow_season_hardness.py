"""Negative control (d): over a whole season, hand hardness by grain type stays within the
ranges seen in field profiles.

SOURCES (hardness index F 1 ... I 6, Fierz et al. 2009 [src]): McClung, D. and Schaerer, P.
(2006), The Avalanche Handbook, 3rd ed., Ch. 3 [mem]: new snow and buried surface hoar F-4F;
decomposing fragments, facets and depth hoar F-1F; rounding facets up to P; crusts P-I
(Jamieson 2006, Rev. Geophys. 44 [mem]). Ranges typed here, not imported from the code.

What this control can catch: the hardness module keeps each grain type's hardness inside its
field range whatever the layer's density, so a failure here means the ranges, the grain
classes or the crust rules drifted -- not that the modelled densities are right. The
densities the ranges hide are a separate question: on this season many faceted (FC, FCsf)
and buried surface-hoar layers are denser than the inverted density regressions allow for
their range, so their hardness sits at the range's upper end.
"""

from __future__ import annotations

import numpy as np
import pytest

from regionmap.snow.codes import GRAIN_INDEX
from regionmap.snow.column import run_columns
from regionmap.snow.state import SnowState
from regionmap.snow.synthetic import season_forcing

START = "2025-11-01T00:00"
FIELD_RANGES = {
    "PP": (1.0, 2.0),
    "SH": (1.0, 2.0),
    "DF": (1.0, 3.0),
    "FC": (1.0, 3.0),
    "FCsf": (1.0, 3.0),
    "FCxr": (1.0, 4.0),
    "DH": (1.0, 3.0),
    "MFcr": (4.0, 6.0),
    "IF": (6.0, 6.0),
}


@pytest.fixture(scope="module")
def season_snapshots():
    f = season_forcing(6, start=START, days=150, seed=23)
    _, _, snap = run_columns(SnowState.empty(6, time=START), f, diag_every_h=24)
    used = np.arange(snap["grain_code"].shape[2])[None, None, :] < snap["layer_count"][..., None]
    return snap, used


@pytest.mark.parametrize("code", sorted(FIELD_RANGES))
def test_season_hardness_within_field_ranges_mcclung_schaerer2006(season_snapshots, code):
    snap, used = season_snapshots
    lo, hi = FIELD_RANGES[code]  # McClung & Schaerer (2006) [mem]
    h = snap["hardness_index"][used & (snap["grain_code"] == GRAIN_INDEX[code])]
    if h.size == 0:
        pytest.skip(f"no {code} layer in this season")
    assert h.min() >= lo - 1e-6 and h.max() <= hi + 1e-6, (code, h.min(), h.max())


def test_season_holds_the_common_grain_types(season_snapshots):
    # the control only means something if the season builds these layers at all
    snap, used = season_snapshots
    seen = {c for c in FIELD_RANGES if np.any(used & (snap["grain_code"] == GRAIN_INDEX[c]))}
    assert {"PP", "DF", "FC", "MFcr"} <= seen, seen

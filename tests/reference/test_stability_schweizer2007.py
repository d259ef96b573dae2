"""Absolute structural threshold count, worked cases built by hand from the criteria.

SOURCES: McCammon, I. and Schweizer, J. (2002), Proc. ISSW 2002; Schweizer, J. and
Jamieson, J. B. (2007), Cold Reg. Sci. Technol. 47, 50-59, doi:10.1016/j.coldregions.
2006.08.011 -- six criteria as recalled [mem]: persistent grain type of the weak
layer; weak-layer grain size >= 1.25 mm; weak-layer hardness <= 1.3; grain-size difference
>= 0.75 mm; hardness difference >= 1.7; interface depth 18-94 cm. Hardness index: Fierz et
al. (2009), F = 1 ... I = 6 [src]. Inclusive window ends are our reading.
"""

import numpy as np
import pytest

from regionmap.snow.codes import GRAIN_INDEX
from regionmap.snow.hardness import parse_hand_hardness
from regionmap.snow.stability import threshold_counts_of_profile


def two_layers(lower, upper, slab_m=0.40, lower_m=0.05):
    """Profile of two layers, bottom first; each layer is (grain code, size mm, hardness)."""
    layers = [lower, upper]
    count, depth = threshold_counts_of_profile(
        [lower_m, slab_m],
        [lay[1] for lay in layers],
        [parse_hand_hardness(lay[2]) for lay in layers],
        [GRAIN_INDEX[lay[0]] for lay in layers],
        mode="absolute",
    )
    assert depth.shape == (1,)
    return count[0], depth[0]


SH_F_3MM = ("SH", 3.0, "F")
RG_1F_2MM = ("RG", 2.0, "1F")


def test_slab_over_surface_hoar_at_40cm_hits_all_six():
    # 1F slab of 2 mm RG over F 3 mm SH, interface at 40 cm: SH persistent; 3 >= 1.25 mm;
    # F = 1 <= 1.3; |2 - 3| = 1 >= 0.75 mm; |3 - 1| = 2 >= 1.7; 0.18 <= 0.40 <= 0.94.
    count, depth = two_layers(SH_F_3MM, RG_1F_2MM, slab_m=0.40)
    assert depth == pytest.approx(0.40)
    assert count == 6  # Schweizer & Jamieson 2007 criteria, all met


def test_same_interface_at_120cm_hits_five():
    # Same layers, 120 cm deep: below the 18-94 cm window, the other five still met.
    count, depth = two_layers(SH_F_3MM, RG_1F_2MM, slab_m=1.20)
    assert depth == pytest.approx(1.20)
    assert count == 5


@pytest.mark.parametrize(
    "lower,upper,slab_m,failing",
    [
        (("RG", 3.0, "F"), RG_1F_2MM, 0.40, "weak layer not persistent (RG)"),
        (("FC", 1.2, "F"), ("RG", 0.4, "1F"), 0.40, "weak grains 1.2 < 1.25 mm"),
        (("SH", 3.0, "4F"), ("RG", 2.0, "P"), 0.40, "weak hardness 2 > 1.3"),
        (SH_F_3MM, ("RG", 2.5, "1F"), 0.40, "grain-size difference 0.5 < 0.75 mm"),
        (SH_F_3MM, ("RG", 2.0, "4F"), 0.40, "hardness difference 1 < 1.7"),
        (SH_F_3MM, RG_1F_2MM, 0.10, "interface 10 cm, above the window"),
    ],
)
def test_each_criterion_alone_drops_one(lower, upper, slab_m, failing):
    count, _ = two_layers(lower, upper, slab_m=slab_m)
    assert count == 5, failing


@pytest.mark.parametrize(
    "lower,upper,slab_m",
    [
        (("FC", 1.25, "F"), ("RG", 0.5, "1F"), 0.40),  # grain size exactly 1.25 mm
        (("FC", 2.0, "F"), ("RG", 1.25, "1F"), 0.40),  # size difference exactly 0.75 mm
        (("FC", 2.0, "F"), ("RG", 0.5, "1F"), 0.18),  # window top
        (("FC", 2.0, "F"), ("RG", 0.5, "1F"), 0.94),  # window bottom
    ],
)
def test_thresholds_inclusive(lower, upper, slab_m):
    count, _ = two_layers(lower, upper, slab_m=slab_m)
    assert count == 6  # ">=" and "<=" as the criteria are stated [mem]


def test_hardness_thresholds_inclusive():
    # Weak layer hardness exactly 1.3, difference exactly 1.7 (1.3 -> 3.0).
    count, _ = threshold_counts_of_profile(
        [0.05, 0.4],
        [3.0, 2.0],
        [1.3, 3.0],
        [GRAIN_INDEX["SH"], GRAIN_INDEX["RG"]],
        mode="absolute",
    )
    assert count[0] == 6


def test_weak_layer_is_the_softer_even_above_a_crust():
    # F 2 mm facets above a K melt-freeze crust (1 mm): the weak layer is the softer upper
    # one (FC persistent, 2 mm, F; diffs 1 mm and 4), interface 50 cm deep -> 6.
    count, depth = two_layers(("MFcr", 1.0, "K"), ("FC", 2.0, "F"), slab_m=0.50)
    assert (count, depth) == (6, pytest.approx(0.50))


def test_weak_layer_on_equal_hardness_is_larger_grained():
    # Equal hardness F: the weak layer is the larger-grained one. Upper 3 mm SH, lower
    # 1 mm RG -> weak = SH: persistent, 3 mm, F, diff 2 mm, hardness diff 0 (fails), depth ok.
    count, _ = two_layers(("RG", 1.0, "F"), ("SH", 3.0, "F"), slab_m=0.40)
    assert count == 5
    # Swap the sizes: weak = RG (3 mm): not persistent -> 4.
    count, _ = two_layers(("RG", 3.0, "F"), ("SH", 1.0, "F"), slab_m=0.40)
    assert count == 4


def test_depth_is_sum_of_layers_above():
    # Four layers bottom first; interface k lies under layers k+1.. (vertical metres).
    th = np.array([0.30, 0.02, 0.25, 0.15])
    _, depth = threshold_counts_of_profile(
        th, [1.0, 3.0, 1.0, 0.5], [4.0, 1.0, 3.0, 1.0], [3, 9, 3, 1], mode="absolute"
    )
    np.testing.assert_allclose(depth, [0.42, 0.40, 0.15], rtol=1e-15)


def test_uniform_profile_scores_only_what_every_interface_shares():
    # Ten identical 4F RG layers: no persistent grains, 1 mm, no contrast; only the depth
    # criterion can be met, at interfaces 20-90 cm deep.
    count, depth = threshold_counts_of_profile(
        np.full(10, 0.1), np.full(10, 1.0), np.full(10, 2.0), np.full(10, 3), mode="absolute"
    )
    expected = ((depth >= 0.18) & (depth <= 0.94)).astype(float)
    np.testing.assert_array_equal(count, expected)

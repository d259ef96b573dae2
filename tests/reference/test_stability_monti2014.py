"""Relative threshold sum (our reading of Monti, Schweizer & Fierz 2014).

SOURCE: Monti, F., Schweizer, J. and Fierz, C. (2014). Hardness estimation and weak layer
detection in simulated snow stratigraphy. Cold Reg. Sci. Technol. 103, 82-90,
doi:10.1016/j.coldregions.2014.03.009 -- each structural variable is expressed relative to
the profile itself (standardised and rescaled 0..1 within the profile) and the scores are
summed [mem, not re-verified]. The implementation details (distribution over interfaces,
min-max scaling, indicators for grain type and depth) are ours and documented in
regionmap.snow.stability; worked values below are [calc] by hand from that rule.
The criteria themselves: Schweizer & Jamieson (2007), Cold Reg. Sci. Technol. 47 [mem].
"""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from regionmap.snow.codes import GRAIN_INDEX
from regionmap.snow.stability import threshold_count_columns, threshold_counts_of_profile

G = GRAIN_INDEX

# Bottom first: FC 4F 2 mm (30 cm), SH F 4 mm (1 cm), RG 1F 1 mm (30 cm), PP F 0.5 mm (10 cm).
PROFILE = dict(
    thickness_m=np.array([0.30, 0.01, 0.30, 0.10]),
    grain_size_mm=np.array([2.0, 4.0, 1.0, 0.5]),
    hardness_index=np.array([2.0, 1.0, 3.0, 1.0]),
    grain_code=np.array([G["FC"], G["SH"], G["RG"], G["PP"]]),
)


def test_relative_worked_case_by_hand():
    # [calc] Interfaces (k: weak layer, persistent, size, -hardness, d size, d hardness, window):
    #   k=2 (10 cm): PP  0 0.5 -1 0.5 2 0 -> 0 + 0     + 0 + 0   + 1 + 0 = 1
    #   k=1 (40 cm): SH  1 4.0 -1 3.0 2 1 -> 1 + 1     + 0 + 1   + 1 + 1 = 5
    #   k=0 (41 cm): SH  1 4.0 -1 2.0 1 1 -> 1 + 1     + 0 + 0.6 + 0 + 1 = 3.6
    # (ranges: size 0.5..4, d size 0.5..3, d hardness 1..2; -hardness has no spread -> 0)
    count, depth = threshold_counts_of_profile(**PROFILE, mode="relative")
    np.testing.assert_allclose(count, [3.6, 5.0, 1.0], rtol=1e-14)
    np.testing.assert_allclose(depth, [0.41, 0.40, 0.10], rtol=1e-14)


def test_absolute_count_of_the_same_profile():
    # Schweizer & Jamieson (2007) criteria by hand: k=1 all six; k=0 all but the hardness
    # difference (1 < 1.7); k=2 only weak hardness F and hardness difference 2.
    count, _ = threshold_counts_of_profile(**PROFILE, mode="absolute")
    np.testing.assert_array_equal(count, [5.0, 6.0, 2.0])


@pytest.mark.parametrize("code", ["RG", "FC", "DH", "PP"])
def test_uniform_profile_hits_none_relative(code):
    # A uniform profile has no layer that stands out from its own profile: every layer
    # variable has zero spread, so every score is 0 (whatever the grain type); depth alone
    # does not count (our rule, see regionmap.snow.stability).
    n = 12
    lc = np.array([n])
    out_c, out_d = np.empty(1), np.empty(1)
    threshold_count_columns(
        lc,
        np.full((1, n), 0.08),
        np.full((1, n), 1.5),
        np.full((1, n), 2.0),
        np.full((1, n), G[code], dtype=np.int8),
        True,
        out_c,
        out_d,
    )
    assert out_c[0] == 0.0
    assert np.isnan(out_d[0])


@settings(deadline=None, max_examples=60)
@given(
    size_factor=st.floats(0.3, 3.0),
    hardness_shift=st.floats(-0.5, 0.5),
)
def test_relative_sum_insensitive_to_systematic_bias(size_factor, hardness_shift):
    # The purpose named by Monti et al. (2014): simulated grain sizes and hardness differ
    # systematically from observed ones. A profile-wide scale of grain size and shift of
    # hardness leaves the relative sum unchanged (ties between layers are kept).
    base, _ = threshold_counts_of_profile(**PROFILE, mode="relative")
    biased = dict(PROFILE)
    biased["grain_size_mm"] = PROFILE["grain_size_mm"] * size_factor
    biased["hardness_index"] = PROFILE["hardness_index"] + hardness_shift
    count, _ = threshold_counts_of_profile(**biased, mode="relative")
    np.testing.assert_allclose(count, base, rtol=1e-9, atol=1e-12)


def test_absolute_count_is_sensitive_to_the_same_bias():
    # Control: the absolute count of Schweizer & Jamieson (2007) does change when modelled
    # grains are systematically too small (here halved: the 1.25 mm size criterion drops).
    biased = dict(PROFILE)
    biased["grain_size_mm"] = PROFILE["grain_size_mm"] * 0.3
    base, _ = threshold_counts_of_profile(**PROFILE, mode="absolute")
    count, _ = threshold_counts_of_profile(**biased, mode="absolute")
    assert (count < base).any()


def test_deep_persistent_layer_stays_visible():
    # Issue requirement: persistent layers below the 18-94 cm window stay visible. A buried
    # SH layer 1.5 m deep under uniform slab layers still has the highest relative sum.
    th = np.array([0.2, 0.01] + [0.15] * 10)
    e = np.array([1.0, 4.0] + [1.0] * 10)
    h = np.array([3.0, 1.0] + [3.0] * 10)
    g = np.array([G["RG"], G["SH"]] + [G["RG"]] * 10)
    count, depth = threshold_counts_of_profile(th, e, h, g, mode="relative")
    k = int(np.argmax(count))
    assert 1.50 - 1e-9 <= depth[k] <= 1.51 + 1e-9  # top or base of the SH layer
    assert count[k] >= 4.0  # persistent, size, hardness, both differences all at their max

"""Regression checks of the snow column's own rules.

Each expected value here is re-typed from the code's own formula or setting (a rule of this
model, not a published value): these checks pin behaviour so that a change is noticed; they
do not validate the physics. The reference tests against outside sources live in
tests/reference/ and beside the scenario tests.
"""

from __future__ import annotations

import pytest

from regionmap.snow.codes import CRUST_INDEX, GRAIN_INDEX
from regionmap.snow.hardness import hardness_index_from_density_array
from regionmap.snow.params import SnowParams
from regionmap.snow.surface_hoar import surface_hoar_survival


def _survival(ustar, load=0.0):
    p = SnowParams()
    return surface_hoar_survival(
        ustar, load, p.sh_keep_ustar_m_s, p.sh_destroy_ustar_m_s, p.sh_shield_kg_m2
    )


def test_burying_snow_shields_the_hoar_regression():
    # regression of our shield rule: the load above buried hoar takes the wind's hold away,
    # linearly up to the shield load (a setting, not a published value)
    shield = SnowParams().sh_shield_kg_m2
    assert _survival(0.5, load=shield) == 1.0
    assert _survival(0.5, load=0.5 * shield) == pytest.approx(0.5)


def test_depth_hoar_hardness_inside_its_range_is_the_inverted_fit_regression():
    # regression: inside its range depth hoar's hardness is the inverted density fit the
    # code carries (185 + 25 h kg m-3, recalled from Geldsetzer & Jamieson 2000 [mem])
    h = hardness_index_from_density_array([250.0], GRAIN_INDEX["DH"], CRUST_INDEX["none"])
    assert h[0] == pytest.approx((250.0 - 185.0) / 25.0)

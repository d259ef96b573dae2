"""Wind on surface hoar: friction velocity of the cell's wind and graded survival.

SOURCES:
* Neutral logarithmic wind profile, u* = k U(z) / ln(z / z0), k = 0.40 (e.g. Stull, R. B.
  1988, An Introduction to Boundary Layer Meteorology, Kluwer, Sect. 9.7) -- analytic.
* Li, L. and Pomeroy, J. W. (1997). Estimates of threshold wind speeds for snow transport
  using meteorological data. J. Appl. Meteorol. 36, 205-213 [mem]: threshold friction
  velocities 0.07-0.25 m s-1 for fresh dry snow, 0.25-1.0 m s-1 for older snow.
* Hachikubo, A. (2001). Ann. Glaciol. 32, 27-31: surface hoar grows at winds of about
  0.5-3.5 m s-1 [mem].
"""

import math

import pytest

from regionmap.snow.params import SnowParams
from regionmap.snow.surface_hoar import friction_velocity_log_law, surface_hoar_survival


def test_friction_velocity_log_law_analytic():
    # k U / ln(z / z0): 5 m s-1 at 10 m over z0 = 1 mm
    assert friction_velocity_log_law(5.0, 10.0, 0.001) == pytest.approx(
        0.4 * 5.0 / math.log(1e4), rel=1e-12
    )


def _survival(ustar, load=0.0):
    p = SnowParams()
    return surface_hoar_survival(
        ustar, load, p.sh_keep_ustar_m_s, p.sh_destroy_ustar_m_s, p.sh_shield_kg_m2
    )


def test_hoar_kept_at_growth_winds_hachikubo2001():
    # winds at which it grows (up to 3.5 m s-1 at 10 m, Hachikubo 2001) do not destroy it
    assert _survival(friction_velocity_log_law(3.0, 10.0, SnowParams().roughness_m)) == 1.0


def test_hoar_lost_where_older_snow_drifts_li_pomeroy1997():
    # u* of 0.5 m s-1, inside the range where even older snow drifts (0.25-1.0): none left
    assert _survival(0.5) == 0.0
    # between the drift thresholds of fresh snow and older snow it is graded
    assert 0.0 < _survival(0.25) < 1.0

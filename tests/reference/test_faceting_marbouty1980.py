"""Faceting and rounding thresholds of the dry metamorphism laws.

SOURCES:
* Colbeck, S. C. (1983). Theory of metamorphism of dry snow. J. Geophys. Res. 88(C9),
  5475-5482, doi:10.1029/JC088iC09p05475: rounding below about 10 K m-1, faceting above
  about 10-20 K m-1 [src in the avalanche handbooks' summary; values mem].
* Marbouty, D. (1980). An experimental study of temperature-gradient metamorphism.
  J. Glaciol. 26(94), 303-312, doi:10.3189/S0022143000010844: kinetic growth needs more
  than ~15 K m-1 (strong from ~25, full from ~50 K m-1), is fastest near -6 degC and stops
  above ~350 kg m-3 [mem].
"""

import pytest

from regionmap.constants import T_MELT_K
from regionmap.snow.metamorphism import arrhenius_ratio_6000, facetedness_rate

T = T_MELT_K - 6.0  # Marbouty's peak growth temperature [mem]


def _rate(gradient_k_m, density_kg_m3=150.0, t_k=T):
    return facetedness_rate(
        t_k, density_kg_m3, gradient_k_m, 10.0, 0.3, 0.1, arrhenius_ratio_6000(t_k)
    )


def test_rounding_below_10_k_per_m_colbeck1983():
    assert _rate(5.0) < 0.0
    assert _rate(-5.0) < 0.0  # the magnitude counts, not the sign


def test_no_faceting_below_15_k_per_m_marbouty1980():
    # between Colbeck's rounding limit and Marbouty's growth threshold: neither
    assert _rate(12.0) == 0.0
    assert _rate(14.9) == 0.0
    assert _rate(20.0) > 0.0


def test_faceting_grows_with_gradient_to_full_at_50_marbouty1980():
    r = [_rate(g) for g in (20.0, 25.0, 40.0, 50.0, 100.0)]
    assert r == sorted(r)
    assert r[3] == pytest.approx(r[4])  # full rate from ~50 K m-1
    assert r[1] < 0.2 * r[3]  # weak at 25 K m-1


def test_no_faceting_in_dense_snow_marbouty1980():
    # growth stops above ~350 kg m-3 (Marbouty 1980 [mem])
    assert _rate(60.0, density_kg_m3=360.0) == 0.0
    assert _rate(60.0, density_kg_m3=250.0) < _rate(60.0, density_kg_m3=150.0)


def test_faceting_fastest_near_minus_6_marbouty1980():
    assert _rate(60.0, t_k=T_MELT_K - 6.0) > _rate(60.0, t_k=T_MELT_K - 20.0)
    assert _rate(60.0, t_k=T_MELT_K - 6.0) > _rate(60.0, t_k=T_MELT_K - 0.5)

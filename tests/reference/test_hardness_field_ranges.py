"""Modelled hand hardness by grain type against the ranges seen in field profiles.

SOURCES (hardness index F 1, 4F 2, 1F 3, P 4, K 5, I 6: Fierz et al. 2009, IHP-VII Tech.
Doc. Hydrol. 83, Table A.3 [src]):
* McClung, D. and Schaerer, P. (2006). The Avalanche Handbook, 3rd ed., Ch. 3 (snowpack
  observations) [mem]: new snow (PP) and buried surface hoar F-4F; decomposing fragments
  F-1F; faceted crystals and depth hoar F-1F; rounded grains 4F-K.
* Geldsetzer, T. and Jamieson, J. B. (2000). Estimating dry snow density from grain form and
  hand hardness. Proc. ISSW 2000, 121-127 [mem, low confidence]: regressions made on dry
  layers whose hardness spans those ranges; depth hoar of 300-400 kg m-3 is still soft.
* Jamieson, B. (2006). Formation of refrozen snowpack layers and their role in slab avalanche
  release. Rev. Geophys. 44, RG2001 [mem]: crusts from pencil (P) to ice (I).
The ranges are typed here from those sources, not imported from the code.
"""

import numpy as np
import pytest

from regionmap.snow.codes import CRUST_INDEX, GRAIN_INDEX
from regionmap.snow.diagnostics import layer_hardness_array
from regionmap.snow.hardness import hardness_index_from_density_array
from regionmap.snow.state import SnowState

NONE = CRUST_INDEX["none"]

#: (lowest, highest) hand-hardness index in field profiles, McClung & Schaerer (2006) [mem]
FIELD_RANGES = {
    "PP": (1.0, 2.0),  # F-4F
    "SH": (1.0, 2.0),  # F-4F (buried surface hoar)
    "DF": (1.0, 3.0),  # F-1F
    "FC": (1.0, 3.0),  # F-1F
    "DH": (1.0, 3.0),  # F-1F
}


@pytest.mark.parametrize("code", sorted(FIELD_RANGES))
def test_hardness_stays_in_field_range_at_any_density_mcclung_schaerer2006(code):
    lo, hi = FIELD_RANGES[code]  # McClung & Schaerer (2006) [mem]
    rho = np.linspace(30.0, 500.0, 95)
    h = hardness_index_from_density_array(rho, GRAIN_INDEX[code], NONE)
    assert h.min() >= lo and h.max() <= hi, (code, h.min(), h.max())


def test_dense_depth_hoar_is_not_ice_geldsetzer2000():
    # Geldsetzer & Jamieson (2000) [mem]: the inverted DH fit (185 + 25 h) would give I at
    # 335 kg m-3; field depth hoar of that density is F-1F (McClung & Schaerer 2006 [mem])
    h = hardness_index_from_density_array([250.0, 350.0, 400.0], GRAIN_INDEX["DH"], NONE)
    assert np.all(h <= 3.0)


def test_crust_hardness_pencil_to_ice_jamieson2006():
    # Jamieson (2006) [mem]: refrozen crusts range from P to I; a thin light rain crust is P,
    # a dense one K, an ice lens I
    rho = np.array([250.0, 450.0, 850.0])
    h = hardness_index_from_density_array(rho, GRAIN_INDEX["MFcr"], CRUST_INDEX["rain"])
    assert h[0] == 4.0
    assert 5.0 <= h[1] < 5.1
    assert h[2] == 6.0


def test_wet_layer_hardness_uses_dry_density_geldsetzer2000():
    # Geldsetzer & Jamieson (2000) fitted dry-snow density: the liquid water of a wet layer
    # does not make it harder (wet snow is soft: Fierz et al. 2009, Sect. 2.5 [mem])
    s = SnowState.empty(1, time="2026-03-01T00:00")
    s.counters[0, 0] = 1
    s.thickness_m[0, 0] = 0.1
    s.ice_kg_m2[0, 0] = 25.0  # 250 kg m-3 of ice
    s.grain_code[0, 0] = GRAIN_INDEX["RG"]
    dry = layer_hardness_array(s)[0, 0]
    s.liquid_kg_m2[0, 0] = 8.0  # 8 % water by volume: "wet" (Fierz et al. 2009)
    wet = layer_hardness_array(s)[0, 0]
    assert wet == dry == pytest.approx((250.0 - 91.0) / 71.0, rel=1e-6)  # RG fit [mem]

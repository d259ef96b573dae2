"""Wind transport of snow: the threshold and the saltation rate against their sources.

SOURCES
* Li, L. & Pomeroy, J. W. (1997). Estimates of threshold wind speeds for snow transport using
  meteorological data. J. Appl. Meteorol. 36(3), 205-213. Dry-snow threshold 10 m wind
  U_10t = 9.43 + 0.18 T + 0.0033 T^2 (T in degC); observed dry-snow thresholds 4-11 m s-1,
  mean 7.7 m s-1; wet snow 7-14.5, mean 9.9 m s-1 (all recalled from memory [mem]).
* Pomeroy, J. W. & Gray, D. M. (1990). Saltation of snow. Water Resour. Res. 26(7),
  1583-1594: Q_salt = 0.68 rho u*t (u*^2 - u*t^2) / (g u*) [mem].
* Tabler, R. D. (1991). Snow transport as a function of wind speed and height. Proc. Cold
  Regions Engineering, ASCE, 729-738: total transport in the lowest 5 m over an unlimited
  fetch Q_T = U_10^3.8 / 233847 kg m-1 s-1 (recalled from memory [mem]) — an independent,
  measured relation that includes suspension, so saltation must stay below it.
* Liston et al. (2007), J. Glaciol. 53(181): u*t = 0.10 exp(0.003 rho) [mem].
"""

from __future__ import annotations

import numpy as np

from regionmap.constants import T_MELT_K
from regionmap.snow.wind_transport import (
    friction_velocity_neutral,
    saltation_transport_pomeroy_gray1990,
    threshold_ustar_density_liston2007,
    threshold_wind_li_pomeroy1997,
)


def test_dry_snow_threshold_li_pomeroy1997():
    # Li & Pomeroy (1997) [mem]: 9.43 m s-1 at 0 degC; the parabola's vertex at
    # T = -0.18 / (2 x 0.0033) = -27.3 degC, 6.97 m s-1 there
    assert abs(threshold_wind_li_pomeroy1997(T_MELT_K) - 9.43) < 0.005
    t = T_MELT_K + np.linspace(-40.0, 0.0, 401)
    u = np.array([threshold_wind_li_pomeroy1997(x) for x in t])
    assert abs(u.min() - 6.97) < 0.01
    assert abs(t[u.argmin()] - T_MELT_K + 27.3) < 0.15
    # every value inside the range of dry-snow thresholds they observed (4-11 m s-1) [mem],
    # and their mean dry-snow threshold (7.7 m s-1) reached in the cold half of the range
    assert u.min() > 4.0 and u.max() < 11.0
    assert np.any(np.abs(u - 7.7) < 0.05)


def test_saltation_zero_at_threshold_pomeroy_gray1990():
    # Pomeroy & Gray (1990): no saltation at or below the threshold friction velocity
    assert saltation_transport_pomeroy_gray1990(0.25, 0.25, 1.2) == 0.0
    assert saltation_transport_pomeroy_gray1990(0.2, 0.25, 1.2) == 0.0


def test_saltation_below_total_transport_tabler1991():
    # Tabler (1991) [mem]: measured total transport to 5 m (saltation + suspension) over a
    # long fetch, Q_T = U10^3.8 / 233847. Saltation alone must be a part of it, a smaller
    # part as the wind rises and suspension takes over (Pomeroy & Male 1992, J. Hydrol. 136,
    # 275-301 [mem]). Friction velocity of a neutral profile over z0 = 1 mm, threshold of
    # dry snow at -10 degC (Li & Pomeroy 1997).
    u10 = np.array([10.0, 12.5, 15.0, 20.0, 25.0])
    ustar_t = friction_velocity_neutral(threshold_wind_li_pomeroy1997(263.15), 10.0, 0.001)
    q_salt = np.array(
        [
            saltation_transport_pomeroy_gray1990(
                friction_velocity_neutral(u, 10.0, 0.001), ustar_t, 1.3
            )
            for u in u10
        ]
    )
    q_total = u10**3.8 / 233847.0
    share = q_salt / q_total
    assert np.all(share > 0.02) and np.all(share < 1.0)
    assert np.all(np.diff(share) < 0)


def test_bonding_raises_the_threshold_liston2007():
    # Liston et al. (2007) [mem]: u*t = 0.10 exp(0.003 rho): 0.135 m s-1 at 100 kg m-3,
    # 0.246 at 300 kg m-3 — within the 0.07-0.25 (fresh) to 0.25-1.0 (aged, bonded) ranges of
    # threshold friction velocity reviewed by Li & Pomeroy (1997) [mem]
    assert abs(threshold_ustar_density_liston2007(100.0) - 0.135) < 0.001
    assert abs(threshold_ustar_density_liston2007(300.0) - 0.246) < 0.001

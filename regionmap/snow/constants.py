"""Physical constants of the snow column [SI].

Sources: ice density, latent heats and heat capacities as tabulated in Fierz et al. (2009,
IHP-VII Tech. Doc. Hydrol. 83) and Jordan (1991, CRREL SR 91-16); Stefan-Boltzmann constant
exact since the 2019 SI redefinition (CODATA 2018).
"""

from __future__ import annotations

T_MELT_K = 273.15  #: melting point of ice [K]
RHO_ICE_KG_M3 = 917.0  #: density of ice [kg m-3]
RHO_WATER_KG_M3 = 1000.0  #: density of liquid water [kg m-3]
C_ICE_J_KG_K = 2100.0  #: specific heat of ice [J kg-1 K-1]
C_WATER_J_KG_K = 4217.0  #: specific heat of liquid water near 0 degC [J kg-1 K-1]
C_AIR_J_KG_K = 1005.0  #: specific heat of dry air at constant pressure [J kg-1 K-1]
L_FUSION_J_KG = 3.334e5  #: latent heat of fusion [J kg-1]
L_VAPOUR_J_KG = 2.501e6  #: latent heat of vaporisation at 0 degC [J kg-1]
L_SUBLIMATION_J_KG = 2.834e6  #: latent heat of sublimation [J kg-1]
SIGMA_W_M2_K4 = 5.670374419e-8  #: Stefan-Boltzmann constant [W m-2 K-4]
R_DRY_J_KG_K = 287.05  #: gas constant of dry air [J kg-1 K-1]
GRAVITY_M_S2 = 9.81  #: gravitational acceleration [m s-2]
VON_KARMAN = 0.40  #: von Karman constant [1]
EPOCH_2000_S = 946684800  #: 2000-01-01T00:00Z in seconds since 1970 (in-memory time origin)

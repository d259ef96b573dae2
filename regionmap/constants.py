"""Physical constants, each defined once with its source [SI units].

Exact values are exact by definition (the SI since 2019, the Celsius scale, standard gravity,
the standard atmosphere). Values of air and water substance are those of the cited tables;
where two common values exist the choice is explained beside the constant. Model parameters
of the snow column (thresholds, rates, soil properties) are settings, in
:mod:`regionmap.snow.params`, not constants.
"""

from __future__ import annotations

__all__ = [
    "ZERO_CELSIUS_K",
    "T_MELT_K",
    "GRAVITY_M_S2",
    "STEFAN_BOLTZMANN_W_M2_K4",
    "MOLAR_GAS_CONSTANT_J_MOL_K",
    "MOLAR_MASS_DRY_AIR_KG_MOL",
    "MOLAR_MASS_WATER_KG_MOL",
    "R_DRY_J_KG_K",
    "R_VAPOUR_J_KG_K",
    "EPSILON",
    "C_AIR_J_KG_K",
    "L_FUSION_J_KG",
    "L_VAPOUR_J_KG",
    "L_SUBLIMATION_J_KG",
    "RHO_ICE_KG_M3",
    "RHO_WATER_KG_M3",
    "C_ICE_J_KG_K",
    "C_WATER_J_KG_K",
    "VON_KARMAN",
    "ICAO_PRESSURE_PA",
    "ICAO_TEMPERATURE_K",
    "ICAO_LAPSE_RATE_K_M",
    "ICAO_PRESSURE_EXPONENT",
    "SOLAR_CONSTANT_W_M2",
    "EARTH_RADIUS_M",
]

# ------------------------------------------------------------------ exact by definition
#: 0 degC in kelvin (definition of the Celsius scale).
ZERO_CELSIUS_K = 273.15
#: Melting point of ice at standard pressure: 273.1500 K within 0.1 mK (air-saturated water,
#: 101 325 Pa), so the Celsius zero.
T_MELT_K = ZERO_CELSIUS_K
#: Standard acceleration of gravity (3rd CGPM, 1901), the value of the WMO and ICAO
#: standards; local gravity in the Alps differs from it by less than 0.1 %.
GRAVITY_M_S2 = 9.80665
#: Stefan-Boltzmann constant, exact since the 2019 SI (CODATA 2018).
STEFAN_BOLTZMANN_W_M2_K4 = 5.670374419e-8
#: Molar gas constant, exact since the 2019 SI (CODATA 2018).
MOLAR_GAS_CONSTANT_J_MOL_K = 8.314462618

# ------------------------------------------------------------------ air and water vapour
#: Molar mass of dry air, 28.96546 g mol-1: the CIPM-2007 air-density equation (Picard et
#: al. 2008, Metrologia 45, 149-155, doi:10.1088/0026-1394/45/2/004) at 400 umol mol-1 of
#: CO2 [mem].
MOLAR_MASS_DRY_AIR_KG_MOL = 28.96546e-3
#: Molar mass of water, 18.015268 g mol-1 (IAPWS-95: Wagner & Pruss 2002, J. Phys. Chem.
#: Ref. Data 31, 387-535, doi:10.1063/1.1461829).
MOLAR_MASS_WATER_KG_MOL = 18.015268e-3
#: Specific gas constant of dry air, R / M_d = 287.0475 J kg-1 K-1 (the rounded 287.05 of
#: older texts differs in the fifth digit only).
R_DRY_J_KG_K = MOLAR_GAS_CONSTANT_J_MOL_K / MOLAR_MASS_DRY_AIR_KG_MOL
#: Specific gas constant of water vapour, R / M_w = 461.523 J kg-1 K-1.
R_VAPOUR_J_KG_K = MOLAR_GAS_CONSTANT_J_MOL_K / MOLAR_MASS_WATER_KG_MOL
#: Ratio of the gas constants of dry air and water vapour, R_d / R_v = 0.62198 [1].
EPSILON = R_DRY_J_KG_K / R_VAPOUR_J_KG_K
#: Specific heat of dry air at constant pressure: an ideal diatomic gas, c_p = 7/2 R_d =
#: 1004.67 J kg-1 K-1 (e.g. Bohren & Albrecht 1998, Atmospheric Thermodynamics, sec. 3.5),
#: so that R_d / c_p = 2/7 as in the dry adiabat; tables give 1005 to 1006 near 0 degC,
#: within 0.1 %.
C_AIR_J_KG_K = 3.5 * R_DRY_J_KG_K

# ------------------------------------------------------------------ water substance
#: Latent heat of fusion of ice at 0 degC (Jordan 1991, CRREL Special Report 91-16, Table 1
#: [mem]; steam tables give 333.4 kJ kg-1 at the triple point).
L_FUSION_J_KG = 3.334e5
#: Latent heat of vaporisation at 0 degC, 2.501e6 J kg-1 (Rogers & Yau 1989, A Short Course
#: in Cloud Physics, Table 2.1 [mem]); IAPWS-95 steam tables give 2500.9 kJ kg-1 at the
#: triple point, the same to four figures. Chosen over 2.50084e6 because the latent heat of
#: sublimation below is the sum of the two, as at the triple point.
L_VAPOUR_J_KG = 2.501e6
#: Latent heat of sublimation at 0 degC: fusion plus vaporisation (enthalpy is a state
#: function), 2.8344e6 J kg-1.
L_SUBLIMATION_J_KG = L_FUSION_J_KG + L_VAPOUR_J_KG
#: Density of pure ice Ih at 0 degC, 917 kg m-3 (Petrenko & Whitworth 1999, Physics of
#: Ice, Table 2.6 [mem]; 916.7 to four figures).
RHO_ICE_KG_M3 = 917.0
#: Density of liquid water near 0 degC (999.8 kg m-3), rounded as in snow hydrology.
RHO_WATER_KG_M3 = 1000.0
#: Specific heat of ice near 0 degC (2.1 kJ kg-1 K-1 to two figures: Feistel & Wagner 2006,
#: J. Phys. Chem. Ref. Data 35, 1021-1047, give 2.097 at 0 degC [mem]).
C_ICE_J_KG_K = 2100.0
#: Specific heat of liquid water at 0 degC, 4.217 kJ kg-1 K-1 (IAPWS-95 steam tables).
C_WATER_J_KG_K = 4217.0

# ------------------------------------------------------------------ boundary layer
#: von Karman constant, 0.40 (Hogstrom 1996, Bound.-Layer Meteorol. 78, 215-246,
#: doi:10.1007/BF00120937, finds 0.40 +- 0.01 [mem]).
VON_KARMAN = 0.40

# ------------------------------------------------------------------ standard atmosphere
#: Sea-level pressure of the ICAO standard atmosphere (ICAO 1993, Doc 7488/3; ISO 2533).
ICAO_PRESSURE_PA = 101325.0
#: Sea-level temperature of the ICAO standard atmosphere.
ICAO_TEMPERATURE_K = 288.15
#: Temperature lapse rate of the ICAO standard troposphere.
ICAO_LAPSE_RATE_K_M = 0.0065
#: Exponent g0 M / (R* L) of the ICAO troposphere's pressure law, 5.25588 with the
#: standard's own gas constant and air molar mass (8.31432 J mol-1 K-1, 28.9644 g mol-1).
ICAO_PRESSURE_EXPONENT = 5.25588

# ------------------------------------------------------------------ the Earth and the Sun
#: Total solar irradiance at 1 AU, 1361 W m-2 (Kopp & Lean 2011, Geophys. Res. Lett. 38,
#: L01706, doi:10.1029/2010GL045777).
SOLAR_CONSTANT_W_M2 = 1361.0
#: Mean radius of the Earth, 6371 km (IUGG: Moritz 2000, J. Geodesy 74, 128-133, R1 =
#: 6 371 008.8 m [mem]).
EARTH_RADIUS_M = 6.371e6

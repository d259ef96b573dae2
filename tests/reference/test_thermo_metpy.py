"""Moist thermodynamics against Buck (1981), ICAO and MetPy (oracle from the package index)."""

import warnings

import metpy.calc as mc
import numpy as np
import pytest
from metpy.units import units
from numba import njit

from regionmap.downscale import thermo as th

warnings.filterwarnings("ignore", module="metpy")


def test_buck1981_coefficients_as_printed():
    # Buck (1981), J. Appl. Meteorol. 20, 1527-1532, e_w1 and e_i1: a = 6.1121 and 6.1115 hPa
    # at 0 degC; at -10/-20 degC the curves give 2.8648/1.2538 (water) and 2.5987/1.0327 hPa
    # (ice), computed from the coefficients as printed (a check of the coefficients, not of
    # the curves: the next two tests check those).
    t = np.array([273.15, 263.15, 253.15])
    np.testing.assert_allclose(
        th.saturation_vapour_pressure_water_buck1981(t) / 100, [6.1121, 2.8648, 1.2538], atol=6e-5
    )
    np.testing.assert_allclose(
        th.saturation_vapour_pressure_ice_buck1981(t) / 100, [6.1115, 2.5987, 1.0327], atol=6e-5
    )


@pytest.mark.parametrize(
    "t_c, water_hpa, ice_hpa",
    [(0.0, 6.1121, 6.1115), (-10.0, 2.8645, 2.5989), (-20.0, 1.2550, 1.0325)],
)
def test_buck1981_against_murphy_koop2005(t_c, water_hpa, ice_hpa):
    # Murphy & Koop (2005), Q. J. R. Meteorol. Soc. 131, 1539-1565 (doi:10.1256/qj.04.94):
    # their water (Eq. 10) and ice (Eq. 7) formulations, values at 0/-10/-20 degC [mem]. Buck
    # fitted his curves to within about 0.1 % of the accurate formulations of his day, which
    # is the tolerance (0.15 %).
    t_k = 273.15 + t_c
    assert th.saturation_vapour_pressure_water_buck1981(t_k) / 100 == pytest.approx(
        water_hpa, rel=1.5e-3
    )
    assert th.saturation_vapour_pressure_ice_buck1981(t_k) / 100 == pytest.approx(
        ice_hpa, rel=1.5e-3
    )


def test_buck1981_against_metpy_ambaum2020():
    # MetPy 1.7's saturation_vapor_pressure implements Ambaum (2020), Q. J. R. Meteorol. Soc.
    # 146, 4252-4258 (doi:10.1002/qj.3899), Eq. 13 over water and Eq. 17 over ice: an
    # independent closed form from the Clausius-Clapeyron equation with temperature-dependent
    # latent heat. The two agree within 0.5 % over water (-20..+40 degC, the range of Buck's
    # e_w1 fit) and 0.6 % over ice (-50..0 degC, that of e_i1); Ambaum's form is the one
    # that parts from the steam tables near 0 degC (6.1076 against 6.1121 hPa).
    t_c = np.linspace(-20.0, 40.0, 61)
    ref = mc.saturation_vapor_pressure(t_c * units.degC, phase="liquid").to("Pa").m
    np.testing.assert_allclose(
        th.saturation_vapour_pressure_water_buck1981(t_c + 273.15), ref, rtol=5e-3
    )
    t_c = np.linspace(-50.0, 0.0, 51)
    ref = mc.saturation_vapor_pressure(t_c * units.degC, phase="solid").to("Pa").m
    np.testing.assert_allclose(
        th.saturation_vapour_pressure_ice_buck1981(t_c + 273.15), ref, rtol=6e-3
    )
    # negative control: the water curve is not the ice curve (10 % apart at -10 degC)
    assert th.saturation_vapour_pressure_water_buck1981(263.15) / ref[40] > 1.09


def test_one_buck_implementation_for_arrays_and_compiled_code():
    # regression check, not a reference: the compiled kernel calls the same ufunc on scalars
    # and gets the values NumPy callers get on arrays, bit for bit
    @njit
    def in_compiled_code(t_k):
        out = np.empty_like(t_k)
        for i in range(t_k.size):
            out[i] = th.saturation_vapour_pressure_ice_buck1981(t_k[i])
        return out

    t_k = np.linspace(220.0, 273.15, 17)
    assert np.array_equal(in_compiled_code(t_k), th.saturation_vapour_pressure_ice_buck1981(t_k))


def test_dew_point_from_relative_humidity_vs_metpy():
    from regionmap.downscale.lapse import dew_point_from_relative_humidity

    t_c = np.linspace(-25, 25, 11)[:, None]
    rh = np.array([0.3, 0.6, 0.9, 1.0])[None, :]
    ref = mc.dewpoint_from_relative_humidity(
        np.broadcast_to(t_c, (11, 4)) * units.degC,
        np.broadcast_to(rh, (11, 4)) * units.dimensionless,
    ).m
    # 0.1 K: the Buck (ours) and MetPy's saturation curves part by ~0.07 K at dew points near
    # -37 degC
    np.testing.assert_allclose(
        dew_point_from_relative_humidity(t_c + 273.15, rh) - 273.15, ref, atol=0.1
    )


def test_relative_humidity_from_specific_humidity_vs_metpy():
    p = np.array([1000e2, 850e2, 700e2])[:, None]
    t = np.array([263.15, 273.15, 288.15])[None, :]
    q = 0.8 * th.specific_humidity_from_relative_humidity(1.0, t, p)
    ref = mc.relative_humidity_from_specific_humidity(
        p * units.Pa, t * units.K, q * units("kg/kg")
    ).m
    np.testing.assert_allclose(th.relative_humidity_from_specific_humidity(q, t, p), ref, rtol=6e-3)


@pytest.mark.parametrize(
    "t_c, rh, p_hpa, expected", [(20, 0.5, 1013.25, 13.665), (20, 0.5, 800, 13.100)]
)
def test_wet_bulb_normand_metpy_values(t_c, rh, p_hpa, expected):
    # metpy.calc.wet_bulb_temperature, 20 degC / 50 % -> 13.665 degC at
    # 1013.25 hPa and 13.100 degC at 800 hPa; tolerance 0.05 K.
    tw = th.wet_bulb_temperature_normand(t_c + 273.15, rh, p_hpa * 100) - 273.15
    assert tw == pytest.approx(expected, abs=0.05)


def test_wet_bulb_normand_vs_metpy_near_freezing():
    # Oracle: metpy.calc.wet_bulb_temperature (Normand's rule) — range used for phase.
    for t_c, rh, p in [
        (0, 0.9, 700),
        (-10, 0.7, 750),
        (2, 0.95, 850),
        (1, 0.6, 800),
        (-5, 0.5, 900),
    ]:
        td = mc.dewpoint_from_relative_humidity(t_c * units.degC, rh * units.dimensionless)
        ref = mc.wet_bulb_temperature(p * units.hPa, t_c * units.degC, td).m
        ours = th.wet_bulb_temperature_normand(t_c + 273.15, rh, p * 100) - 273.15
        assert ours == pytest.approx(ref, abs=0.05)


def test_standard_atmosphere_icao_and_metpy():
    # ICAO Doc 7488 / ISO 2533: 898.75, 794.95, 701.09 hPa at 1, 2, 3 km;
    # oracle metpy.calc.height_to_pressure_std within 0.2 hPa.
    z = np.array([1000.0, 2000.0, 3000.0])
    p = th.pressure_standard_atmosphere_icao(z) / 100
    np.testing.assert_allclose(p, [898.75, 794.95, 701.09], atol=0.02)
    ref = mc.height_to_pressure_std(np.linspace(0, 4000, 41) * units.m).to("hPa").m
    np.testing.assert_allclose(
        th.pressure_standard_atmosphere_icao(np.linspace(0, 4000, 41)) / 100, ref, atol=0.2
    )


def test_hypsometric_matches_standard_atmosphere():
    # The hypsometric equation through a standard-atmosphere layer (6.5 K/km) reproduces ICAO
    # pressures within 0.2 hPa when the layer mean temperature is used.
    z0, z1 = 500.0, 2500.0
    p0 = th.pressure_standard_atmosphere_icao(z0)
    t_mean = 288.15 - 0.0065 * (z0 + z1) / 2
    p1 = th.pressure_hypsometric(p0, t_mean, z1 - z0)
    assert p1 / 100 == pytest.approx(th.pressure_standard_atmosphere_icao(z1) / 100, abs=0.2)


def test_kernel_wet_bulb_of_rain_vs_metpy():
    # the column's rain temperature (psychrometric equation, Newton) against MetPy's
    # wet_bulb_temperature (Normand's construction): within 0.15 K from -5 to +20 degC
    from regionmap.snow.surface import wet_bulb_temperature_psychrometric

    for t_c, rh, p_pa in [
        (20.0, 0.5, 101325.0),
        (20.0, 0.5, 80000.0),
        (1.0, 0.8, 75000.0),
        (2.0, 0.6, 70000.0),
        (0.5, 0.95, 85000.0),
        (4.0, 0.3, 65000.0),
        (-5.0, 0.7, 70000.0),
    ]:
        td = mc.dewpoint_from_relative_humidity(t_c * units.degC, rh)
        ref = mc.wet_bulb_temperature(p_pa * units.Pa, t_c * units.degC, td).to("K").m
        assert wet_bulb_temperature_psychrometric(t_c + 273.15, rh, p_pa) == pytest.approx(
            ref, abs=0.15
        )

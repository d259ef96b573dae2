"""Precipitation phase: Jennings et al. (2018) thresholds; Bourgouin (2000) decisions."""

import numpy as np
import pytest
from scipy.optimize import brentq

from regionmap.downscale import phase


def test_jennings2018_fifty_percent_thresholds():
    # Jennings et al. (2018), Nature Comm. 9:1148, Table 2 [calc]: 50 % snow at
    # 0.738 degC with 100 % RH and 3.929 degC with 50 % RH; p(0 degC, 100 %) = 0.7389.
    for rh, expected in [(1.0, 0.738), (0.5, 3.929)]:
        t50 = brentq(
            lambda t, rh=rh: phase.snow_probability_jennings2018(t + 273.15, rh) - 0.5, -5, 10
        )
        assert t50 == pytest.approx(expected, abs=1e-3)
        assert phase.threshold_temperature_jennings2018(rh) - 273.15 == pytest.approx(
            expected, abs=1e-3
        )
        # the mass partition is one half at the published threshold
        assert phase.snow_fraction_jennings2018(expected + 273.15, rh) == pytest.approx(
            0.5, abs=2e-3
        )
    assert phase.snow_probability_jennings2018(273.15, 1.0) == pytest.approx(0.7389, abs=1e-4)


def test_jennings2018_partition_is_all_snow_a_degree_below_the_threshold():
    # Jennings et al. (2018), Table 2: at 100 % RH the threshold is 0.738 degC, so an hour at
    # -1.3 degC is snow; the probability there is 0.95 (a share of observations, not a mass
    # split: 5 % of the mass as rain would be the error the probability gives)
    t = 273.15 - 1.3
    assert phase.snow_probability_jennings2018(t, 1.0) == pytest.approx(0.95, abs=0.01)
    assert phase.snow_fraction_jennings2018(t, 1.0) == 1.0
    # and all rain a degree above it
    assert phase.snow_fraction_jennings2018(273.15 + 0.738 + 1.0, 1.0) == 0.0


def test_no_liquid_below_zero_wet_bulb_with_metpy_as_oracle():
    # MetPy wet_bulb_temperature (Normand's construction, an outside library) decides which
    # hours have a wet bulb at or below 0 degC; there every method gives all snow, as a
    # snowflake below 0 degC wet bulb does not melt (Matsuo & Sasyo 1981 [mem])
    import metpy.calc as mc
    from metpy.units import units

    rng = np.random.default_rng(7)
    t = 273.15 + rng.uniform(-3.0, 6.0, 400)
    rh = rng.uniform(0.3, 1.0, 400)
    p = rng.uniform(60e3, 95e3, 400)
    td = mc.dewpoint_from_relative_humidity(t * units.K, rh)
    tw = mc.wet_bulb_temperature(p * units.Pa, t * units.K, td).to("K").m
    for method in ("jennings2018", "wet_bulb", "air_temperature"):
        sf = phase.snow_fraction(method, t, rh, p, threshold_c=-1.0, half_width_k=1.0)
        cold = tw < 273.15 - 0.05  # away from the 0.1 K difference of the two wet bulbs
        assert cold.sum() > 50 and np.all(sf[cold] == 1.0), method
        assert np.any(sf[~cold] < 1.0), method


def test_bourgouin2000_warm_nose_over_cold_surface_is_freezing_rain():
    # Bourgouin (2000) [mem]: melting area > 13.2 J/kg with a shallow cold layer gives
    # freezing rain; a deep cold layer (area > 46 + 0.66 melt area) refreezes to pellets.
    p_lev = np.array([950e2, 900e2, 850e2, 800e2, 700e2])
    warm = np.array([[272.0], [277.0], [276.0], [270.0], [262.0]])
    melt, cold = phase.bourgouin2000_areas(np.array([271.0]), np.array([1000e2]), warm, p_lev)
    assert melt[0] > 13.2 and cold[0] < 46 + 0.66 * melt[0]
    assert phase.freezing_rain_fraction_bourgouin2000(melt, cold)[0] == 1.0
    # same warm nose above a deep, very cold surface layer -> ice pellets, no freezing rain
    p_lev2 = np.array([950e2, 900e2, 850e2, 800e2, 750e2, 700e2])
    deep = np.array([[258.0], [258.0], [262.0], [276.0], [271.0], [262.0]])
    melt2, cold2 = phase.bourgouin2000_areas(np.array([258.0]), np.array([1000e2]), deep, p_lev2)
    assert cold2[0] > 46 + 0.66 * melt2[0]
    assert phase.freezing_rain_fraction_bourgouin2000(melt2, cold2)[0] == 0.0
    # an all-cold sounding: no melting, nothing flagged
    cold_col = np.full((5, 1), 265.0)
    m3, c3 = phase.bourgouin2000_areas(np.array([268.0]), np.array([1000e2]), cold_col, p_lev)
    assert m3[0] == 0.0 and phase.freezing_rain_fraction_bourgouin2000(m3, c3)[0] == 0.0


def test_bourgouin_area_formula_on_a_linear_profile():
    # Area of a layer with T linear in ln p: R_d * mean(T - 273.15) * ln(p_bot / p_top) [calc].
    p_lev = np.array([900e2])
    melt, cold = phase.bourgouin2000_areas(
        np.array([272.15]), np.array([1000e2]), np.array([[274.15]]), p_lev
    )
    # crossing halfway in ln p: each triangle 0.5 * 1 K * ln(1000/900)/2
    expected = 287.04749097718457 * 0.5 * 1.0 * np.log(1000 / 900) / 2
    assert melt[0] == pytest.approx(expected, rel=1e-12) and cold[0] == pytest.approx(
        expected, rel=1e-12
    )


def test_freezing_rain_only_over_subfreezing_cells():
    snow, fz = phase.freezing_rain_at_cell(
        np.array([0.9, 0.9]), np.array([1.0, 1.0]), np.array([271.0, 275.0])
    )
    assert fz.tolist() == [1.0, 0.0] and snow[0] == 0.0 and snow[1] == 0.9

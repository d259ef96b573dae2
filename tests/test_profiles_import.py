"""Observed-profile import: CAAML v6 XML and regionmap's CSV profile format.

Fixtures in tests/data/profiles/ are invented profiles written by us following the CAAML
v6.0.3 SnowProfileIOP schema (namespace http://caaml.org/Schemas/SnowProfileIOP/v6.0.3) and
docs/profile_csv.md. Expected values and their sources:
* hand-hardness index F 1, 4F 2, 1F 3, P 4, K 5 and the half step 4F-1F = 2.5 (Fierz et al.
  2009, International Classification for Seasonal Snow on the Ground); "1F+" = 3 1/3 is the
  project's one-third convention for the sign (regionmap.snow.hardness);
* densities from hardness: Geldsetzer & Jamieson (2000) linear fits as recalled in
  recalled [mem, low confidence]: PP 45+36h, DF 91+35h, RG 91+71h, FC 112+46h, DH 185+25h;
* wetness -> liquid water content at the class midpoints of Fierz et al. (2009) (moist 0-3 %,
  wet 3-8 %) [src];
* temperatures: linear interpolation between the observed points and 0 degC at the ground,
  computed by hand [calc].
The top-down and bottom-up files describe the same snowpack independently, and the CSV file
gives the hand-computed layer temperatures explicitly: all three must agree.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from regionmap.errors import InputError
from regionmap.io.profiles import read_caaml_profile, read_csv_profile, read_profile

DATA = Path(__file__).parent / "data" / "profiles"


def test_caaml_top_down_layers_bottom_first_in_si():
    p = read_caaml_profile(DATA / "caaml_top_down.xml")
    # the recordTime 10:30+01:00 is 09:30 UTC
    assert p.time == np.datetime64("2026-02-10T09:30:00")
    assert list(p.grain_code) == [
        "DH",
        "FC",
        "MFcr",
        "RG",
        "SH",
        "DF",
        "PP",
    ]  # FCso->FC, SHsu->SH, DFdc->DF
    np.testing.assert_allclose(
        p.thickness_m, [0.20, 0.27, 0.03, 0.24, 0.01, 0.15, 0.10], atol=1e-12
    )
    assert p.snow_depth_m == pytest.approx(1.0)
    np.testing.assert_allclose(p.grain_size_mm, [3.0, 1.5, 1.5, 0.5, 4.0, 0.75, 1.0])
    # Fierz et al. (2009) hardness; "4F-1F" -> 2.5, "1F+" -> 3 1/3 (project convention)
    np.testing.assert_allclose(p.hardness_index, [2, 4, 5, 3 + 1 / 3, 1, 2.5, 1], atol=1e-12)


def test_density_from_hardness_geldsetzer_jamieson2000_mem():
    p = read_caaml_profile(DATA / "caaml_top_down.xml")
    rho = dict(zip(p.grain_code, p.density_kg_m3, strict=True))
    # Geldsetzer & Jamieson (2000) as recalled [mem]: DH 185+25*2, FC 112+46*4, PP 45+36*1,
    # DF 91+35*2.5; SH uses the FC fit (project choice): 112+46*1
    assert rho["DH"] == pytest.approx(235.0)
    assert rho["FC"] == pytest.approx(296.0)
    assert rho["PP"] == pytest.approx(81.0)
    assert rho["DF"] == pytest.approx(178.5)
    assert rho["SH"] == pytest.approx(158.0)
    assert rho["RG"] == 280.0  # observed, kept
    assert list(p.density_estimated) == [True, True, True, False, True, True, True]


def test_temperatures_interpolated_between_observations_and_ground_calc():
    p = read_caaml_profile(DATA / "caaml_top_down.xml")
    # layer mid-depths 90, 66.5, 51.5, 38, 25.5, 17.5, 5 cm; observed -8 (0 cm), -6 (20),
    # -3 (50), -1 (90), 0 degC at the ground (100 cm); linear by hand [calc]
    expected_c = [-1.0, -2.175, -2.925, -4.2, -5.45, -6.25, -7.5]
    np.testing.assert_allclose(p.temperature_k - 273.15, expected_c, atol=1e-9)


def test_top_down_bottom_up_and_csv_describe_the_same_snowpack():
    a = read_caaml_profile(DATA / "caaml_top_down.xml")
    b = read_caaml_profile(DATA / "caaml_bottom_up.xml")
    c = read_csv_profile(DATA / "winter_top_down.csv")
    for other in (b, c):
        assert other.time == a.time
        assert list(other.grain_code) == list(a.grain_code)
        for name in (
            "thickness_m",
            "density_kg_m3",
            "grain_size_mm",
            "hardness_index",
            "temperature_k",
            "liquid_frac",
        ):
            np.testing.assert_allclose(
                getattr(other, name), getattr(a, name), atol=1e-9, err_msg=name
            )
    assert not c.temperature_interpolated.any() and a.temperature_interpolated.all()


def test_missing_optional_fields_air_temperature_rule():
    p = read_caaml_profile(DATA / "caaml_minimal.xml")
    assert list(p.grain_code) == ["FC", "RG"]
    # "4F+" = 2 1/3 (project convention); FC fit 112 + 46 h [mem]
    assert p.density_kg_m3[0] == pytest.approx(112 + 46 * (2 + 1 / 3))
    assert np.all(p.liquid_frac == 0.0)  # no wetness: dry
    # no snow temperatures: surface = air temperature -4 degC, 0 degC at the ground (60 cm);
    # mid-depths 40 and 10 cm -> -4 + 4*40/60 and -4 + 4*10/60 [calc]
    np.testing.assert_allclose(p.temperature_k - 273.15, [-4 / 3, -10 / 3], atol=1e-9)


def test_no_air_temperature_means_isothermal_zero(tmp_path):
    text = (DATA / "caaml_minimal.xml").read_text()
    text = text.replace('<caaml:airTempPres uom="degC">-4.0</caaml:airTempPres>', "")
    path = tmp_path / "p.xml"
    path.write_text(text)
    np.testing.assert_allclose(read_caaml_profile(path).temperature_k, 273.15)


def test_wetness_classes_fierz2009_midpoints_and_wet_layers_at_zero():
    p = read_csv_profile(DATA / "spring_wet.csv")
    # bottom first: M (0-3 % -> 1.5 %), M-W (mean of 1.5 and 5.5 -> 3.5 %), W (3-8 % -> 5.5 %)
    np.testing.assert_allclose(p.liquid_frac, [0.015, 0.035, 0.055], atol=1e-12)
    np.testing.assert_allclose(p.temperature_k, 273.15)
    assert p.density_kg_m3[1] == 380.0
    np.testing.assert_allclose(p.liquid_kg_m2(), p.liquid_frac * 1000 * p.thickness_m)
    np.testing.assert_allclose(p.ice_kg_m2() + p.liquid_kg_m2(), p.density_kg_m3 * p.thickness_m)
    assert p.name == "Invented test slope, spring"


def test_malformed_xml_is_input_error():
    with pytest.raises(InputError, match=r"caaml_malformed\.xml: malformed XML"):
        read_profile(DATA / "caaml_malformed.xml")


def test_entity_expansion_refused():
    with pytest.raises(InputError, match=r"refused XML with a DTD, entity declaration"):
        read_profile(DATA / "caaml_entity_expansion.xml")


@pytest.mark.parametrize(
    ("old", "new", "match"),
    [
        (
            '<caaml:hardness uom="">P</caaml:hardness>',
            "",
            r"layer 6: required element 'hardness' is missing",
        ),
        (
            "<caaml:grainFormPrimary>RG</caaml:grainFormPrimary>",
            "",
            r"layer 4: required element 'grainFormPrimary'",
        ),
        (
            '<caaml:thickness uom="cm">3</caaml:thickness>',
            "",
            r"layer 5: required element 'thickness'",
        ),
        (
            "<caaml:timePosition>2026-02-10T10:30:00+01:00</caaml:timePosition>",
            "",
            r"timePosition \(the observation time\) is missing",
        ),
        (
            "<caaml:timePosition>2026-02-10T10:30:00+01:00</caaml:timePosition>",
            "<caaml:timePosition>yesterday</caaml:timePosition>",
            r"expected an ISO-8601 time",
        ),
        (
            '<caaml:hardness uom="">P</caaml:hardness>',
            '<caaml:hardness uom="">hard</caaml:hardness>',
            r"layer 6, hardness: expected a hand-hardness label",
        ),
        (
            "<caaml:grainFormPrimary>RG</caaml:grainFormPrimary>",
            "<caaml:grainFormPrimary>XX</caaml:grainFormPrimary>",
            r"unknown grain class 'XX'",
        ),
        (
            '<caaml:thickness uom="cm">27</caaml:thickness>',
            '<caaml:thickness uom="cm">20</caaml:thickness>',
            r"layers leave a gap of 7.0 cm",
        ),
        (
            "<caaml:snowTemp>-1.0</caaml:snowTemp>",
            "<caaml:snowTemp>2.0</caaml:snowTemp>",
            r"cannot be warmer than 0 °C",
        ),
        ('dir="top down"', 'dir="sideways"', r"dir must be 'top down' or 'bottom up'"),
        (
            "SnowProfileIOP/v6.0.3",
            "SnowProfileIOP/v5.0",
            r"expected SnowProfile in the CAAML v6 namespace",
        ),
        (
            '<caaml:wetness uom="">D</caaml:wetness>',
            '<caaml:wetness uom="">Q</caaml:wetness>',
            r"unknown wetness 'Q'",
        ),
        (
            '<caaml:height uom="cm">100</caaml:height>',
            '<caaml:height uom="cm">120</caaml:height>',
            r"profileDepth 100.0 cm is less than the snow depth 120.0 cm",
        ),
    ],
)
def test_caaml_errors_name_the_problem(tmp_path, old, new, match):
    text = (DATA / "caaml_top_down.xml").read_text()
    assert old in text
    path = tmp_path / "bad.xml"
    path.write_text(text.replace(old, new, 1))
    with pytest.raises(InputError, match=match):
        read_caaml_profile(path)


@pytest.mark.parametrize(
    ("text", "match"),
    [
        (
            "top_cm,bottom_cm,grain_class,grain_size_mm,hardness\n10,0,RG,0.5,1F\n",
            r"observation time is missing",
        ),
        (
            "# time: 2026-01-01T00:00Z\ntop_cm,bottom_cm,grain_class,grain_size_mm\n10,0,RG,0.5\n",
            r"missing \['hardness'\]",
        ),
        (
            "# time: 2026-01-01T00:00Z\n"
            "top_cm,bottom_cm,grain_class,grain_size_mm,hardness,colour\n"
            "10,0,RG,0.5,1F,x\n",
            r"unknown \['colour'\]",
        ),
        (
            "# time: 2026-01-01T00:00Z\n"
            "top_cm,bottom_cm,grain_class,grain_size_mm,hardness\n"
            "20,10,RG,0.5,1F\n",
            r"does not reach the ground",
        ),
        (
            "# time: 2026-01-01T00:00Z\n"
            "top_cm,bottom_cm,grain_class,grain_size_mm,hardness\n"
            "10,0,RG,big,1F\n",
            r"line 3, column 'grain_size_mm': expected a number, got 'big'",
        ),
        (
            "# time: 2026-01-01T00:00Z\n"
            "top_cm,bottom_cm,grain_class,grain_size_mm,hardness\n"
            "10,0,RG,0.5,1F\n"
            "30,12,FC,1,4F\n",
            r"gap of 2.0 cm",
        ),
        (
            "# time: 2026-01-01T00:00Z\n"
            "top_cm,bottom_cm,grain_class,grain_size_mm,hardness,wetness\n"
            "10,0,RG,0.5,1F,D-W\n",
            r"unknown wetness 'D-W'",
        ),
        (
            "# time: 2026-01-01T00:00Z\n"
            "top_cm,bottom_cm,grain_class,grain_size_mm,hardness\n"
            "10,10,RG,0.5,1F\n",
            r"no positive thickness",
        ),
        # values that cannot be physical: a 35 m snowpack (m written for cm), infinite
        # sizes, impossible densities
        (
            "# time: 2026-01-01T00:00Z\n"
            "top_cm,bottom_cm,grain_class,grain_size_mm,hardness\n"
            "3500,0,RG,0.5,1F\n",
            r"line 3: the layer's top lies at 35 m above the ground; expected 0 to 20 m",
        ),
        (
            "# time: 2026-01-01T00:00Z\n"
            "top_cm,bottom_cm,grain_class,grain_size_mm,hardness\n"
            "inf,0,RG,0.5,1F\n",
            r"the layer's top lies at inf m",
        ),
        (
            "# time: 2026-01-01T00:00Z\n"
            "top_cm,bottom_cm,grain_class,grain_size_mm,hardness\n"
            "10,0,RG,inf,1F\n",
            r"grain size inf mm; expected 0 to 100 mm",
        ),
        (
            "# time: 2026-01-01T00:00Z\n"
            "top_cm,bottom_cm,grain_class,grain_size_mm,hardness\n"
            "10,0,RG,-2,1F\n",
            r"column 'grain_size_mm': expected a size ≥ 0, got -2",
        ),
        (
            "# time: 2026-01-01T00:00Z\n"
            "top_cm,bottom_cm,grain_class,grain_size_mm,hardness,density_kg_m3\n"
            "10,0,RG,0.5,1F,5000\n",
            r"density 5000 kg m-3 .* inconsistent",
        ),
        (
            "# time: 2026-01-01T00:00Z\n"
            "top_cm,bottom_cm,grain_class,grain_size_mm,hardness,density_kg_m3\n"
            "10,0,RG,0.5,1F,-inf\n",
            r"line 3: density -inf kg m-3; expected \(0, 917\] or empty",
        ),
    ],
)
def test_csv_errors(tmp_path, text, match):
    path = tmp_path / "p.csv"
    path.write_text(text)
    with pytest.raises(InputError, match=match):
        read_csv_profile(path)


def test_unknown_suffix_and_missing_file(tmp_path):
    with pytest.raises(InputError, match=r"unknown suffix '\.txt'"):
        read_profile(tmp_path / "p.txt")
    with pytest.raises(InputError, match="does not exist"):
        read_profile(tmp_path / "p.xml")

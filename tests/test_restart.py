"""Restart cells from an observed profile (regionmap.pipeline.restart).

Outside sources of the expected values:
* the profile files themselves (tests/data/profiles, invented, written following the CAAML
  v6.0.3 SnowProfileIOP schema and docs/profile_csv.md): the tests read the raw CSV with the
  standard library and convert units by hand (cm -> m);
* hand-hardness index F 1, 4F 2, 1F 3, P 4, K 5, I 6, and the half step 4F-1F = 2.5
  (Fierz et al. 2009, The International Classification for Seasonal Snow on the Ground,
  IHP-VII Tech. Doc. Hydrol. 83); grain-class codes of the same classification, subclasses
  the model does not carry reduced to their main class (FCso -> FC, SHsu -> SH, DFdc -> DF);
* densities of layers without an observed density: the linear fits of Geldsetzer & Jamieson
  (2000, Proc. ISSW 2000, 121-127) as recalled [mem]: PP 45+36h, DF 91+35h,
  FC 112+46h, DH 185+25h (SH on the FC fit, project choice); MFcr at K: the RG fit at K,
  91+71*5 = 446 kg m-3 (project crust rule);
* conservation of mass and energy; enthalpy relative to liquid water at 0 degC with
  c_ice = 2100 J kg-1 K-1, c_water = 4217 J kg-1 K-1 and L_f = 3.334e5 J kg-1 (handbook
  values, e.g. Fierz et al. 2009 Appendix / Cuffey & Paterson 2010 Table 9.1 [mem]).
"""

from __future__ import annotations

import csv
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from regionmap.errors import InputError
from regionmap.pipeline.restart import (
    apply_restart,
    merge_restart_records,
    resolve_restarts,
    restarts_in_chunk,
    run_columns_with_restarts,
)
from regionmap.snow.codes import GRAIN_CODES
from regionmap.snow.column import run_columns
from regionmap.snow.diagnostics import layer_hardness_array
from regionmap.snow.params import SnowParams
from regionmap.snow.state import SnowState
from regionmap.snow.synthetic import hours, make_forcing

DATA = Path(__file__).parent / "data" / "profiles"
CSV = DATA / "winter_top_down.csv"
C_ICE, C_W, L_F = 2100.0, 4217.0, 3.334e5  # J kg-1 K-1, J kg-1 K-1, J kg-1 (handbook values)
HARDNESS = {"F": 1, "4F": 2, "1F": 3, "P": 4, "K": 5, "I": 6}  # Fierz et al. (2009)


def _cells() -> pd.DataFrame:
    """A small invented cell table: two zones, bands below 1500, 1500-1800, above 1800."""
    rows = []
    for zone in ("Invented North", "Invented South"):
        for lo, hi in ((-np.inf, 1500.0), (1500.0, 1800.0), (1800.0, np.inf)):
            for sector in ("N", "E", "S", "W", "flat"):
                rows.append((zone, lo, hi, sector, 0))
    t = pd.DataFrame(
        rows, columns=["zone", "band_lower_m", "band_upper_m", "aspect_sector", "slope_class"]
    )
    t.index = pd.RangeIndex(len(t), name="cell_id")
    return t


TIMES = hours("2026-02-10T01:00", 48)  # interval ends 02:00 .. 2026-02-12T01:00 UTC


def _entry(
    profile=CSV, *, zone="Invented North", bands=("1500-1800",), aspects=("N", "e"), time=None
):
    return {
        "profile": profile,
        "time": time,
        "zone": zone,
        "bands": list(bands),
        "aspects": list(aspects),
    }


def _raw_csv_layers(path: Path) -> list[dict]:
    lines = [ln for ln in path.read_text().splitlines() if ln.strip() and not ln.startswith("#")]
    rows = list(csv.DictReader(lines))
    return sorted(rows, key=lambda r: float(r["bottom_cm"]))  # bottom first


def _hardness_fierz(text: str) -> float:
    if "-" in text:
        a, b = text.split("-")
        return 0.5 * (HARDNESS[a] + HARDNESS[b])
    step = {"+": 1 / 3, "-": -1 / 3}.get(text[-1], 0.0)  # regionmap's one-third convention
    return HARDNESS[text.rstrip("+-")] + step


def _enthalpy(state: SnowState) -> np.ndarray:
    """Independent column enthalpy [J m-2] relative to liquid water at 0 degC."""
    out = np.zeros(state.n_cells)
    for c in range(state.n_cells):  # small test states: a plain loop is the clearest check
        n = state.layer_count[c]
        ice, liq = state.ice_kg_m2[c, :n], state.liquid_kg_m2[c, :n]
        t = state.temperature_k[c, :n].astype(np.float64) - 273.15
        out[c] = (
            np.sum((C_ICE * ice + C_W * liq) * t - L_F * ice)
            - L_F * state.cell_value("surface_hoar_kg_m2")[c]
        )
    return out


def test_resolve_matches_zone_band_aspect_and_rounds_to_the_hour():
    table = _cells()
    (r,) = resolve_restarts([_entry()], table, TIMES)
    assert r.observed_time == np.datetime64("2026-02-10T09:30")  # the file's '# time:' line
    assert r.time == np.datetime64("2026-02-10T10:00")  # nearest state time, half-way goes later
    expected = table.index[
        (table.zone == "Invented North")
        & (table.band_lower_m == 1500)
        & table.aspect_sector.isin(["N", "E"])
    ]
    np.testing.assert_array_equal(r.cell_ids, expected.to_numpy())
    # two adjacent bands written as one range, the open top band written up to 9000 m
    (r2,) = resolve_restarts([_entry(bands=("1500-9000",), aspects=("flat",))], table, TIMES)
    assert sorted(table.loc[r2.cell_ids, "band_lower_m"]) == [1500.0, 1800.0]
    # an entry time overrides the profile's
    (r3,) = resolve_restarts([_entry(time="2026-02-11T05:10Z")], table, TIMES)
    assert r3.time == np.datetime64("2026-02-11T05:00")


@pytest.mark.parametrize(
    "entry, match",
    [
        (
            _entry(zone="Nowhere"),
            r"unknown zone 'Nowhere'; the run's zones are \['Invented North', 'Invented South'\]",
        ),
        (
            _entry(bands=("2100-2400",)),
            r"band '2100-2400' does not match .* its bands are \['0-1500', '1500-1800', "
            r"'1800-9000'\]",
        ),
        (
            _entry(aspects=("NNE",)),
            r"aspect 'NNE' has no cell .* the aspects there are \['N', 'E', 'S', 'W', 'flat'\]",
        ),
        (
            _entry(time="2026-03-01T00:00"),
            r"restart time 2026-03-01T00:00:00 UTC .* outside the run's period",
        ),
        (_entry(profile=DATA / "missing.csv"), r"missing.csv"),
    ],
)
def test_bad_matching_gives_one_clear_error(entry, match):
    with pytest.raises(InputError, match=match):
        resolve_restarts([entry], _cells(), TIMES)


def test_same_cell_twice_at_one_time_and_too_many_layers_are_refused():
    with pytest.raises(InputError, match="both restart cell"):
        resolve_restarts([_entry(), _entry(aspects=("N",))], _cells(), TIMES)
    with pytest.raises(InputError, match="7 layers but cells hold at most"):
        resolve_restarts([_entry()], _cells(), TIMES, max_layers=5)


def test_restarted_cell_holds_the_profile_layers_from_the_file():
    (r,) = resolve_restarts([_entry()], _cells(), TIMES)
    state = SnowState.empty(3, 50, time=r.time)
    new, record = apply_restart(state, [1], r, SnowParams())
    raw = _raw_csv_layers(CSV)
    n = len(raw)
    assert new.layer_count.tolist() == [0, n, 0]  # only the listed cell changes
    thick = new.thickness_m[1, :n].astype(np.float64)
    # thickness: (top_cm - bottom_cm) / 100 from the file, float32 storage
    np.testing.assert_allclose(
        thick, [(float(x["top_cm"]) - float(x["bottom_cm"])) / 100 for x in raw], rtol=1e-6
    )
    # grain classes of the international classification, subclasses to main classes
    main = {"FCso": "FC", "SHsu": "SH", "DFdc": "DF"}
    codes = [GRAIN_CODES[c] for c in new.grain_code[1, :n]]
    assert codes == [main.get(x["grain_class"], x["grain_class"]) for x in raw]
    # density: the observed one where given, else Geldsetzer & Jamieson (2000) [mem] fits
    fits = {"PP": (45, 36), "DF": (91, 35), "FC": (112, 46), "DH": (185, 25), "SH": (112, 46)}
    density = (new.ice_kg_m2[1, :n] + new.liquid_kg_m2[1, :n]) / thick
    for x, code, rho in zip(raw, codes, density, strict=True):
        h = _hardness_fierz(x["hardness"])
        if x["density_kg_m3"]:
            expected = float(x["density_kg_m3"])
        elif code == "MFcr":
            expected = 91 + 71 * 5  # crust at K: RG fit at K (project crust rule)
        else:
            expected = fits[code][0] + fits[code][1] * h
        assert rho == pytest.approx(expected, rel=1e-6), code
    # hand hardness: the model derives it from density and class; it reproduces the observed
    # hardness (Fierz et al. 2009 scale) wherever the density came from the hardness, within
    # the class's field range (an observation outside it gives the range's nearest end)
    from regionmap.snow.hardness import FIELD_HARDNESS_RANGE

    model_h = layer_hardness_array(new)[1, :n]
    for x, code, h_model in zip(raw, codes, model_h, strict=True):
        if not x["density_kg_m3"]:
            lo, hi = FIELD_HARDNESS_RANGE[code]
            expected = min(max(_hardness_fierz(x["hardness"]), lo), hi)
            assert h_model == pytest.approx(expected, abs=1e-5), code
    # temperature from the file's temperature_degC column, deposition time = restart time
    np.testing.assert_allclose(
        new.temperature_k[1, :n], [float(x["temperature_degC"]) + 273.15 for x in raw], atol=1e-4
    )
    t_s = r.time.astype("datetime64[s]").astype(np.int64) - 946684800
    assert np.all(new.deposition_time_s2000[1, :n] == t_s) and np.all(new.event_id[1, :n] == -1)
    # crust kind for the melt-freeze crust, surface state reset
    crust = new.crust_code[1, :n]
    assert [c != 0 for c in crust] == [code == "MFcr" for code in codes]
    assert new.cell_value("surface_temperature_k")[1] == pytest.approx(
        float(raw[-1]["temperature_degC"]) + 273.15, abs=1e-4
    )
    assert new.cell_value("surface_hoar_kg_m2")[1] == 0.0 and not new.new_snow_kg_m2[1].any()
    assert record["cell_id"] == [1] and record["layers"] == n


def test_increments_close_with_the_state_difference():
    # conservation: the increment is exactly the change of SWE and enthalpy the restart makes
    t = hours("2026-02-09T00:00", 33)  # 33 h of snow before the restart at 2026-02-10T09:00
    state0 = SnowState.empty(2, 50, time="2026-02-09T00:00")
    before, _, _ = run_columns(
        state0,
        make_forcing(t, 2, t_air_k=268.0, precip_kg_m2=0.8),
        diag_every_h=1,
        with_snapshots=False,
    )
    (r,) = resolve_restarts(
        [_entry(time="2026-02-10T09:00")], _cells(), hours("2026-02-09T00:00", 60)
    )
    after, record = apply_restart(before, [0], r, SnowParams())
    dswe = after.swe_kg_m2() - before.swe_kg_m2()
    dh = _enthalpy(after) - _enthalpy(before)
    assert record["swe_increment_kg_m2"] == [pytest.approx(dswe[0], rel=1e-12)]
    assert record["enthalpy_increment_j_m2"] == [pytest.approx(dh[0], rel=1e-9)]
    assert dswe[1] == 0.0 and dh[1] == 0.0  # the other cell is untouched
    # the new SWE is the profile's: sum of density x thickness
    raw = _raw_csv_layers(CSV)
    assert after.swe_kg_m2()[0] == pytest.approx(
        sum(
            (float(x["top_cm"]) - float(x["bottom_cm"])) / 100 * rho
            for x, rho in zip(
                raw,
                (after.ice_kg_m2[0] + after.liquid_kg_m2[0])[:7] / after.thickness_m[0, :7],
                strict=True,
            )
        ),
        rel=1e-6,
    )


def test_run_split_at_the_restart_evolves_and_closes_mass():
    params = SnowParams()
    table = _cells()
    (r,) = resolve_restarts([_entry()], table, TIMES)
    lo, hi = 4, 9  # a chunk holding the restarted cells 5 and 6 (positions 1 and 2 locally)
    chunk = restarts_in_chunk([r], lo, hi)
    assert [p.tolist() for _, p in chunk] == [[1, 2]]
    snowing = np.where(TIMES <= r.time, 0.3, 0.0)  # snow until the restart, then dry and cold
    forcing = make_forcing(TIMES, hi - lo, t_air_k=266.0, precip_kg_m2=snowing, wind_m_s=2.0)
    state0 = SnowState.empty(
        hi - lo, 50, time=TIMES[0] - np.timedelta64(3600, "s"), cell_id=np.arange(lo, hi)
    )
    end, diags, snaps, records = run_columns_with_restarts(state0, forcing, chunk, params, 1, 6)
    assert diags["swe_kg_m2"].shape == (5, 48) and diags["time"].size == 48
    k = int(np.flatnonzero(diags["time"] == r.time)[0])
    depth = diags["snow_depth_cm"]
    # before the restart every cell has the same new snow; one hour after it the restarted
    # cells carry the profile's 100 cm less an hour's settlement
    assert depth[1, k] == pytest.approx(depth[0, k], rel=1e-6)
    assert 97.0 < depth[1, k + 1] <= 100.0 and depth[0, k + 1] < 10.0
    # then it evolves: without new snow the pack settles under its own weight (common
    # practice: a pack topped by new snow loses a few cm in a day and a half)
    assert 85.0 < depth[1, -1] < depth[1, k + 1] - 0.5
    # mass closure with the increment: change = fluxes + restart increment (conservation)
    fluxes = (
        diags["snowfall_kg_m2"]
        + diags["rain_kg_m2"]
        + diags["deposition_kg_m2"]
        - diags["sublimation_kg_m2"]
        - diags["runoff_kg_m2"]
    ).sum(axis=1)
    increment = np.zeros(hi - lo)
    (rec,) = records
    increment[np.asarray(rec["cell_id"]) - lo] = rec["swe_increment_kg_m2"]
    np.testing.assert_allclose(
        end.swe_kg_m2() - state0.swe_kg_m2(), fluxes + increment, rtol=1e-9, atol=1e-9
    )
    # energy bookkeeping of the kernel is not disturbed by the restart
    assert np.abs(diags["energy_residual_w_m2"][1:3, k + 1 :]).mean() <= 0.1
    assert merge_restart_records(records)[0]["cell_id"] == [5, 6]


def test_caaml_and_csv_profiles_restart_the_same_column():
    table = _cells()
    states = []
    for name in ("caaml_top_down.xml", "caaml_bottom_up.xml", "winter_top_down.csv"):
        (r,) = resolve_restarts([_entry(DATA / name)], table, TIMES)
        new, _ = apply_restart(SnowState.empty(1, 50, time=r.time), [0], r)
        states.append(new)
    for other in states[1:]:
        for name in (
            "thickness_m",
            "ice_kg_m2",
            "liquid_kg_m2",
            "temperature_k",
            "grain_code",
            "crust_code",
        ):
            np.testing.assert_allclose(
                getattr(other, name), getattr(states[0], name), atol=1e-5, err_msg=name
            )


def test_wet_profile_restart_holds_liquid_at_zero_degrees():
    # docs/profile_csv.md / Fierz et al. (2009) Table 3.4 midpoints: moist 1.5 %, wet 5.5 %
    raw = _raw_csv_layers(DATA / "spring_wet.csv")
    (r,) = resolve_restarts(
        [_entry(DATA / "spring_wet.csv", time="2026-02-11T12:00")], _cells(), TIMES
    )
    new, record = apply_restart(SnowState.empty(1, 50, time=r.time), [0], r)
    n = len(raw)
    lwc = new.liquid_kg_m2[0, :n] / (1000.0 * new.thickness_m[0, :n])
    mid = {"D": 0.0, "M": 0.015, "W": 0.055, "M-W": 0.035, "": 0.0}
    np.testing.assert_allclose(lwc, [mid[x.get("wetness", "")] for x in raw], atol=1e-6)
    assert np.all(new.temperature_k[0, :n][lwc > 0] == np.float32(273.15))
    # from an empty column the increment is the whole column's enthalpy (liquid at 0 degC)
    assert record["enthalpy_increment_j_m2"][0] == pytest.approx(_enthalpy(new)[0], rel=1e-9)


def test_apply_refuses_a_state_at_another_time():
    (r,) = resolve_restarts([_entry()], _cells(), TIMES)
    with pytest.raises(InputError, match="the state is valid at .* but the restart is at"):
        apply_restart(SnowState.empty(1, 50, time="2026-02-10T11:00"), [0], r)

"""`regionmap verify` through regionmap.stations.chain on demo-derived synthetic observations.

The demo region and its weather are invented (regionmap.demo.scenario). Observations are made from
the model's own station series with biases chosen here, written to CSV files in everyday
units (degC, %, mm, cm), and read back by the command: the expected scores are known by
construction, and the scores are recomputed with plain NumPy from the CSV text (Wilks 2011,
Statistical Methods in the Atmospheric Sciences, Sect. 8.3: bias = mean(model - obs),
percent over-prediction of the total = 100 (sum model / sum obs - 1)).
"""

from __future__ import annotations

import csv
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

from regionmap.config import load_config
from regionmap.errors import InputError
from regionmap.io.stations import read_stations
from regionmap.stations.chain import run_verification_last_day, station_model_series, verify_command

START, END = "2026-01-08", "2026-01-21T23:00"  # 14 days of the invented season, a storm included
# station pixels (row, col) on the 300 x 300 demo DEM and their metadata exposure class
STATIONS = {
    "LOWPLOT": ((250, 60), "sheltered"),
    "CREST": ((150, 180), "exposed"),
    "MIDSLOPE": ((80, 220), ""),
}


def write_scenario(folder: Path, dem, *, start=START, end=END, lapse=None) -> Path:
    """Demo forcing for a short window and a config using the shipped demo DEM and zones."""
    from regionmap.demo.scenario import SHIPPED_DEM, SHIPPED_ZONES
    from regionmap.demo.weather import write_demo_forcing

    folder.mkdir(parents=True, exist_ok=True)
    write_demo_forcing(
        folder / "forcing.nc", dem.elevation_m, dem.transform, dem.crs, start=start, end=end
    )
    extra = (
        f'\n[downscale]\nlapse = "fixed"\nlapse_rate_k_per_km = {lapse}\n'
        if lapse is not None
        else ""
    )
    text = f"""[region]
dem = "{SHIPPED_DEM}"
zones = "{SHIPPED_ZONES}"
zone_field = "name"

[forcing]
path = "forcing.nc"

[output]
dir = "out"
{extra}"""
    (folder / "demo.toml").write_text(text)
    return folder / "demo.toml"


def write_stations(path: Path, dem, stations=STATIONS, *, elevations=None) -> Path:
    from pyproj import Transformer

    to_ll = Transformer.from_crs(dem.crs, "EPSG:4326", always_xy=True)
    lines = [
        "# invented stations on the invented demo range",
        "id,lon,lat,elevation_m,exposure_class",
    ]
    for sid, ((r, c), cls) in stations.items():
        x = dem.transform.c + (c + 0.5) * dem.transform.a
        y = dem.transform.f + (r + 0.5) * dem.transform.e
        lon, lat = to_ll.transform(x, y)
        z = dem.elevation_m[r, c] if elevations is None else elevations[sid]
        lines.append(f"{sid},{lon:.7f},{lat:.7f},{z:.1f},{cls}")
    path.write_text("\n".join(lines) + "\n")
    return path


def write_observations(path: Path, rows: list[dict], header: list[str]) -> Path:
    with path.open("w", newline="") as fh:
        w = csv.DictWriter(fh, fieldnames=header)
        w.writeheader()
        w.writerows(rows)
    return path


@pytest.fixture(scope="module")
def scenario(tmp_path_factory, demo_dem, demo_terrain):
    folder = tmp_path_factory.mktemp("verify")
    cfg = load_config(write_scenario(folder, demo_dem))
    stations_path = write_stations(folder / "stations.csv", demo_dem)
    stations = read_stations(stations_path)
    region = SimpleNamespace(dem=demo_dem, terrain=demo_terrain)
    model = station_model_series(cfg, stations, None, region=region, snow=True)
    return SimpleNamespace(
        folder=folder,
        cfg=cfg,
        stations_path=stations_path,
        stations=stations,
        region=region,
        model=model,
    )


# known biases of the model (model - obs, or model / obs), by construction
T_BIAS_K = 2.0
PRECIP_OVER = 1.6
DEPTH_BIAS_M = -0.05


def synthetic_observations(
    model: pd.DataFrame, folder: Path, *, seed=7, wind_factor=None
) -> list[Path]:
    """Hourly obs for LOWPLOT and CREST, daily precipitation and snow depth at MIDSLOPE."""
    rng = np.random.default_rng(seed)
    wind_factor = wind_factor or {"LOWPLOT": 0.2, "CREST": 1.3, "MIDSLOPE": 1.0}
    hourly, daily = [], []
    for sid, block in model.groupby(level="station_id"):
        t = block.index.get_level_values("time")
        n = len(block)
        temp_c = block["air_temperature"].to_numpy() - T_BIAS_K - 273.15 + rng.normal(0, 0.3, n)
        rh_pct = np.clip(block["relative_humidity"].to_numpy() * 100 - 5.0, 0, 100)
        wind = block["wind_speed"].to_numpy() * wind_factor[sid] * rng.uniform(0.9, 1.1, n)
        precip = block["precipitation"].to_numpy() / PRECIP_OVER
        depth_cm = (block["snow_depth"].to_numpy() - DEPTH_BIAS_M) * 100
        if sid != "MIDSLOPE":
            for k in range(n):
                hourly.append(
                    {
                        "station_id": sid,
                        "time": f"{t[k].isoformat()}Z",
                        "air_temperature[degC]": f"{temp_c[k]:.3f}",
                        "relative_humidity[%]": f"{rh_pct[k]:.2f}",
                        "wind_speed[km h-1]": f"{wind[k] * 3.6:.4f}",
                        "precipitation[mm]": f"{precip[k]:.5f}",
                        "snow_depth[cm]": f"{depth_cm[k]:.3f}",
                    }
                )
        else:  # daily rows at 06 UTC: precipitation summed over the day before, depth at 06 UTC
            ends = np.flatnonzero((t.hour == 6) & (np.arange(n) >= 24))
            for e in ends:
                daily.append(
                    {
                        "station_id": sid,
                        "time": f"{t[e].isoformat()}Z",
                        "precipitation[mm]": f"{precip[e - 23 : e + 1].sum():.5f}",
                        "snow_depth[cm]": f"{depth_cm[e]:.3f}",
                    }
                )
    a = write_observations(folder / "obs_hourly.csv", hourly, list(hourly[0]))
    b = write_observations(folder / "obs_daily.csv", daily, list(daily[0]))
    return [a, b]


def _csv_column(path: Path, station: str, column: str) -> tuple[np.ndarray, np.ndarray]:
    rows = [r for r in csv.DictReader(path.open()) if r["station_id"] == station]
    times = np.array([np.datetime64(r["time"].rstrip("Z"), "s") for r in rows])
    return times, np.array([float(r[column]) for r in rows])


def test_verify_recovers_the_known_biases(scenario, capsys):
    obs_paths = synthetic_observations(scenario.model, scenario.folder)
    out = scenario.folder / "verify_out"
    table = verify_command(
        scenario.cfg, scenario.stations_path, obs_paths, out, region=scenario.region
    )
    row = table.set_index(["station_id", "variable"])
    # temperature: model - obs = +2 K by construction (noise of 0.3 K averages out)
    for sid in ("LOWPLOT", "CREST"):
        assert row.loc[(sid, "air_temperature"), "bias"] == pytest.approx(T_BIAS_K, abs=0.05)
        # precipitation: a 1.6x over-forecast is +60 % (common practice: 24 against 21.8 is +10 %)
        assert row.loc[(sid, "precipitation"), "total_percent_difference"] == pytest.approx(
            60.0, abs=0.5
        )
        assert row.loc[(sid, "snow_depth"), "bias"] == pytest.approx(DEPTH_BIAS_M, abs=1e-4)
    # daily station: hourly model summed over each observation day, same +60 %
    assert row.loc[("MIDSLOPE", "precipitation"), "total_percent_difference"] == pytest.approx(
        60.0, abs=0.5
    )
    assert row.loc[("MIDSLOPE", "precipitation"), "n"] == 13
    # plain NumPy reference from the CSV text: bias of wind at the sheltered plot
    times, wind_kmh = _csv_column(obs_paths[0], "LOWPLOT", "wind_speed[km h-1]")
    model_wind = scenario.model.loc["LOWPLOT"]["wind_speed"].reindex(times).to_numpy()
    assert row.loc[("LOWPLOT", "wind_speed"), "bias"] == pytest.approx(
        np.mean(model_wind - wind_kmh / 3.6), abs=1e-4
    )
    assert row.loc[("LOWPLOT", "wind_speed"), "n"] == times.size
    # the CSV, the figures, the console table and the caution
    written = pd.read_csv(out / "verification.csv")
    assert len(written) == len(table) and {"period_start", "period_end", "exposure_class"} <= set(
        written.columns
    )
    assert (out / "figures" / "verification_scatter_air-temperature.png").stat().st_size > 10_000
    assert (out / "figures" / "verification_precipitation_accumulated.png").is_file()
    text = capsys.readouterr().out
    assert "LOWPLOT" in text and "Caution:" in text and "field observations" in text


def test_station_chain_applies_the_lapse_rate_icao(tmp_path, demo_dem, demo_terrain):
    # two stations on the same pixel, 1000 m apart in stated elevation, fixed lapse rate of
    # 6.5 K km-1 (ICAO standard atmosphere, ISO 2533:1975): 6.5 K colder at the upper one
    cfg = load_config(
        write_scenario(tmp_path, demo_dem, start="2026-01-08", end="2026-01-08T23:00", lapse=6.5)
    )
    pixel = (150, 180)
    path = write_stations(
        tmp_path / "st.csv",
        demo_dem,
        {"LOWER": (pixel, ""), "UPPER": (pixel, "")},
        elevations={"LOWER": 1800.0, "UPPER": 2800.0},
    )
    m = station_model_series(
        cfg, read_stations(path), None, region=SimpleNamespace(dem=demo_dem, terrain=demo_terrain)
    )
    dt = m.loc["LOWER"]["air_temperature"].to_numpy() - m.loc["UPPER"]["air_temperature"].to_numpy()
    np.testing.assert_allclose(dt, 6.5, atol=1e-9)
    # horizontal shortwave never exceeds the top-of-atmosphere value on a horizontal plane
    # (solar constant 1361 W m-2, Kopp & Lean 2011, GRL 38, L01706)
    assert m["shortwave_down"].max() < 1361.0 and m["shortwave_down"].min() >= 0.0


def test_station_outside_the_dem_is_one_clear_error(scenario, tmp_path):
    path = tmp_path / "far.csv"
    path.write_text("id,lon,lat,elevation_m\nFAR,0.5,10.0,100\n")
    obs = tmp_path / "obs.csv"
    obs.write_text("station_id,time,air_temperature[degC]\nFAR,2026-01-09T00:00Z,1.0\n")
    with pytest.raises(InputError, match=r"station\(s\) \['FAR'\] lie outside the DEM"):
        verify_command(
            scenario.cfg, path, [obs], tmp_path / "out", region=scenario.region, echo=False
        )


def test_observations_outside_the_forcing_period(scenario, tmp_path):
    obs = tmp_path / "obs.csv"
    obs.write_text("station_id,time,air_temperature[degC]\nLOWPLOT,2025-03-01T00:00Z,1.0\n")
    with pytest.raises(InputError, match="do not overlap the forcing"):
        verify_command(
            scenario.cfg,
            scenario.stations_path,
            [obs],
            tmp_path / "out",
            region=scenario.region,
            echo=False,
        )


def test_last_day_verification_for_the_run(scenario):
    obs_paths = synthetic_observations(scenario.model, scenario.folder, seed=3)
    cfg = scenario.cfg.model_copy(
        update={
            "stations": SimpleNamespace(stations=scenario.stations_path, observations=obs_paths)
        }
    )
    out = scenario.folder / "run_out"
    out.mkdir()
    table = run_verification_last_day(cfg, scenario.region, out, np.datetime64("2026-01-20T06:00"))
    written = pd.read_csv(out / "verification.csv")
    assert set(written["period_start"]) == {"2026-01-19T06:00:00"} and set(
        written["period_end"]
    ) == {"2026-01-20T06:00:00"}
    row = table.set_index(["station_id", "variable"])
    assert row.loc[("LOWPLOT", "air_temperature"), "n"] == 24  # the 24 hours of that day
    assert row.loc[("MIDSLOPE", "precipitation"), "n"] == 1  # one daily row ends in it
    assert row.loc[("LOWPLOT", "air_temperature"), "bias"] == pytest.approx(T_BIAS_K, abs=0.3)
    assert (
        run_verification_last_day(
            scenario.cfg, scenario.region, out, np.datetime64("2026-01-20T06:00")
        )
        is None
    )


def test_undercatch_correction_before_comparing(scenario, tmp_path):
    # Kochendorfer et al. (2017, HESS 21) catch efficiency CE <= 1: corrected gauge totals are
    # larger, so the model's over-prediction shrinks; amounts without wind (the daily
    # station) cannot be corrected and drop out
    obs = synthetic_observations(scenario.model, tmp_path, seed=9)
    plain = verify_command(
        scenario.cfg,
        scenario.stations_path,
        obs,
        tmp_path / "a",
        region=scenario.region,
        echo=False,
    )
    corrected = verify_command(
        scenario.cfg,
        scenario.stations_path,
        obs,
        tmp_path / "b",
        undercatch="single_alter",
        region=scenario.region,
        echo=False,
    )
    key = ["station_id", "variable"]
    p, c = plain.set_index(key), corrected.set_index(key)
    assert (
        c.loc[("CREST", "precipitation"), "total_percent_difference"]
        < p.loc[("CREST", "precipitation"), "total_percent_difference"] - 1.0
    )
    assert c.loc[("MIDSLOPE", "precipitation"), "n"] == 0
    assert (
        c.loc[("CREST", "air_temperature"), "bias"] == p.loc[("CREST", "air_temperature"), "bias"]
    )

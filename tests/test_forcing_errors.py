"""Forcing reader, bad input: one test per rule of the forcing conventions.

Each rule is checked for the error class (regionmap.errors) and that the message names the
file and the variable. Tolerances (3 h gaps, -0.05 kg m-2) are the project's contract
(the forcing conventions), not outside values.
"""

from __future__ import annotations

import numpy as np
import pytest
from test_forcing_reader import hourly_amounts, make_forcing, own_coords, write

from regionmap.errors import ConfigError, ForcingReadError, GridMismatchError
from regionmap.io.forcing import open_forcing


def test_missing_variable_names_standard_name_and_alternatives(tmp_path):
    path = write(make_forcing(drop=("rh",)), tmp_path)
    with pytest.raises(
        ForcingReadError,
        match=r"f\.nc.*humidity.*relative_humidity or specific_humidity or dew_point_temperature",
    ):
        open_forcing(path)


def test_unknown_units(tmp_path):
    ds = make_forcing()
    ds["rh"].attrs["units"] = "furlongs_per_fortnight"
    with pytest.raises(ForcingReadError, match=r"f\.nc.*'rh'.*not understood"):
        open_forcing(write(ds, tmp_path))


def test_incompatible_units(tmp_path):
    ds = make_forcing()
    ds["t2m"].attrs["units"] = "m s-1"
    with pytest.raises(ForcingReadError, match=r"f\.nc.*'t2m'.*cannot be converted to 'K'"):
        open_forcing(write(ds, tmp_path))


@pytest.mark.parametrize("what", ["duplicated", "not increasing"])
def test_times_not_increasing_or_duplicated(tmp_path, what):
    ds = make_forcing().drop_vars("time_bnds")
    t = ds["time"].values.copy()
    if what == "duplicated":
        t[10] = t[9]
    else:
        t[[10, 11]] = t[[11, 10]]
    ds = ds.assign_coords(time=("time", t))
    with pytest.raises(ForcingReadError, match=rf"f\.nc.*'time'.*{what}"):
        open_forcing(write(ds, tmp_path))


def test_gap_longer_than_3h_fails_shorter_is_filled_and_counted(tmp_path):
    ds = make_forcing()
    long_gap = ds.isel(time=np.r_[0:10, 14:48])  # 4 hours missing
    with pytest.raises(ForcingReadError, match=r"f\.nc.*4 h without data"):
        open_forcing(write(long_gap, tmp_path))
    short = ds.isel(time=np.r_[0:10, 12:48])  # 2 hours missing
    gf = open_forcing(write(short, tmp_path, "g.nc"))
    assert gf.counts["gap_hours_filled"] == 2
    # temperature rises 0.1 K per hour: linear filling restores it
    t = gf.air_temperature.values[:, 0, 0]
    np.testing.assert_allclose(np.diff(t), 0.1, atol=2e-4)


def test_gap_without_bounds_is_a_step_error(tmp_path):
    ds = make_forcing().drop_vars("time_bnds").isel(time=np.r_[0:10, 15:48])
    ds["time"].attrs.pop("bounds", None)
    with pytest.raises(ForcingReadError, match=r"f\.nc.*'t2m'.*step of 6 h \(5 h missing\)"):
        open_forcing(write(ds, tmp_path))


def test_nan_run_longer_than_3h_fails_shorter_is_filled_and_counted(tmp_path):
    ds = make_forcing()
    ds["t2m"][20:24, 2, 3] = np.nan
    with pytest.raises(ForcingReadError, match=r"f\.nc.*'t2m'.*4 consecutive missing hours"):
        open_forcing(write(ds, tmp_path))
    ds = make_forcing()
    ds["t2m"][20:22, 2, 3] = np.nan
    gf = open_forcing(write(ds, tmp_path, "g.nc"))
    assert gf.counts["nan_filled"] == 2
    np.testing.assert_allclose(np.diff(gf.air_temperature.values[18:25, 2, 3]), 0.1, atol=2e-4)


def test_negative_precipitation_beyond_tolerance_fails_tiny_is_clipped(tmp_path):
    amounts = hourly_amounts(48, 6, 7)
    bad = amounts.copy()
    bad[30, 1, 1] = -0.1  # a decrease of the accumulated amount
    with pytest.raises(ForcingReadError, match=r"f\.nc.*'pr'.*-0\.100 kg m-2"):
        open_forcing(write(make_forcing(precip="accumulated", amounts=bad), tmp_path))
    tiny = amounts.copy()
    tiny[30, 1, 1] = -0.015625
    gf = open_forcing(write(make_forcing(precip="accumulated", amounts=tiny), tmp_path, "g.nc"))
    assert gf.counts["negative_precip_clipped"] == 1
    assert gf.precipitation.values[30, 1, 1] == 0.0


def test_relative_humidity_above_100_percent_is_clipped_and_counted(tmp_path):
    ds = make_forcing()
    ds["rh"][5:8, 0, 0] = 103.0
    gf = open_forcing(write(ds, tmp_path))
    assert gf.counts["rh_clipped"] == 3
    assert gf.relative_humidity.values[5:8, 0, 0].max() == 1.0


def test_cells_outside_the_grid_print_both_extents(tmp_path):
    gf = open_forcing(write(make_forcing("latlon1d"), tmp_path))
    gf.check_covers([11.1, 11.2], [46.2, 46.2])  # inside: no error
    with pytest.raises(
        GridMismatchError,
        match=r"f\.nc.*1 of 2 points.*grid extent lon 11\.0000\.\.11\.3000.*"
        r"points span lon 11\.1000\.\.12\.0000",
    ):
        gf.check_covers([11.1, 12.0], [46.2, 46.2])


def test_several_temperatures_need_height_to_pick(tmp_path):
    ds = make_forcing()
    ds["t10"] = ds["t2m"] - 0.5
    own_coords(ds, "t2m", "height2")
    own_coords(ds, "t10", "height10")
    path = write(ds, tmp_path)
    with pytest.raises(
        ForcingReadError,
        match=r"several variables have standard_name 'air_temperature': "
        r"t10 \(height 10\.0\), t2m \(height 2\.0\)",
    ):
        open_forcing(path)
    gf = open_forcing(path, heights_m={"temperature": 10.0, "wind": 10.0})
    np.testing.assert_allclose(gf.air_temperature.values, ds["t10"].values, rtol=1e-6)


def test_bad_variables_mapping_is_a_config_error(tmp_path):
    path = write(make_forcing(), tmp_path)
    with pytest.raises(ConfigError, match=r"variables\.air_temp"):
        open_forcing(path, variables={"air_temp": {"name": "t2m"}})
    with pytest.raises(
        ForcingReadError, match=r"'T2M' named in \[forcing\] variables\.air_temperature"
    ):
        open_forcing(path, variables={"air_temperature": {"name": "T2M"}})


@pytest.mark.parametrize(
    "case, expect",
    [
        (
            "celsius_as_kelvin",
            r"'t2m'.*-?\d.* K at .*cannot be physical.*degrees Celsius labelled K",
        ),
        ("kelvin_as_celsius", r"'t2m'.*cannot be physical.*kelvin labelled degrees Celsius"),
        ("wind_in_km_h", r"'u10'.*cannot be physical.*km h-1 labelled m s-1"),
        ("precip_mm_as_m", r"'pr'.*kg m-2 per hour.*cannot be physical.*mm labelled m"),
        ("temperature_spike", r"'t2m'.*1e\+06 K at 2026-01-01T13:00:00 cannot be physical"),
    ],
)
def test_values_that_cannot_be_physical_are_refused_at_open(tmp_path, case, expect):
    # bounds well beyond the world's weather records (184-330 K air temperature, ~113 m s-1
    # gusts, ~300 mm of rain in an hour): common knowledge, not fitted values
    ds = make_forcing()
    if case == "celsius_as_kelvin":
        ds["t2m"] = ds["t2m"] - 273.15
    elif case == "kelvin_as_celsius":
        ds["t2m"].attrs["units"] = "degC"
    elif case == "wind_in_km_h":
        ds["u10"] = ds["u10"] * 0 + 100.0
    elif case == "precip_mm_as_m":
        ds["pr"] = ds["pr"] + 5.0
        ds["pr"].attrs.update(units="m", standard_name="lwe_thickness_of_precipitation_amount")
    else:
        ds["t2m"][12, 1, 1] = 1e6
    for name in ("t2m", "u10", "pr"):
        ds[name].attrs.update(
            {k: v for k, v in make_forcing()[name].attrs.items() if k not in ds[name].attrs}
        )
    with pytest.raises(ForcingReadError, match=r"f\.nc.*" + expect):
        open_forcing(write(ds, tmp_path))


def test_a_corrupted_compressed_chunk_names_file_and_variable(tmp_path):
    import h5py

    ds = make_forcing(n_h=96, ny=12, nx=12)
    enc = {
        k: {"units": "hours since 2025-10-01 00:00:00", "dtype": "float64"}
        for k in ("time", "time_bnds")
    }
    for name in ("t2m", "rh", "u10", "v10", "ssrd", "pr"):
        enc[name] = {"zlib": True, "complevel": 4, "chunksizes": (48, 6, 6)}
    path = tmp_path / "f.nc"
    ds.to_netcdf(path, encoding=enc)
    with h5py.File(path) as f:
        chunk = f["u10"].id.get_chunk_info(2)
    raw = bytearray(path.read_bytes())
    middle = chunk.byte_offset + chunk.size // 2
    raw[middle : middle + 32] = b"\xff" * 32  # inside the deflate stream of one chunk
    path.write_bytes(bytes(raw))
    with pytest.raises(ForcingReadError, match=r"f\.nc', variable 'u10': cannot be read.*damaged"):
        open_forcing(path)

"""Pipeline checks on a small synthetic grid and cell set that follow the contracts."""

from dataclasses import dataclass, field

import numpy as np
import pytest

from regionmap.downscale import solar
from regionmap.downscale.pipeline import CellBatch, downscale_cells, downscale_record
from regionmap.downscale.settings import BiasSettings, DownscaleSettings
from regionmap.downscale.weights import build_cell_weights
from regionmap.errors import ConfigError, GridMismatchError, InputError

LON0, LAT0, D = 10.0, 46.0, 0.05
NY, NX = 9, 11


@dataclass
class FakeGrid:
    """A regular lat/lon grid with the GridForcing reading API, counting reads."""

    time: np.ndarray
    fields: dict
    surface_altitude: np.ndarray
    heights_m: dict = field(default_factory=lambda: {"wind": 10.0, "temperature": 2.0})
    longwave_down: object = None
    freezing_rain_frac: object = None
    upper_air_temperature: object = None
    upper_air_pressure_pa: object = None
    reads: int = 0
    paths: tuple = ("synthetic.nc",)

    def grid_index_of(self, lon, lat):
        fi = (np.asarray(lat) - LAT0) / D
        fj = (np.asarray(lon) - LON0) / D
        bad = (fi < 0) | (fi > NY - 1) | (fj < 0) | (fj > NX - 1)
        return np.where(bad, np.nan, fi), np.where(bad, np.nan, fj)

    def extent_lonlat(self):
        return (LON0, LON0 + D * (NX - 1), LAT0, LAT0 + D * (NY - 1))

    def read_block(self, names, iy, ix, time_slice):
        self.reads += 1
        return {n: self.fields[n][time_slice][..., iy, ix].astype(np.float32) for n in names}


def make_grid(n_t=72, start="2026-01-10T01:00", seed=0, t_fn=None):
    rng = np.random.default_rng(seed)
    time = np.datetime64(start) + np.arange(n_t).astype("timedelta64[h]")
    z = 1200.0 + 600.0 * rng.random((NY, NX))
    shape = (n_t, NY, NX)
    hours = np.arange(n_t)[:, None, None]
    t = t_fn(z, hours) if t_fn else 275.0 - 0.0065 * z + 3 * np.sin(2 * np.pi * hours / 24) + 0 * z
    zen, _ = solar.solar_position_noaa(time, 46.2, 10.25)
    ghi = np.maximum(np.cos(np.radians(zen)), 0)[:, None, None] * 600.0 * np.ones(shape)
    fields = {
        "air_temperature": t * np.ones(shape),
        "relative_humidity": np.clip(0.7 + 0.2 * rng.random(shape), 0, 1),
        "surface_air_pressure": 101325.0 * (1 - 0.0065 * z / 288.15) ** 5.25588 * np.ones(shape),
        "wind_speed": 2 + 8 * rng.random(shape),
        "wind_from_direction": 360 * rng.random(shape),
        "shortwave_down": ghi,
        "precipitation": rng.gamma(0.5, 1.0, shape),
    }
    return FakeGrid(time=time, fields=fields, surface_altitude=z)


def flat_sunlit(n_cell, slope_deg=0.0, aspect_deg=180.0):
    az = np.arange(0.0, 360.0, 5.0)
    el = np.arange(0.0, 91.0, 2.0)
    cosi = solar.cos_incidence_deg(90 - el[None, :], az[:, None], slope_deg, aspect_deg)
    frac = (cosi > 0).astype(np.float32)
    tab = np.broadcast_to(np.maximum(cosi, 0), (n_cell,) + cosi.shape).astype(np.float32)
    return az, el, np.broadcast_to(frac, tab.shape).copy(), tab.copy()


def make_batch(grid, n_cell=40, seed=1, zones=3, px=5, elevation=None, settings=None):
    settings = settings or DownscaleSettings()
    rng = np.random.default_rng(seed)
    lon_c = LON0 + D * (1 + (NX - 3) * rng.random(n_cell))
    lat_c = LAT0 + D * (1 + (NY - 3) * rng.random(n_cell))
    pix_cell = np.repeat(np.arange(n_cell), px)
    pix_lon = lon_c[pix_cell] + 0.01 * rng.standard_normal(pix_cell.size)
    pix_lat = lat_c[pix_cell] + 0.01 * rng.standard_normal(pix_cell.size)
    w = build_cell_weights(
        grid.grid_index_of,
        grid.extent_lonlat,
        (NY, NX),
        pix_cell,
        pix_lon,
        pix_lat,
        n_cell,
        lon_c,
        lat_c,
        method=settings.interpolation,
        lapse_radius=settings.grid_lapse_radius,
    )
    az, el, frac, cosi = flat_sunlit(n_cell)
    return CellBatch(
        cell_id=np.arange(n_cell),
        elevation_m=elevation if elevation is not None else 1000 + 2000 * rng.random(n_cell),
        slope_deg=np.zeros(n_cell),
        aspect_deg=np.full(n_cell, np.nan),
        sky_view_frac=np.ones(n_cell),
        lon_deg=lon_c,
        lat_deg=lat_c,
        area_m2=1e5 * (1 + rng.random(n_cell)),
        zone_code=rng.integers(0, zones, n_cell),
        sx_deg=20 * rng.standard_normal((n_cell, 8)),
        sx_directions_deg=np.arange(0, 360, 45.0),
        sun_azimuth_deg=az,
        sun_elevation_deg=el,
        sunlit_fraction=frac,
        sunlit_cos_incidence=cosi,
        weights=w,
    )


def test_fixed_lapse_reproduces_standard_atmosphere_field_whatever_the_model_terrain():
    # ICAO standard atmosphere (Doc 7488): T(z) = 288.15 K - 6.5 K/km z. The grid has random
    # model terrain; each cell must get T at its own elevation, exact up to the float32
    # rounding of the values the reader hands over.
    grid = make_grid(t_fn=lambda z, h: 288.15 - 0.0065 * z + 0 * h)
    batch = make_batch(grid)
    cf = downscale_cells(grid, batch, DownscaleSettings(lapse="fixed", lapse_rate_k_per_km=6.5))
    t_grid = 288.15 - 0.0065 * grid.surface_altitude
    f32_err = np.max(np.abs(t_grid.astype(np.float32) - t_grid))
    t_true = 288.15 - 0.0065 * batch.elevation_m
    assert np.max(np.abs(cf.t_air_k - t_true[:, None])) <= f32_err + 1e-9


def test_inversion_in_the_grid_survives_grid_lapse():
    # A valley inversion: temperature rising 8 K/km with model height. lapse = "grid" must
    # keep it (the monthly January rate, 4.4 K/km cooling, would reverse it).
    grid = make_grid(t_fn=lambda z, h: 263.0 + 0.008 * z + 0 * h)
    s = DownscaleSettings(lapse="grid")
    batch = make_batch(grid, settings=s)
    cf = downscale_cells(grid, batch, s)
    t_true = 263.0 + 0.008 * batch.elevation_m
    assert np.max(np.abs(cf.t_air_k - t_true[:, None])) < 1e-3
    monthly = downscale_cells(grid, batch, DownscaleSettings(lapse="monthly"))
    high = batch.elevation_m > 2500
    assert np.all(monthly.t_air_k[high] < cf.t_air_k[high] - 1.0)


def test_grid_points_read_once_per_span_and_chunk_invariance(monkeypatch):
    import regionmap.downscale.pipeline as pipeline

    grid = make_grid(n_t=72)
    batch = make_batch(grid)
    a = downscale_cells(grid, batch, DownscaleSettings(time_block_h=24, chunk_cells=7))
    assert grid.reads == 1  # all 72 h fit the read budget: one read serves every block and chunk
    b = downscale_cells(grid, batch, DownscaleSettings(time_block_h=72, chunk_cells=1000))
    assert grid.reads == 2
    monkeypatch.setattr(pipeline, "READ_BUDGET_BYTES", 1)  # spans shrink to one block each
    c = downscale_cells(grid, batch, DownscaleSettings(time_block_h=24, chunk_cells=7))
    assert grid.reads == 5
    # bit for bit, whatever the chunks and blocks (results must not depend on chunking)
    for name in (
        "t_air_k",
        "rh_frac",
        "sw_in_w_m2",
        "lw_in_w_m2",
        "precip_kg_m2",
        "wind_m_s",
        "pressure_pa",
        "snow_frac",
    ):
        np.testing.assert_array_equal(getattr(a, name), getattr(c, name))
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name))
    assert a.wind_height_m == 10.0 and a.temp_height_m == 2.0
    assert np.all((a.rh_frac > 0) & (a.rh_frac <= 1)) and np.all(a.precip_kg_m2 >= 0)


def test_sx_at_the_hours_wind_is_handed_to_the_snow_column():
    # wind transport needs each cell's maximum upwind slope at the hour's wind direction:
    # interpolated between the tabulated directions, so within each cell's own range
    grid = make_grid()
    batch = make_batch(grid, zones=3)
    f = downscale_cells(grid, batch, DownscaleSettings())
    assert f.sx_deg is not None and f.sx_deg.shape == f.precip_kg_m2.shape
    sx = np.nan_to_num(batch.sx_deg)
    assert np.all(f.sx_deg >= sx.min(axis=1)[:, None] - 1e-9)
    assert np.all(f.sx_deg <= sx.max(axis=1)[:, None] + 1e-9)
    assert np.ptp(f.sx_deg, axis=1).max() > 0  # it follows the wind


def test_bias_factors_and_monthly_offsets_apply_exactly():
    grid = make_grid()
    batch = make_batch(grid)
    base = downscale_cells(grid, batch, DownscaleSettings())
    offs = [-0.5] * 12
    offs[0] = -1.25  # January
    bias = BiasSettings(
        precipitation={"factor": 0.85},
        air_temperature={"offset": offs},
        wind_speed={"factor": [0.5] * 12},
    )
    cf = downscale_cells(grid, batch, DownscaleSettings(), bias=bias)
    np.testing.assert_array_equal(cf.precip_kg_m2, base.precip_kg_m2 * 0.85)
    np.testing.assert_array_equal(cf.t_air_k, base.t_air_k + -1.25)
    np.testing.assert_array_equal(cf.wind_m_s, base.wind_m_s * 0.5)


def test_freezing_rain_only_with_upper_air_information():
    grid = make_grid(t_fn=lambda z, h: 271.0 + 0 * z + 0 * h)
    batch = make_batch(grid, elevation=np.full(40, 1500.0))
    cf = downscale_cells(grid, batch, DownscaleSettings(lapse="fixed", lapse_rate_k_per_km=0.0))
    assert np.all(cf.freezing_rain_frac == 0)
    assert downscale_record(grid, DownscaleSettings())["freezing_rain_source"].startswith("none")
    grid.freezing_rain_frac = True
    grid.fields["freezing_rain_frac"] = np.full((72, NY, NX), 0.8)
    cf = downscale_cells(grid, batch, DownscaleSettings(lapse="fixed", lapse_rate_k_per_km=0.0))
    np.testing.assert_allclose(cf.freezing_rain_frac, 0.8, atol=1e-6)
    assert np.all(cf.snow_frac <= 0.2 + 1e-6)


def test_grid_that_misses_cells_is_a_grid_mismatch_error_with_both_extents():
    grid = make_grid()
    with pytest.raises(
        GridMismatchError, match=r"Cells span lon .* the grid spans lon 10\.0000\.\.10\.5000"
    ):
        build_cell_weights(
            grid.grid_index_of,
            grid.extent_lonlat,
            (NY, NX),
            np.array([0, 0]),
            np.array([10.2, 10.9]),
            np.array([46.1, 46.1]),
            1,
            np.array([10.5]),
            np.array([46.1]),
        )


def test_bad_settings_are_config_errors():
    with pytest.raises(ConfigError, match="lapse"):
        DownscaleSettings(lapse="steep")
    with pytest.raises(ConfigError, match="12"):
        BiasSettings(air_temperature={"offset": [1, 2]})
    grid = make_grid()
    with pytest.raises(InputError, match="time_slice"):
        downscale_cells(grid, make_batch(grid), DownscaleSettings(), slice(10, 5))


def test_freezing_rain_needs_the_warm_layer_above_the_cell():
    """A warm layer (+3 degC) between 800 and 700 hPa over sub-freezing air: cells below it get
    freezing rain, cells above it do not (Bourgouin 2000: the melting layer must lie between the
    precipitation's origin and the cell's cold surface layer)."""
    from regionmap.downscale.thermo import pressure_standard_atmosphere_icao

    grid = make_grid(t_fn=lambda z, h: 271.0 + 0 * z + 0 * h)
    levels = np.array([900e2, 850e2, 800e2, 750e2, 700e2, 650e2, 600e2, 500e2])
    temps = np.array(
        [270.0, 271.0, 272.5, 276.0, 273.0, 270.0, 266.0, 255.0]
    )  # warm nose at 750 hPa
    grid.upper_air_temperature = True
    grid.upper_air_pressure_pa = levels
    grid.fields["upper_air_temperature"] = np.broadcast_to(
        temps[None, :, None, None], (72, 8, NY, NX)
    ).copy()
    low, high = 1500.0, 3300.0  # ~845 hPa (below the warm layer) and ~670 hPa (above it)
    assert (
        pressure_standard_atmosphere_icao(np.array(high))
        < 700e2
        < 800e2
        < pressure_standard_atmosphere_icao(np.array(low))
    )
    elevation = np.where(np.arange(40) % 2 == 0, low, high)
    batch = make_batch(grid, elevation=elevation)
    cf = downscale_cells(
        grid,
        batch,
        DownscaleSettings(lapse="fixed", lapse_rate_k_per_km=0.0, pressure="standard_atmosphere"),
    )
    assert np.all(cf.freezing_rain_frac[elevation == low] > 0.5)
    assert np.all(cf.freezing_rain_frac[elevation == high] == 0)

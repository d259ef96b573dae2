"""Horn (1981) slope and aspect: worked examples and GDAL's gdaldem as the oracle.

Sources: Horn, B. K. P. (1981), Proc. IEEE 69(1), 14-47, doi:10.1109/PROC.1981.11918;
worked 3 x 3 examples (GIS handbook examples that gdaldem
reproduces); GDAL `gdaldem slope|aspect -alg Horn -compute_edges` run on matplotlib's
sample DEMs (open data shipped in the matplotlib package).
"""

from __future__ import annotations

import os
import shutil
import subprocess

import numpy as np
import pytest
from affine import Affine

from regionmap.io.dem import Dem, read_dem
from regionmap.terrain.slope import slope_aspect_horn1981

GDALDEM = shutil.which("gdaldem")


def _need_gdaldem():
    if GDALDEM is None:
        if os.environ.get("CI") == "true":
            pytest.fail("gdaldem (GDAL oracle) is missing and CI=true: install gdal-bin")
        pytest.skip("gdaldem not installed (GDAL oracle)")


def test_horn_worked_example_steep_window_horn1981():
    # Worked example: window 50 45 50 / 30 30 30 / 8 10 10 at 5 m
    # -> slope 75.26 deg, aspect 180.75 deg (values printed to 2 decimals).
    z = np.array([[50, 45, 50], [30, 30, 30], [8, 10, 10]], dtype=float)
    slope, aspect = slope_aspect_horn1981(z, 5.0, 5.0)
    assert slope[1, 1] == pytest.approx(75.26, abs=0.005)
    assert aspect[1, 1] == pytest.approx(180.75, abs=0.005)


def test_horn_worked_example_east_facing_window_horn1981():
    # Worked example: window 101 92 85 / 101 92 85 / 101 91 84 -> aspect 92.64 deg.
    z = np.array([[101, 92, 85], [101, 92, 85], [101, 91, 84]], dtype=float)
    _, aspect = slope_aspect_horn1981(z, 5.0, 5.0)
    assert aspect[1, 1] == pytest.approx(92.64, abs=0.005)


def test_flat_aspect_is_nan_like_gdaldem_flat_marker():
    # gdaldem marks aspect of zero-gradient cells as nodata (-9999); we use NaN.
    slope, aspect = slope_aspect_horn1981(np.full((4, 4), 7.0), 10.0, 10.0)
    assert np.all(slope == 0) and np.all(np.isnan(aspect))


def _jacksboro_dem():
    from matplotlib import cbook

    d = cbook.get_sample_data("jacksboro_fault_dem.npz")
    z = d["elevation"].astype(np.float64)
    north = float(d["ymin"])  # the sample's ymin/ymax keys are swapped: ymin is the north edge
    assert north > float(d["ymax"])
    t = Affine(float(d["dx"]), 0, float(d["xmin"]), 0, -float(d["dy"]), north)
    return Dem(z, t, _crs(4326))


def _topobathy_dem():
    from matplotlib import cbook
    from scipy.interpolate import interp1d

    d = cbook.get_sample_data("topobathy.npz")
    lat = d["latitude"].astype(np.float64)  # irregular spacing (0.0214-0.0223 deg)
    lon = d["longitude"].astype(np.float64) - 360.0
    z = d["topo"].astype(np.float64)
    lat_reg = np.linspace(lat[0], lat[-1], lat.size)
    z_reg = interp1d(lat, z, axis=0)(lat_reg)[::-1]  # regular, north-up
    dlat = lat_reg[1] - lat_reg[0]
    dlon = lon[1] - lon[0]
    t = Affine(dlon, 0, lon[0] - dlon / 2, 0, -dlat, lat_reg[-1] + dlat / 2)
    return Dem(z_reg, t, _crs(4326))


def _crs(epsg):
    from rasterio.crs import CRS

    return CRS.from_epsg(epsg)


def _write(path, dem):
    from regionmap.io.writers import write_geotiff

    write_geotiff(
        path,
        dem.elevation_m.astype(np.float32),
        transform=dem.transform,
        crs=dem.crs,
        nodata=-9999.0,
        description="elevation",
        cog=False,
    )


def _gdaldem(mode, src, dst):
    subprocess.run(
        [GDALDEM, mode, "-alg", "Horn", "-compute_edges", str(src), str(dst)],
        check=True,
        capture_output=True,
    )
    return read_dem(dst).elevation_m


@pytest.mark.parametrize(
    "make", [_jacksboro_dem, _topobathy_dem], ids=["jacksboro_fault", "topobathy"]
)
def test_slope_aspect_match_gdaldem_on_matplotlib_sample_dems(tmp_path, make):
    _need_gdaldem()
    geo_path = tmp_path / "geo.tif"
    _write(geo_path, make())
    metric = read_dem(geo_path).metric()  # local UTM: gdaldem has one scale factor only
    assert metric.crs.is_projected
    metric_path = tmp_path / "utm.tif"
    _write(metric_path, metric)
    dem = read_dem(metric_path)
    dx, dy = dem.spacing_m()
    slope, aspect = slope_aspect_horn1981(dem.elevation_m, dx, dy)
    g_slope = _gdaldem("slope", metric_path, tmp_path / "slope.tif")
    g_aspect = _gdaldem("aspect", metric_path, tmp_path / "aspect.tif")
    # interior pixels: all 3 x 3 neighbours hold data
    z = dem.elevation_m
    full = np.isfinite(z)
    interior = np.zeros_like(full)
    interior[1:-1, 1:-1] = True
    for dr in (-1, 0, 1):
        for dc in (-1, 0, 1):
            interior &= np.roll(np.roll(full, dr, 0), dc, 1)
    assert interior.sum() > 1000
    # GDAL gdaldem Horn slope: interior pixels agree within 1e-3 deg
    np.testing.assert_allclose(slope[interior], g_slope[interior], atol=1e-3, rtol=0)
    # GDAL gdaldem Horn aspect: gdaldem computes in float32, which scatters its aspect by
    # about 2e-3 deg / slope_deg on gentle slopes, so compare where the slope exceeds 3 deg
    sel = interior & (slope > 3.0) & np.isfinite(g_aspect)
    assert sel.sum() > 1000
    diff = (aspect[sel] - g_aspect[sel] + 180.0) % 360.0 - 180.0
    assert np.abs(diff).max() < 1e-3

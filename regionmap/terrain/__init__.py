"""Terrain analysis on the DEM grid: slope, aspect, curvature, horizon, sky view, exposure.

All kernels run on a metric grid; a geographic DEM is analysed on its UTM view
(:meth:`regionmap.io.dem.Dem.metric`) and the results are brought back to the DEM grid,
where aspects and the azimuths of horizon and Sx bands are turned from UTM grid north to
true north by the meridian convergence. On a projected DEM they stay relative to the
DEM's own grid north.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from regionmap.config import TerrainSettings
from regionmap.io.dem import Dem, read_dem, reproject_to_grid
from regionmap.io.writers import write_geotiff
from regionmap.terrain.horizon import (
    horizon_sky_view_dozier_frew1990,
    max_upwind_slope_winstral2002,
    sky_view_dozier_frew1990,
)
from regionmap.terrain.slope import curvature_liston_sturm1998, slope_aspect_horn1981

__all__ = [
    "Terrain",
    "compute_terrain",
    "write_terrain_layers",
    "slope_aspect_horn1981",
    "curvature_liston_sturm1998",
    "horizon_sky_view_dozier_frew1990",
    "sky_view_dozier_frew1990",
    "max_upwind_slope_winstral2002",
]


@dataclass
class Terrain:
    """Terrain layers on the DEM grid (see DEVELOPERS.md, internal contracts).

    Attributes
    ----------
    slope_deg, aspect_deg : ndarray (y, x) float64
        Horn (1981) slope and aspect [deg]; aspect 0 = north, clockwise, NaN where flat.
    curvature : ndarray (y, x) float64
        Liston & Sturm (1998) curvature [1].
    horizon_deg : ndarray (azimuth, y, x) float32
        Horizon elevation angle [deg] at ``horizon_azimuths_deg``.
    sky_view_frac : ndarray (y, x) float64
        Dozier & Frew (1990) sky-view factor [1].
    sx_deg : ndarray (direction, y, x) float32
        Winstral et al. (2002) maximum upwind slope [deg] for wind from
        ``sx_directions_deg`` (positive = sheltered).
    """

    slope_deg: np.ndarray
    aspect_deg: np.ndarray
    curvature: np.ndarray
    horizon_deg: np.ndarray
    horizon_azimuths_deg: np.ndarray
    sky_view_frac: np.ndarray
    sx_deg: np.ndarray
    sx_directions_deg: np.ndarray


def compute_terrain(dem: Dem, settings: TerrainSettings | None = None, *, progress=None) -> Terrain:
    """All terrain layers of a DEM, on the DEM's grid.

    Parameters
    ----------
    dem : Dem
    settings : TerrainSettings (defaults when None)
    progress : callable or None
        Called with a number of finished steps (horizon_azimuths + exposure_directions + 2 in
        total).
    """
    settings = settings or TerrainSettings()
    m = dem.metric()
    dx, dy = m.spacing_m()
    z = m.elevation_m
    slope, aspect = slope_aspect_horn1981(z, dx, dy)
    curv = curvature_liston_sturm1998(z, dx, dy, settings.curvature_length_m)
    if progress is not None:
        progress(1)
    az = settings.horizon_azimuths_deg
    horizon, sky = horizon_sky_view_dozier_frew1990(
        z,
        dx,
        dy,
        slope,
        aspect,
        az,
        settings.horizon_distance_m,
        earth_curvature=settings.earth_curvature,
        progress=progress,
    )
    dirs = settings.exposure_directions_deg
    sx = max_upwind_slope_winstral2002(
        z, dx, dy, dirs, settings.exposure_distance_m, progress=progress
    )
    if m is not dem:
        slope, aspect, curv, horizon, sky, sx = _back_to_grid(
            m, dem, slope, aspect, curv, horizon, sky, sx
        )
    if progress is not None:
        progress(1)
    return Terrain(slope, aspect, curv, horizon, az, sky, sx, dirs)


def _back_to_grid(m: Dem, dem: Dem, slope, aspect, curv, horizon, sky, sx):
    """Bilinear reprojection from the metric view to the DEM grid (aspect via its unit
    vector), then aspects and azimuth bands from the view's grid north to true north."""
    a = np.radians(aspect)
    vec = reproject_to_grid(np.stack([np.sin(a), np.cos(a), slope, curv, sky]), m, dem)
    aspect_out = np.degrees(np.arctan2(vec[0], vec[1])) % 360.0
    aspect_out[(vec[0] == 0) & (vec[1] == 0) | np.isnan(vec[0])] = np.nan
    slope_out, curv_out, sky_out = vec[2], vec[3], vec[4]
    aspect_out[np.isnan(slope_out)] = np.nan
    gamma = _meridian_convergence_deg(m.crs, dem)
    aspect_out = (aspect_out + gamma) % 360.0
    horizon_out = _bands_at_true_azimuths(reproject_to_grid(horizon, m, dem), gamma).astype(
        np.float32
    )
    sx_out = _bands_at_true_azimuths(reproject_to_grid(sx, m, dem), gamma).astype(np.float32)
    return slope_out, aspect_out, curv_out, horizon_out, sky_out, sx_out


def _meridian_convergence_deg(projected_crs, dem: Dem, lattice: int = 33) -> np.ndarray:
    """Meridian convergence γ [deg] of ``projected_crs`` at the pixel centres of a lon/lat
    ``dem``: a direction of grid azimuth α_g has true azimuth α_g + γ.

    γ (pyproj ``Factors.meridian_convergence``) is evaluated on a lattice of at most
    ``lattice`` x ``lattice`` pixels and interpolated bilinearly (it varies smoothly,
    ≈ Δλ sin φ on a Transverse Mercator grid, Snyder 1987, USGS PP 1395).
    """
    from pyproj import Proj

    ny, nx = dem.shape
    t = dem.transform
    r_s = np.unique(np.linspace(0, ny - 1, min(ny, lattice)).round())
    c_s = np.unique(np.linspace(0, nx - 1, min(nx, lattice)).round())
    rr, cc = np.meshgrid(r_s + 0.5, c_s + 0.5, indexing="ij")
    lon = t.c + t.a * cc + t.b * rr
    lat = t.f + t.d * cc + t.e * rr
    # Sign checked against PROJ's own forward projection: at 12 E, 46.5 N in UTM zone 32 a
    # step due north has grid bearing -2.177 deg (pyproj Transformer), and
    # meridian_convergence there is +2.177 deg, so true = grid + γ.
    g_s = np.asarray(Proj(projected_crs.to_wkt()).get_factors(lon, lat).meridian_convergence)
    g_rows = _lerp_axis(g_s, r_s, np.arange(ny), 0)
    return _lerp_axis(g_rows, c_s, np.arange(nx), 1)


def _lerp_axis(values: np.ndarray, at: np.ndarray, to: np.ndarray, axis: int) -> np.ndarray:
    """Linear interpolation of ``values`` given at increasing positions ``at`` along
    ``axis`` to the positions ``to`` (inside the range of ``at``)."""
    if at.size == 1:
        return np.repeat(values, to.size, axis=axis)
    i = np.clip(np.searchsorted(at, to, side="right") - 1, 0, at.size - 2)
    w = (to - at[i]) / (at[i + 1] - at[i])
    shape = [1, 1]
    shape[axis] = -1
    w = w.reshape(shape)
    return np.take(values, i, axis=axis) * (1.0 - w) + np.take(values, i + 1, axis=axis) * w


def _bands_at_true_azimuths(bands: np.ndarray, gamma_deg: np.ndarray) -> np.ndarray:
    """Bands (n, y, x) at equally spaced grid azimuths k·360/n turned to the same true
    azimuths: true azimuth α is grid azimuth α − γ, interpolated linearly (circularly)
    between the two neighbouring bands."""
    n = bands.shape[0]
    f = -gamma_deg / (360.0 / n)
    j = np.floor(f)
    w = f - j
    j = j.astype(np.int64)
    out = np.empty_like(bands)
    for k in range(n):  # over the few azimuth bands; pixels are vectorised
        lo = np.take_along_axis(bands, ((k + j) % n)[None], axis=0)[0]
        hi = np.take_along_axis(bands, ((k + j + 1) % n)[None], axis=0)[0]
        out[k] = (1.0 - w) * lo + w * hi
    return out


def write_terrain_layers(
    dem_path: str | os.PathLike,
    out_dir: str | os.PathLike,
    settings: TerrainSettings | None = None,
    progress: bool = True,
) -> list[Path]:
    """Compute the terrain of a DEM file and write each layer as a GeoTIFF on its grid.

    Files: ``slope_deg.tif``, ``aspect_deg.tif``, ``curvature.tif``, ``sky_view_frac.tif``,
    ``horizon_deg.tif`` (one band per azimuth), ``sx_deg.tif`` (one band per wind direction).

    Returns
    -------
    list of Path : the files written.
    """
    from tqdm import tqdm

    settings = settings or TerrainSettings()
    dem = read_dem(dem_path)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    steps = settings.horizon_azimuths + settings.exposure_directions + 2 + 6
    written: list[Path] = []
    with tqdm(total=steps, desc="terrain", unit="step", disable=not progress) as bar:
        t = compute_terrain(dem, settings, progress=bar.update)
        layers = [
            ("slope_deg", t.slope_deg.astype(np.float32), "slope angle [deg] (Horn 1981)"),
            (
                "aspect_deg",
                t.aspect_deg.astype(np.float32),
                "aspect [deg], 0 = north, clockwise; nodata where flat",
            ),
            ("curvature", t.curvature.astype(np.float32), "curvature [1] (Liston & Sturm 1998)"),
            (
                "sky_view_frac",
                t.sky_view_frac.astype(np.float32),
                "sky-view factor [1] (Dozier & Frew 1990)",
            ),
            (
                "horizon_deg",
                t.horizon_deg,
                [f"horizon angle [deg] at azimuth {a:g} deg" for a in t.horizon_azimuths_deg],
            ),
            (
                "sx_deg",
                t.sx_deg,
                [
                    f"max upwind slope Sx [deg], wind from {a:g} deg (Winstral et al. 2002)"
                    for a in t.sx_directions_deg
                ],
            ),
        ]
        for name, arr, desc in layers:
            written.append(
                write_geotiff(
                    out / f"{name}.tif",
                    arr,
                    transform=dem.transform,
                    crs=dem.crs,
                    nodata=-9999.0,
                    description=desc,
                    tags={"source_dem": str(dem.path)},
                )
            )
            bar.update(1)
    return written

"""Digital elevation model reader and its metric view.

Any raster GDAL opens (GeoTIFF, ASCII grid, VRT, …) is read with rasterio into float64
metres with NaN for nodata. Terrain analysis needs true metric spacing, so a DEM on a
geographic (lon/lat) grid is reprojected to its local UTM zone by :meth:`Dem.metric`.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from regionmap.errors import InputError

__all__ = ["Dem", "read_dem", "utm_crs_for", "ellipsoidal_pixel_area_m2"]


@dataclass
class Dem:
    """An elevation grid with its georeferencing.

    Attributes
    ----------
    elevation_m : ndarray (y, x) float64
        Elevation [m], NaN for nodata. Row 0 is the northern edge (north-up grid).
    transform : affine.Affine
        Pixel-corner transform (rasterio convention).
    crs : rasterio.crs.CRS
        Never None.
    path : Path or None
        Source file (None for a DEM made in memory).
    nodata : float or None
        The file's nodata value (already turned into NaN in ``elevation_m``).
    """

    elevation_m: np.ndarray
    transform: object
    crs: object
    path: Path | None = None
    nodata: float | None = None
    _metric_cache: Dem | None = field(default=None, repr=False, compare=False)

    @property
    def shape(self) -> tuple[int, int]:
        return self.elevation_m.shape

    @property
    def is_geographic(self) -> bool:
        return bool(self.crs.is_geographic)

    @property
    def bounds(self) -> tuple[float, float, float, float]:
        """(left, bottom, right, top) in the DEM's CRS."""
        ny, nx = self.shape
        t = self.transform
        xs = (t.c, t.c + t.a * nx)
        ys = (t.f, t.f + t.e * ny)
        return min(xs), min(ys), max(xs), max(ys)

    def pixel_centres(self) -> tuple[np.ndarray, np.ndarray]:
        """Pixel-centre coordinates in the DEM's CRS: x (x,) and y (y,) 1-D arrays."""
        ny, nx = self.shape
        t = self.transform
        x = t.c + t.a * (np.arange(nx) + 0.5)
        y = t.f + t.e * (np.arange(ny) + 0.5)
        return x, y

    def spacing_m(self) -> tuple[float, float]:
        """Pixel size (dx, dy) [m] of a projected DEM (positive numbers)."""
        if self.is_geographic:
            raise InputError(
                f"DEM {self.path}: pixel spacing in metres asked of a geographic grid; "
                "use Dem.metric() first"
            )
        unit = _linear_unit_m(self.crs)
        return abs(self.transform.a) * unit, abs(self.transform.e) * unit

    def pixel_area_m2(self) -> np.ndarray:
        """True area of each pixel (y, x) [m2].

        Projected grids: the grid cell area (the projection's scale error, < 0.1 % in UTM,
        is ignored — common practice). Geographic grids: the area of each lon/lat cell on
        the CRS's ellipsoid (:func:`ellipsoidal_pixel_area_m2`).
        """
        ny, nx = self.shape
        if not self.is_geographic:
            dx, dy = self.spacing_m()
            return np.full((ny, nx), dx * dy)
        from pyproj import CRS as PyprojCRS

        ell = PyprojCRS.from_user_input(self.crs.to_wkt()).ellipsoid
        t = self.transform
        lat_edges = t.f + t.e * np.arange(ny + 1)
        rows = ellipsoidal_pixel_area_m2(
            lat_edges, abs(t.a), ell.semi_major_metre, 1.0 / ell.inverse_flattening
        )
        return np.repeat(rows[:, None], nx, axis=1)

    def metric(self) -> Dem:
        """This DEM on a projected grid in metres.

        Returns itself when the CRS is already projected; a geographic DEM is reprojected
        (bilinear, NaN-aware) to the UTM zone of its centre at the mean true pixel size.
        """
        if not self.is_geographic:
            return self
        if self._metric_cache is None:
            self._metric_cache = _reproject_to_utm(self)
        return self._metric_cache


def ellipsoidal_pixel_area_m2(lat_edges_deg, dlon_deg: float, a_m: float, f: float) -> np.ndarray:
    """Area of lon/lat cells between consecutive latitude edges on an ellipsoid.

    Parameters
    ----------
    lat_edges_deg : ndarray (n+1,)
        Latitudes of the cell edges [deg].
    dlon_deg : float
        Longitude width of a cell [deg].
    a_m, f : float
        Semi-major axis [m] and flattening [1] of the ellipsoid.

    Returns
    -------
    ndarray (n,) [m2]

    Notes
    -----
    Area between the equator and latitude φ per radian of longitude is a² q(φ)/2 with the
    authalic function q(φ) = (1−e²)[sinφ/(1−e²sin²φ) − ln((1−e sinφ)/(1+e sinφ))/(2e)]
    (Eq. 3-12 of [1]).

    References
    ----------
    .. [1] Snyder, J. P. (1987). Map Projections — A Working Manual. USGS Professional
       Paper 1395. https://doi.org/10.3133/pp1395
    """
    e2 = f * (2.0 - f)
    e = math.sqrt(e2)
    s = np.sin(np.radians(np.asarray(lat_edges_deg, dtype=np.float64)))
    q = (1.0 - e2) * (s / (1.0 - e2 * s * s) - np.log((1.0 - e * s) / (1.0 + e * s)) / (2.0 * e))
    return 0.5 * a_m * a_m * np.radians(dlon_deg) * np.abs(np.diff(q))


def utm_crs_for(lon_deg: float, lat_deg: float):
    """The WGS 84 / UTM zone CRS (EPSG 326zz north, 327zz south) containing a point."""
    from rasterio.crs import CRS

    zone = int(math.floor(((lon_deg + 180.0) % 360.0) / 6.0)) + 1
    zone = min(max(zone, 1), 60)
    return CRS.from_epsg((32600 if lat_deg >= 0 else 32700) + zone)


def _linear_unit_m(crs) -> float:
    try:
        factor = crs.linear_units_factor[1]
    except Exception:  # rasterio raises CRSError for CRSs without a linear unit
        return 1.0
    return float(factor)


def _reproject_to_utm(dem: Dem) -> Dem:
    from rasterio.warp import Resampling, calculate_default_transform, reproject

    ny, nx = dem.shape
    left, bottom, right, top = dem.bounds
    dst_crs = utm_crs_for(0.5 * (left + right), 0.5 * (bottom + top))
    # Pixel size: the geometric mean of the true spacing at the centre latitude.
    lat_c = math.radians(0.5 * (bottom + top))
    dx = abs(dem.transform.a) * 111_320.0 * math.cos(lat_c)
    dy = abs(dem.transform.e) * 110_574.0
    res = math.sqrt(dx * dy)
    transform, width, height = calculate_default_transform(
        dem.crs, dst_crs, nx, ny, left, bottom, right, top, resolution=res
    )
    out = np.full((height, width), np.nan)
    reproject(
        dem.elevation_m,
        out,
        src_transform=dem.transform,
        src_crs=dem.crs,
        src_nodata=np.nan,
        dst_transform=transform,
        dst_crs=dst_crs,
        dst_nodata=np.nan,
        resampling=Resampling.bilinear,
    )
    return Dem(out, transform, dst_crs, path=dem.path, nodata=dem.nodata)


def reproject_to_grid(
    values: np.ndarray, src: Dem, dst: Dem, *, nearest: bool = False
) -> np.ndarray:
    """Bring a (y, x) or (band, y, x) float array from ``src``'s grid to ``dst``'s grid.

    Bilinear (NaN-aware) unless ``nearest``; NaN where ``dst`` has no data.
    """
    from rasterio.warp import Resampling, reproject

    arr = np.asarray(values, dtype=np.float64)
    shape = (arr.shape[0], *dst.shape) if arr.ndim == 3 else dst.shape
    out = np.full(shape, np.nan)
    reproject(
        arr,
        out,
        src_transform=src.transform,
        src_crs=src.crs,
        src_nodata=np.nan,
        dst_transform=dst.transform,
        dst_crs=dst.crs,
        dst_nodata=np.nan,
        resampling=Resampling.nearest if nearest else Resampling.bilinear,
    )
    out[..., np.isnan(dst.elevation_m)] = np.nan
    return out


def read_dem(path: str | os.PathLike) -> Dem:
    """Read band 1 of any GDAL raster as a :class:`Dem`.

    Parameters
    ----------
    path : path of the raster (GeoTIFF, ASCII grid, VRT, …). Elevations in metres.

    Returns
    -------
    Dem
        float64 elevations with NaN for nodata (the file's nodata value, and non-finite
        values).

    Raises
    ------
    InputError
        The file is missing or unreadable, has no CRS, is not a north-up grid, or holds no
        valid elevation.
    """
    import rasterio
    from rasterio.errors import RasterioError

    p = Path(path)
    if not p.exists():
        raise InputError(
            f"DEM {p}: file not found; check the [region] dem path (relative to the config file)"
        )
    try:
        with rasterio.open(p) as src:
            crs = src.crs
            transform = src.transform
            nodata = src.nodata
            data = src.read(1, masked=False).astype(np.float64)
            mask = src.read_masks(1) == 0 if nodata is not None else None
    except (RasterioError, OSError) as exc:
        raise InputError(
            f"DEM {p}: cannot be read as a raster ({exc}); expected a GDAL raster such as a GeoTIFF"
        ) from exc
    if crs is None:
        raise InputError(
            f"DEM {p}: no coordinate reference system; expected a georeferenced raster. "
            "Hint: assign one, e.g. `gdal_edit.py -a_srs EPSG:32632 FILE`"
        )
    if transform.b != 0 or transform.d != 0 or transform.a <= 0 or transform.e >= 0:
        raise InputError(
            f"DEM {p}: the grid is rotated or not north-up (transform {tuple(transform)[:6]}); "
            "expected a north-up grid. Hint: `gdalwarp` it to a north-up grid first"
        )
    if data.ndim != 2 or min(data.shape) < 3:
        raise InputError(f"DEM {p}: expected a grid of at least 3 x 3 pixels, got {data.shape}")
    if nodata is not None:
        data[data == nodata] = np.nan
        if mask is not None:
            data[mask] = np.nan
    data[~np.isfinite(data)] = np.nan
    if np.isnan(data).all():
        raise InputError(
            f"DEM {p}: every pixel is nodata (nodata = {nodata}); expected elevations in metres"
        )
    return Dem(data, transform, crs, path=p, nodata=nodata)

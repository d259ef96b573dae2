"""Band cells: the DEM pixels of each zone grouped by elevation band x aspect sector
[x slope class], with their pixel->cell index and sunlit-fraction tables."""

from __future__ import annotations

import hashlib
import math
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from functools import partial

import numba
import numpy as np
import pandas as pd

from regionmap.config import CellSettings
from regionmap.errors import GridMismatchError, InputError

__all__ = [
    "band_edges_m",
    "SunlitTable",
    "CellSet",
    "build_cells",
    "sector_names",
    "sunlit_tables",
    "IDENTITY_COLUMNS",
    "describe_cell",
    "match_cells",
    "region_fingerprints",
]

#: The columns of the cell table that identify a cell across runs and zone files.
IDENTITY_COLUMNS = ("zone", "band_lower_m", "band_upper_m", "aspect_sector", "slope_class")

#: The 16 compass sectors clockwise from north; 8 and 4 sectors take every second and fourth.
COMPASS_16: tuple[str, ...] = (
    "N", "NNE", "NE", "ENE", "E", "ESE", "SE", "SSE",
    "S", "SSW", "SW", "WSW", "W", "WNW", "NW", "NNW",
)  # fmt: skip

_SECTORS = {n: list(COMPASS_16[:: 16 // n]) for n in (4, 8, 16)}


def sector_names(n: int) -> list[str]:
    """Aspect-sector labels for 4, 8 or 16 sectors (sector 0 centred on north), plus ``flat``."""
    return _SECTORS[n] + ["flat"]


def band_edges_m(settings: CellSettings, elevation_m: np.ndarray) -> np.ndarray:
    """Band edges [m] for the given elevations: ``band_edges_m``, or multiples of
    ``band_step_m`` spanning them."""
    step = settings.band_step_m
    if settings.band_edges_m is not None or step is None:  # the settings give one of both
        return np.asarray(settings.band_edges_m, dtype=float)
    lo = math.floor(np.nanmin(elevation_m) / step) * step
    hi = math.ceil(np.nanmax(elevation_m) / step) * step
    return np.arange(lo, hi + 0.5 * step, step)


@dataclass
class SunlitTable:
    """Per-cell sunlit fraction over a sun azimuth x elevation grid.

    Attributes
    ----------
    azimuth_deg : ndarray (n_az,) sun azimuths [deg], 0 = north, clockwise
    elevation_deg : ndarray (n_el,) sun elevations [deg]
    fraction : ndarray (cell, n_az, n_el) float32
        Share of the cell's pixels in sun: the sun above the pixel's horizon in that azimuth
        (horizon interpolated linearly between horizon azimuths) and cos(incidence) > 0 [1].
    cos_incidence : ndarray (cell, n_az, n_el) float32
        Mean cosine of the incidence angle over the sunlit pixels (0 where none is lit) [1].
    """

    azimuth_deg: np.ndarray
    elevation_deg: np.ndarray
    fraction: np.ndarray
    cos_incidence: np.ndarray


@dataclass
class CellSet:
    """Cells of a region (see DEVELOPERS.md, internal contracts)."""

    table: pd.DataFrame
    sx_deg: np.ndarray
    sx_directions_deg: np.ndarray
    index: np.ndarray
    sunlit: SunlitTable
    transform: object = None
    crs: object = None
    band_edges_m: np.ndarray = field(default_factory=lambda: np.array([]))
    _polygons: object = field(default=None, init=False, repr=False, compare=False)

    def polygons(self):
        """Cell polygons (MultiPolygon per cell, from the index raster) with the cell table,
        as a GeoDataFrame in the DEM CRS (traced once, then copied: the rain-crust lines and
        the GeoPackage both need them)."""
        if self._polygons is None:
            self._polygons = self._trace_polygons()
        return self._polygons.copy()

    def _trace_polygons(self):
        import geopandas as gpd
        import shapely
        from rasterio.features import shapes
        from shapely.geometry import shape

        geoms, ids = [], []
        for geom, value in shapes(
            self.index, mask=self.index >= 0, transform=self.transform, connectivity=4
        ):
            geoms.append(shape(geom))
            ids.append(int(value))
        ids = np.asarray(ids, dtype=np.int64)
        order = np.argsort(ids, kind="stable")
        multi = shapely.multipolygons(
            np.asarray(geoms, dtype=object)[order],
            indices=np.searchsorted(np.unique(ids), ids[order]),
        )
        frame = self.table.loc[np.unique(ids)].reset_index()
        return gpd.GeoDataFrame(frame, geometry=list(multi), crs=self.crs)


@numba.njit(cache=True, nogil=True, error_model="numpy")
def _sunlit_kernel(
    cell, hor, slope_rad, aspect_rad, hor_az_rad, sun_az_rad, sun_el_rad, count, cos_sum
):
    """Accumulate sunlit pixel counts and cos(incidence) sums per cell (pixels given as lists)."""
    n_pix = cell.size
    n_h = hor_az_rad.size
    n_az = sun_az_rad.size
    n_el = sun_el_rad.size
    dphi = 2.0 * math.pi / n_h
    sin_el = np.sin(sun_el_rad)
    cos_el = np.cos(sun_el_rad)
    for p in range(n_pix):
        c = cell[p]
        s = slope_rad[p]
        a = aspect_rad[p]
        cs = math.cos(s)
        ss = math.sin(s)
        for j in range(n_az):
            # horizon in the sun's azimuth, linear between neighbouring horizon azimuths
            x = sun_az_rad[j] / dphi
            k0 = int(math.floor(x))
            f = x - k0
            k0 = k0 % n_h
            k1 = (k0 + 1) % n_h
            h = (1.0 - f) * hor[k0, p] + f * hor[k1, p]
            cos_rel = math.cos(sun_az_rad[j] - a) if a == a else 0.0
            for k in range(n_el):
                if sun_el_rad[k] <= h:
                    continue
                ci = sin_el[k] * cs + cos_el[k] * ss * cos_rel
                if ci > 0.0:
                    count[c, j, k] += 1.0
                    cos_sum[c, j, k] += ci


def sunlit_tables(
    cell_of_pixel,
    horizon_deg_pixels,
    slope_deg,
    aspect_deg,
    horizon_azimuths_deg,
    n_cells,
    sun_azimuth_deg,
    sun_elevation_deg,
) -> SunlitTable:
    """Sunlit fraction and mean cos(incidence) per cell from its own pixels.

    Parameters
    ----------
    cell_of_pixel : ndarray (pixel,) int64 cell of each listed pixel
    horizon_deg_pixels : ndarray (azimuth, pixel) horizon angles [deg]
    slope_deg, aspect_deg : ndarray (pixel,) [deg] (aspect NaN where flat)
    horizon_azimuths_deg : ndarray (azimuth,) equally spaced from 0 [deg]
    n_cells : int
    sun_azimuth_deg, sun_elevation_deg : ndarray the sun grid [deg]

    Notes
    -----
    cos θi = cos θz cos S + sin θz sin S cos(φsun − A) (Liu & Jordan 1963, Solar Energy 7(2),
    https://doi.org/10.1016/0038-092X(63)90006-9); a pixel is lit when cos θi > 0 and the sun
    stands above its horizon angle in that azimuth.
    """
    hor = np.ascontiguousarray(np.radians(horizon_deg_pixels.astype(np.float64)))
    sl = np.radians(np.asarray(slope_deg, dtype=np.float64))
    asp = np.radians(np.asarray(aspect_deg, dtype=np.float64))
    az = np.radians(np.asarray(sun_azimuth_deg, dtype=np.float64))
    el = np.radians(np.asarray(sun_elevation_deg, dtype=np.float64))
    haz = np.radians(np.asarray(horizon_azimuths_deg, dtype=np.float64))
    cells = np.asarray(cell_of_pixel, dtype=np.int64)
    halves = np.array_split(np.arange(cells.size), 2)

    def work(idx):
        count = np.zeros((n_cells, az.size, el.size))
        cos_sum = np.zeros_like(count)
        _sunlit_kernel(
            cells[idx],
            np.ascontiguousarray(hor[:, idx]),
            sl[idx],
            asp[idx],
            haz,
            az,
            el,
            count,
            cos_sum,
        )
        return count, cos_sum

    with ThreadPoolExecutor(2) as pool:
        parts = list(pool.map(work, halves))
    count = parts[0][0] + parts[1][0]
    cos_sum = parts[0][1] + parts[1][1]
    n_pix = np.bincount(cells, minlength=n_cells).astype(float)[:, None, None]
    with np.errstate(invalid="ignore", divide="ignore"):
        fraction = np.where(n_pix > 0, count / np.maximum(n_pix, 1), 0.0)
        cos_mean = np.where(count > 0, cos_sum / np.maximum(count, 1), 0.0)
    return SunlitTable(
        np.asarray(sun_azimuth_deg, float),
        np.asarray(sun_elevation_deg, float),
        fraction.astype(np.float32),
        cos_mean.astype(np.float32),
    )


def build_cells(dem, terrain, zones, settings: CellSettings | None = None) -> CellSet:
    """Group the valid DEM pixels inside each zone into cells.

    Parameters
    ----------
    dem : regionmap.io.dem.Dem
    terrain : regionmap.terrain.Terrain on the DEM grid
    zones : GeoDataFrame from :func:`regionmap.io.zones.read_zones` (columns ``zone``, geometry)
    settings : CellSettings (defaults when None)

    Returns
    -------
    CellSet
        Cells ordered by zone (file order), band, sector (N clockwise, then flat), slope
        class; ``cell_id`` 0..n-1.

    Raises
    ------
    InputError
        A zone covers no valid DEM pixel (named).
    """
    from pyproj import Transformer

    settings = settings or CellSettings()
    z = dem.elevation_m
    zone_idx, valid = _zone_pixels(dem, terrain, zones)
    rows, cols = np.nonzero(valid)
    zp = z[rows, cols]
    slope = terrain.slope_deg[rows, cols]
    aspect = terrain.aspect_deg[rows, cols]
    edges = band_edges_m(settings, zp)
    sclass_edges = np.asarray(settings.slope_classes_deg, dtype=float)
    n_band, n_sec, n_cls = edges.size + 1, settings.aspect_sectors, sclass_edges.size + 1
    key = _cell_keys(zone_idx[rows, cols], zp, slope, aspect, edges, sclass_edges, settings)
    keys, cell = np.unique(key, return_inverse=True)
    n = keys.size
    area = dem.pixel_area_m2()[rows, cols]
    w_sum = np.bincount(cell, area, n)
    mean = partial(_cell_mean, cell, n, area)
    a_rad = np.radians(aspect)
    asp_mean = (
        np.degrees(np.arctan2(mean(np.sin(a_rad)), mean(np.cos(a_rad)))) % 360.0
    )  # circular mean
    xs, ys = dem.pixel_centres()
    x_mean = mean(xs[cols])
    y_mean = mean(ys[rows])
    lon, lat = Transformer.from_crs(dem.crs, "EPSG:4326", always_xy=True).transform(x_mean, y_mean)
    k_cls = keys % n_cls
    k_sec = (keys // n_cls) % (n_sec + 1)
    k_band = (keys // (n_cls * (n_sec + 1))) % n_band
    k_zone = keys // (n_cls * (n_sec + 1) * n_band)
    pix = np.bincount(cell, minlength=n)
    table = pd.DataFrame(
        {
            "zone": zones.zone.to_numpy()[k_zone],
            "band_lower_m": np.concatenate([[-np.inf], edges])[k_band],
            "band_upper_m": np.concatenate([edges, [np.inf]])[k_band],
            "aspect_sector": np.asarray(sector_names(n_sec))[k_sec],
            "slope_class": k_cls.astype(np.int64),
            "slope_lower_deg": np.concatenate([[0.0], sclass_edges])[k_cls],
            "slope_upper_deg": np.concatenate([sclass_edges, [90.0]])[k_cls],
            "pixel_count": pix.astype(np.int64),
            "area_km2": w_sum / 1e6,
            "elevation_m": mean(zp),
            "slope_deg": mean(slope),
            "aspect_deg": asp_mean,
            "sky_view_frac": mean(terrain.sky_view_frac[rows, cols]),
            "curvature": mean(terrain.curvature[rows, cols]),
            "lon": np.asarray(lon),
            "lat": np.asarray(lat),
            "x": x_mean,
            "y": y_mean,
            "small": pix < settings.small_below_pixels,
        }
    )
    table.index = pd.RangeIndex(n, name="cell_id")
    sx = _cell_sx(mean, terrain, rows, cols, n)
    index = np.full(z.shape, -1, dtype=np.int32)
    index[rows, cols] = cell
    sunlit = _cell_sunlit(cell, n, terrain, rows, cols, slope, aspect, settings)
    return CellSet(
        table,
        sx.astype(np.float32),
        np.asarray(terrain.sx_directions_deg),
        index,
        sunlit,
        transform=dem.transform,
        crs=dem.crs,
        band_edges_m=edges,
    )


def _cell_sx(mean, terrain, rows: np.ndarray, cols: np.ndarray, n: int) -> np.ndarray:
    """(cell, direction) mean maximum upwind slope Sx [deg] (``mean`` averages per cell)."""
    if not terrain.sx_deg.shape[0]:
        return np.zeros((n, 0))
    return np.stack(
        [
            mean(terrain.sx_deg[d][rows, cols].astype(np.float64))
            for d in range(terrain.sx_deg.shape[0])
        ],
        axis=1,
    )


def _cell_sunlit(
    cell, n: int, terrain, rows, cols, slope_deg, aspect_deg, settings: CellSettings
) -> SunlitTable:
    """The cells' sunlit-fraction tables on the settings' sun azimuth × elevation grid."""
    sun_az = np.arange(0.0, 360.0 - 1e-9, settings.sun_azimuth_step_deg)
    sun_el = np.arange(0.0, 90.0 + 1e-9, settings.sun_elevation_step_deg)
    return sunlit_tables(
        cell,
        terrain.horizon_deg[:, rows, cols],
        slope_deg,
        aspect_deg,
        terrain.horizon_azimuths_deg,
        n,
        sun_az,
        sun_el,
    )


def _zone_pixels(dem, terrain, zones) -> tuple[np.ndarray, np.ndarray]:
    """The zone index of each DEM pixel (-1 outside every zone) and the mask of valid
    pixels (inside a zone, with elevation and slope).

    Raises
    ------
    InputError
        A zone covers no valid DEM pixel (named).
    """
    from rasterio.features import rasterize

    z = dem.elevation_m
    zone_idx = rasterize(
        [(g, i) for i, g in enumerate(zones.geometry)],
        out_shape=z.shape,
        transform=dem.transform,
        fill=-1,
        dtype="int32",
        all_touched=False,
    )
    valid = (zone_idx >= 0) & np.isfinite(z) & np.isfinite(terrain.slope_deg)
    counts = np.bincount(zone_idx[valid], minlength=len(zones))
    empty = [zones.zone.iloc[i] for i in np.flatnonzero(counts == 0)]
    if empty:
        raise InputError(
            f"zones {empty}: no valid DEM pixel (pixel centre with data) inside; "
            f"the zone is smaller than a pixel or lies on nodata of DEM {dem.path}"
        )
    return zone_idx, valid


def _cell_keys(
    zone_of_pixel: np.ndarray,
    elevation_m: np.ndarray,
    slope_deg: np.ndarray,
    aspect_deg: np.ndarray,
    band_edges: np.ndarray,
    slope_class_edges_deg: np.ndarray,
    settings: CellSettings,
) -> np.ndarray:
    """One int64 key per pixel that orders cells by zone, band, sector (N clockwise, then
    flat) and slope class."""
    band = np.searchsorted(band_edges, elevation_m, side="right")  # 0 = below the first edge
    n_sec = settings.aspect_sectors
    width = 360.0 / n_sec
    flat = (slope_deg < settings.flat_below_deg) | np.isnan(aspect_deg)
    sector = np.where(
        flat, n_sec, np.floor(((np.nan_to_num(aspect_deg) + 0.5 * width) % 360.0) / width)
    ).astype(np.int64)
    sclass = (
        np.searchsorted(slope_class_edges_deg, slope_deg, side="right")
        if slope_class_edges_deg.size
        else np.zeros(slope_deg.size, np.int64)
    )
    n_band = band_edges.size + 1
    n_cls = slope_class_edges_deg.size + 1
    return (
        (zone_of_pixel.astype(np.int64) * n_band + band) * (n_sec + 1) + sector
    ) * n_cls + sclass


def _cell_mean(cell: np.ndarray, n: int, weights: np.ndarray, v: np.ndarray) -> np.ndarray:
    """Weighted mean of the pixel values ``v`` per cell, over the finite ones (NaN if none)."""
    ok = np.isfinite(v)
    num = np.bincount(cell[ok], (v * weights)[ok], n)
    den = np.bincount(cell[ok], weights[ok], n)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(den > 0, num / den, np.nan)


# --------------------------------------------------------------------------- identity
def describe_cell(row) -> str:
    """A cell's identity in words: ``zone 'North', band 1800-2100 m, aspect NE, slope class 0``."""
    lo, hi = float(row["band_lower_m"]), float(row["band_upper_m"])
    band = (
        f"below {hi:g} m"
        if lo == -np.inf
        else (f"above {lo:g} m" if hi == np.inf else f"{lo:g}-{hi:g} m")
    )
    return (
        f"zone {row['zone']!r}, band {band}, aspect {row['aspect_sector']}, "
        f"slope class {int(row['slope_class'])}"
    )


def match_cells(saved: pd.DataFrame, current: pd.DataFrame, where: str) -> np.ndarray:
    """Where each of this run's cells is in a saved set of cells, matched by identity
    (:data:`IDENTITY_COLUMNS`), whatever the order of either.

    Parameters
    ----------
    saved, current : DataFrame with the identity columns, one row per cell.
    where : the saved set's file, for messages.

    Returns
    -------
    ndarray (current cell,) int64
        Row of ``saved`` for each row of ``current``.

    Raises
    ------
    GridMismatchError
        The two sets differ; the message names the first cell found in one and not the other.
    """
    cols = list(IDENTITY_COLUMNS)
    keys_saved = pd.MultiIndex.from_frame(saved[cols].reset_index(drop=True))
    keys_now = pd.MultiIndex.from_frame(current[cols].reset_index(drop=True))
    if keys_saved.has_duplicates:
        dup = saved.reset_index(drop=True)[keys_saved.duplicated()].iloc[0]
        raise GridMismatchError(f"{where}: the cell {describe_cell(dup)} appears twice")
    pos = keys_saved.get_indexer(keys_now)
    if (pos < 0).any():
        first = current.reset_index(drop=True).iloc[int(np.argmax(pos < 0))]
        raise GridMismatchError(
            f"{where}: this run's cell {describe_cell(first)} is not in the state "
            f"({int((pos < 0).sum())} of {len(current)} cells are not); the state comes from "
            "other zones or [cells] settings. Hint: continue with the zones and settings of "
            "the run that wrote it, or start a new season"
        )
    if len(saved) != len(current):
        unused = np.setdiff1d(np.arange(len(saved)), pos)
        first = saved.reset_index(drop=True).iloc[int(unused[0])]
        raise GridMismatchError(
            f"{where}: the state's cell {describe_cell(first)} is not in this run "
            f"({unused.size} of its {len(saved)} cells are not); the state comes from other "
            "zones or [cells] settings. Hint: continue with the zones and settings of the run "
            "that wrote it, or start a new season"
        )
    return pos.astype(np.int64)


def region_fingerprints(dem, zones) -> dict:
    """Fingerprints of a run's DEM and of each of its zones, independent of the zones' order.

    Returns
    -------
    dict
        ``{"dem": hex, "zones": {name: hex}}``: SHA-256 (first 16 hex digits) of the DEM's
        elevations, grid transform and CRS, and of each zone's normalised polygon (WKB, in
        the DEM's CRS).
    """
    import shapely

    h = hashlib.sha256(np.ascontiguousarray(dem.elevation_m, dtype=np.float64).tobytes())
    h.update(repr(tuple(dem.transform)[:6]).encode())
    h.update(dem.crs.to_wkt().encode())
    zone_prints = {
        str(name): hashlib.sha256(shapely.to_wkb(shapely.normalize(geom))).hexdigest()[:16]
        for name, geom in zip(zones["zone"], zones.geometry, strict=True)
    }
    return {"dem": h.hexdigest()[:16], "zones": zone_prints}

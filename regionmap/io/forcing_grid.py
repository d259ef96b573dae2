"""The geometry of a forcing grid: 1-D lat/lon, projected x/y with a grid mapping (pyproj
``CRS.from_cf``), or 2-D latitude/longitude without one; fractional grid indices of points
and the coverage check (split from :mod:`regionmap.io.forcing`)."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import xarray as xr
from pyproj import CRS, Transformer
from scipy.interpolate import RectBivariateSpline
from scipy.spatial import cKDTree

from regionmap.errors import ForcingReadError, GridMismatchError
from regionmap.io import units as U

__all__ = ["ForcingGrid", "grid_from_dataset"]


@dataclass
class ForcingGrid:
    """Geometry of the forcing grid.

    ``kind`` is ``"latlon1d"``, ``"projected"`` (x/y in metres, ``crs`` from the CF
    grid_mapping) or ``"latlon2d"`` (2-D latitude/longitude without a mapping; ``crs`` None).
    ``x``, ``y`` are the native 1-D coordinates (deg or m), None for ``latlon2d``.
    """

    kind: str
    lon: np.ndarray
    lat: np.ndarray
    crs: CRS | None
    x: np.ndarray | None = None
    y: np.ndarray | None = None
    _inverse: object = field(default=None, repr=False)

    @property
    def shape(self):
        return self.lon.shape

    def extent_lonlat(self):
        return (
            float(np.nanmin(self.lon)),
            float(np.nanmax(self.lon)),
            float(np.nanmin(self.lat)),
            float(np.nanmax(self.lat)),
        )

    def index_of(self, lon, lat):
        """Fractional (row along y, column along x) of points [index units]; NaN outside."""
        lon = np.atleast_1d(np.asarray(lon, dtype=np.float64))
        lat = np.atleast_1d(np.asarray(lat, dtype=np.float64))
        if self.kind == "latlon1d":
            if np.nanmax(self.x) > 180.0:
                lon = np.mod(lon, 360.0)
            fi, fj = _axis_index(self.y, lat), _axis_index(self.x, lon)
        elif self.kind == "projected":
            px, py = Transformer.from_crs("EPSG:4326", self.crs, always_xy=True).transform(lon, lat)
            fi, fj = _axis_index(self.y, np.asarray(py)), _axis_index(self.x, np.asarray(px))
        else:
            fi, fj = self._invert_2d(lon, lat)
        ny, nx = self.shape
        bad = ~((fi >= 0) & (fi <= ny - 1) & (fj >= 0) & (fj <= nx - 1))
        return np.where(bad, np.nan, fi), np.where(bad, np.nan, fj)

    def _invert_2d(self, lon, lat):
        """Newton inversion of cubic-spline maps (row, col) -> local azimuthal metres."""
        if self._inverse is None:
            lon0, lat0 = float(np.mean(self.lon)), float(np.mean(self.lat))
            tr = Transformer.from_crs(
                "EPSG:4326", f"+proj=aeqd +lat_0={lat0} +lon_0={lon0} +datum=WGS84", always_xy=True
            )
            gx, gy = tr.transform(self.lon, self.lat)
            ny, nx = self.shape
            ii, jj = np.arange(ny, dtype=float), np.arange(nx, dtype=float)
            kx, ky = min(3, ny - 1), min(3, nx - 1)
            self._inverse = (
                tr,
                RectBivariateSpline(ii, jj, gx, kx=kx, ky=ky),
                RectBivariateSpline(ii, jj, gy, kx=kx, ky=ky),
                cKDTree(np.c_[gx.ravel(), gy.ravel()]),
                np.hypot(*np.gradient(gx)).mean(),
            )
        tr, sx, sy, tree, spacing = self._inverse
        px, py = tr.transform(lon, lat)
        _, nearest = tree.query(np.c_[px, py])
        fi, fj = np.divmod(nearest, self.shape[1])
        fi, fj = fi.astype(float), fj.astype(float)
        ny, nx = self.shape
        for _ in range(30):
            rx, ry = sx.ev(fi, fj) - px, sy.ev(fi, fj) - py
            if np.all(np.hypot(rx, ry) < 1e-9 * spacing):
                break
            a, b = sx.ev(fi, fj, dx=1), sx.ev(fi, fj, dy=1)
            c, d = sy.ev(fi, fj, dx=1), sy.ev(fi, fj, dy=1)
            det = a * d - b * c
            fi = np.clip(fi - (d * rx - b * ry) / det, -1.0, ny)
            fj = np.clip(fj - (a * ry - c * rx) / det, -1.0, nx)
        rx, ry = sx.ev(fi, fj) - px, sy.ev(fi, fj) - py
        lost = np.hypot(rx, ry) > 1e-6 * spacing
        return np.where(lost, np.nan, fi), np.where(lost, np.nan, fj)

    def check_covers(self, lon, lat, where="forcing") -> None:
        """Raise GridMismatchError unless every point has 4 surrounding grid points."""
        lon = np.atleast_1d(np.asarray(lon, dtype=np.float64))
        lat = np.atleast_1d(np.asarray(lat, dtype=np.float64))
        fi, _ = self.index_of(lon, lat)
        out = np.isnan(fi)
        if out.any():
            g = self.extent_lonlat()
            raise GridMismatchError(
                f"forcing grid of {where!r} does not cover {int(out.sum())} of {lon.size} points: "
                f"grid extent lon {g[0]:.4f}..{g[1]:.4f}, lat {g[2]:.4f}..{g[3]:.4f}; points span "
                f"lon {lon.min():.4f}..{lon.max():.4f}, lat {lat.min():.4f}..{lat.max():.4f}; "
                f"hint: use forcing over a larger domain than the DEM and zones"
            )


def _axis_index(coord, value):
    """Fractional index of values along a monotonic 1-D coordinate (NaN outside)."""
    idx = np.arange(coord.size, dtype=np.float64)
    if coord.size > 1 and coord[-1] < coord[0]:
        coord, idx = coord[::-1], idx[::-1]
    return np.interp(value, coord, idx, left=np.nan, right=np.nan)


def _is_axis(coord, kind):
    sn, units = coord.attrs.get("standard_name", ""), str(coord.attrs.get("units", ""))
    if kind == "lon":
        return sn == "longitude" or units in ("degrees_east", "degree_east", "degrees_E", "degreeE")
    if kind == "lat":
        return sn == "latitude" or units in (
            "degrees_north",
            "degree_north",
            "degrees_N",
            "degreeN",
        )
    return sn in (
        "projection_x_coordinate",
        "projection_y_coordinate",
        "grid_longitude",
        "grid_latitude",
    ) or units in ("m", "km", "metre", "meter", "kilometre")


def _coord_along(ds, dim):
    """The 1-D coordinate along ``dim``: the dimension coordinate, else one with axis meaning."""
    if dim in ds.coords:
        return ds[dim]
    for c in ds.coords.values():
        if c.dims == (dim,) and any(_is_axis(c, k) for k in ("lon", "lat", "xy")):
            return c
    return None


def grid_from_dataset(ds: xr.Dataset, var: xr.DataArray, path: str) -> ForcingGrid:
    """Recognise the grid of ``var``: 1-D lat/lon, projected x/y with a grid_mapping, or
    2-D latitude/longitude."""
    ydim, xdim = var.dims[-2:]
    xc, yc = _coord_along(ds, xdim), _coord_along(ds, ydim)
    gm = var.attrs.get("grid_mapping") or var.encoding.get("grid_mapping")
    crs = None
    if gm:
        if gm not in ds.variables:
            raise ForcingReadError(
                f"forcing file {path!r}, variable {var.name!r}: grid_mapping "
                f"{gm!r} names no variable in the file"
            )
        try:
            crs = CRS.from_cf(dict(ds[gm].attrs))
        except Exception as exc:
            raise ForcingReadError(
                f"forcing file {path!r}, grid_mapping {gm!r}: not a CF grid "
                f"mapping pyproj understands ({exc})"
            ) from None
    if xc is not None and yc is not None and _is_axis(xc, "lon") and _is_axis(yc, "lat"):
        x, y = xc.values.astype(np.float64), yc.values.astype(np.float64)
        lon, lat = np.meshgrid(np.where(x > 180, x - 360, x), y)
        return ForcingGrid("latlon1d", lon, lat, crs or CRS.from_epsg(4326), x, y)
    if xc is not None and yc is not None and _is_axis(xc, "xy") and _is_axis(yc, "xy"):
        if crs is None:
            raise ForcingReadError(
                f"forcing file {path!r}, variable {var.name!r}: projected x/y "
                f"coordinates need a grid_mapping attribute (CF §5.6)"
            )
        try:
            sx, _ = U.affine_conversion(xc.attrs.get("units", "m"), "m")
            sy, _ = U.affine_conversion(yc.attrs.get("units", "m"), "m")
        except U.UnitsProblem as exc:
            raise ForcingReadError(f"forcing file {path!r}: grid coordinate units: {exc}") from None
        x, y = xc.values.astype(np.float64) * sx, yc.values.astype(np.float64) * sy
        xx, yy = np.meshgrid(x, y)
        lon, lat = Transformer.from_crs(crs, "EPSG:4326", always_xy=True).transform(xx, yy)
        return ForcingGrid("projected", np.asarray(lon), np.asarray(lat), crs, x, y)
    two_d = {k: c for k, c in ds.variables.items() if c.dims == (ydim, xdim)}
    lon2 = [c for c in two_d.values() if _is_axis(c, "lon")]
    lat2 = [c for c in two_d.values() if _is_axis(c, "lat")]
    if lon2 and lat2:
        lon = np.asarray(lon2[0].values, dtype=np.float64)
        return ForcingGrid(
            "latlon2d",
            np.where(lon > 180, lon - 360, lon),
            np.asarray(lat2[0].values, dtype=np.float64),
            None,
        )
    raise ForcingReadError(
        f"forcing file {path!r}, variable {var.name!r}: grid not recognised: expected 1-D "
        f"latitude/longitude, projected x/y with a grid_mapping, or 2-D latitude/longitude on "
        f"({ydim}, {xdim}) (units degrees_north/degrees_east)"
    )

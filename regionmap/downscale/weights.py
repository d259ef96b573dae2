"""Interpolation weights from NWP grid points to cells, built once from the cells' pixels."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from regionmap.errors import GridMismatchError, InputError

__all__ = ["CellWeights", "build_cell_weights", "neighbour_block"]


@dataclass
class CellWeights:
    """Sparse interpolation operator and lapse-fit neighbourhoods for a set of cells.

    Attributes
    ----------
    matrix : scipy.sparse.csr_matrix (cell, grid point) float64
        Row-stochastic weights onto flattened grid points (``iy * nx + ix``).
    grid_shape : (ny, nx)
    neighbours : ndarray (cell, k) int64
        Flat grid-point indices of each cell's fitting neighbourhood (a (2r+1)^2 block
        around its nearest grid point, shifted inside the grid at its edges).
    method : str
        ``"bilinear"`` or ``"idw"``.
    """

    matrix: sp.csr_matrix
    grid_shape: tuple[int, int]
    neighbours: np.ndarray
    method: str

    def rows(self, cells) -> CellWeights:
        """The weights of some cells (positions within this set)."""
        return CellWeights(self.matrix[cells], self.grid_shape, self.neighbours[cells], self.method)


def _corner_weights(fi: np.ndarray, fj: np.ndarray, ny: int, nx: int, method: str):
    """Four surrounding grid points and their weights for fractional indices."""
    i0 = np.clip(np.floor(fi).astype(np.int64), 0, max(ny - 2, 0))
    j0 = np.clip(np.floor(fj).astype(np.int64), 0, max(nx - 2, 0))
    di, dj = fi - i0, fj - j0
    ii = np.stack([i0, i0, i0 + 1, i0 + 1], axis=1)
    jj = np.stack([j0, j0 + 1, j0, j0 + 1], axis=1)
    if method == "bilinear":
        w = np.stack([(1 - di) * (1 - dj), (1 - di) * dj, di * (1 - dj), di * dj], axis=1)
    elif method == "idw":
        d2 = (ii - fi[:, None]) ** 2 + (jj - fj[:, None]) ** 2
        on_point = d2 < 1e-18
        inv = np.where(
            on_point.any(axis=1, keepdims=True), on_point.astype(float), 1.0 / np.maximum(d2, 1e-18)
        )
        w = inv / inv.sum(axis=1, keepdims=True)
    else:
        raise InputError(f"[downscale] interpolation: expected 'bilinear' or 'idw', got {method!r}")
    return np.minimum(ii, ny - 1), np.minimum(jj, nx - 1), w


def neighbour_block(fi: np.ndarray, fj: np.ndarray, ny: int, nx: int, radius: int) -> np.ndarray:
    """Flat indices of the (2r+1) x (2r+1) grid block around each point's nearest node.

    Parameters
    ----------
    fi, fj : ndarray (n,) float64
        Fractional row and column indices.
    ny, nx : int
        Grid shape.
    radius : int
        Half width r of the block in grid points.

    Returns
    -------
    ndarray (n, k) int64
        k = (2r'+1)^2 with r' = r reduced to fit the grid; blocks shifted inside at edges.
    """
    r = int(max(0, min(radius, (ny - 1) // 2, (nx - 1) // 2)))
    ci = np.clip(np.rint(fi).astype(np.int64), r, ny - 1 - r)
    cj = np.clip(np.rint(fj).astype(np.int64), r, nx - 1 - r)
    off = np.arange(-r, r + 1)
    oi, oj = np.meshgrid(off, off, indexing="ij")
    return ((ci[:, None] + oi.ravel()[None, :]) * nx + (cj[:, None] + oj.ravel()[None, :])).astype(
        np.int64
    )


def build_cell_weights(
    index_of,
    extent_lonlat,
    grid_shape: tuple[int, int],
    pixel_cell: np.ndarray,
    pixel_lon_deg: np.ndarray,
    pixel_lat_deg: np.ndarray,
    n_cells: int,
    cell_lon_deg: np.ndarray,
    cell_lat_deg: np.ndarray,
    *,
    method: str = "bilinear",
    lapse_radius: int = 2,
    where: str = "forcing grid",
) -> CellWeights:
    """Weights from grid points to cells: the mean of the cells' pixels' weights.

    Parameters
    ----------
    index_of : callable (lon, lat) -> (fi, fj)
        Fractional grid indices of points, NaN outside the grid (``GridForcing.grid_index_of``).
    extent_lonlat : callable () -> (lon_min, lon_max, lat_min, lat_max)
        The grid's extent, for the error message.
    grid_shape : (ny, nx)
    pixel_cell : ndarray (pixel,) int
        Cell (0..n_cells-1) of each in-zone pixel.
    pixel_lon_deg, pixel_lat_deg : ndarray (pixel,) float64
        Pixel centres [deg].
    n_cells : int
    cell_lon_deg, cell_lat_deg : ndarray (cell,) float64
        Cell centroids [deg], for the lapse-fit neighbourhood.
    method : {"bilinear", "idw"}
        Bilinear in grid-index space, or inverse squared distance (in index space) over the
        4 surrounding points.
    lapse_radius : int
        Half width of the neighbourhood used by ``lapse = "grid"`` [grid points].
    where : str
        The grid's name (file) for messages.

    Returns
    -------
    CellWeights

    Raises
    ------
    GridMismatchError
        When any pixel lies outside the grid (interpolation needs 4 surrounding points);
        the message gives both extents.
    """
    ny, nx = grid_shape
    if ny < 2 or nx < 2:
        raise GridMismatchError(
            f"{where}: the forcing grid is {ny} x {nx} points; interpolation to cells needs "
            "at least 2 x 2. Hint: supply forcing on a grid that surrounds the region."
        )
    pixel_cell = np.asarray(pixel_cell, dtype=np.int64)
    fi, fj = index_of(np.asarray(pixel_lon_deg), np.asarray(pixel_lat_deg))
    fi, fj = np.asarray(fi, dtype=np.float64), np.asarray(fj, dtype=np.float64)
    outside = (
        ~np.isfinite(fi) | ~np.isfinite(fj) | (fi < 0) | (fj < 0) | (fi > ny - 1) | (fj > nx - 1)
    )
    if outside.any():
        gx0, gx1, gy0, gy1 = extent_lonlat()
        lon = np.asarray(pixel_lon_deg)
        lat = np.asarray(pixel_lat_deg)
        raise GridMismatchError(
            f"{where}: the forcing grid does not cover every cell: {int(outside.sum())} of "
            f"{outside.size} cell pixels lie outside it. Cells span lon "
            f"{np.nanmin(lon):.4f}..{np.nanmax(lon):.4f}, lat "
            f"{np.nanmin(lat):.4f}..{np.nanmax(lat):.4f}; "
            f"the grid spans lon {gx0:.4f}..{gx1:.4f}, lat {gy0:.4f}..{gy1:.4f}. "
            "Hint: use forcing that extends at least one grid point beyond the region."
        )
    counts = np.bincount(pixel_cell, minlength=n_cells).astype(np.float64)
    if np.any(counts == 0):
        raise InputError(
            f"cells: {int((counts == 0).sum())} cells have no pixels; expected every cell "
            "0..n-1 to own at least one pixel of the pixel->cell index."
        )
    ii, jj, w = _corner_weights(fi, fj, ny, nx, method)
    rows = np.repeat(pixel_cell, 4)
    vals = (w / counts[pixel_cell][:, None]).ravel()
    mat = sp.coo_matrix((vals, (rows, (ii * nx + jj).ravel())), shape=(n_cells, ny * nx)).tocsr()
    mat.sum_duplicates()
    mat.eliminate_zeros()
    ci, cj = index_of(np.asarray(cell_lon_deg), np.asarray(cell_lat_deg))
    ci = np.where(np.isfinite(ci), ci, 0.0)
    cj = np.where(np.isfinite(cj), cj, 0.0)
    neighbours = neighbour_block(np.asarray(ci, float), np.asarray(cj, float), ny, nx, lapse_radius)
    return CellWeights(mat, (ny, nx), neighbours, method)

"""Invented relief for the demo: a fractal surface carved by rivers, hillslopes and glaciers.

The demo range is synthesised, not drawn. A fractional Brownian surface (spectral synthesis)
seeds a landscape-evolution model in which rivers incise an uplifting block under the
stream-power law while hillslopes creep, so valleys branch and drain to the edges as real ones
do. The result is bent by a smooth random displacement (which keeps the drainage), given fine
fractal texture, cut by cirques below the highest crests on their north side, and its slopes
are brought to a talus angle by thermal weathering. Every step is deterministic for a seed.

This is invented terrain for demonstration and tests, not a model of any real place.
"""

from __future__ import annotations

import numba as nb
import numpy as np
from scipy import ndimage

__all__ = [
    "carve_cirques_haynes1968",
    "d8_receivers_ocallaghan1984",
    "demo_relief_m",
    "domain_warp_perlin1985",
    "fbm_surface_saupe1988",
    "hillslope_diffusion_culling1960",
    "priority_flood_eps_barnes2014",
    "stream_power_step_braun2013",
    "thermal_erosion_musgrave1989",
]

# the 8 neighbours of a pixel as (row, column) offsets
_D8 = ((-1, -1), (-1, 0), (-1, 1), (0, -1), (0, 1), (1, -1), (1, 0), (1, 1))
_D8_DY = np.array([d[0] for d in _D8])
_D8_DX = np.array([d[1] for d in _D8])


def _edge_mask(shape) -> np.ndarray:
    edge = np.ones(shape, bool)
    edge[1:-1, 1:-1] = False
    return edge


def _neighbour(z: np.ndarray, dy: int, dx: int, outside: float = np.inf) -> np.ndarray:
    """``z`` at (row + dy, column + dx); ``outside`` where that is off the grid."""
    ny, nx = z.shape
    padded = np.pad(z, 1, constant_values=outside)
    return padded[1 + dy : 1 + dy + ny, 1 + dx : 1 + dx + nx]


def fbm_surface_saupe1988(
    rng: np.random.Generator, n: int, spacing_m: float, hurst: float, longest_m: float
) -> np.ndarray:
    """A fractional Brownian surface by spectral synthesis, with unit standard deviation.

    Gaussian white noise is filtered in the Fourier domain by the amplitude
    ``k**-(hurst + 1)``, so that the power spectrum falls as ``k**-(2 hurst + 2)`` (2-D fBm),
    and transformed back. Below the frequency ``1 / longest_m`` the amplitude is held flat, so
    no single wave longer than that dominates.

    Parameters
    ----------
    rng : numpy Generator (its seed makes the surface).
    n : grid size; the surface is n x n and periodic (crop it to avoid the wrap-around).
    spacing_m : grid spacing [m].
    hurst : Hurst exponent H (0 < H <= 1); the fractal dimension is 3 - H.
    longest_m : the longest wavelength that still grows in amplitude [m].

    Returns
    -------
    ndarray (n, n) float64, zero mean, unit standard deviation.

    References
    ----------
    Saupe, D. (1988). Algorithms for random fractals. In H.-O. Peitgen & D. Saupe (eds.), The
    Science of Fractal Images, Springer, New York, 71-136 (spectral synthesis of fBm
    surfaces; Voss, R. F., same volume, 21-70, for the spectral exponent 2H + 2; both
    recalled from memory).
    """
    f = np.fft.fftfreq(n, d=spacing_m)
    k = np.hypot(f[:, None], f[None, :])
    amplitude = np.maximum(k, 1.0 / longest_m) ** -(hurst + 1.0)
    amplitude[0, 0] = 0.0
    z = np.fft.ifft2(np.fft.fft2(rng.standard_normal((n, n))) * amplitude).real
    return z / z.std()


@nb.njit(cache=True, nogil=True, inline="always")
def _heap_push(keys, vals, size, key, val):
    i = size
    while i > 0:
        parent = (i - 1) >> 1
        if keys[parent] <= key:
            break
        keys[i] = keys[parent]
        vals[i] = vals[parent]
        i = parent
    keys[i] = key
    vals[i] = val
    return size + 1


@nb.njit(cache=True, nogil=True, inline="always")
def _heap_pop(keys, vals, size):
    top = vals[0]
    size -= 1
    key = keys[size]
    val = vals[size]
    i = 0
    while True:
        child = 2 * i + 1
        if child >= size:
            break
        if child + 1 < size and keys[child + 1] < keys[child]:
            child += 1
        if keys[child] >= key:
            break
        keys[i] = keys[child]
        vals[i] = vals[child]
        i = child
    if size > 0:
        keys[i] = key
        vals[i] = val
    return top, size


@nb.njit(cache=True, nogil=True)
def priority_flood_eps_barnes2014(z_m, eps_m):
    """Fill depressions so that every pixel drains to the grid's edge (Priority-Flood+epsilon).

    Pixels leave a priority queue seeded with the edge, lowest first; each neighbour they reach
    for the first time is raised to at least ``eps_m`` above them. Afterwards every inner pixel
    has a strictly lower neighbour.

    Parameters
    ----------
    z_m : ndarray (y, x) float64 — elevation [m].
    eps_m : the smallest drop left towards the edge [m].

    Returns
    -------
    ndarray (y, x) float64 — the filled elevation [m].

    References
    ----------
    Barnes, R., Lehman, C. & Mulla, D. (2014). Priority-flood: an optimal depression-filling
    and watershed-labeling algorithm for digital elevation models. Computers & Geosciences
    62, 117-127, doi:10.1016/j.cageo.2013.04.024 (Priority-Flood+epsilon).
    """
    ny, nx = z_m.shape
    n = ny * nx
    filled = z_m.ravel().copy()
    seen = np.zeros(n, np.bool_)
    keys = np.empty(n)
    vals = np.empty(n, np.int64)
    size = 0
    for i in range(ny):
        for j in range(nx):
            if i == 0 or j == 0 or i == ny - 1 or j == nx - 1:
                c = i * nx + j
                seen[c] = True
                size = _heap_push(keys, vals, size, filled[c], c)
    while size > 0:
        c, size = _heap_pop(keys, vals, size)
        ci, cj = c // nx, c % nx
        for d in range(8):
            i, j = ci + _D8_DY[d], cj + _D8_DX[d]
            if i < 0 or j < 0 or i >= ny or j >= nx:
                continue
            q = i * nx + j
            if seen[q]:
                continue
            seen[q] = True
            filled[q] = max(filled[q], filled[c] + eps_m)
            size = _heap_push(keys, vals, size, filled[q], q)
    return filled.reshape(ny, nx)


def d8_receivers_ocallaghan1984(z_m: np.ndarray, spacing_m: float) -> np.ndarray:
    """Each pixel drains to the neighbour of steepest descent (D8).

    Parameters
    ----------
    z_m : ndarray (y, x) float64 — elevation without depressions [m].
    spacing_m : grid spacing [m].

    Returns
    -------
    ndarray (y*x,) int64 — flat index of each pixel's receiver; -1 on the edge and where no
    neighbour is lower.

    References
    ----------
    O'Callaghan, J. F. & Mark, D. M. (1984). The extraction of drainage networks from digital
    elevation data. Computer Vision, Graphics, and Image Processing 28(3), 323-344,
    doi:10.1016/S0734-189X(84)80011-0.
    """
    ny, nx = z_m.shape
    rows, cols = np.indices(z_m.shape)
    steepest = np.zeros(z_m.shape)
    receiver = np.full(z_m.shape, -1, np.int64)
    for dy, dx in _D8:
        drop = (z_m - _neighbour(z_m, dy, dx)) / (spacing_m * np.hypot(dy, dx))
        better = drop > steepest
        steepest = np.where(better, drop, steepest)
        receiver = np.where(better, (rows + dy) * nx + cols + dx, receiver)
    receiver[_edge_mask(z_m.shape)] = -1
    return receiver.ravel()


@nb.njit(cache=True, nogil=True)
def stream_power_step_braun2013(
    z_m, receiver, uplift_m_yr, erodibility_dt, area_exponent, spacing_m, dt_yr
):
    """One implicit time step of rock uplift and stream-power incision (slope exponent 1).

    Pixels are visited from low to high, so every receiver is solved before its donors.
    Drainage area is summed down the receiver tree, then each pixel is solved from
    ``dz/dt = U - K A**m S`` with the slope to its receiver taken at the new time:
    ``z_i' = (z_i + U dt + F z_r') / (1 + F)``, ``F = K dt A_i**m / L_ir`` — stable for any
    time step.

    Parameters
    ----------
    z_m : ndarray (y, x) float64 — elevation, every inner pixel with a lower receiver [m].
    receiver : ndarray (y*x,) int64 — from :func:`d8_receivers_ocallaghan1984`.
    uplift_m_yr : ndarray (y, x) float64 — rock uplift rate [m yr-1].
    erodibility_dt : ndarray (y, x) float64 — K dt [m**(1 - 2m)].
    area_exponent : m, the drainage-area exponent.
    spacing_m : grid spacing [m].
    dt_yr : time step [yr].

    Returns
    -------
    ndarray (y, x) float64 — elevation after the step [m]; pixels without a receiver only
    rise with the uplift.

    References
    ----------
    Braun, J. & Willett, S. D. (2013). A very efficient O(n), implicit and parallel method to
    solve the stream power equation governing fluvial incision and landscape evolution.
    Geomorphology 180-181, 170-179, doi:10.1016/j.geomorph.2012.10.008.
    """
    ny, nx = z_m.shape
    n = ny * nx
    z = z_m.ravel().copy()
    uplift = uplift_m_yr.ravel()
    k_dt = erodibility_dt.ravel()
    order = np.argsort(z, kind="mergesort")
    area = np.full(n, spacing_m * spacing_m)
    for q in range(n - 1, -1, -1):
        c = order[q]
        if receiver[c] >= 0:
            area[receiver[c]] += area[c]
    for q in range(n):
        c = order[q]
        r = receiver[c]
        if r < 0:
            z[c] += uplift[c] * dt_yr
            continue
        di = c // nx - r // nx
        dj = c % nx - r % nx
        f = k_dt[c] * area[c] ** area_exponent / (spacing_m * np.sqrt(di * di + dj * dj))
        z[c] = (z[c] + uplift[c] * dt_yr + f * z[r]) / (1.0 + f)
    return z.reshape(ny, nx)


def hillslope_diffusion_culling1960(
    z_m: np.ndarray, diffusivity_m2_yr: float, spacing_m: float, dt_yr: float
) -> np.ndarray:
    """Linear hillslope creep ``dz/dt = D laplacian(z)`` over ``dt_yr``, explicit steps.

    Parameters
    ----------
    z_m : ndarray (y, x) float64 — elevation [m].
    diffusivity_m2_yr : D [m2 yr-1].
    spacing_m : grid spacing [m].
    dt_yr : time to advance [yr]; split into sub-steps within the explicit stability limit
        ``D dt / dx**2 <= 1/4``.

    Returns
    -------
    ndarray (y, x) float64 [m] (zero-flux edges).

    References
    ----------
    Culling, W. E. H. (1960). Analytical theory of erosion. The Journal of Geology 68(3),
    336-344, doi:10.1086/626663.
    """
    courant = diffusivity_m2_yr * dt_yr / spacing_m**2
    steps = max(int(np.ceil(courant / 0.2)), 1)
    z = np.array(z_m, dtype=np.float64)
    for _ in range(steps):
        z = z + (courant / steps) * ndimage.laplace(z, mode="nearest")
    return z


def domain_warp_perlin1985(
    z_m: np.ndarray, shift_rows: np.ndarray, shift_cols: np.ndarray
) -> np.ndarray:
    """Sample a surface at displaced positions (cubic spline): straight lines bend.

    A smooth displacement whose gradient stays well below 1 keeps the order of neighbours,
    so ridges stay ridges and valleys stay connected valleys.

    Parameters
    ----------
    z_m : ndarray (y, x) float64 [m].
    shift_rows, shift_cols : ndarray (y, x) float64 — displacement [pixels].

    Returns
    -------
    ndarray (y, x) float64 [m].

    References
    ----------
    Perlin, K. (1985). An image synthesizer. Computer Graphics (SIGGRAPH '85) 19(3),
    287-296, doi:10.1145/325165.325247 (textures from a domain perturbed by noise).
    """
    rows, cols = np.indices(z_m.shape, dtype=np.float64)
    return ndimage.map_coordinates(
        z_m, [rows + shift_rows, cols + shift_cols], order=3, mode="nearest"
    )


def thermal_erosion_musgrave1989(
    z_m: np.ndarray, spacing_m: float, talus_deg: float, iterations: int, rate: float = 0.5
) -> np.ndarray:
    """Thermal weathering: slopes steeper than the talus angle shed material downhill.

    In each pass every pixel whose drop to some of its 8 neighbours exceeds the talus drop
    (``tan(talus) * distance``) moves ``rate`` times half its largest excess to those
    neighbours, shared in proportion to their excess. Mass is conserved.

    Parameters
    ----------
    z_m : ndarray (y, x) float64 — elevation [m].
    spacing_m : grid spacing [m].
    talus_deg : the angle above which material moves [deg].
    iterations : number of passes.
    rate : fraction of the excess moved per pass (0-1).

    Returns
    -------
    ndarray (y, x) float64 [m].

    References
    ----------
    Musgrave, F. K., Kolb, C. E. & Mace, R. S. (1989). The synthesis and rendering of eroded
    fractal terrains. Computer Graphics (SIGGRAPH '89) 23(3), 41-50,
    doi:10.1145/74334.74337 (thermal weathering; the proportional sharing as restated by
    Olsen, J. (2004), Realtime procedural terrain generation, IMADA, University of Southern
    Denmark; both recalled from memory).
    """
    z = np.array(z_m, dtype=np.float64)
    talus_drop = [np.tan(np.radians(talus_deg)) * spacing_m * np.hypot(dy, dx) for dy, dx in _D8]
    for _ in range(iterations):
        excess = np.stack(
            [z - _neighbour(z, dy, dx) - t for (dy, dx), t in zip(_D8, talus_drop, strict=True)]
        )
        np.maximum(excess, 0.0, out=excess)
        total = excess.sum(axis=0)
        share = np.divide(excess, total, out=np.zeros_like(excess), where=total > 0)
        moved = 0.5 * rate * excess.max(axis=0) * share  # (neighbour, y, x) leaving (y, x)
        z -= moved.sum(axis=0)
        for (dy, dx), m in zip(_D8, moved, strict=True):  # arrives at (y + dy, x + dx)
            z += _neighbour(m, -dy, -dx, outside=0.0)
    return z


def carve_cirques_haynes1968(
    z_m: np.ndarray,
    spacing_m: float,
    headwalls_rc: list[tuple[int, int]],
    length_m: float,
    width_m: float,
    axis_azimuth_deg: float = 0.0,
) -> np.ndarray:
    """Cut cirques below crest points: a concave floor under a steep headwall, between walls.

    Each cirque runs from its headwall point (elevation ``z_h``) along the axis azimuth to its
    lip ``length_m`` away (elevation ``z_l``, the terrain there). Along the axis the floor
    follows the cirque long profile ``z_l + (z_h - z_l) (1 - s) exp(-s)``, ``s`` the distance
    from the headwall over ``length_m``; across it the side walls rise with the square of the
    distance from the axis to the headwall's height at ``width_m / 2``. Terrain above that
    surface is lowered to it, fully inside and fading out over the last quarter of the
    length and of each half-width.

    Parameters
    ----------
    z_m : ndarray (y, x) float64 — elevation [m].
    spacing_m : grid spacing [m].
    headwalls_rc : (row, column) of each cirque's headwall point.
    length_m, width_m : cirque length (headwall to lip) and width [m].
    axis_azimuth_deg : the direction the cirques open towards (0 = north, clockwise) [deg].

    Returns
    -------
    ndarray (y, x) float64 [m].

    References
    ----------
    Haynes, V. M. (1968). The influence of glacial erosion and rock structure on corries in
    Scotland. Geografiska Annaler 50A(4), 221-234 (the long profile y = k (1 - x) exp(-x);
    recalled from memory).
    """
    z = np.array(z_m, dtype=np.float64)
    rows, cols = np.indices(z.shape)
    axis_e = np.sin(np.radians(axis_azimuth_deg))
    axis_n = np.cos(np.radians(axis_azimuth_deg))
    for r0, c0 in headwalls_rc:
        east = (cols - c0) * spacing_m
        north = (r0 - rows) * spacing_m
        s = (east * axis_e + north * axis_n) / length_m
        d = (east * axis_n - north * axis_e) / (0.5 * width_m)
        lip_r = int(np.clip(round(r0 - axis_n * length_m / spacing_m), 0, z.shape[0] - 1))
        lip_c = int(np.clip(round(c0 + axis_e * length_m / spacing_m), 0, z.shape[1] - 1))
        z_head, z_lip = z[r0, c0], z[lip_r, lip_c]
        floor = z_lip + (z_head - z_lip) * (1.0 - s) * np.exp(-s)
        surface = floor + (z_head - floor) * d**2
        # full depth inside, fading out over the last quarter towards the lip and the sides
        fade = np.clip(4.0 * (1.0 - s), 0.0, 1.0) * np.clip(4.0 * (1.0 - np.abs(d)), 0.0, 1.0)
        fade[s < 0.0] = 0.0
        z = z - fade * np.maximum(z - surface, 0.0)
    return z


def _summits(
    z_m: np.ndarray, spacing_m: float, count: int, apart_m: float
) -> list[tuple[int, int]]:
    """The ``count`` highest local maxima at least ``apart_m`` apart, highest first."""
    size = 2 * int(round(apart_m / spacing_m)) + 1
    r, c = np.nonzero(z_m == ndimage.maximum_filter(z_m, size=size, mode="nearest"))
    best = np.argsort(-z_m[r, c], kind="stable")[:count]
    return [(int(r[i]), int(c[i])) for i in best]


def _rescaled(z: np.ndarray, low_m: float, high_m: float, gamma: float = 1.0) -> np.ndarray:
    return low_m + (high_m - low_m) * ((z - z.min()) / (z.max() - z.min())) ** gamma


def demo_relief_m(
    seed: int,
    *,
    n: int = 300,
    spacing_m: float = 100.0,
    elevation_range_m: tuple[float, float] = (1200.0, 3200.0),
) -> np.ndarray:
    """The demo range: an uplifted block incised by rivers, threshold hillslopes, cirques.

    1. Initial land surface: a fractional Brownian surface (:func:`fbm_surface_saupe1988`,
       H = 0.8) of 20 m standard deviation on a grid of twice the spacing, a margin wider
       than the result.
    2. 16 Myr in 80 steps of rock uplift (strongest along a main divide running WSW-ENE
       across the middle, varied by a smooth fractal field), river incision under the
       stream-power law (m = 0.5, n = 1, erodibility 2e-5 varied by a factor e**(±0.3 sigma))
       draining to the grid's edge at base level (:func:`priority_flood_eps_barnes2014`,
       :func:`d8_receivers_ocallaghan1984`, :func:`stream_power_step_braun2013`) and hillslope
       creep (:func:`hillslope_diffusion_culling1960`, D = 0.02 m2/yr).
    3. Resampled to the grid spacing (cubic spline) and bent by a smooth displacement of
       about 400 m (:func:`domain_warp_perlin1985`), which straightens out the grid's eight
       flow directions; stretched to the elevation range with more area high up (exponent
       0.7); 15 m of fine fractal texture; cirques 1.6 km long below the three highest summits
       on their north side (:func:`carve_cirques_haynes1968`); slopes brought to a talus
       angle of 40 deg (:func:`thermal_erosion_musgrave1989`); scaled to the range again.

    Parameters
    ----------
    seed : the random seed; the same seed gives the same relief.
    n : grid size (n x n pixels; even).
    spacing_m : pixel size [m].
    elevation_range_m : lowest and highest elevation [m].

    Returns
    -------
    ndarray (n, n) float64 — elevation [m], row 0 in the north.
    """
    rng = np.random.default_rng(seed)
    low_m, high_m = elevation_range_m
    margin = n // 20  # fine pixels on each side, cropped after the displacement
    coarse_n, coarse_m = (n + 2 * margin) // 2, 2.0 * spacing_m
    fft_n = int(2 ** np.ceil(np.log2(1.5 * coarse_n)))  # crop well inside the periodic surface
    extent_m = coarse_n * coarse_m

    def coarse_fbm(hurst, longest_m):
        return fbm_surface_saupe1988(rng, fft_n, coarse_m, hurst, longest_m)[:coarse_n, :coarse_n]

    z = 20.0 * coarse_fbm(0.8, extent_m)
    variation = coarse_fbm(1.0, extent_m)
    erodibility = 2e-5 * np.exp(0.3 * coarse_fbm(0.8, extent_m / 3.0))
    east = (np.arange(coarse_n) + 0.5) * coarse_m
    north = extent_m - (np.arange(coarse_n)[:, None] + 0.5) * coarse_m
    divide_north = 0.5 * extent_m + 0.033 * extent_m * np.sin(1.6 * np.pi * east / extent_m)
    divide = np.exp(-(((north - divide_north) / (0.23 * extent_m)) ** 2))
    uplift_m_yr = 1e-3 * np.maximum(0.5 + 0.8 * divide + 0.3 * variation, 0.2)
    edge = _edge_mask(z.shape)
    z = z - z.min()
    z[edge] = 0.0
    dt_yr = 2e5
    for _ in range(80):
        # centimetre noise, so that filled lakes drain along irregular paths, not grid lines
        z = priority_flood_eps_barnes2014(z + rng.uniform(0.0, 0.01, z.shape), 1e-3)
        receiver = d8_receivers_ocallaghan1984(z, coarse_m)
        z = stream_power_step_braun2013(
            z, receiver, uplift_m_yr, erodibility * dt_yr, 0.5, coarse_m, dt_yr
        )
        z = hillslope_diffusion_culling1960(z, 0.005, coarse_m, dt_yr)
        z[edge] = 0.0

    fine_n = 2 * coarse_n
    z = ndimage.zoom(z, 2, order=3)
    shifts = []
    for _ in range(2):
        field = fbm_surface_saupe1988(rng, 2 * fft_n, spacing_m, 1.0, 10_000.0)[:fine_n, :fine_n]
        field = ndimage.gaussian_filter(field, 1200.0 / spacing_m)
        shifts.append(400.0 / spacing_m * field / field.std())
    z = domain_warp_perlin1985(z, *shifts)[margin : margin + n, margin : margin + n]
    z = _rescaled(z, low_m, high_m, gamma=0.7)
    texture = fbm_surface_saupe1988(rng, 2 * fft_n, spacing_m, 0.8, 2000.0)[:n, :n]
    z = z + 15.0 * texture
    z = carve_cirques_haynes1968(z, spacing_m, _summits(z, spacing_m, 3, 4000.0), 1600.0, 1400.0)
    z = thermal_erosion_musgrave1989(z, spacing_m, 40.0, 20)
    return _rescaled(z, low_m, high_m)

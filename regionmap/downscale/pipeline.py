"""NWP grid forcing -> hourly per-cell forcing, vectorised over cells x time.

Each surrounding grid point's value is brought to the cell's elevation, then interpolated
with the cell's sparse weights. Where an adjustment is linear in the height difference with
one coefficient per cell and step (temperature, dew point, log pressure), that equals
interpolating and then adjusting by the weighted model-height difference, which is how it
is computed; the non-linear precipitation factor is folded into one sparse matrix per month.
The grid points a batch needs are read once per time block.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
import scipy.sparse as sp

from regionmap.errors import InputError

from . import bias as _bias
from . import lapse as _lapse
from . import longwave as _lw
from . import phase as _phase
from . import precip as _precip
from . import solar as _solar
from . import thermo as _thermo
from . import wind as _wind
from .quantile_mapping import QuantileMappingTable, select_qm_table
from .settings import BiasEntry, BiasSettings, DownscaleSettings
from .types import CellForcing
from .weights import CellWeights, build_cell_weights

__all__ = ["CellBatch", "prepare_cells", "downscale_cells", "downscale_record"]

_SERIES = (
    "t_air_k",
    "rh_frac",
    "pressure_pa",
    "wind_m_s",
    "sw_in_w_m2",
    "lw_in_w_m2",
    "precip_kg_m2",
    "snow_frac",
    "freezing_rain_frac",
)
_BIAS_TARGET = {  # [bias] key -> (CellForcing field, scale of the offset to canonical units)
    "air_temperature": ("t_air_k", 1.0),
    "relative_humidity": ("rh_frac", 0.01),  # offsets in %
    "wind_speed": ("wind_m_s", 1.0),
    "shortwave_down": ("sw_in_w_m2", 1.0),
    "longwave_down": ("lw_in_w_m2", 1.0),
    "precipitation": ("precip_kg_m2", 1.0),
}


@dataclass
class CellBatch:
    """What the pipeline needs of a set of cells (a whole CellSet or a chunk of it).

    Attributes
    ----------
    cell_id : ndarray (cell,) int64
    elevation_m, slope_deg, aspect_deg, sky_view_frac, lon_deg, lat_deg, area_m2 :
        ndarray (cell,) float64 [m, deg, deg, 1, deg, deg, m2]; aspect NaN for flat cells.
    zone_code : ndarray (cell,) int64 — zone index, for zone-conserving wind transport.
    exposure_class : ndarray (cell,) str — ``sheltered``/``neutral``/``exposed`` (from Sx),
        selects exposure-specific ``[bias]`` entries and quantile-mapping tables.
    sx_deg : ndarray (cell, direction) float64, with ``sx_directions_deg`` (direction,).
    sun_azimuth_deg, sun_elevation_deg : ndarray (n_az,), (n_el,) — sunlit table axes.
    sunlit_fraction, sunlit_cos_incidence : ndarray (cell, n_az, n_el) float32.
    weights : CellWeights — rows for these cells.
    """

    cell_id: np.ndarray
    elevation_m: np.ndarray
    slope_deg: np.ndarray
    aspect_deg: np.ndarray
    sky_view_frac: np.ndarray
    lon_deg: np.ndarray
    lat_deg: np.ndarray
    area_m2: np.ndarray
    zone_code: np.ndarray
    sx_deg: np.ndarray
    sx_directions_deg: np.ndarray
    sun_azimuth_deg: np.ndarray
    sun_elevation_deg: np.ndarray
    sunlit_fraction: np.ndarray
    sunlit_cos_incidence: np.ndarray
    weights: CellWeights
    exposure_class: np.ndarray | None = None
    #: (forcing time,) int64 region-wide event window of each forcing hour
    #: (:func:`regionmap.downscale.events.region_event_hours`), None when not known
    region_event_hour: np.ndarray | None = None
    _per_cell: tuple = field(
        default=(
            "cell_id",
            "elevation_m",
            "slope_deg",
            "aspect_deg",
            "sky_view_frac",
            "lon_deg",
            "lat_deg",
            "area_m2",
            "zone_code",
            "sx_deg",
            "sunlit_fraction",
            "sunlit_cos_incidence",
            "exposure_class",
        ),
        repr=False,
    )

    @property
    def n_cells(self) -> int:
        return int(np.size(self.cell_id))

    def subset(self, cells) -> CellBatch:
        """Some cells of the batch (positions), weights included."""
        kw = {
            name: getattr(self, name)
            for name in (
                "sx_directions_deg",
                "sun_azimuth_deg",
                "sun_elevation_deg",
                "region_event_hour",
            )
        }
        for name in self._per_cell:
            value = getattr(self, name)
            kw[name] = None if value is None else value[cells]
        return CellBatch(weights=self.weights.rows(cells), **kw)


def _month_index(time: np.ndarray) -> np.ndarray:
    """Month (0 = January) of each interval's middle (labels are interval ends)."""
    mid = np.asarray(time, dtype="datetime64[s]") - np.timedelta64(1800, "s")
    return mid.astype("datetime64[M]").astype(np.int64) % 12


def _freezing_rain_source(gf) -> str:
    if getattr(gf, "freezing_rain_frac", None) is not None:
        return "forcing variable freezing_rain_frac"
    if getattr(gf, "upper_air_temperature", None) is not None:
        return "upper-air temperature, Bourgouin (2000) energy areas"
    return (
        "none: the forcing has no upper-air or precipitation-type information, so no "
        "freezing rain is flagged"
    )


def downscale_record(grid_forcing, settings: DownscaleSettings) -> dict:
    """What the downscaling did, for run.json: methods and the freezing-rain source."""
    return {
        "interpolation": settings.interpolation,
        "lapse": settings.lapse,
        "pressure": settings.pressure,
        "precip_elevation": settings.precip_elevation,
        "phase": settings.phase,
        "freezing_rain_source": _freezing_rain_source(grid_forcing),
        "longwave": (
            "forcing longwave, cloud factor carried to the cell"
            if getattr(grid_forcing, "longwave_down", None) is not None
            else "estimated: clear-sky emissivity and a clearness-index cloud proxy"
        ),
        "wind": settings.wind,
        "solar_substeps": settings.solar_substeps,
    }


def _points_needed(batch: CellBatch, settings: DownscaleSettings) -> np.ndarray:
    cols = np.unique(batch.weights.matrix.indices)
    if settings.lapse == "grid":
        cols = np.union1d(cols, batch.weights.neighbours.ravel())
    return cols.astype(np.int64)


def _cell_lapse(settings, month_index, lat_deg):
    """Temperature and dew-point lapse rates (cell, time) [K m-1] before any grid fit."""
    t_month, vp_month = _lapse.monthly_lapse_rates_kunkel1989(
        month_index[None, :] + 1, lat_deg[:, None]
    )
    td_lapse = _lapse.dew_point_lapse_liston_elder2006(vp_month)
    if settings.lapse == "fixed":
        t_month = np.full_like(t_month, settings.lapse_rate_k_per_km / 1000.0)
    return t_month, td_lapse


def _precip_matrices(wmat: sp.csr_matrix, dz_pair: np.ndarray, months: np.ndarray, settings):
    """One sparse (cell, point) matrix per month: weight x elevation factor of the pair."""
    out = {}
    for m in np.unique(months):
        if settings.precip_elevation == "none":
            out[m] = wmat
            continue
        chi = (
            settings.precip_chi_per_km
            if settings.precip_chi_per_km is not None
            else _precip.THORNTON1997_CHI_PER_KM[m]
        ) * settings.precip_coefficient_scale
        fac = _precip.precip_factor_thornton1997(dz_pair, chi, bounds=settings.precip_factor_bounds)
        out[m] = sp.csr_matrix((wmat.data * fac, wmat.indices, wmat.indptr), shape=wmat.shape)
    return out


#: memory for one span of grid-point values read at once [bytes]
READ_BUDGET_BYTES = 256 * 2**20


def _read(gf, names, iy, ix, tslice) -> dict:
    raw = gf.read_block(names, iy, ix, tslice)
    return {
        k: np.ascontiguousarray(np.moveaxis(np.asarray(v, dtype=np.float64), 0, -1))
        for k, v in raw.items()
    }


def _downscale_block(
    grid_forcing, chunks, settings, corrections, data, z_pts, time, month_idx, cols, out, sx_all
):
    """Downscale every cell chunk over the hours ``cols`` (positions in ``time``) from the grid
    values ``data`` of those hours, into ``out`` (and Sx at the hour's wind into ``sx_all``)."""
    for sel, chunk, carry in chunks:
        res = _chunk_block(
            grid_forcing,
            chunk,
            settings,
            corrections,
            data,
            z_pts,
            time[cols],
            month_idx[cols],
            carry,
        )
        for name in out:
            out[name][sel, cols] = res[name]
        sx_all[sel, cols] = res["_sx_now"]


def _n_levels(grid_forcing) -> int:
    """Vertical levels of the upper-air temperature, 0 without it."""
    if getattr(grid_forcing, "upper_air_temperature", None) is None:
        return 0
    return int(np.size(getattr(grid_forcing, "upper_air_pressure_pa", 0)))


def _chunk_block(gf, batch: CellBatch, settings, corrections, data, z_pts, time, month_idx, carry):
    """Downscale one chunk of cells over one time block; returns a dict of (cell, time)."""
    w = batch.weights.matrix  # (cell, point) with columns = union positions
    z_c = batch.elevation_m[:, None]
    dz = z_c - (w @ z_pts)[:, None]  # cell minus weighted model height [m]
    t_pts, rh_pts = data["air_temperature"], np.clip(data["relative_humidity"], 1e-4, 1.0)
    t_w = w @ t_pts
    lapse_t, lapse_td = _cell_lapse(settings, month_idx, batch.lat_deg)
    if settings.lapse == "grid":
        lapse_t, _ = _lapse.grid_lapse_fit(
            t_pts,
            z_pts,
            batch.weights.neighbours,
            lapse_t,
            bounds_k_m=(
                settings.grid_lapse_bounds_k_per_km[0] / 1000.0,
                settings.grid_lapse_bounds_k_per_km[1] / 1000.0,
            ),
            min_r2=settings.grid_lapse_min_r2,
            min_z_range_m=settings.grid_lapse_min_range_m,
        )
    t_c = _lapse.adjust_temperature_lapse(t_w, dz, lapse_t)
    td_pts = _lapse.dew_point_from_relative_humidity(t_pts, rh_pts)
    td_c = _lapse.adjust_temperature_lapse(w @ td_pts, dz, lapse_td)
    rh_c = _lapse.humidity_at_new_temperature(t_c, td_c)
    # the user's temperature and humidity corrections come before phase and longwave
    corrected = {"t_air_k": t_c, "rh_frac": rh_c}
    _apply_bias(corrected, month_idx, corrections, batch.exposure_class, only=_BEFORE_PHASE)
    t_c, rh_c = corrected["t_air_k"], np.clip(corrected["rh_frac"], 1e-4, 1.0)
    e_c = rh_c * _thermo.saturation_vapour_pressure_water_buck1981(t_c)

    if settings.pressure == "standard_atmosphere":
        p_c = np.broadcast_to(_thermo.pressure_standard_atmosphere_icao(z_c), t_c.shape).copy()
    else:
        lnp = w @ np.log(data["surface_air_pressure"])
        p_c = _thermo.pressure_hypsometric(np.exp(lnp), 0.5 * (t_w + t_c), dz)

    # wind: scalar mean speed, speed-weighted vector-mean direction
    spd, wdir = data["wind_speed"], np.radians(data["wind_from_direction"])
    speed = w @ spd
    wdir_c = np.mod(
        np.degrees(np.arctan2(w @ (spd * np.sin(wdir)), w @ (spd * np.cos(wdir)))), 360.0
    )
    factor = np.ones_like(speed)
    sx_now = _wind.sx_at_direction(batch.sx_deg, batch.sx_directions_deg, wdir_c)
    if settings.wind == "winstral":
        factor = factor * _wind.wind_factor_winstral_sx(
            sx_now, coef_per_deg=settings.wind_sx_coef_per_deg, bounds=settings.wind_factor_bounds
        )
    if settings.wind == "liston_sturm":
        factor = factor * _wind.wind_factor_liston_sturm1998(
            batch.slope_deg[:, None],
            batch.aspect_deg[:, None],
            wdir_c,
            slope_ref_deg=settings.liston_sturm_slope_ref_deg,
            bounds=settings.wind_factor_bounds,
        )
    wind_c = speed * np.clip(factor, *settings.wind_factor_bounds)

    # precipitation: elevation factor per (cell, point) pair, per month
    pair_row = np.repeat(np.arange(w.shape[0]), np.diff(w.indptr))
    dz_pair = batch.elevation_m[pair_row] - z_pts[w.indices]
    mats = _precip_matrices(w, dz_pair, month_idx, settings)
    precip_pts = np.maximum(data["precipitation"], 0.0)
    p_cell = np.empty_like(t_c)
    for m, mat in mats.items():
        sel = month_idx == m
        p_cell[:, sel] = mat @ precip_pts[:, sel]

    # phase and freezing rain
    snow = _phase.snow_fraction(
        settings.phase,
        t_c,
        rh_c,
        p_c,
        threshold_c=settings.phase_threshold_c,
        half_width_k=settings.phase_half_width_k,
    )
    if "freezing_rain_frac" in data:
        aloft = w @ np.clip(data["freezing_rain_frac"], 0.0, 1.0)
    elif "upper_air_temperature" in data:
        # the sounding over each cell starts at the cell's own surface: a cell above the warm
        # layer has no melting layer aloft, whatever the grid column below it shows
        ua = data["upper_air_temperature"]  # (level, point, time)
        ua_c = np.stack([w @ ua[k] for k in range(ua.shape[0])])  # (level, cell, time)
        melt, cold = _phase.bourgouin2000_areas(
            t_c, p_c, ua_c, np.asarray(gf.upper_air_pressure_pa)
        )
        aloft = _phase.freezing_rain_fraction_bourgouin2000(melt, cold)
    else:
        aloft = np.zeros_like(t_c)
    snow, fzra = _phase.freezing_rain_at_cell(snow, aloft, t_c)

    # shortwave with interval-mean geometry and the sunlit-fraction table
    terms = _solar.substep_sun_terms(time, 3600.0, settings.solar_substeps)
    cosz, beam = _solar.interval_sun_geometry(
        terms,
        batch.lat_deg,
        batch.lon_deg,
        batch.sun_azimuth_deg,
        batch.sun_elevation_deg,
        batch.sunlit_fraction,
        batch.sunlit_cos_incidence,
    )
    ghi_c = w @ np.maximum(data["shortwave_down"], 0.0)
    sw_c, kt = _solar.slope_shortwave_interval_mean(
        ghi_c,
        terms["extra_w_m2"][None, :],
        cosz,
        beam,
        batch.sky_view_frac[:, None],
        settings.terrain_albedo_frac,
    )

    # longwave
    eps_clr_c = _lw.clear_sky_emissivity(e_c, t_c, settings.longwave)
    if "longwave_down" in data:
        e_pts = rh_pts * _thermo.saturation_vapour_pressure_water_buck1981(t_pts)
        cf = w @ _lw.cloud_factor(data["longwave_down"], e_pts, t_pts, settings.longwave)
        eps_c = cf * eps_clr_c
    else:
        day = cosz >= settings.cloud_proxy_min_cos_zenith
        cloud_now = _lw.cloud_fraction_from_clearness_index(kt, kt_clear=settings.kt_clear)
        initial = carry.get("cloud")
        if initial is None:
            first = np.argmax(day, axis=1)
            initial = np.where(
                day.any(axis=1),
                cloud_now[np.arange(day.shape[0]), first],
                settings.cloud_frac_without_daylight,
            )
        cloud = _lw.fill_night_forward(cloud_now, day, initial)
        carry["cloud"] = cloud[:, -1].copy()
        eps_c = _lw.emissivity_all_sky_crawford_duchon1999(cloud, eps_clr_c)
    lw_c = _lw.longwave_at_cell(
        eps_c, t_c, batch.sky_view_frac[:, None], terrain_emissivity=settings.terrain_emissivity
    )
    return {
        "t_air_k": t_c,
        "rh_frac": rh_c,
        "pressure_pa": p_c,
        "wind_m_s": wind_c,
        "sw_in_w_m2": sw_c,
        "lw_in_w_m2": lw_c,
        "precip_kg_m2": p_cell,
        "snow_frac": snow,
        "freezing_rain_frac": fzra,
        "_sx_now": sx_now,
    }


_BEFORE_PHASE = ("air_temperature", "relative_humidity")


def _entry_for(entries: list[BiasEntry], exposure: str) -> BiasEntry | None:
    """The correction for one exposure class: its own entry, else the one for all cells."""
    own = [e for e in entries if e.exposure == exposure]
    general = [e for e in entries if e.exposure == "all"]
    return (own or general or [None])[0]


def _apply_bias(
    out: dict,
    month_idx: np.ndarray,
    corrections: tuple[BiasSettings, tuple],
    exposure_class=None,
    *,
    only=None,
) -> None:
    """Offsets/factors, then quantile mapping, per exposure class of the cells, for the
    variables in ``only`` (default: every variable except those corrected before phase)."""
    bias, quantile_tables = corrections
    keys = only if only is not None else tuple(k for k in _BIAS_TARGET if k not in _BEFORE_PHASE)
    n_cell = next(iter(out.values())).shape[0]
    classes = (
        np.full(n_cell, "neutral", dtype=object)
        if exposure_class is None
        else np.asarray(exposure_class, dtype=object)
    )
    for table in quantile_tables:
        if table.variable not in _BIAS_TARGET:
            raise InputError(
                f"[bias] quantile_mapping: table for {table.variable!r} has no downscaled "
                f"series; expected one of {sorted(_BIAS_TARGET)}"
            )
    for key in keys:
        name, scale = _BIAS_TARGET[key]
        if name not in out:
            continue
        entries = getattr(bias, key)
        for cls in np.unique(classes):
            rows = classes == cls
            corr = _entry_for(entries, cls)
            if corr is not None:
                offset = corr.offset
                if offset is not None:
                    offset = np.asarray(offset, dtype=np.float64) * scale
                out[name][rows] = _bias.apply_offset_factor(
                    out[name][rows], month_idx, offset=offset, factor=corr.factor
                )
            table = select_qm_table(quantile_tables, key, cls)
            if table is not None:
                out[name][rows] = _bias.apply_quantile_table(out[name][rows], month_idx, table)
    if "rh_frac" in out:
        out["rh_frac"] = np.clip(out["rh_frac"], 0.0, 1.0)
    for name in ("wind_m_s", "sw_in_w_m2", "lw_in_w_m2", "precip_kg_m2"):
        if name in out:
            out[name] = np.maximum(out[name], 0.0)


def downscale_cells(
    grid_forcing,
    cells_subset: CellBatch,
    settings: DownscaleSettings,
    time_slice: slice = slice(None),
    *,
    bias: BiasSettings | None = None,
    quantile_tables: Sequence[QuantileMappingTable] = (),
) -> CellForcing:
    """Hourly per-cell forcing for a batch of cells over a slice of the forcing's hours.

    Parameters
    ----------
    grid_forcing : regionmap.io.forcing.GridForcing
        Canonical hourly grid forcing (anything with ``time``, ``surface_altitude``,
        ``read_block``, ``heights_m`` and the optional variables as attributes).
    cells_subset : CellBatch
        The cells, with weights built once by :func:`prepare_cells`.
    settings : DownscaleSettings
    time_slice : slice
        Contiguous hourly indices into ``grid_forcing.time``.
    bias : the ``[bias]`` offsets and factors (None: none).
    quantile_tables : quantile-mapping tables applied after them (read from ``[bias]
        quantile_mapping`` by :func:`regionmap.downscale.quantile_mapping.read_qm_table`).

    Returns
    -------
    CellForcing
        (cell, time) series in the batch's cell order, with ``sx_deg`` (Sx at the hour's
        wind direction) for wind transport.
    """
    times_all = np.asarray(grid_forcing.time, dtype="datetime64[s]")
    start, stop, step = time_slice.indices(times_all.size)
    if step != 1 or stop <= start:
        raise InputError(
            f"downscale: time_slice must be a non-empty contiguous slice of the forcing's "
            f"{times_all.size} hours, got {time_slice!r}"
        )
    time = times_all[start:stop]
    month_idx = _month_index(time)
    corrections = (bias if bias is not None else BiasSettings(), tuple(quantile_tables))
    n_cell, n_t = cells_subset.n_cells, time.size
    out = {name: np.empty((n_cell, n_t)) for name in _SERIES}
    sx_all = np.empty((n_cell, n_t))

    names = [
        "air_temperature",
        "relative_humidity",
        "surface_air_pressure",
        "wind_speed",
        "wind_from_direction",
        "shortwave_down",
        "precipitation",
    ]
    for opt in ("longwave_down", "freezing_rain_frac", "upper_air_temperature"):
        if getattr(grid_forcing, opt, None) is not None:
            names.append(opt)
            if opt == "freezing_rain_frac":
                break  # a precipitation-type variable wins over upper-air temperatures

    points = _points_needed(cells_subset, settings)
    ny, nx = cells_subset.weights.grid_shape
    iy, ix = points // nx, points % nx
    z_pts = np.asarray(grid_forcing.surface_altitude, dtype=np.float64)[iy, ix]
    remap = np.full(ny * nx, -1, dtype=np.int64)
    remap[points] = np.arange(points.size)
    chunks = []
    for c0 in range(0, n_cell, settings.chunk_cells):
        sel = np.arange(c0, min(c0 + settings.chunk_cells, n_cell))
        chunk = cells_subset.subset(sel)
        wm = chunk.weights.matrix
        local = CellWeights(
            sp.csr_matrix((wm.data, remap[wm.indices], wm.indptr), shape=(sel.size, points.size)),
            (ny, nx),
            remap[chunk.weights.neighbours],
            chunk.weights.method,
        )
        chunk.weights = local
        chunks.append((sel, chunk, {}))

    # the grid points are read in long spans (one file access per variable and span, bounded
    # by READ_BUDGET_BYTES) and the cells computed in blocks of time_block_h hours of a span
    per_hour = max(points.size * (len(names) + _n_levels(grid_forcing)) * 8, 1)
    span_h = max(
        settings.time_block_h,
        READ_BUDGET_BYTES // per_hour // settings.time_block_h * settings.time_block_h,
    )
    for r0 in range(start, stop, span_h):
        r1 = min(r0 + span_h, stop)
        span = _read(grid_forcing, names, iy, ix, slice(r0, r1))
        for t0 in range(r0, r1, settings.time_block_h):
            t1 = min(t0 + settings.time_block_h, r1)
            data = {k: np.ascontiguousarray(v[..., t0 - r0 : t1 - r0]) for k, v in span.items()}
            _downscale_block(
                grid_forcing,
                chunks,
                settings,
                corrections,
                data,
                z_pts,
                time,
                month_idx,
                slice(t0 - start, t1 - start),
                out,
                sx_all,
            )

    _apply_bias(out, month_idx, corrections, cells_subset.exposure_class)
    heights = grid_forcing.heights_m
    if not {"wind", "temperature"} <= set(heights):
        raise InputError(
            f"downscale: the forcing's measurement heights must give 'wind' and "
            f"'temperature' [m], got {heights!r}. Hint: set [forcing] heights_m."
        )
    region_hours = cells_subset.region_event_hour
    return CellForcing(
        time=time,
        event_hour=None if region_hours is None else region_hours[start:stop],
        wind_height_m=float(heights["wind"]),
        temp_height_m=float(heights["temperature"]),
        dt_s=3600.0,
        sx_deg=sx_all,
        **out,
    )


def _cell_pixels(cellset) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """(pixel_cell, lon, lat) of every in-zone pixel of a CellSet [deg]."""
    missing = [a for a in ("index", "transform", "crs") if getattr(cellset, a, None) is None]
    if missing:
        raise InputError(
            f"downscale: the cell set lacks {', '.join(missing)}; interpolation weights are "
            "built from each cell's pixels and need the pixel->cell index with its affine "
            "transform and CRS. Hint: pass pixel_cell / pixel_lon_deg / pixel_lat_deg."
        )
    from pyproj import CRS, Transformer

    index = np.asarray(cellset.index)
    rows, cols = np.nonzero(index >= 0)
    a = cellset.transform
    x = a.c + (cols + 0.5) * a.a + (rows + 0.5) * a.b
    y = a.f + (cols + 0.5) * a.d + (rows + 0.5) * a.e
    to_ll = Transformer.from_crs(CRS.from_user_input(cellset.crs), "EPSG:4326", always_xy=True)
    lon, lat = to_ll.transform(x, y)
    return index[rows, cols].astype(np.int64), np.asarray(lon), np.asarray(lat)


def prepare_cells(
    cellset,
    grid_forcing,
    settings: DownscaleSettings,
    *,
    pixel_cell: np.ndarray | None = None,
    pixel_lon_deg: np.ndarray | None = None,
    pixel_lat_deg: np.ndarray | None = None,
    weights: CellWeights | None = None,
) -> CellBatch:
    """Collect what downscaling needs of a CellSet and build its weights once.

    Parameters
    ----------
    cellset : regionmap.cells.CellSet
        ``table`` (indexed by cell_id 0..n-1), ``sx_deg`` with ``sx_directions_deg``,
        ``sunlit``; pixels from ``index`` + ``transform`` + ``crs`` unless given.
    grid_forcing : GridForcing
        For ``grid_index_of``, ``extent_lonlat`` and ``surface_altitude``.
    settings : DownscaleSettings
    pixel_cell, pixel_lon_deg, pixel_lat_deg : ndarray (pixel,), optional
        Cell of each pixel and its centre [deg], overriding the CellSet's index.
    weights : CellWeights, optional
        Weights built earlier for these cells and this grid (the preparation cache); None
        builds them.

    Returns
    -------
    CellBatch
        For all cells in ``cell_id`` order; take chunks with :meth:`CellBatch.subset`.

    Raises
    ------
    GridMismatchError
        The forcing grid does not cover every cell (both extents in the message).
    """
    table = cellset.table
    n = len(table)
    directions = getattr(cellset, "sx_directions_deg", None)
    if directions is None:
        raise InputError(
            "downscale: the cell set has sx_deg but no sx_directions_deg (the wind "
            "directions of its columns) [deg]."
        )
    if weights is None:
        if pixel_cell is None:
            pixel_cell, pixel_lon_deg, pixel_lat_deg = _cell_pixels(cellset)
        weights = build_cell_weights(
            grid_forcing.grid_index_of,
            grid_forcing.extent_lonlat,
            np.shape(grid_forcing.surface_altitude),
            pixel_cell,
            pixel_lon_deg,
            pixel_lat_deg,
            n,
            table["lon"].to_numpy(float),
            table["lat"].to_numpy(float),
            method=settings.interpolation,
            lapse_radius=settings.grid_lapse_radius,
            where=str(getattr(grid_forcing, "paths", ["forcing grid"])[0]),
        )
    sun = cellset.sunlit
    return CellBatch(
        cell_id=table.index.to_numpy(np.int64),
        elevation_m=table["elevation_m"].to_numpy(float),
        slope_deg=table["slope_deg"].to_numpy(float),
        aspect_deg=table["aspect_deg"].to_numpy(float),
        sky_view_frac=table["sky_view_frac"].to_numpy(float),
        lon_deg=table["lon"].to_numpy(float),
        lat_deg=table["lat"].to_numpy(float),
        area_m2=table["area_km2"].to_numpy(float) * 1e6,
        zone_code=pd.factorize(table["zone"])[0].astype(np.int64),
        sx_deg=np.asarray(cellset.sx_deg, dtype=np.float64),
        sx_directions_deg=np.asarray(directions, dtype=np.float64),
        sun_azimuth_deg=np.asarray(sun.azimuth_deg, dtype=np.float64),
        sun_elevation_deg=np.asarray(sun.elevation_deg, dtype=np.float64),
        sunlit_fraction=np.asarray(sun.fraction),
        sunlit_cos_incidence=np.asarray(sun.cos_incidence),
        weights=weights,
        exposure_class=_wind.exposure_class_from_sx(cellset.sx_deg),
    )

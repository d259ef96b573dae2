"""Station points through the same downscaling chain as the cells; verify and calibrate.

Each station becomes a one-pixel "cell": its elevation comes from the station metadata,
slope, aspect, sky-view factor, Sx wind exposure and the horizon (for the sunlit table) from
the DEM terrain at the station's pixel, and its exposure class from Sx unless the metadata
gives one. :func:`regionmap.downscale.pipeline.prepare_cells` builds the interpolation
weights from the station's own position, and :func:`~regionmap.downscale.pipeline.downscale_cells`
runs the chain the run uses (lapse rates, precipitation elevation factor, phase, shaded
shortwave, longwave, exposure-adjusted wind, the user's ``[bias]``). Pyranometers measure on
a horizontal plane, so shortwave is downscaled a second time for a horizontal surface at the
station (same horizon). Where snow depth or SWE is observed, the snow column is run at the
point (:func:`regionmap.snow.column.run_columns`) from the first forcing hour, snow-free.

* :func:`station_model_series` — hourly model series per station.
* :func:`verify_command` — ``regionmap verify``: scores table, ``verification.csv``, figures.
* :func:`calibrate_command` — ``regionmap calibrate``: ``[bias]`` TOML, ``qm.nc``, skill.
* :func:`run_verification_last_day` — what a run writes when ``[stations]`` is configured.

A station stands alone, with no zone of cells around it: its column has no wind transport
(the zone's transport moves snow between the cells of a zone).

Station scores describe the model at a few points. They help trained forecasters judge how far
to trust the guidance and replace neither field observations nor the local avalanche service.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from regionmap import CAUTION
from regionmap.cells import sunlit_tables
from regionmap.config import Config
from regionmap.downscale.pipeline import downscale_cells, prepare_cells
from regionmap.downscale.quantile_mapping import write_qm_table
from regionmap.downscale.wind import exposure_class_from_sx
from regionmap.errors import InputError, warn
from regionmap.io.atomic import atomic_write_text
from regionmap.io.dem import read_dem
from regionmap.io.stations import read_observations, read_stations
from regionmap.io.writers import write_csv
from regionmap.pipeline.region import open_grid_forcing, quantile_tables
from regionmap.snow.column import run_columns
from regionmap.snow.state import SnowState
from regionmap.stations.calibrate import (
    DEFAULT_KIND,
    QM_KIND,
    bias_toml,
    calibrate,
    correct_undercatch_kochendorfer2017,
)
from regionmap.stations.verify import (
    aggregate_model_to_observations,
    verification_table,
    write_verification_csv,
)
from regionmap.terrain import compute_terrain

__all__ = [
    "MODEL_VARIABLES",
    "StationCells",
    "station_cells",
    "station_model_series",
    "verify_command",
    "calibrate_command",
    "run_verification_last_day",
]

#: Model series per station: column name -> CellForcing field (canonical SI units as in
#: :data:`regionmap.io.stations.CANONICAL_UNITS`). ``shortwave_down`` is on a horizontal
#: plane; ``snow_depth`` [m] and ``snow_water_equivalent`` [kg m-2] come from the column run.
MODEL_VARIABLES: dict[str, str] = {
    "air_temperature": "t_air_k",
    "relative_humidity": "rh_frac",
    "wind_speed": "wind_m_s",
    "precipitation": "precip_kg_m2",
    "shortwave_down": "sw_in_w_m2",
}
_SNOW_VARIABLES = ("snow_depth", "snow_water_equivalent")


@dataclass
class StationCells:
    """A CellSet-like description of station points (what ``prepare_cells`` reads).

    Attributes
    ----------
    table : pandas.DataFrame
        One row per station point (index 0..n-1): ``zone`` (one per station), ``elevation_m``,
        ``slope_deg``, ``aspect_deg`` (NaN where flat), ``sky_view_frac``, ``lon``, ``lat``,
        ``area_km2`` (the pixel's), ``station_id``, ``row``, ``col``.
    sx_deg : ndarray (station, direction) float64
    sx_directions_deg : ndarray (direction,)
    sunlit : regionmap.cells.SunlitTable
    exposure_class : ndarray (station,) object
        From the metadata where given, else from Sx.
    exposure_source : ndarray (station,) object
        ``"metadata"`` or ``"terrain (Sx)"``.
    """

    table: pd.DataFrame
    sx_deg: np.ndarray
    sx_directions_deg: np.ndarray
    sunlit: object
    exposure_class: np.ndarray
    exposure_source: np.ndarray


def _station_pixels(dem, stations: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Row and column of the DEM pixel under each station; InputError outside or on nodata."""
    from pyproj import CRS, Transformer

    to_dem = Transformer.from_crs("EPSG:4326", CRS.from_user_input(dem.crs), always_xy=True)
    x, y = to_dem.transform(stations["lon"].to_numpy(float), stations["lat"].to_numpy(float))
    inv = ~dem.transform
    x, y = np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64)
    col = np.floor(inv.a * x + inv.b * y + inv.c).astype(np.int64)
    row = np.floor(inv.d * x + inv.e * y + inv.f).astype(np.int64)
    ny, nx = dem.shape
    outside = (row < 0) | (row >= ny) | (col < 0) | (col >= nx)
    src = stations.attrs.get("source", "station metadata")
    if outside.any():
        sid = stations.index[np.flatnonzero(outside)].tolist()
        raise InputError(
            f"{src}: station(s) {sid} lie outside the DEM {dem.path}; expected lon/lat (WGS 84) "
            "inside the region's DEM. Hint: check the station coordinates or leave the station out."
        )
    nodata = ~np.isfinite(dem.elevation_m[row, col])
    if nodata.any():
        sid = stations.index[np.flatnonzero(nodata)].tolist()
        raise InputError(
            f"{src}: station(s) {sid} lie on DEM nodata in {dem.path}; no terrain there."
        )
    return row, col


def station_cells(
    stations: pd.DataFrame,
    dem,
    terrain,
    *,
    sun_azimuth_step_deg: float = 10.0,
    sun_elevation_step_deg: float = 5.0,
    horizontal: bool = False,
) -> StationCells:
    """Describe station points as one-pixel cells from the DEM terrain.

    Parameters
    ----------
    stations : pandas.DataFrame
        From :func:`regionmap.io.stations.read_stations`.
    dem : regionmap.io.dem.Dem
    terrain : regionmap.terrain.Terrain
        On the DEM grid.
    sun_azimuth_step_deg, sun_elevation_step_deg : float
        Sunlit-table resolution [deg] (as the cells' ``[cells]`` settings).
    horizontal : bool
        True: a horizontal surface at the station (slope 0) with the pixel's horizon, for
        comparison with pyranometers.

    Returns
    -------
    StationCells

    Raises
    ------
    InputError
        A station outside the DEM or on nodata.
    """
    row, col = _station_pixels(dem, stations)
    n = len(stations)
    slope = terrain.slope_deg[row, col].astype(np.float64)
    aspect = terrain.aspect_deg[row, col].astype(np.float64)
    if horizontal:
        slope = np.zeros(n)
        aspect = np.full(n, np.nan)
    sx = np.asarray(terrain.sx_deg[:, row, col], dtype=np.float64).T.reshape(n, -1)
    sun_az = np.arange(0.0, 360.0 - 1e-9, sun_azimuth_step_deg)
    sun_el = np.arange(0.0, 90.0 + 1e-9, sun_elevation_step_deg)
    sunlit = sunlit_tables(
        np.arange(n),
        terrain.horizon_deg[:, row, col],
        slope,
        aspect,
        terrain.horizon_azimuths_deg,
        n,
        sun_az,
        sun_el,
    )
    meta = (
        stations["exposure_class"].fillna("").astype(str).to_numpy()
        if "exposure_class" in stations
        else np.full(n, "", dtype=object)
    )
    from_sx = exposure_class_from_sx(sx)
    exposure = np.where(meta != "", meta, from_sx).astype(object)
    table = pd.DataFrame(
        {
            "zone": [f"station {s}" for s in stations.index],
            "elevation_m": stations["elevation_m"].to_numpy(float),
            "slope_deg": slope,
            "aspect_deg": aspect,
            "sky_view_frac": terrain.sky_view_frac[row, col].astype(np.float64),
            "lon": stations["lon"].to_numpy(float),
            "lat": stations["lat"].to_numpy(float),
            "area_km2": dem.pixel_area_m2()[row, col] / 1e6,
            "station_id": stations.index.to_numpy(dtype=object),
            "row": row,
            "col": col,
        }
    )
    return StationCells(
        table,
        sx,
        np.asarray(terrain.sx_directions_deg, dtype=np.float64),
        sunlit,
        exposure,
        np.where(meta != "", "metadata", "terrain (Sx)").astype(object),
    )


def _batch(cells: StationCells, gf, settings):
    t = cells.table
    gf.check_covers(t["lon"].to_numpy(float), t["lat"].to_numpy(float))
    batch = prepare_cells(
        cells,
        gf,
        settings,
        pixel_cell=np.arange(len(t), dtype=np.int64),
        pixel_lon_deg=t["lon"].to_numpy(float),
        pixel_lat_deg=t["lat"].to_numpy(float),
    )
    batch.exposure_class = np.asarray(cells.exposure_class, dtype=object)
    return batch


def _time_slice(gf_time: np.ndarray, period) -> slice:
    t = np.asarray(gf_time, dtype="datetime64[s]")
    if period is None:
        return slice(0, t.size)
    start, end = (np.datetime64(p, "s") for p in period)
    i0 = int(np.searchsorted(t, start, side="left"))
    i1 = int(np.searchsorted(t, end, side="right"))
    if i1 <= i0:
        raise InputError(
            f"Stations: the period {start} .. {end} UTC has no forcing hour (the forcing covers "
            f"{t[0]} .. {t[-1]} UTC); hint: observations must overlap the [forcing] period."
        )
    return slice(i0, i1)


def _region_parts(cfg: Config, region):
    """DEM and terrain: the run's when given, else read and computed here."""
    if region is not None:
        return region.dem, region.terrain
    dem = read_dem(cfg.region.dem)
    return dem, compute_terrain(dem, cfg.terrain)


def station_model_series(
    cfg: Config,
    stations: pd.DataFrame,
    period=None,
    *,
    region=None,
    grid_forcing=None,
    snow: bool = False,
    raw: bool = False,
) -> pd.DataFrame:
    """Hourly model series at each station, downscaled by the cells' chain.

    Parameters
    ----------
    cfg : Config
        The run's configuration (region, forcing, ``[downscale]``, ``[bias]``, ``[snow]``).
    stations : pandas.DataFrame
        From :func:`regionmap.io.stations.read_stations`.
    period : (start, end) of datetime64-like, optional
        First and last hourly interval end to return (UTC); None: the whole forcing.
    region : regionmap.pipeline.region.Region, optional
        A prepared region (its DEM and terrain are reused); None reads and computes them.
    grid_forcing : GridForcing, optional
        An opened forcing; None opens ``[forcing]``.
    snow : bool
        Also run the snow column at each station from the first forcing hour (snow-free) and
        return ``snow_depth`` [m] and ``snow_water_equivalent`` [kg m-2].
    raw : bool
        True leaves out the config's ``[bias]`` corrections and quantile mapping (what
        calibration fits against).

    Returns
    -------
    pandas.DataFrame
        Index (``station_id``, ``time`` datetime64[s], interval end), columns of
        :data:`MODEL_VARIABLES` (and the snow variables) in canonical SI units;
        ``attrs["exposure_class"]`` and ``attrs["exposure_source"]`` per station.

    Raises
    ------
    InputError, GridMismatchError
        Stations outside the DEM or the forcing grid, a period without forcing.
    """
    dem, terrain = _region_parts(cfg, region)
    gf = open_grid_forcing(cfg) if grid_forcing is None else grid_forcing
    settings = cfg.downscale
    corrections = {} if raw else {"bias": cfg.bias, "quantile_tables": quantile_tables(cfg)}
    cs = cfg.cells
    steps = dict(
        sun_azimuth_step_deg=cs.sun_azimuth_step_deg,
        sun_elevation_step_deg=cs.sun_elevation_step_deg,
    )
    on_terrain = station_cells(stations, dem, terrain, **steps)
    flat = station_cells(stations, dem, terrain, horizontal=True, **steps)
    wanted = _time_slice(gf.time, period)
    run_slice = slice(0, wanted.stop) if snow else wanted
    forcing = downscale_cells(
        gf, _batch(on_terrain, gf, settings), settings, run_slice, **corrections
    )
    sw_flat = downscale_cells(
        gf, _batch(flat, gf, settings), settings, wanted, **corrections
    ).sw_in_w_m2
    keep = slice(wanted.start - run_slice.start, None)
    time = forcing.time[keep]
    n, nt = len(stations), time.size
    columns = {name: getattr(forcing, field)[:, keep] for name, field in MODEL_VARIABLES.items()}
    columns["shortwave_down"] = sw_flat
    if snow:
        params = cfg.snow
        state0 = SnowState.empty(
            n, params.max_layers, time=forcing.time[0] - np.timedelta64(3600, "s")
        )
        _, diags, _ = run_columns(state0, forcing, params, 1, with_snapshots=False)
        columns["snow_depth"] = diags["snow_depth_cm"].astype(np.float64)[:, keep] / 100.0
        columns["snow_water_equivalent"] = diags["swe_kg_m2"][:, keep]
    index = pd.MultiIndex.from_arrays(
        [np.repeat(stations.index.to_numpy(dtype=object), nt), np.tile(time, n)],
        names=["station_id", "time"],
    )
    out = pd.DataFrame(
        {k: np.asarray(v, dtype=np.float64).reshape(n * nt) for k, v in columns.items()},
        index=index,
    )
    out.attrs["exposure_class"] = dict(zip(stations.index, on_terrain.exposure_class, strict=True))
    out.attrs["exposure_source"] = dict(
        zip(stations.index, on_terrain.exposure_source, strict=True)
    )
    return out


# ------------------------------------------------------------------------------ commands
def _observation_period(obs: pd.DataFrame) -> tuple[np.datetime64, np.datetime64]:
    start = obs["interval_start"].to_numpy().astype("datetime64[s]").min() + np.timedelta64(
        3600, "s"
    )
    end = obs.index.get_level_values("time").to_numpy().astype("datetime64[s]").max()
    return start, end


def _clip_to_forcing(gf, obs: pd.DataFrame, where: str) -> tuple[np.datetime64, np.datetime64]:
    t = np.asarray(gf.time, dtype="datetime64[s]")
    start, end = _observation_period(obs)
    a, b = max(start, t[0]), min(end, t[-1])
    if b < a:
        raise InputError(
            f"{where}: the observations ({start - np.timedelta64(3600, 's')} .. {end} UTC) do not "
            f"overlap the forcing ({t[0]} .. {t[-1]} UTC); hint: give observations inside the "
            "[forcing] period."
        )
    return a, b


def _read_inputs(stations_path, observation_paths):
    stations = read_stations(stations_path)
    paths = (
        [observation_paths]
        if isinstance(observation_paths, (str, Path))
        else list(observation_paths)
    )
    return stations, read_observations(paths, stations)


def _matched(cfg, stations, obs, *, raw, where, region=None, grid_forcing=None):
    gf = open_grid_forcing(cfg) if grid_forcing is None else grid_forcing
    period = _clip_to_forcing(gf, obs, where)
    used = stations.loc[sorted(set(obs.index.get_level_values("station_id")))]
    used.attrs.update(stations.attrs)
    snow = any(v in obs.columns and obs[v].notna().any() for v in _SNOW_VARIABLES)
    model = station_model_series(
        cfg, used, period, region=region, grid_forcing=gf, snow=snow, raw=raw
    )
    matched = aggregate_model_to_observations(model, obs)
    return model, matched


def _undercatch_corrected(obs: pd.DataFrame, undercatch) -> pd.DataFrame:
    """Observed precipitation corrected for gauge undercatch (Kochendorfer et al. 2017)."""
    if undercatch is None or "precipitation" not in obs.columns:
        return obs
    missing = [v for v in ("wind_speed", "air_temperature") if v not in obs.columns]
    if missing:
        raise InputError(
            f"verify: the undercatch correction needs observed {missing} beside the "
            "precipitation; they are not in the observation files."
        )
    out = obs.copy()
    out["precipitation"] = correct_undercatch_kochendorfer2017(
        obs["precipitation"].to_numpy(float),
        obs["wind_speed"].to_numpy(float),
        obs["air_temperature"].to_numpy(float),
        shield=undercatch,
    )
    return out


#: Headings of the skill statistics in the printed tables.
_STATISTICS = {
    "n": "n",
    "bias": "bias",
    "mae": "MAE",
    "rmse": "RMSE",
    "r2": "R2",
    "total_percent_difference": "total %",
}
_CONSOLE = {"station_id": "station", "variable": "variable", "units": "unit", **_STATISTICS}


def _print_table(table: pd.DataFrame, columns: dict = _CONSOLE) -> None:
    view = table[[c for c in columns if c in table.columns]].rename(columns=columns)
    print(view.to_string(index=False, float_format=lambda v: f"{v:.3g}", na_rep="-"))


def verify_command(
    cfg: Config,
    stations_path,
    observation_paths,
    out_dir,
    *,
    undercatch=None,
    echo: bool = True,
    region=None,
) -> pd.DataFrame:
    """``regionmap verify``: model at the stations against their observations.

    Parameters
    ----------
    cfg : Config
    stations_path : path
        Station metadata CSV (docs/station_csv.md).
    observation_paths : path or list of paths
        Observation CSV files.
    out_dir : path
        Folder for ``verification.csv`` and ``figures/`` (created when missing).
    undercatch : {"single_alter", "unshielded"}, optional
        Correct the observed precipitation for wind-induced gauge undercatch with the transfer
        function of Kochendorfer et al. (2017, HESS 21, doi:10.5194/hess-21-3525-2017;
        coefficients [mem]) before comparing; None compares the gauge as measured.
    echo : bool
        Print the table, where the files are and the caution.
    region : regionmap.pipeline.region.Region, optional
        A prepared region whose DEM and terrain are reused (None computes them).

    Returns
    -------
    pandas.DataFrame
        :func:`regionmap.stations.verify.verification_table` over the overlap, plus ``period_start``
        and ``period_end`` (UTC) and ``exposure_class`` of each station.

    Raises
    ------
    InputError
        Bad station or observation files, stations outside the DEM or forcing, no overlap.
    """
    from regionmap.plots.verification import write_verification_figures

    stations, obs = _read_inputs(stations_path, observation_paths)
    obs = _undercatch_corrected(obs, undercatch)
    model, matched = _matched(cfg, stations, obs, raw=False, where="verify", region=region)
    table = verification_table(matched, obs)
    start, end = _observation_period(obs)
    table["period_start"] = str(start - np.timedelta64(3600, "s"))
    table["period_end"] = str(end)
    table["exposure_class"] = table["station_id"].map(model.attrs["exposure_class"])
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    csv_path = write_verification_csv(table, out / "verification.csv")
    figures = write_verification_figures(matched, obs, out / "figures")
    if echo:
        note = (
            f", observed precipitation corrected for undercatch ({undercatch})"
            if undercatch
            else ""
        )
        print(
            f"Downscaled model against station observations{note}, "
            f"{start - np.timedelta64(3600, 's')} "
            f"to {end} UTC (bias = model minus observation):"
        )
        _print_table(table)
        print(
            f"\nTable: {csv_path}; figures: {', '.join(p.name for p in figures)} in "
            f"{out / 'figures'}."
        )
        print(f"Caution: station scores describe the model at a few points. {CAUTION}")
    return table


def _calibrate_observed(matched, obs, stations, *, method, per_month, undercatch):
    """:func:`regionmap.stations.calibrate.calibrate` on the variables the observations hold (each
    exposure class is fitted from its stations that observe the variable)."""
    kinds = DEFAULT_KIND if method == "scaling" else QM_KIND
    present = [
        v for v in kinds if v in matched.columns and v in obs.columns and obs[v].notna().any()
    ]
    if not present:
        raise InputError(
            f"calibrate: the observations hold none of the variables that can be fitted "
            f"({sorted(kinds)}); got {[c for c in obs.columns if c != 'interval_start']}."
        )
    return calibrate(
        matched,
        obs,
        stations,
        variables=present,
        method=method,
        per_month=per_month,
        undercatch=undercatch,
    )


def calibrate_command(
    cfg: Config,
    stations_path,
    observation_paths,
    out_dir,
    *,
    method="scaling",
    per_month: bool = False,
    undercatch=None,
    echo: bool = True,
    region=None,
):
    """``regionmap calibrate``: fit ``[bias]`` settings from the station overlap.

    The model is downscaled **without** the config's current ``[bias]`` (the fitted settings
    replace that section, they do not stack on it). Stations without an exposure class in
    their metadata take the class of their terrain (Sx), as cells do; wind settings are
    fitted per class and apply to cells of that class only.

    Parameters
    ----------
    cfg : Config
    stations_path, observation_paths : paths
        As for :func:`verify_command`.
    out_dir : path
        Folder (created when missing) for ``bias.toml`` (the fitted section),
        ``calibration_skill.csv`` (the skill table), ``figures/`` (the raw model against the
        stations, :func:`regionmap.plots.verification.write_verification_figures`, and
        ``calibration_skill.png``) and, when quantile-mapping tables are fitted, ``qm.nc``.
    method : {"scaling", "quantile_mapping"}
    per_month : bool
        Scaling with twelve monthly values.
    undercatch : {"single_alter", "unshielded"}, optional
        Kochendorfer et al. (2017) gauge correction of observed precipitation before fitting.
    echo : bool
        Print the TOML, the skill table, the notes and the caution.
    region : regionmap.pipeline.region.Region, optional
        A prepared region whose DEM and terrain are reused (None computes them).

    Returns
    -------
    toml_text : str
        The ``[bias]`` section to paste (:func:`regionmap.stations.calibrate.bias_toml`).
    skill : pandas.DataFrame
        Skill before (``raw``), after (``fitted``) and cross-validated (leave one month out)
        per exposure class and variable.

    Raises
    ------
    InputError
        Bad inputs, or too little data to fit (the message says what is missing).
    """
    stations, obs = _read_inputs(stations_path, observation_paths)
    model, matched = _matched(cfg, stations, obs, raw=True, where="calibrate", region=region)
    stations, derived = _with_terrain_exposure(stations, model)
    result = _calibrate_observed(
        matched, obs, stations, method=method, per_month=per_month, undercatch=undercatch
    )
    if derived:
        result.notes.append(
            "exposure class from the terrain (Sx) for station(s) "
            + ", ".join(f"{s}: {model.attrs['exposure_class'][s]}" for s in derived)
            + "; give exposure_class in the station metadata to set it yourself."
        )
    out = Path(out_dir)
    text, qm_path, written = _write_calibration(out, result, matched, obs)
    if echo:
        _print_calibration(text, result, qm_path, out, written)
    return text, result.skill


def _with_terrain_exposure(stations: pd.DataFrame, model) -> tuple[pd.DataFrame, list]:
    """The stations with the exposure class of their terrain (Sx) where their metadata gives
    none, as cells have; and the ids of those stations."""
    source = model.attrs["exposure_source"]
    derived = [s for s in stations.index if s in source and source[s] != "metadata"]
    stations = stations.copy()
    for s in derived:
        stations.loc[s, "exposure_class"] = model.attrs["exposure_class"][s]
    return stations, derived


def _write_calibration(out: Path, result, matched, obs) -> tuple[str, Path | None, list]:
    """``bias.toml``, ``calibration_skill.csv``, the figures and the quantile-mapping tables
    (``qm.nc``) of a calibration in ``out``; returns the TOML text, the tables' path (None
    without them) and the files written."""
    from regionmap.plots.style import save_png
    from regionmap.plots.verification import calibration_skill_figure, write_verification_figures

    out.mkdir(parents=True, exist_ok=True)
    qm_path = write_qm_table(out / "qm.nc", result.qm_tables) if result.qm_tables else None
    text = bias_toml(result, quantile_mapping_file=str(qm_path) if qm_path else "qm.nc")
    written = [
        atomic_write_text(out / "bias.toml", text),
        write_csv(out / "calibration_skill.csv", result.skill),
        *write_verification_figures(matched, obs, out / "figures"),
    ]
    fig = calibration_skill_figure(result.skill)
    if fig is not None:
        written.append(save_png(fig, out / "figures" / "calibration_skill.png"))
    return text, qm_path, written


#: Columns of the printed skill table and their headings.
_SKILL_COLUMNS = {
    "exposure_class": "exposure",
    "variable": "variable",
    "stage": "stage",
    **_STATISTICS,
}


def _print_calibration(text: str, result, qm_path, out: Path, written: list) -> None:
    """The fitted ``[bias]`` section, the skill table, the notes, the files and the caution."""
    print(text)
    print(
        "Skill before (raw), after (fitted, in sample) and cross-validated (leave one month "
        "out); bias = model minus observation:"
    )
    _print_table(result.skill, _SKILL_COLUMNS)
    for note in result.notes:
        print(f"  note: {note}")
    if qm_path:
        print(f"Quantile-mapping tables: {qm_path}")
    print(f"Written in {out}: {', '.join(str(p.relative_to(out)) for p in written)}")
    print(
        "Caution: settings fitted at a few stations describe the model's past behaviour there; "
        "check them against field observations before relying on them. " + CAUTION
    )


def run_verification_last_day(cfg: Config, region, out_dir, map_time, *, grid_forcing=None):
    """Verification of the last day before the map time, for a run with ``[stations]``.

    Parameters
    ----------
    cfg : Config
        With a ``[stations]`` section (``stations``, ``observations``); None section: nothing.
    region : regionmap.pipeline.region.Region
        The run's prepared region (DEM and terrain reused).
    out_dir : path
        The run's (temporary) output folder; ``verification.csv`` is written there.
    map_time : datetime64
        The run's map time; the day is (map_time − 24 h, map_time].
    grid_forcing : GridForcing, optional
        The run's opened forcing.

    Returns
    -------
    pandas.DataFrame or None
        The table written (``verification_table`` columns plus ``period_start``,
        ``period_end``, ``exposure_class``), or None when ``[stations]`` is absent or no
        observation falls in that day (a RegionmapWarning says so).

    Raises
    ------
    InputError
        Bad station or observation files, stations outside the DEM or the forcing.
    """
    if cfg.stations is None:
        return None
    stations, obs = _read_inputs(cfg.stations.stations, cfg.stations.observations)
    end = np.datetime64(map_time, "s")
    start = end - np.timedelta64(24 * 3600, "s")
    t = obs.index.get_level_values("time").to_numpy().astype("datetime64[s]")
    t0 = obs["interval_start"].to_numpy().astype("datetime64[s]")
    day = obs.loc[(t > start) & (t <= end) & (t0 >= start)]
    day.attrs.update(obs.attrs)
    if day.empty:
        warn(
            f"[stations]: no observation in the day before the map time ({start} .. {end} UTC); "
            "no verification.csv written"
        )
        return None
    model, matched = _matched(
        cfg, stations, day, raw=False, where="[stations]", region=region, grid_forcing=grid_forcing
    )
    table = verification_table(matched, day)
    table["period_start"] = str(start)
    table["period_end"] = str(end)
    table["exposure_class"] = table["station_id"].map(model.attrs["exposure_class"])
    write_verification_csv(table, Path(out_dir) / "verification.csv")
    return table

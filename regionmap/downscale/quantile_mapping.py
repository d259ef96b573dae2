"""Empirical quantile mapping per calendar month: fit, apply, and the table file.

Empirical quantile mapping (Panofsky & Brier 1968; Themeßl et al. 2011; Gudmundsson et al.
2012) replaces a model value by the observed value of the same non-exceedance probability:
``x' = F_obs^-1(F_model(x))``, estimated per calendar month from ``n`` empirical quantiles
(probabilities ``0, 1/(n-1), …, 1``, linear interpolation between them, NumPy's default
quantile definition, Hyndman & Fan 1996 type 7).

* ``additive`` (temperature and other unbounded variables): outside the training range the
  correction at the nearest end is kept constant, ``x' = x + (q_obs − q_model)`` at the first
  or last quantile (Themeßl et al. 2011, "constant correction" extrapolation).
* ``multiplicative`` (precipitation): the mapping is fitted on wet values only and the
  correction outside the range is a constant *factor* ``q_obs / q_model`` at the nearest end.
  **Wet-day frequency adaptation**: a model threshold is chosen so that the share of model
  values above it equals the observed share above the observed wet threshold (Gudmundsson
  et al. 2012, Sect. 2.2; Themeßl et al. 2012); model values at or below it become 0. When
  the model has *fewer* wet values than observed, no wet values are invented (the mapping is
  deterministic): every model value above 0 is then treated as wet, and the table records
  the remaining wet-frequency deficit in ``wet_deficit_frac``.

Months with too few samples for a fit of their own use the table fitted on all months
(``pooled`` is then True for that month). The applied correction is monotone
non-decreasing in the model value and is the identity when model and observed samples are
identical (above the wet threshold for precipitation).

References
----------
.. [1] Panofsky, H. A. and Brier, G. W. (1968). Some Applications of Statistics to
   Meteorology. Pennsylvania State University, University Park, 224 pp.
.. [2] Themeßl, M. J., Gobiet, A. and Leuprecht, A. (2011). Empirical-statistical
   downscaling and error correction of daily precipitation from regional climate models.
   Int. J. Climatol. 31, 1530–1544. doi:10.1002/joc.2168
.. [3] Themeßl, M. J., Gobiet, A. and Heinrich, G. (2012). Empirical-statistical downscaling
   and error correction of regional climate models and its impact on the climate change
   signal. Climatic Change 112, 449–468. doi:10.1007/s10584-011-0224-4
.. [4] Gudmundsson, L., Bremnes, J. B., Haugen, J. E. and Engen-Skaugen, T. (2012).
   Technical Note: Downscaling RCM precipitation to the station scale using statistical
   transformations – a comparison of methods. Hydrol. Earth Syst. Sci. 16, 3383–3390.
   doi:10.5194/hess-16-3383-2012
.. [5] Hyndman, R. J. and Fan, Y. (1996). Sample quantiles in statistical packages.
   Am. Stat. 50, 361–365. doi:10.1080/00031305.1996.10473566
"""

from __future__ import annotations

import os
import tempfile
from collections.abc import Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import numpy as np
import xarray as xr

from regionmap.errors import InputError, OutputError

__all__ = [
    "QMKind",
    "QuantileMappingTable",
    "MIN_SAMPLES_PER_MONTH",
    "MIN_WET_SAMPLES_PER_MONTH",
    "FORMAT_NAME",
    "month_index_of",
    "fit_quantile_mapping",
    "apply_quantile_mapping",
    "select_qm_table",
    "write_qm_table",
    "read_qm_table",
]

QMKind = Literal["additive", "multiplicative"]

#: Fewest pairs a calendar month needs for a fit of its own (otherwise it uses the pooled
#: table); also the fewest pairs of all months together for any fit. 120 = five days hourly.
MIN_SAMPLES_PER_MONTH = 120
#: Fewest wet values (model and observed each) a month needs for a multiplicative fit.
MIN_WET_SAMPLES_PER_MONTH = 20
#: Value of the global attribute ``regionmap_format`` of a table file.
FORMAT_NAME = "regionmap quantile-mapping tables v1"


@dataclass(frozen=True)
class QuantileMappingTable:
    """Empirical quantile mapping for one variable (and exposure class), per month.

    Attributes
    ----------
    variable : str
        Canonical variable name (``air_temperature``, ``precipitation``, …).
    kind : {"additive", "multiplicative"}
        Extrapolation rule outside the training range (see module notes).
    probabilities : ndarray (quantile,) float64
        Non-exceedance probabilities, increasing from 0 to 1 [1].
    model_quantiles, obs_quantiles : ndarray (12, quantile) float64
        Quantiles per calendar month (index 0 = January), in the variable's canonical unit;
        for ``multiplicative`` quantiles of the wet values only.
    model_wet_threshold : ndarray (12,) float64
        Model values at or below it become 0 (``multiplicative``); NaN for ``additive``.
    obs_wet_threshold : float
        Observed wet threshold [canonical unit]; NaN for ``additive``.
    wet_deficit_frac : ndarray (12,) float64
        Observed wet share minus the model's wet share that no threshold can remove [1]
        (0 when the model is not too dry; NaN for ``additive``).
    n_samples : ndarray (12,) int64
        Pairs of each month in the training data.
    pooled : ndarray (12,) bool
        True where the month had too few samples and uses the all-months fit.
    exposure_class : str
        Exposure class the table applies to, or ``"all"``.
    """

    variable: str
    kind: QMKind
    probabilities: np.ndarray
    model_quantiles: np.ndarray
    obs_quantiles: np.ndarray
    model_wet_threshold: np.ndarray
    obs_wet_threshold: float
    wet_deficit_frac: np.ndarray
    n_samples: np.ndarray
    pooled: np.ndarray
    exposure_class: str = "all"


def month_index_of(time: np.ndarray) -> np.ndarray:
    """Calendar-month index (0 = January … 11 = December) of datetime64 values (UTC)."""
    months = np.asarray(time).astype("datetime64[M]").astype(np.int64)
    return np.mod(months, 12).astype(np.int64)


def _check_month_index(month_index: np.ndarray, where: str) -> np.ndarray:
    month = np.asarray(month_index)
    if month.dtype.kind not in "iu":
        raise InputError(
            f"{where}: month_index must be integers 0 (January) … 11 (December), got dtype "
            f"{month.dtype}; compute it with month_index_of(time)."
        )
    if month.size and (month.min() < 0 or month.max() > 11):
        bad = month[(month < 0) | (month > 11)].ravel()[0]
        raise InputError(
            f"{where}: month_index must lie in 0 (January) … 11 (December), got {bad}; note "
            "the index is 0-based."
        )
    return month.astype(np.int64)


def _fit_one(model: np.ndarray, obs: np.ndarray, p: np.ndarray, kind: str, wet: float):
    """Quantiles (and wet thresholds) from one sample; None when the sample is too small."""
    if kind == "additive":
        if model.size < MIN_SAMPLES_PER_MONTH:
            return None
        return np.quantile(model, p), np.quantile(obs, p), np.nan, np.nan
    wet_obs = obs[obs > wet]
    wet_frac_obs = wet_obs.size / obs.size if obs.size else 0.0
    threshold = float(np.quantile(model, 1.0 - wet_frac_obs)) if model.size else 0.0
    threshold = max(threshold, 0.0)
    wet_model = model[model > threshold]
    if (
        model.size < MIN_SAMPLES_PER_MONTH
        or wet_obs.size < MIN_WET_SAMPLES_PER_MONTH
        or wet_model.size < MIN_WET_SAMPLES_PER_MONTH
    ):
        return None
    deficit = max(wet_frac_obs - wet_model.size / model.size, 0.0)
    return np.quantile(wet_model, p), np.quantile(wet_obs, p), threshold, deficit


def fit_quantile_mapping(
    model: np.ndarray,
    obs: np.ndarray,
    month_index: np.ndarray,
    kind: QMKind,
    *,
    variable: str,
    n_quantiles: int = 101,
    wet_threshold: float = 0.1,
    exposure_class: str = "all",
) -> QuantileMappingTable:
    """Fit an empirical quantile-mapping table per calendar month.

    Parameters
    ----------
    model, obs : ndarray (n,) float
        Training samples over the same period (pairs with a NaN on either side are dropped),
        canonical units.
    month_index : ndarray (n,) int
        Calendar month of each pair, 0 = January … 11 = December (see :func:`month_index_of`).
    kind : {"additive", "multiplicative"}
        ``additive`` for temperature-like variables, ``multiplicative`` for precipitation.
    variable : str
        Canonical variable name the table is for.
    n_quantiles : int
        Number of quantiles (≥ 2), probabilities evenly spaced from 0 to 1.
    wet_threshold : float
        Observed wet threshold for ``multiplicative`` [canonical unit, e.g. kg m-2 per
        interval]; common practice 0.1 mm for hourly amounts, 1 mm for daily.
    exposure_class : str
        Exposure class the table applies to, or ``"all"``.

    Returns
    -------
    QuantileMappingTable

    Raises
    ------
    InputError
        Mismatched lengths, bad month indices or kind, or too little data: fewer than
        :data:`MIN_SAMPLES_PER_MONTH` pairs altogether (and, for ``multiplicative``, fewer
        than :data:`MIN_WET_SAMPLES_PER_MONTH` wet values in model or observations).
    """
    if kind not in ("additive", "multiplicative"):
        raise InputError(
            f"Quantile mapping for {variable}: kind must be 'additive' or 'multiplicative', "
            f"got {kind!r}."
        )
    if int(n_quantiles) < 2:
        raise InputError(
            f"Quantile mapping for {variable}: n_quantiles must be ≥ 2, got {n_quantiles}."
        )
    m = np.asarray(model, dtype=np.float64).ravel()
    o = np.asarray(obs, dtype=np.float64).ravel()
    month = _check_month_index(np.asarray(month_index).ravel(), f"Quantile mapping for {variable}")
    if not (m.size == o.size == month.size):
        raise InputError(
            f"Quantile mapping for {variable}: model, obs and month_index must have the same "
            f"length, got {m.size}, {o.size} and {month.size}."
        )
    ok = np.isfinite(m) & np.isfinite(o)
    m, o, month = m[ok], o[ok], month[ok]
    p = np.linspace(0.0, 1.0, int(n_quantiles))
    pooled_fit = _fit_one(m, o, p, kind, wet_threshold)
    if pooled_fit is None:
        need = f"{MIN_SAMPLES_PER_MONTH} valid pairs"
        if kind == "multiplicative":
            need += (
                f" with at least {MIN_WET_SAMPLES_PER_MONTH} wet values (> {wet_threshold}) in "
                "model and observations"
            )
        raise InputError(
            f"Quantile mapping for {variable}: too little data to fit; need at least {need}, "
            f"got {m.size} pairs ({int(np.sum(o > wet_threshold))} observed wet). Use a "
            "longer overlap period or a simple factor/offset instead."
        )
    nq = p.size
    q_model = np.empty((12, nq))
    q_obs = np.empty((12, nq))
    thresholds = np.full(12, np.nan)
    deficit = np.full(12, np.nan)
    n_samples = np.bincount(month, minlength=12).astype(np.int64)
    pooled = np.zeros(12, dtype=bool)
    for k in range(12):  # twelve calendar months, not a loop over time steps
        sel = month == k
        fit = _fit_one(m[sel], o[sel], p, kind, wet_threshold) if sel.any() else None
        if fit is None:
            fit = pooled_fit
            pooled[k] = True
        q_model[k], q_obs[k], thresholds[k], deficit[k] = fit
    return QuantileMappingTable(
        variable=variable,
        kind=kind,
        probabilities=p,
        model_quantiles=q_model,
        obs_quantiles=q_obs,
        model_wet_threshold=thresholds,
        obs_wet_threshold=float(wet_threshold) if kind == "multiplicative" else np.nan,
        wet_deficit_frac=deficit,
        n_samples=n_samples,
        pooled=pooled,
        exposure_class=exposure_class,
    )


def apply_quantile_mapping(
    values: np.ndarray, month_index: np.ndarray, table: QuantileMappingTable
) -> np.ndarray:
    """Correct values with a quantile-mapping table (vectorised, any shape).

    Parameters
    ----------
    values : ndarray float
        Model values in the table variable's canonical unit, any shape (e.g. (cell, time)).
    month_index : ndarray int
        Calendar month of each value, 0 = January … 11 = December, broadcastable to
        ``values`` (e.g. shape (time,) against (cell, time)).
    table : QuantileMappingTable

    Returns
    -------
    ndarray float64
        Corrected values, the shape of ``values``; NaN stays NaN.

    Raises
    ------
    InputError
        For month indices outside 0..11 or not broadcastable to ``values``.
    """
    x = np.asarray(values, dtype=np.float64)
    month = _check_month_index(month_index, f"Quantile mapping of {table.variable}")
    try:
        month = np.broadcast_to(month, x.shape)
    except ValueError:
        raise InputError(
            f"Quantile mapping of {table.variable}: month_index of shape {month.shape} does "
            f"not broadcast to values of shape {x.shape}."
        ) from None
    out = np.array(x, dtype=np.float64, copy=True)
    for k in np.unique(month):  # at most twelve passes over the data
        sel = month == k
        xs = x[sel]
        qm, qo = table.model_quantiles[k], table.obs_quantiles[k]
        y = np.interp(xs, qm, qo)
        if table.kind == "additive":
            y = np.where(xs < qm[0], xs + (qo[0] - qm[0]), y)
            y = np.where(xs > qm[-1], xs + (qo[-1] - qm[-1]), y)
        else:
            low = qo[0] / qm[0] if qm[0] > 0 else 1.0
            high = qo[-1] / qm[-1] if qm[-1] > 0 else 1.0
            y = np.where(xs < qm[0], xs * low, y)
            y = np.where(xs > qm[-1], xs * high, y)
            y = np.where(xs <= table.model_wet_threshold[k], 0.0, y)
        out[sel] = np.where(np.isnan(xs), np.nan, y)
    return out


def select_qm_table(
    tables: Sequence[QuantileMappingTable], variable: str, exposure_class: str = "all"
) -> QuantileMappingTable | None:
    """The table for a variable and exposure class: the class's own, else ``"all"``, else None."""
    own = [t for t in tables if t.variable == variable and t.exposure_class == exposure_class]
    if own:
        return own[0]
    general = [t for t in tables if t.variable == variable and t.exposure_class == "all"]
    return general[0] if general else None


def _to_dataset(tables: Sequence[QuantileMappingTable]) -> xr.Dataset:
    p = tables[0].probabilities
    for t in tables:
        if t.probabilities.shape != p.shape or not np.array_equal(t.probabilities, p):
            raise OutputError(
                f"Quantile-mapping tables in one file must share their probabilities; "
                f"{t.variable}/{t.exposure_class} has {t.probabilities.size}, the first "
                f"{p.size}. Fit them with the same n_quantiles."
            )
    keys = [(t.variable, t.exposure_class) for t in tables]
    if len(set(keys)) != len(keys):
        raise OutputError(f"Quantile-mapping tables repeat a (variable, exposure class): {keys}.")
    ds = xr.Dataset(
        {
            "variable": ("table", np.array([t.variable for t in tables], dtype=object)),
            "kind": ("table", np.array([t.kind for t in tables], dtype=object)),
            "exposure_class": ("table", np.array([t.exposure_class for t in tables], dtype=object)),
            "model_quantile": (
                ("table", "month", "quantile"),
                np.stack([t.model_quantiles for t in tables]),
            ),
            "obs_quantile": (
                ("table", "month", "quantile"),
                np.stack([t.obs_quantiles for t in tables]),
            ),
            "model_wet_threshold": (
                ("table", "month"),
                np.stack([t.model_wet_threshold for t in tables]),
            ),
            "obs_wet_threshold": ("table", np.array([t.obs_wet_threshold for t in tables])),
            "wet_deficit_frac": (
                ("table", "month"),
                np.stack([t.wet_deficit_frac for t in tables]),
            ),
            "n_samples": (
                ("table", "month"),
                np.stack([t.n_samples for t in tables]).astype(np.int64),
            ),
            "pooled": (("table", "month"), np.stack([t.pooled for t in tables]).astype(np.int8)),
        },
        coords={"month": np.arange(1, 13, dtype=np.int32), "probability": ("quantile", p)},
        attrs={
            "regionmap_format": FORMAT_NAME,
            "title": "Empirical quantile-mapping tables per calendar month",
            "references": "Panofsky & Brier 1968; Themessl et al. 2011, doi:10.1002/joc.2168; "
            "Gudmundsson et al. 2012, doi:10.5194/hess-16-3383-2012",
            "comment": "month 1 = January; quantiles in the canonical unit of each variable",
        },
    )
    ds["pooled"].attrs.update(
        flag_values=np.array([0, 1], dtype=np.int8), flag_meanings="own_fit pooled_fit"
    )
    return ds


def write_qm_table(
    path: str | Path, tables: QuantileMappingTable | Sequence[QuantileMappingTable]
) -> Path:
    """Write quantile-mapping tables to NetCDF atomically (temporary file, then ``os.replace``).

    Parameters
    ----------
    path : str or Path
        Destination file (its folder must exist).
    tables : QuantileMappingTable or sequence of them
        One file holds any number of (variable, exposure class) tables sharing their
        probabilities.

    Returns
    -------
    Path

    Raises
    ------
    OutputError
        When the folder is missing or unwritable, or the tables cannot share one file.
    """
    path = Path(path)
    tables = [tables] if isinstance(tables, QuantileMappingTable) else list(tables)
    if not tables:
        raise OutputError(f"No quantile-mapping table to write to {path}.")
    if not path.parent.is_dir():
        raise OutputError(f"Cannot write {path}: folder {path.parent} does not exist.")
    ds = _to_dataset(tables)
    tmp = None
    try:
        fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=path.parent)
        os.close(fd)
        ds.to_netcdf(tmp, engine="netcdf4")
        os.replace(tmp, path)
    except OSError as exc:
        if tmp is not None and os.path.exists(tmp):
            os.unlink(tmp)
        raise OutputError(f"Cannot write quantile-mapping tables {path}: {exc}.") from None
    return path


def read_qm_table(path: str | Path) -> list[QuantileMappingTable]:
    """Read and validate a quantile-mapping table file written by :func:`write_qm_table`.

    Returns
    -------
    list of QuantileMappingTable

    Raises
    ------
    InputError
        Missing or unreadable file, not a regionmap table file, missing variables, wrong
        shapes, non-monotone or non-finite quantiles, an unknown kind — naming the file and
        the table.
    """
    path = Path(path)
    if not path.is_file():
        raise InputError(
            f"Quantile-mapping file {path} does not exist; check [bias] quantile_mapping."
        )
    try:
        with xr.open_dataset(path, engine="netcdf4") as handle:
            ds = handle.load()
    except (OSError, ValueError) as exc:
        raise InputError(
            f"Quantile-mapping file {path} cannot be read as NetCDF ({exc})."
        ) from None
    if ds.attrs.get("regionmap_format") != FORMAT_NAME:
        raise InputError(
            f"Quantile-mapping file {path}: global attribute regionmap_format is "
            f"{ds.attrs.get('regionmap_format')!r}, expected {FORMAT_NAME!r}; write it with "
            "`regionmap calibrate`."
        )
    needed = [
        "variable",
        "kind",
        "exposure_class",
        "model_quantile",
        "obs_quantile",
        "model_wet_threshold",
        "obs_wet_threshold",
        "wet_deficit_frac",
        "n_samples",
        "pooled",
    ]
    missing = [v for v in needed if v not in ds.variables]
    if missing or "probability" not in ds.coords:
        raise InputError(
            f"Quantile-mapping file {path}: missing variable(s) {missing or ['probability']}."
        )
    p = ds["probability"].to_numpy().astype(np.float64)
    if p.size < 2 or p[0] != 0.0 or p[-1] != 1.0 or np.any(np.diff(p) <= 0):
        raise InputError(
            f"Quantile-mapping file {path}: probability must increase strictly from 0 to 1, got "
            f"{p}."
        )
    if ds.sizes.get("month") != 12:
        raise InputError(
            f"Quantile-mapping file {path}: expected 12 months, got {ds.sizes.get('month')}."
        )
    tables = []
    for i in range(ds.sizes["table"]):
        name = str(ds["variable"].values[i])
        kind = str(ds["kind"].values[i])
        where = f"Quantile-mapping file {path}, table {name}/{ds['exposure_class'].values[i]}"
        if kind not in ("additive", "multiplicative"):
            raise InputError(f"{where}: kind must be 'additive' or 'multiplicative', got {kind!r}.")
        qm = ds["model_quantile"].values[i].astype(np.float64)
        qo = ds["obs_quantile"].values[i].astype(np.float64)
        for label, q in (("model_quantile", qm), ("obs_quantile", qo)):
            if not np.all(np.isfinite(q)):
                raise InputError(f"{where}: {label} has non-finite values.")
            if np.any(np.diff(q, axis=1) < 0):
                month = int(np.flatnonzero(np.any(np.diff(q, axis=1) < 0, axis=1))[0]) + 1
                raise InputError(
                    f"{where}: {label} decreases within month {month}; quantiles must be "
                    "non-decreasing."
                )
        thresholds = ds["model_wet_threshold"].values[i].astype(np.float64)
        if kind == "multiplicative" and (
            not np.all(np.isfinite(thresholds)) or np.any(qm < 0) or np.any(qo < 0)
        ):
            raise InputError(
                f"{where}: a multiplicative table needs finite wet thresholds and non-negative "
                "quantiles."
            )
        tables.append(
            QuantileMappingTable(
                variable=name,
                kind=kind,  # type: ignore[arg-type]
                probabilities=p.copy(),
                model_quantiles=qm,
                obs_quantiles=qo,
                model_wet_threshold=thresholds,
                obs_wet_threshold=float(ds["obs_wet_threshold"].values[i]),
                wet_deficit_frac=ds["wet_deficit_frac"].values[i].astype(np.float64),
                n_samples=ds["n_samples"].values[i].astype(np.int64),
                pooled=ds["pooled"].values[i].astype(bool),
                exposure_class=str(ds["exposure_class"].values[i]),
            )
        )
    return tables

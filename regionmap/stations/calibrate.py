"""Fit bias settings (offsets, factors, quantile-mapping tables) from station overlap.

Input are matched tables of model and observed series (index ``station_id``, ``time``;
canonical SI columns; the model already on the observations' intervals, see
:func:`regionmap.stations.verify.aggregate_model_to_observations`). :func:`calibrate` fits, per
variable,

* an **offset** ``model + offset`` (mean of obs − model; temperature and humidity) or a
  **factor** ``model × factor`` (ratio of totals, sum(obs)/sum(model); wind, precipitation,
  shortwave), pooled or per calendar month (a list of 12; months with too little data take
  the pooled value and are marked), or
* **quantile-mapping tables** per calendar month
  (:mod:`regionmap.downscale.quantile_mapping`),

and reports skill before and after, in sample and cross-validated by leaving one month of
data out at a time. Settings for exposure-dependent variables (by default wind speed) are
fitted per exposure class of the stations and apply only to cells of that class: a wind
factor learnt at a sheltered plot says nothing about a ridge. Precipitation gauges catch too
little snowfall in wind; :func:`correct_undercatch_kochendorfer2017` corrects the observed
amounts before comparing when the option is chosen.

Fitted settings describe the model's past behaviour at a few points. They are guidance for
trained forecasters and replace neither field observations nor the local avalanche service.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal

import numpy as np
import pandas as pd

from regionmap.constants import ZERO_CELSIUS_K
from regionmap.downscale.quantile_mapping import (
    QuantileMappingTable,
    apply_quantile_mapping,
    fit_quantile_mapping,
    month_index_of,
)
from regionmap.errors import InputError
from regionmap.io.stations import EXPOSURE_CLASSES
from regionmap.stations.verify import (
    bias,
    mean_absolute_error,
    r_squared,
    root_mean_square_error,
    total_percent_difference,
)

__all__ = [
    "MIN_PAIRS",
    "MIN_PAIRS_PER_MONTH",
    "MIN_WET_PAIRS",
    "MIN_PRECIPITATION_TOTAL_KG_M2",
    "DEFAULT_KIND",
    "QM_KIND",
    "KOCHENDORFER2017_COEFFICIENTS",
    "Correction",
    "CalibrationResult",
    "fit_offset",
    "fit_factor",
    "catch_efficiency_kochendorfer2017",
    "correct_undercatch_kochendorfer2017",
    "calibrate",
    "bias_toml",
]

#: Fewest matched pairs for any fit (ten days of hourly values).
MIN_PAIRS = 240
#: Fewest pairs for a calendar month's own value in a per-month fit (five days hourly).
MIN_PAIRS_PER_MONTH = 120
#: Fewest observed wet intervals (> 0.1 kg m-2) for a precipitation factor.
MIN_WET_PAIRS = 20
#: Smallest observed precipitation total for a precipitation factor [kg m-2].
MIN_PRECIPITATION_TOTAL_KG_M2 = 10.0
_WET_KG_M2 = 0.1

#: Kind of scaling correction fitted per variable.
DEFAULT_KIND: dict[str, Literal["offset", "factor"]] = {
    "air_temperature": "offset",
    "relative_humidity": "offset",
    "wind_speed": "factor",
    "precipitation": "factor",
    "shortwave_down": "factor",
}
#: Kind of quantile mapping per variable (shortwave is not quantile-mapped: night zeros).
QM_KIND: dict[str, Literal["additive", "multiplicative"]] = {
    "air_temperature": "additive",
    "relative_humidity": "additive",
    "wind_speed": "multiplicative",
    "precipitation": "multiplicative",
}
_QM_WET_THRESHOLD = {"precipitation": _WET_KG_M2, "wind_speed": 0.0}

#: Coefficients (a [s m-1], b [K-1], c [1], U_max [m s-1]) of the transfer function of
#: Kochendorfer et al. (2017b), Eq. 4, for Geonor/Pluvio-type weighing gauges, per shield.
#: **Recalled from memory, low confidence** ([mem]): verify against Table 3 of the paper
#: (and check whether they are for gauge-height or 10 m wind) before operational use.
KOCHENDORFER2017_COEFFICIENTS: dict[str, tuple[float, float, float, float]] = {
    "single_alter": (0.0348, 1.366, 0.779, 7.2),
    "unshielded": (0.0785, 0.729, 0.407, 7.2),
}

_CONFIG_UNIT_SCALE = {"relative_humidity": 100.0}  # [bias] offsets for RH are in percent


@dataclass(frozen=True)
class Correction:
    """A fitted offset or factor for one variable.

    Attributes
    ----------
    variable : str
        Canonical variable name.
    kind : {"offset", "factor"}
        ``offset``: corrected = model + value [canonical unit]; ``factor``: model × value [1].
    values : tuple of float
        One value (all months) or twelve (January … December).
    own_fit : tuple of bool
        Per month (twelve entries) whether the month had its own data; empty for one value.
    n_pairs : int
        Matched pairs the fit used.
    """

    variable: str
    kind: Literal["offset", "factor"]
    values: tuple[float, ...]
    own_fit: tuple[bool, ...]
    n_pairs: int

    def apply(self, model: np.ndarray, month_index: np.ndarray) -> np.ndarray:
        """Corrected values; ``month_index`` 0 = January (ignored for a single value)."""
        x = np.asarray(model, dtype=np.float64)
        v = np.asarray(self.values, dtype=np.float64)
        per = v[np.asarray(month_index, dtype=np.int64)] if v.size == 12 else v[0]
        return x + per if self.kind == "offset" else x * per


@dataclass
class CalibrationResult:
    """Fitted settings per exposure class, QM tables, skill, and notes.

    Attributes
    ----------
    settings : dict
        ``{exposure_class: {variable: Correction}}``; class ``"all"`` holds settings for the
        whole region, the classes of :data:`regionmap.io.stations.EXPOSURE_CLASSES` those
        for cells of that class only (``exposure = "<class>"`` in the ``[bias]`` entries).
    qm_tables : list of QuantileMappingTable
        Tables when ``method="quantile_mapping"`` (each with its ``exposure_class``).
    skill : pandas.DataFrame
        Rows per (exposure_class, variable, stage) with stage ``raw``, ``fitted``
        (in sample) and ``cross_validated`` (leave one month out): ``n``, ``bias``, ``mae``,
        ``rmse``, ``r2``, ``total_percent_difference``.
    notes : list of str
        What the fit could not do (pooled months, folds without a fit, undercatch rows).
    stations : list of str
        Stations that contributed.
    period : tuple of numpy.datetime64
        First and last matched time.
    """

    settings: dict[str, dict[str, Correction]]
    qm_tables: list[QuantileMappingTable]
    skill: pd.DataFrame
    notes: list[str] = field(default_factory=list)
    stations: list[str] = field(default_factory=list)
    period: tuple[np.datetime64, np.datetime64] | None = None


def _pairs(model, obs, month_index):
    m = np.asarray(model, dtype=np.float64).ravel()
    o = np.asarray(obs, dtype=np.float64).ravel()
    month = (
        np.zeros(m.size, dtype=np.int64)
        if month_index is None
        else np.asarray(month_index, dtype=np.int64).ravel()
    )
    if not (m.size == o.size == month.size):
        raise InputError(
            f"Calibration: model, obs and month_index must be matched, got {m.size}, {o.size} "
            f"and {month.size} values."
        )
    ok = np.isfinite(m) & np.isfinite(o)
    return m[ok], o[ok], month[ok]


def _need(variable: str, n: int, what: str) -> InputError:
    return InputError(
        f"Calibration of {variable}: too little data to fit; need at least {what}, got {n}. "
        "Use a longer overlap period or more stations."
    )


def fit_offset(
    model: np.ndarray, obs: np.ndarray, month_index: np.ndarray | None = None, *, variable: str
) -> Correction:
    """Fit an additive offset, mean(obs − model), pooled or per calendar month.

    Parameters
    ----------
    model, obs : ndarray (n,) float
        Matched series, canonical units; NaN pairs are dropped.
    month_index : ndarray (n,) int, optional
        Calendar month (0 = January) of each pair; None fits one pooled value.
    variable : str
        Variable name (for messages and the result).

    Returns
    -------
    Correction
        ``kind="offset"``; twelve values when ``month_index`` is given (months with fewer
        than :data:`MIN_PAIRS_PER_MONTH` pairs take the pooled value).

    Raises
    ------
    InputError
        Fewer than :data:`MIN_PAIRS` pairs.
    """
    m, o, month = _pairs(model, obs, month_index)
    if m.size < MIN_PAIRS:
        raise _need(variable, m.size, f"{MIN_PAIRS} matched pairs")
    pooled = float(np.mean(o - m))
    if month_index is None:
        return Correction(variable, "offset", (pooled,), (), int(m.size))
    sums = np.bincount(month, weights=o - m, minlength=12)
    counts = np.bincount(month, minlength=12)
    own = counts >= MIN_PAIRS_PER_MONTH
    values = np.where(own, sums / np.maximum(counts, 1), pooled)
    return Correction(
        variable, "offset", tuple(map(float, values)), tuple(map(bool, own)), int(m.size)
    )


def fit_factor(
    model: np.ndarray, obs: np.ndarray, month_index: np.ndarray | None = None, *, variable: str
) -> Correction:
    """Fit a multiplicative factor as the ratio of totals, sum(obs) / sum(model).

    The ratio of totals makes the corrected model reproduce the observed total exactly
    over the training pairs (the usual scaling of precipitation; for wind the ratio of mean
    speeds).

    Parameters
    ----------
    model, obs : ndarray (n,) float
        Matched series, canonical units, non-negative; NaN pairs are dropped.
    month_index : ndarray (n,) int, optional
        Calendar month (0 = January) of each pair; None fits one pooled value.
    variable : str
        Variable name; for ``precipitation`` the observations must also hold
        :data:`MIN_WET_PAIRS` wet intervals and :data:`MIN_PRECIPITATION_TOTAL_KG_M2`.

    Returns
    -------
    Correction
        ``kind="factor"``; twelve values when ``month_index`` is given (months with too
        little data take the pooled value).

    Raises
    ------
    InputError
        Too little data (see above), or a model total of zero.
    """
    m, o, month = _pairs(model, obs, month_index)
    if m.size < MIN_PAIRS:
        raise _need(variable, m.size, f"{MIN_PAIRS} matched pairs")
    precip = variable == "precipitation"
    if precip:
        wet = int(np.sum(o > _WET_KG_M2))
        if wet < MIN_WET_PAIRS or o.sum() < MIN_PRECIPITATION_TOTAL_KG_M2:
            raise _need(
                variable,
                wet,
                f"{MIN_WET_PAIRS} observed wet intervals (> {_WET_KG_M2} kg m-2) and an observed "
                f"total of {MIN_PRECIPITATION_TOTAL_KG_M2} kg m-2 (got {o.sum():.1f} kg m-2 in "
                "total); wet intervals",
            )
    if m.sum() <= 0.0:
        raise InputError(
            f"Calibration of {variable}: the model total over the overlap is {m.sum()}; a "
            "factor needs a positive model total."
        )
    pooled = float(o.sum() / m.sum())
    if month_index is None:
        return Correction(variable, "factor", (pooled,), (), int(m.size))
    so = np.bincount(month, weights=o, minlength=12)
    sm = np.bincount(month, weights=m, minlength=12)
    counts = np.bincount(month, minlength=12)
    own = (counts >= MIN_PAIRS_PER_MONTH) & (sm > 0)
    if precip:
        wet_m = np.bincount(month, weights=(o > _WET_KG_M2).astype(float), minlength=12)
        own &= (wet_m >= MIN_WET_PAIRS) & (so >= MIN_PRECIPITATION_TOTAL_KG_M2)
    values = np.where(own, so / np.where(sm > 0, sm, 1.0), pooled)
    return Correction(
        variable, "factor", tuple(map(float, values)), tuple(map(bool, own)), int(m.size)
    )


def catch_efficiency_kochendorfer2017(
    wind_m_s: np.ndarray,
    t_air_k: np.ndarray,
    *,
    shield: Literal["single_alter", "unshielded"] = "single_alter",
    coefficients: tuple[float, float, float, float] | None = None,
) -> np.ndarray:
    """Catch efficiency of a precipitation gauge in wind, Kochendorfer et al. (2017b).

    Parameters
    ----------
    wind_m_s : ndarray float
        Wind speed at the height the coefficients are for [m s-1].
    t_air_k : ndarray float
        Air temperature [K].
    shield : {"single_alter", "unshielded"}
        Which coefficient set of :data:`KOCHENDORFER2017_COEFFICIENTS` to use.
    coefficients : (a, b, c, U_max), optional
        Own coefficients instead (a [s m-1], b [K-1], c [1], U_max [m s-1]).

    Returns
    -------
    ndarray float64
        Catch efficiency CE = measured / true precipitation [1], in (0, 1] for calm or
        positive ``c``.

    Notes
    -----
    Eq. 4 of [1] (the "universal" transfer function for mixed and solid precipitation)::

        CE = exp(−a U (1 − arctan(b T) + c)),   U = min(U, U_max),  T in °C

    Coefficients are recalled from memory ([mem], low confidence): verify them against the
    paper's table before operational use.

    References
    ----------
    .. [1] Kochendorfer, J., Nitu, R., Wolff, M., Mekis, E., Rasmussen, R., Baker, B., et al.
       (2017). Analysis of single-Alter-shielded and unshielded measurements of mixed and
       solid precipitation from WMO-SPICE. Hydrol. Earth Syst. Sci. 21, 3525–3542.
       doi:10.5194/hess-21-3525-2017
    """
    if coefficients is None:
        if shield not in KOCHENDORFER2017_COEFFICIENTS:
            raise InputError(
                f"Gauge undercatch: unknown shield {shield!r}; expected one of "
                f"{sorted(KOCHENDORFER2017_COEFFICIENTS)}."
            )
        coefficients = KOCHENDORFER2017_COEFFICIENTS[shield]
    a, b, c, u_max = coefficients
    u = np.minimum(np.asarray(wind_m_s, dtype=np.float64), u_max)
    t_c = np.asarray(t_air_k, dtype=np.float64) - ZERO_CELSIUS_K
    return np.exp(-a * u * (1.0 - np.arctan(b * t_c) + c))


def correct_undercatch_kochendorfer2017(
    precip_kg_m2: np.ndarray,
    wind_m_s: np.ndarray,
    t_air_k: np.ndarray,
    *,
    shield: Literal["single_alter", "unshielded"] = "single_alter",
    coefficients: tuple[float, float, float, float] | None = None,
) -> np.ndarray:
    """Gauge precipitation corrected for wind-induced undercatch: P / CE.

    See :func:`catch_efficiency_kochendorfer2017` (Kochendorfer et al. 2017b, HESS 21,
    Eq. 4; coefficients [mem]). NaN where wind or temperature is missing.
    """
    ce = catch_efficiency_kochendorfer2017(
        wind_m_s, t_air_k, shield=shield, coefficients=coefficients
    )
    return np.asarray(precip_kg_m2, dtype=np.float64) / ce


def _scores(model: np.ndarray, obs: np.ndarray, variable: str) -> dict[str, float]:
    ok = np.isfinite(model) & np.isfinite(obs)
    out = {
        "n": int(ok.sum()),
        "bias": bias(model, obs),
        "mae": mean_absolute_error(model, obs),
        "rmse": root_mean_square_error(model, obs),
        "r2": r_squared(model, obs),
        "total_percent_difference": np.nan,
    }
    if variable == "precipitation":
        out["total_percent_difference"] = total_percent_difference(model, obs)
    return out


def _fit(variable, m, o, month, *, method, per_month, exposure_class):
    """One fitted object (Correction or QuantileMappingTable) from matched arrays."""
    if method == "quantile_mapping":
        return fit_quantile_mapping(
            m,
            o,
            month,
            QM_KIND[variable],
            variable=variable,
            wet_threshold=_QM_WET_THRESHOLD.get(variable, 0.1),
            exposure_class=exposure_class,
        )
    fitter = fit_offset if DEFAULT_KIND[variable] == "offset" else fit_factor
    return fitter(m, o, month if per_month else None, variable=variable)


def _apply(fitted, m, month):
    if isinstance(fitted, QuantileMappingTable):
        return apply_quantile_mapping(m, month, fitted)
    return fitted.apply(m, month)


def _cross_validate(variable, m, o, month, blocks, *, method, per_month, exposure_class, notes):
    """Leave one block (calendar month of one year) out: fit on the rest, predict it."""
    predicted = np.full(m.size, np.nan)
    unique = np.unique(blocks)
    if unique.size < 2:
        notes.append(f"{variable}/{exposure_class}: only one month of data, no cross-validation.")
        return predicted
    for block in unique:  # one fit per month of data
        held = blocks == block
        try:
            fitted = _fit(
                variable,
                m[~held],
                o[~held],
                month[~held],
                method=method,
                per_month=per_month,
                exposure_class=exposure_class,
            )
        except InputError:
            notes.append(
                f"{variable}/{exposure_class}: too little data without {block}; "
                "that month has no cross-validated prediction."
            )
            continue
        predicted[held] = _apply(fitted, m[held], month[held])
    return predicted


def calibrate(
    model: pd.DataFrame,
    obs: pd.DataFrame,
    stations: pd.DataFrame,
    *,
    variables: list[str] | None = None,
    method: Literal["scaling", "quantile_mapping"] = "scaling",
    per_month: bool = False,
    exposure_dependent: tuple[str, ...] = ("wind_speed",),
    undercatch: Literal["single_alter", "unshielded"] | None = None,
) -> CalibrationResult:
    """Fit bias settings from the overlap of model and station series.

    Parameters
    ----------
    model, obs : pandas.DataFrame
        Matched series, index (``station_id``, ``time``), canonical SI columns.
    stations : pandas.DataFrame
        From :func:`regionmap.io.stations.read_stations` (for ``exposure_class``).
    variables : list of str, optional
        Variables to fit; None means those of :data:`DEFAULT_KIND` (``scaling``) or
        :data:`QM_KIND` (``quantile_mapping``) present in both tables.
    method : {"scaling", "quantile_mapping"}
        Offsets/factors, or quantile-mapping tables per calendar month.
    per_month : bool
        ``scaling`` only: twelve values per variable instead of one.
    exposure_dependent : tuple of str
        Variables fitted per exposure class of the stations (settings for cells of that
        class only); the others are fitted from all stations together (class ``"all"``).
    undercatch : {"single_alter", "unshielded"}, optional
        Correct observed precipitation for gauge undercatch with
        :func:`correct_undercatch_kochendorfer2017` (needs observed ``wind_speed`` and
        ``air_temperature``) before fitting; None leaves it as measured.

    Returns
    -------
    CalibrationResult

    Notes
    -----
    Cross-validation leaves out one month of data (a calendar month of one year) at a
    time, fits on the rest and predicts the held-out month. With per-month settings and a
    single season the held-out calendar month then has no data of its own, so it is
    predicted by the all-month value: the cross-validated skill is that of the fallback.

    Raises
    ------
    InputError
        Unknown variable or method, missing columns, a station without exposure class for
        an exposure-dependent variable, or too little data (minimums :data:`MIN_PAIRS`,
        :data:`MIN_WET_PAIRS`, :data:`MIN_PRECIPITATION_TOTAL_KG_M2`,
        :data:`regionmap.downscale.quantile_mapping.MIN_SAMPLES_PER_MONTH`).
    """
    if method not in ("scaling", "quantile_mapping"):
        raise InputError(
            f"Calibration: method must be 'scaling' or 'quantile_mapping', got {method!r}."
        )
    kinds = DEFAULT_KIND if method == "scaling" else QM_KIND
    if variables is None:
        variables = [v for v in kinds if v in model.columns and v in obs.columns]
    unknown = [v for v in variables if v not in kinds]
    if unknown:
        raise InputError(
            f"Calibration ({method}): cannot fit {unknown}; supported are {sorted(kinds)}."
        )
    absent = [v for v in variables if v not in model.columns or v not in obs.columns]
    if absent or not variables:
        raise InputError(
            f"Calibration: variable(s) {absent or variables} missing from the model or the "
            f"observations (model: {list(model.columns)}, observations: {list(obs.columns)})."
        )
    joined = obs.join(model[variables], how="inner", suffixes=("", "__model"))
    if joined.empty:
        raise InputError("Calibration: model and observations share no (station_id, time).")
    notes: list[str] = []
    obs_values = {v: joined[v].to_numpy(dtype=np.float64) for v in variables}
    if undercatch is not None and "precipitation" in variables:
        for need in ("wind_speed", "air_temperature"):
            if need not in obs.columns:
                raise InputError(
                    f"Calibration: the undercatch correction needs observed {need} at the "
                    "precipitation stations; it is not in the observation files."
                )
        wind = joined["wind_speed"].to_numpy(dtype=np.float64)
        temp = joined["air_temperature"].to_numpy(dtype=np.float64)
        p = obs_values["precipitation"]
        lost = int(np.sum(np.isfinite(p) & ~(np.isfinite(wind) & np.isfinite(temp))))
        obs_values["precipitation"] = correct_undercatch_kochendorfer2017(
            p, wind, temp, shield=undercatch
        )
        if lost:
            notes.append(
                f"precipitation: {lost} observed amounts without wind or temperature "
                "left out (undercatch correction needs both)."
            )
    station_ids = joined.index.get_level_values("station_id").to_numpy()
    times = joined.index.get_level_values("time").to_numpy().astype("datetime64[s]")
    month = month_index_of(times)
    blocks = times.astype("datetime64[M]")
    exposure = stations["exposure_class"].reindex(station_ids).fillna("").to_numpy()

    settings: dict[str, dict[str, object]] = {}
    tables: list[QuantileMappingTable] = []
    skill_rows = []
    for v in variables:
        if v in exposure_dependent:
            unclassed = sorted(set(station_ids[(exposure == "") & np.isfinite(obs_values[v])]))
            if unclassed:
                raise InputError(
                    f"Calibration of {v}: station(s) {unclassed} have no exposure_class; {v} is "
                    f"fitted per exposure class ({list(EXPOSURE_CLASSES)}). Add the class to the "
                    "station metadata file."
                )
            # classes whose stations observe the variable (a precipitation-only gauge of
            # another class takes no part in the wind fit)
            observed = np.isfinite(obs_values[v])
            groups = [
                (c, exposure == c) for c in EXPOSURE_CLASSES if np.any((exposure == c) & observed)
            ]
        else:
            groups = [("all", np.ones(station_ids.size, dtype=bool))]
        m_all = joined[f"{v}__model"].to_numpy(dtype=np.float64)
        for cls, sel in groups:
            m, o = m_all[sel], obs_values[v][sel]
            fitted = _fit(
                v, m, o, month[sel], method=method, per_month=per_month, exposure_class=cls
            )
            if isinstance(fitted, QuantileMappingTable):
                tables.append(fitted)
                pooled = np.flatnonzero(fitted.pooled & (fitted.n_samples > 0)) + 1
            else:
                settings.setdefault(cls, {})[v] = fitted
                pooled = (
                    np.flatnonzero(~np.asarray(fitted.own_fit, dtype=bool)) + 1
                    if fitted.own_fit
                    else []
                )
            if len(pooled):
                notes.append(
                    f"{v}/{cls}: month(s) {list(map(int, pooled))} had too little data of "
                    "their own and use the value fitted on all months."
                )
            after = _apply(fitted, m, month[sel])
            cv = _cross_validate(
                v,
                m,
                o,
                month[sel],
                blocks[sel],
                method=method,
                per_month=per_month,
                exposure_class=cls,
                notes=notes,
            )
            for stage, pred in (("raw", m), ("fitted", after), ("cross_validated", cv)):
                skill_rows.append(
                    {"exposure_class": cls, "variable": v, "stage": stage, **_scores(pred, o, v)}
                )
    used = sorted(set(station_ids))
    return CalibrationResult(
        settings=settings,  # type: ignore[arg-type]
        qm_tables=tables,
        skill=pd.DataFrame(skill_rows),
        notes=notes,
        stations=used,
        period=(times.min(), times.max()),
    )


def _toml_number(x: float) -> str:
    return f"{x:.4g}" if abs(x) >= 1e-3 or x == 0 else f"{x:.3e}"


_MONTHS = ("Jan", "Feb", "Mar", "Apr", "May", "Jun", "Jul", "Aug", "Sep", "Oct", "Nov", "Dec")


def _toml_entry(c: Correction, exposure_class: str) -> tuple[str, str]:
    """One inline table ``{ factor = … }`` (plus ``exposure = "…"``) and its comment."""
    scale = _CONFIG_UNIT_SCALE.get(c.variable, 1.0) if c.kind == "offset" else 1.0
    values = [v * scale for v in c.values]
    text = (
        _toml_number(values[0])
        if len(values) == 1
        else "[" + ", ".join(_toml_number(v) for v in values) + "]"
    )
    entry = f"{c.kind} = {text}"
    if exposure_class != "all":
        entry += f', exposure = "{exposure_class}"'
    comment = ""
    if c.own_fit and not all(c.own_fit):
        pooled = [m for m, own in zip(_MONTHS, c.own_fit, strict=True) if not own]
        comment = f"{', '.join(pooled)}: all-month value (too little data)"
    return "{ " + entry + " }", comment


def bias_toml(result: CalibrationResult, *, quantile_mapping_file: str = "qm.nc") -> str:
    """The ``[bias]`` TOML to paste into the configuration.

    Parameters
    ----------
    result : CalibrationResult
    quantile_mapping_file : str
        File name the tables are written to (config key ``quantile_mapping``), used when the
        result holds quantile-mapping tables.

    Returns
    -------
    str
        ``[bias]`` with one entry per variable: ``variable = { offset = … }`` or
        ``{ factor = … }`` for the whole region, or a list of such tables each with
        ``exposure = "<class>"`` for settings that apply only to cells of that exposure
        class (offsets in the config's units: K, %, m s-1, W m-2; a list of twelve = per
        month); ``quantile_mapping = "…"`` when there are tables.
    """
    lines = ["# Bias settings fitted by `regionmap calibrate`"]
    if result.stations:
        lines.append(f"# from station(s) {', '.join(result.stations)}")
    if result.period is not None:
        a, b = (np.datetime_as_string(t, unit="m") for t in result.period)
        lines.append(f"# over {a} .. {b} UTC")
    lines.append("# Guidance only: check against field observations before relying on it.")
    lines.append("[bias]")
    by_variable: dict[str, list[tuple[str, Correction]]] = {}
    for cls in ("all",) + EXPOSURE_CLASSES:
        for variable, c in result.settings.get(cls, {}).items():
            by_variable.setdefault(variable, []).append((cls, c))
    for variable, entries in by_variable.items():
        rendered = [_toml_entry(c, cls) for cls, c in entries]
        if len(entries) == 1 and entries[0][0] == "all":
            entry, comment = rendered[0]
            lines.append(f"{variable} = {entry}" + (f"  # {comment}" if comment else ""))
        else:
            lines.append(
                f"{variable} = [  # each entry applies to cells of its exposure class only"
            )
            lines.extend(
                f"    {entry}," + (f"  # {comment}" if comment else "")
                for entry, comment in rendered
            )
            lines.append("]")
    if result.qm_tables:
        lines.append(f'quantile_mapping = "{quantile_mapping_file}"')
    return "\n".join(lines) + "\n"

"""Verification statistics: downscaled model series against station observations.

Plain functions on matched 1-D float64 arrays (model and observation at the same times), each
pairwise-complete: a pair enters only when both values are finite. The usual scores of
forecast verification (Wilks 2011, *Statistical Methods in the Atmospheric Sciences*, 3rd ed.,
Academic Press, Sect. 8.3 "continuous predictands"): mean error (bias), mean absolute error,
root-mean-square error, the squared Pearson correlation, and for accumulated amounts the
ratio of totals and the percent over- or under-prediction.

:func:`verification_table` turns tables of matched series (index ``station_id``, ``time``,
canonical variable columns as returned by :func:`regionmap.io.stations.read_observations`)
into one row per station and variable; :func:`aggregate_model_to_observations` first brings
hourly model series onto the observations' times and intervals.

Station scores describe a model's behaviour at points; they help a trained forecaster judge
how far to trust the guidance, and replace neither field observations nor local expertise.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from regionmap.errors import InputError, OutputError
from regionmap.io.writers import write_csv

__all__ = [
    "AMOUNT_VARIABLES",
    "MEAN_VARIABLES",
    "paired",
    "bias",
    "mean_absolute_error",
    "root_mean_square_error",
    "r_squared",
    "total_ratio",
    "total_percent_difference",
    "snow_depth_agreement",
    "aggregate_model_to_observations",
    "verification_table",
    "write_verification_csv",
]

#: Variables that are amounts over an interval (summed when aggregating, totals compared).
AMOUNT_VARIABLES: tuple[str, ...] = ("precipitation", "new_snow_depth")
#: Variables that are means over an interval (averaged when aggregating).
MEAN_VARIABLES: tuple[str, ...] = ("shortwave_down",)


def paired(model: np.ndarray, obs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The pairs where both model and observation are finite.

    Parameters
    ----------
    model, obs : array_like (n,) float
        Matched series (same times), any unit, the same for both.

    Returns
    -------
    (ndarray, ndarray)
        The finite pairs, float64.

    Raises
    ------
    InputError
        When the two series differ in length.
    """
    m = np.asarray(model, dtype=np.float64).ravel()
    o = np.asarray(obs, dtype=np.float64).ravel()
    if m.shape != o.shape:
        raise InputError(
            f"Verification: model and observation series must be matched pair by pair; got "
            f"{m.size} model and {o.size} observed values."
        )
    ok = np.isfinite(m) & np.isfinite(o)
    return m[ok], o[ok]


def bias(model: np.ndarray, obs: np.ndarray) -> float:
    """Mean error, mean(model − obs), in the series' unit (NaN without pairs).

    Wilks (2011), Statistical Methods in the Atmospheric Sciences, Eq. 8.33 ("bias", mean
    error).
    """
    m, o = paired(model, obs)
    return float(np.mean(m - o)) if m.size else np.nan


def mean_absolute_error(model: np.ndarray, obs: np.ndarray) -> float:
    """Mean absolute error, mean|model − obs| (NaN without pairs). Wilks (2011), Eq. 8.28."""
    m, o = paired(model, obs)
    return float(np.mean(np.abs(m - o))) if m.size else np.nan


def root_mean_square_error(model: np.ndarray, obs: np.ndarray) -> float:
    """Root-mean-square error, sqrt(mean((model − obs)²)) (NaN without pairs).

    Wilks (2011), Eq. 8.29–8.30 (square root of the mean squared error).
    """
    m, o = paired(model, obs)
    return float(np.sqrt(np.mean((m - o) ** 2))) if m.size else np.nan


def r_squared(model: np.ndarray, obs: np.ndarray) -> float:
    """Coefficient of determination as the squared Pearson correlation of model and obs.

    NaN with fewer than two pairs or when either series is constant (the correlation is
    undefined). Wilks (2011), Eq. 3.24 (Pearson correlation) and Sect. 7.2.4.
    """
    m, o = paired(model, obs)
    if m.size < 2:
        return np.nan
    dm = m - m.mean()
    do = o - o.mean()
    denom = np.sqrt(np.sum(dm * dm) * np.sum(do * do))
    if denom == 0.0:
        return np.nan
    r = np.sum(dm * do) / denom
    return float(r * r)


def total_ratio(model: np.ndarray, obs: np.ndarray) -> float:
    """Ratio of accumulated totals, sum(model)/sum(obs), over the common pairs.

    NaN without pairs or when the observed total is zero.
    """
    m, o = paired(model, obs)
    total_obs = o.sum()
    if m.size == 0 or total_obs == 0.0:
        return np.nan
    return float(m.sum() / total_obs)


def total_percent_difference(model: np.ndarray, obs: np.ndarray) -> float:
    """Percent over- (positive) or under-prediction (negative) of the accumulated total.

    ``100 * (sum(model) / sum(obs) − 1)`` over the common pairs, e.g. a forecast total of 24
    against an observed 21.8 is +10.1 % (common practice for quoting a precipitation bias;
    the relative bias of Wilks 2011, Sect. 8.3).
    """
    ratio = total_ratio(model, obs)
    return float(100.0 * (ratio - 1.0)) if np.isfinite(ratio) else np.nan


def snow_depth_agreement(
    model_m: np.ndarray,
    obs_m: np.ndarray,
    *,
    presence_threshold_m: float = 0.01,
    tolerance_m: float = 0.10,
) -> dict[str, float]:
    """Agreement of modelled and observed snow depth.

    Parameters
    ----------
    model_m, obs_m : array_like (n,) float
        Matched snow depths [m].
    presence_threshold_m : float
        Depth above which the ground counts as snow-covered [m] (common practice: 1 cm).
    tolerance_m : float
        Depth difference still counted as agreement [m].

    Returns
    -------
    dict
        ``presence_agreement_frac``: share of pairs where model and observation agree on snow
        cover (yes/no) — the proportion correct of the 2×2 contingency table, Wilks (2011),
        Eq. 8.7 [1]; ``within_tolerance_frac``: share of pairs with |model − obs| ≤
        ``tolerance_m`` [1]; ``n``: number of pairs. NaN fractions without pairs.
    """
    m, o = paired(model_m, obs_m)
    if m.size == 0:
        return {"presence_agreement_frac": np.nan, "within_tolerance_frac": np.nan, "n": 0}
    agree = (m > presence_threshold_m) == (o > presence_threshold_m)
    within = np.abs(m - o) <= tolerance_m
    return {
        "presence_agreement_frac": float(agree.mean()),
        "within_tolerance_frac": float(within.mean()),
        "n": int(m.size),
    }


def aggregate_model_to_observations(model: pd.DataFrame, obs: pd.DataFrame) -> pd.DataFrame:
    """Bring hourly model series onto the observations' times and intervals.

    Parameters
    ----------
    model : pandas.DataFrame
        Index (``station_id``, ``time``), regular steps per station, time = end of each
        interval; canonical variable columns (as :data:`regionmap.io.stations.CANONICAL_UNITS`).
    obs : pandas.DataFrame
        From :func:`regionmap.io.stations.read_observations`, with ``interval_start``.

    Returns
    -------
    pandas.DataFrame
        Index of ``obs``, the model's variable columns: amounts (:data:`AMOUNT_VARIABLES`)
        summed over each observation interval (``interval_start``, ``time``], interval means
        (:data:`MEAN_VARIABLES`) averaged over it, states taken at ``time``. NaN where the
        model does not cover the whole interval or has a gap in it.

    Raises
    ------
    InputError
        When ``model`` lacks the (station_id, time) index or ``obs`` lacks ``interval_start``.
    """
    if list(model.index.names) != ["station_id", "time"]:
        raise InputError(
            f"Model series: expected an index (station_id, time), got {list(model.index.names)}."
        )
    if "interval_start" not in obs.columns:
        raise InputError(
            "Observations: column 'interval_start' missing; read them with "
            "regionmap.io.stations.read_observations."
        )
    model = model.sort_index()
    variables = [c for c in model.columns if c != "interval_start"]
    out = pd.DataFrame(index=obs.index, columns=variables, dtype=np.float64)
    states = [v for v in variables if v not in AMOUNT_VARIABLES + MEAN_VARIABLES]
    if states:
        out[states] = model[states].reindex(obs.index).to_numpy()
    interval_vars = [v for v in variables if v in AMOUNT_VARIABLES + MEAN_VARIABLES]
    if not interval_vars:
        return out
    obs_station = obs.index.get_level_values("station_id")
    for station in obs_station.unique():  # a loop over stations, not over times
        if station not in model.index.get_level_values("station_id"):
            continue
        sel = np.asarray(obs_station == station)
        ends = obs.index.get_level_values("time")[sel].to_numpy().astype("datetime64[s]")
        starts = obs["interval_start"].to_numpy()[sel].astype("datetime64[s]")
        block = model.xs(station, level="station_id")
        t = block.index.to_numpy().astype("datetime64[s]")
        step = np.median(np.diff(t)) if t.size > 1 else np.timedelta64(3600, "s")
        i_end = np.searchsorted(t, ends, side="right")
        i_start = np.searchsorted(t, starts, side="right")
        n = i_end - i_start
        expected = (ends - starts) / step
        covered = (n > 0) & (n == expected)
        covered &= (i_end > 0) & (t[np.maximum(i_end - 1, 0)] == ends)
        for v in interval_vars:
            x = block[v].to_numpy(dtype=np.float64)
            csum = np.concatenate([[0.0], np.cumsum(np.where(np.isfinite(x), x, 0.0))])
            cbad = np.concatenate([[0], np.cumsum(~np.isfinite(x))])
            total = csum[i_end] - csum[i_start]
            ok = covered & (cbad[i_end] - cbad[i_start] == 0)
            value = total if v in AMOUNT_VARIABLES else total / np.maximum(n, 1)
            out.loc[out.index[sel], v] = np.where(ok, value, np.nan)
    return out


_STAT_COLUMNS = [
    "station_id",
    "variable",
    "units",
    "n",
    "obs_mean",
    "model_mean",
    "bias",
    "mae",
    "rmse",
    "r2",
    "obs_total",
    "model_total",
    "total_ratio",
    "total_percent_difference",
    "presence_agreement_frac",
    "within_tolerance_frac",
]


def verification_table(
    model: pd.DataFrame,
    obs: pd.DataFrame,
    *,
    variables: list[str] | None = None,
    units: dict[str, str] | None = None,
) -> pd.DataFrame:
    """Scores per station and variable over the matched pairs.

    Parameters
    ----------
    model, obs : pandas.DataFrame
        Index (``station_id``, ``time``), canonical variable columns, matched: the model
        already on the observations' times and intervals (see
        :func:`aggregate_model_to_observations`). Rows are joined on the index; pairs with a
        NaN on either side are left out.
    variables : list of str, optional
        Variables to score; None means every column both tables share (except
        ``interval_start``).
    units : dict, optional
        Unit of each variable for the ``units`` column; None takes ``obs.attrs["units"]``.

    Returns
    -------
    pandas.DataFrame
        One row per station and variable with ``n`` (pairs), ``obs_mean``, ``model_mean``,
        ``bias``, ``mae``, ``rmse`` (in the variable's unit), ``r2`` [1]; for amounts
        (:data:`AMOUNT_VARIABLES`) ``obs_total``, ``model_total``, ``total_ratio`` [1] and
        ``total_percent_difference`` [%]; for ``snow_depth`` ``presence_agreement_frac`` and
        ``within_tolerance_frac`` [1]; NaN where a score does not apply.

    Raises
    ------
    InputError
        When the tables share no variable or no (station, time).
    """
    for name, table in (("model", model), ("observations", obs)):
        if list(table.index.names) != ["station_id", "time"]:
            raise InputError(
                f"Verification: the {name} table needs an index (station_id, time), got "
                f"{list(table.index.names)}."
            )
    if variables is None:
        variables = [c for c in obs.columns if c in model.columns and c != "interval_start"]
    missing = [v for v in variables if v not in model.columns or v not in obs.columns]
    if missing or not variables:
        raise InputError(
            f"Verification: variable(s) {missing or variables} are not in both tables; model "
            f"has {list(model.columns)}, observations have {list(obs.columns)}."
        )
    units = dict(obs.attrs.get("units", {})) if units is None else units
    joined = obs[variables].join(model[variables], how="inner", suffixes=("_obs", "_model"))
    if joined.empty:
        raise InputError(
            "Verification: model and observations share no (station_id, time); check that "
            "the model covers the observation period and the station ids match."
        )
    rows = []
    for station, group in joined.groupby(level="station_id", sort=True):
        for v in variables:
            m_all = group[f"{v}_model"].to_numpy(dtype=np.float64)
            o_all = group[f"{v}_obs"].to_numpy(dtype=np.float64)
            m, o = paired(m_all, o_all)
            row = dict.fromkeys(_STAT_COLUMNS, np.nan)
            row.update(station_id=station, variable=v, units=units.get(v, ""), n=int(m.size))
            if m.size:
                row.update(
                    obs_mean=float(o.mean()),
                    model_mean=float(m.mean()),
                    bias=bias(m, o),
                    mae=mean_absolute_error(m, o),
                    rmse=root_mean_square_error(m, o),
                    r2=r_squared(m, o),
                )
            if v in AMOUNT_VARIABLES and m.size:
                row.update(
                    obs_total=float(o.sum()),
                    model_total=float(m.sum()),
                    total_ratio=total_ratio(m, o),
                    total_percent_difference=total_percent_difference(m, o),
                )
            if v == "snow_depth":
                agreement = snow_depth_agreement(m, o)
                row.update(
                    presence_agreement_frac=agreement["presence_agreement_frac"],
                    within_tolerance_frac=agreement["within_tolerance_frac"],
                )
            rows.append(row)
    table = pd.DataFrame(rows, columns=_STAT_COLUMNS)
    table["n"] = table["n"].astype(np.int64)
    return table


def write_verification_csv(table: pd.DataFrame, path: str | Path) -> Path:
    """Write a verification table as CSV atomically (:func:`regionmap.io.writers.write_csv`).

    Parameters
    ----------
    table : pandas.DataFrame
        From :func:`verification_table`.
    path : str or Path
        Destination; its folder must exist.

    Returns
    -------
    Path
        The written file.

    Raises
    ------
    OutputError
        When the folder does not exist or cannot be written.
    """
    path = Path(path)
    if not path.parent.is_dir():
        raise OutputError(
            f"Cannot write verification table {path}: folder {path.parent} does not exist."
        )
    try:
        return write_csv(path, table)
    except OSError as exc:
        raise OutputError(f"Cannot write verification table {path}: {exc}.") from None

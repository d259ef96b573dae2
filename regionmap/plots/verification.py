"""Verification figures: model against station observations.

* :func:`scatter_figure` — observed (x) against modelled (y) for one variable, every station
  in its own colour, with the 1:1 line (perfect agreement) over the common range.
* :func:`accumulated_precipitation_figure` — accumulated observed and modelled precipitation
  per station over the pairs where both exist.
* :func:`write_verification_figures` — both kinds as PNG under a folder.
* :func:`calibration_skill_figure` — mean absolute error per variable before calibration,
  after it (in sample) and cross-validated, per exposure class.

Colours: the Okabe & Ito (2008) colour-blind-safe set of :mod:`regionmap.plots.style`.
Station comparisons describe the model at points; they are no substitute for field
observations, the local avalanche service or professional standards.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from regionmap.constants import ZERO_CELSIUS_K
from regionmap.plots.style import OKABE_ITO, new_figure, save_png, slug

__all__ = [
    "VARIABLE_LABELS",
    "scatter_figure",
    "accumulated_precipitation_figure",
    "write_verification_figures",
    "calibration_skill_figure",
]

#: Axis label and display scaling (offset, factor) per canonical variable.
VARIABLE_LABELS: dict[str, tuple[str, float, float]] = {
    "air_temperature": ("air temperature [°C]", -ZERO_CELSIUS_K, 1.0),
    "relative_humidity": ("relative humidity [%]", 0.0, 100.0),
    "wind_speed": ("wind speed [m s-1]", 0.0, 1.0),
    "precipitation": ("precipitation per interval [kg m-2]", 0.0, 1.0),
    "shortwave_down": ("incoming shortwave [W m-2]", 0.0, 1.0),
    "snow_depth": ("snow depth [cm]", 0.0, 100.0),
    "snow_water_equivalent": ("snow water equivalent [kg m-2]", 0.0, 1.0),
    "new_snow_depth": ("new snow [cm]", 0.0, 100.0),
}
_COLOURS = [c for name, c in OKABE_ITO.items() if name != "black"]


def _display(variable: str, values: np.ndarray) -> np.ndarray:
    _, offset, factor = VARIABLE_LABELS.get(variable, (variable, 0.0, 1.0))
    return (np.asarray(values, dtype=np.float64) + offset) * factor


def _pairs(model: pd.DataFrame, obs: pd.DataFrame, variable: str) -> pd.DataFrame:
    joined = pd.DataFrame({"obs": obs[variable], "model": model[variable].reindex(obs.index)})
    return joined[np.isfinite(joined["obs"]) & np.isfinite(joined["model"])]


def scatter_figure(model: pd.DataFrame, obs: pd.DataFrame, variable: str):
    """Scatter of modelled against observed values with the 1:1 line.

    Parameters
    ----------
    model, obs : pandas.DataFrame
        Matched tables, index (``station_id``, ``time``), canonical SI columns (the model on
        the observations' intervals,
        :func:`regionmap.stations.verify.aggregate_model_to_observations`).
    variable : str
        Column to plot.

    Returns
    -------
    matplotlib.figure.Figure or None
        None when no pair has both values.
    """
    pairs = _pairs(model, obs, variable)
    if pairs.empty:
        return None
    label = VARIABLE_LABELS.get(variable, (variable, 0.0, 1.0))[0]
    fig = new_figure(5.0, 5.0)
    ax = fig.add_subplot(1, 1, 1)
    stations = pairs.index.get_level_values("station_id")
    for k, station in enumerate(pd.unique(stations)):
        sel = stations == station
        ax.scatter(
            _display(variable, pairs["obs"][sel]),
            _display(variable, pairs["model"][sel]),
            s=8,
            alpha=0.6,
            color=_COLOURS[k % len(_COLOURS)],
            label=str(station),
            edgecolors="none",
        )
    both = np.concatenate([_display(variable, pairs["obs"]), _display(variable, pairs["model"])])
    lo, hi = float(both.min()), float(both.max())
    pad = 0.05 * (hi - lo) if hi > lo else 1.0
    lims = (lo - pad, hi + pad)
    ax.plot(lims, lims, color=OKABE_ITO["black"], linewidth=1.0, label="1:1")
    ax.set_xlim(lims)
    ax.set_ylim(lims)
    ax.set_aspect("equal")
    ax.set_xlabel(f"observed {label}")
    ax.set_ylabel(f"model {label}")
    ax.set_title(f"{variable.replace('_', ' ')}: model against stations")
    ax.grid(True, linewidth=0.3)
    ax.legend(fontsize=7, loc="upper left")
    return fig


def accumulated_precipitation_figure(model: pd.DataFrame, obs: pd.DataFrame):
    """Accumulated precipitation per station, observed (solid) and model (dashed).

    Sums run over the intervals where both values exist, so the two curves of a station
    cover the same intervals. Returns None without precipitation pairs.
    """
    if "precipitation" not in obs.columns or "precipitation" not in model.columns:
        return None
    pairs = _pairs(model, obs, "precipitation")
    if pairs.empty:
        return None
    fig = new_figure(7.0, 4.0)
    ax = fig.add_subplot(1, 1, 1)
    stations = pairs.index.get_level_values("station_id")
    for k, station in enumerate(pd.unique(stations)):
        block = pairs[stations == station]
        t = block.index.get_level_values("time")
        colour = _COLOURS[k % len(_COLOURS)]
        ax.plot(
            t,
            np.cumsum(block["obs"].to_numpy()),
            color=colour,
            linewidth=1.5,
            label=f"{station} observed",
        )
        ax.plot(
            t,
            np.cumsum(block["model"].to_numpy()),
            color=colour,
            linewidth=1.5,
            linestyle="--",
            label=f"{station} model",
        )
    ax.set_ylabel("accumulated precipitation [kg m-2]")
    ax.set_xlabel("time [UTC]")
    ax.set_title("Accumulated precipitation: model (dashed) against gauges (solid)")
    ax.grid(True, linewidth=0.3)
    ax.legend(fontsize=7, loc="upper left")
    fig.autofmt_xdate()
    return fig


def write_verification_figures(model: pd.DataFrame, obs: pd.DataFrame, folder) -> list[Path]:
    """Write ``verification_scatter_<variable>.png`` per shared variable and
    ``verification_precipitation_accumulated.png`` into ``folder`` (created when missing).

    Returns
    -------
    list of Path
        The files written (variables without pairs get no figure).
    """
    folder = Path(folder)
    written = []
    variables = [v for v in obs.columns if v in model.columns and v != "interval_start"]
    for v in variables:
        fig = scatter_figure(model, obs, v)
        if fig is not None:
            written.append(save_png(fig, folder / f"verification_scatter_{slug(v)}.png"))
    fig = accumulated_precipitation_figure(model, obs)
    if fig is not None:
        written.append(save_png(fig, folder / "verification_precipitation_accumulated.png"))
    return written


_STAGES = (
    ("raw", "raw model"),
    ("fitted", "fitted (in sample)"),
    ("cross_validated", "cross-validated"),
)


def calibration_skill_figure(skill: pd.DataFrame):
    """Mean absolute error per variable and exposure class, one bar per calibration stage.

    Parameters
    ----------
    skill : pandas.DataFrame
        :attr:`regionmap.stations.calibrate.CalibrationResult.skill` (columns
        ``exposure_class``, ``variable``, ``stage``, ``mae``).

    Returns
    -------
    matplotlib.figure.Figure or None
        None when the table holds no score. Each variable has its own panel and unit.
    """
    skill = skill.dropna(subset=["mae"])
    if skill.empty:
        return None
    variables = list(pd.unique(skill["variable"]))
    fig = new_figure(4.0 * len(variables), 3.6)
    for k, variable in enumerate(variables):
        ax = fig.add_subplot(1, len(variables), k + 1)
        rows = skill[skill["variable"] == variable]
        classes = list(pd.unique(rows["exposure_class"]))
        label, _, factor = VARIABLE_LABELS.get(variable, (variable, 0.0, 1.0))
        x = np.arange(len(classes))
        for j, (stage, name) in enumerate(_STAGES):
            mae = rows[rows["stage"] == stage].set_index("exposure_class")["mae"]
            ax.bar(
                x + (j - 1) * 0.27,
                mae.reindex(classes).to_numpy(dtype=float) * factor,
                width=0.27,
                color=_COLOURS[j],
                label=name,
            )
        ax.set_xticks(x, [str(c) for c in classes])
        ax.set_xlabel("exposure class")
        ax.set_ylabel(f"mean absolute error, {label}")
        ax.set_title(variable.replace("_", " "))
        ax.grid(True, axis="y", linewidth=0.3)
        if k == 0:
            ax.legend(fontsize=7)
    return fig

"""User bias correction of downscaled forcing: offsets, factors, quantile mapping."""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

from .quantile_mapping import apply_quantile_mapping

__all__ = ["monthly_values", "apply_offset_factor", "apply_quantile_table"]


def monthly_values(value: float | Sequence[float], month_index: np.ndarray) -> np.ndarray:
    """A scalar, or a list of 12 (January..December) picked per step.

    Parameters
    ----------
    value : float or sequence of 12 floats
        The correction.
    month_index : ndarray (time,) int
        Month of each step, 0 = January.

    Returns
    -------
    ndarray (time,) float64
    """
    arr = np.asarray(value, dtype=np.float64)
    if arr.ndim == 0:
        return np.full(np.shape(month_index), float(arr))
    if arr.shape != (12,):
        raise ValueError(
            f"a monthly correction needs 12 values (January..December), got {arr.shape}"
        )
    return arr[np.asarray(month_index)]


def apply_offset_factor(
    values: np.ndarray,
    month_index: np.ndarray,
    *,
    offset: float | Sequence[float] | None = None,
    factor: float | Sequence[float] | None = None,
) -> np.ndarray:
    """Apply ``values * factor + offset``, each scalar or per month.

    Parameters
    ----------
    values : ndarray (cell, time) float64
        Downscaled series in canonical units.
    month_index : ndarray (time,) int
        Month of each step, 0 = January.
    offset : float or 12 floats, optional
        Added after the factor, in the series' units; None = 0.
    factor : float or 12 floats, optional
        Multiplier [1]; None = 1.

    Returns
    -------
    ndarray (cell, time) float64
        A new array; the operation is exact (a plain multiply and add).
    """
    out = np.array(values, dtype=np.float64, copy=True)
    if factor is not None:
        out *= monthly_values(factor, month_index)[None, :]
    if offset is not None:
        out += monthly_values(offset, month_index)[None, :]
    return out


def apply_quantile_table(values: np.ndarray, month_index: np.ndarray, table) -> np.ndarray:
    """Empirical quantile mapping per month from a fitted table.

    Parameters
    ----------
    values : ndarray (cell, time) float64
        Series to correct.
    month_index : ndarray (time,) int
        Month of each step, 0 = January.
    table : object
        A table as read by :mod:`regionmap.downscale.quantile_mapping`.

    Returns
    -------
    ndarray (cell, time) float64

    Notes
    -----
    Delegates to :func:`regionmap.downscale.quantile_mapping.apply_quantile_mapping`
    (Panofsky & Brier 1968; Gudmundsson et al. 2012, HESS 16, 3383-3390).
    """
    return np.asarray(apply_quantile_mapping(values, month_index, table), dtype=np.float64)

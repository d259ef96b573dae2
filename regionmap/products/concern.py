"""Which buried persistent layers are *weak layers of concern*: one definition for every product.

The column model flags a persistent weak layer of concern (``pwl_present`` in ``cells.nc``)
with :func:`regionmap.snow.diagnostics.mark_weak_layers_of_concern`. The products decide the
same question on the daily layer snapshots of ``profiles.nc`` by calling that same compiled
rule on the same layer fields, so the layers-of-concern table, the ``FC_``/``DH_``/``SH_``
fractions, the slab and load above the uppermost weak layer, the GIS layers and the briefing
count exactly the layers the column counts.

A layer is of concern when it belongs to a run of adjacent layers of persistent grain type
(FC, FCxr, FCsf, DH, SH; Schweizer & Jamieson 2007) that

* lies under a slab at least ``min_depth_m`` deep (vertical),
* is at least ``min_thickness_m`` thick (buried surface hoar at any thickness),
* holds grains of at least ``min_grain_mm``, and
* has a bounding interface (the one above or below the run) whose structural threshold
  count reaches the critical value: 5 of the 6 criteria of McCammon & Schweizer (2002) /
  Schweizer & Jamieson (2007), or 0.8 of the maximum of the relative threshold sum of Monti,
  Schweizer & Fierz (2014) for simulated profiles (:mod:`regionmap.snow.stability`).

The thresholds are the column model's (:class:`regionmap.snow.params.SnowParams`,
``pwl_min_*`` and the threshold mode), so the products and ``pwl_present`` agree.

This is structural guidance from a model, for trained people; it does not replace field
observations, stability tests, the local avalanche service or professional judgement.

References
----------
.. [1] McCammon, I. and Schweizer, J. (2002). A field method for identifying structural
   weaknesses in the snowpack. Proc. International Snow Science Workshop 2002, Penticton.
.. [2] Schweizer, J. and Jamieson, J. B. (2007). A threshold sum approach to stability
   evaluation of manual snow profiles. Cold Regions Science and Technology 47(1-2), 50-59.
   doi:10.1016/j.coldregions.2006.08.011
.. [3] Monti, F., Schweizer, J. and Fierz, C. (2014). Hardness estimation and weak layer
   detection in simulated snow stratigraphy. Cold Regions Science and Technology 103,
   82-90. doi:10.1016/j.coldregions.2014.03.009
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numba import njit

from regionmap.errors import InputError
from regionmap.snow.diagnostics import mark_weak_layers_of_concern
from regionmap.snow.params import SnowParams
from regionmap.snow.stability import (
    CRITICAL_COUNT_ABSOLUTE,
    CRITICAL_SUM_RELATIVE,
    N_CRITERIA,
    interface_scores_column,
)

__all__ = ["ConcernCriteria", "weak_layers_of_concern"]


@dataclass(frozen=True)
class ConcernCriteria:
    """The thresholds that make a buried persistent layer one of concern.

    Attributes
    ----------
    relative : bool
        True: relative threshold sum (Monti et al. 2014); False: absolute count (Schweizer &
        Jamieson 2007).
    min_depth_m : float
        Slab above the run of persistent layers, vertical [m].
    min_thickness_m : float
        Thickness of the run [m] (buried surface hoar at any thickness).
    min_grain_mm : float
        Coarsest grains of the run [mm].
    """

    relative: bool
    min_depth_m: float
    min_thickness_m: float
    min_grain_mm: float

    @classmethod
    def from_snow_params(cls, params: SnowParams) -> ConcernCriteria:
        """The criteria of the column model run with ``params`` (``pwl_min_*`` and the
        threshold mode)."""
        return cls(
            relative=params.threshold_mode == "relative",
            min_depth_m=float(params.pwl_min_depth_m),
            min_thickness_m=float(params.pwl_min_thickness_m),
            min_grain_mm=float(params.pwl_min_grain_mm),
        )

    @property
    def critical_score(self) -> float:
        """Threshold score at or above which an interface is critical [of 6]."""
        return CRITICAL_SUM_RELATIVE if self.relative else CRITICAL_COUNT_ABSOLUTE


#: the column model's defaults
DEFAULT_CRITERIA = ConcernCriteria.from_snow_params(SnowParams())


@njit(cache=True, nogil=True, error_model="numpy")
def _mark_columns(
    layer_count,
    thickness_m,
    grain_size_mm,
    hardness_index,
    grain_code,
    relative,
    critical,
    min_depth_m,
    min_thickness_m,
    min_grain_mm,
    out,
):
    """Concern marks (column, layer) of many columns: the column model's interface scores
    and marking rule, column by column."""
    n_col, n_layer = thickness_m.shape
    width = max(n_layer, 1)
    scratch = np.empty((N_CRITERIA + 1, width))
    scores = np.zeros(width)
    mark = np.empty(width)
    for c in range(n_col):
        n = min(layer_count[c], n_layer)
        if n < 2:  # one layer has no interface, so no critical one
            continue
        interface_scores_column(
            n,
            thickness_m[c],
            grain_size_mm[c],
            hardness_index[c],
            grain_code[c],
            relative,
            scratch,
            scores,
        )
        top = mark_weak_layers_of_concern(
            n,
            thickness_m[c],
            grain_size_mm[c],
            grain_code[c],
            scores,
            critical,
            min_depth_m,
            min_thickness_m,
            min_grain_mm,
            mark,
        )
        if top >= 0:
            for k in range(n):
                out[c, k] = mark[k] > 0.0


def weak_layers_of_concern(
    layer_count: np.ndarray,
    thickness_m: np.ndarray,
    grain_size_mm: np.ndarray,
    hardness_index: np.ndarray,
    grain_code: np.ndarray,
    criteria: ConcernCriteria = DEFAULT_CRITERIA,
) -> np.ndarray:
    """Mark the layers that belong to a persistent weak layer of concern (module notes).

    Parameters
    ----------
    layer_count : ndarray (...,) int
        Active layers of each column (bottom first).
    thickness_m : ndarray (..., layer) float
        Vertical layer thickness [m].
    grain_size_mm : ndarray (..., layer) float
        Grain size [mm].
    hardness_index : ndarray (..., layer) float
        Hand-hardness index, F = 1 ... I = 6 (Fierz et al. 2009).
    grain_code : ndarray (..., layer) int
        Indices into :data:`regionmap.snow.codes.GRAIN_CODES`.
    criteria : :class:`ConcernCriteria`, by default the column model's.

    Returns
    -------
    ndarray (..., layer) bool
        True for every layer of a run of concern (False above ``layer_count``).

    Raises
    ------
    InputError
        When the layer arrays differ in shape or ``layer_count`` does not match them.
    """
    th = np.asarray(thickness_m, dtype=np.float64)
    arrays = {
        "grain_size_mm": np.asarray(grain_size_mm, dtype=np.float64),
        "hardness_index": np.asarray(hardness_index, dtype=np.float64),
        "grain_code": np.asarray(grain_code, dtype=np.int64),
    }
    count = np.asarray(layer_count, dtype=np.int64)
    for name, a in arrays.items():
        if a.shape != th.shape:
            raise InputError(
                f"weak layers of concern: {name} has shape {a.shape}, expected the shape of "
                f"thickness_m {th.shape}"
            )
    if th.ndim < 1 or count.shape != th.shape[:-1]:
        raise InputError(
            f"weak layers of concern: layer_count has shape {count.shape}, expected "
            f"{th.shape[:-1]} (one count per column of thickness_m {th.shape})"
        )
    shape = (count.size, th.shape[-1])
    out = np.zeros(shape, dtype=np.bool_)
    _mark_columns(
        count.reshape(-1),
        np.nan_to_num(th).reshape(shape),
        np.nan_to_num(arrays["grain_size_mm"]).reshape(shape),
        np.nan_to_num(arrays["hardness_index"]).reshape(shape),
        arrays["grain_code"].reshape(shape),
        criteria.relative,
        criteria.critical_score,
        criteria.min_depth_m,
        criteria.min_thickness_m,
        criteria.min_grain_mm,
        out,
    )
    return out.reshape(th.shape)

"""Hand hardness of snow layers: index, notation, and density <-> hardness by grain type.

The hand-hardness scale is the one of the International Classification for Seasonal Snow on
the Ground (Fierz et al. 2009, Table A.3 and Sect. 1.5): fist (F) = 1, four fingers (4F) = 2,
one finger (1F) = 3, pencil (P) = 4, knife blade (K) = 5, ice (I) = 6.

Density and hand hardness are related per grain type by the linear regressions of
Geldsetzer & Jamieson (2000), ``density = A + B * hardness_index``, fitted on dry-snow layers
of manual profiles. The coefficients below are **recalled, low confidence** ([mem]) and have
not been re-verified against the paper; verify them before relying on absolute densities or
hardness values.

Those regressions predict density from hardness, with wide scatter. Inverted to predict
hardness from a model's density, a shallow slope (depth hoar: 25 kg m-3 per step) turns a
density error of a few tens of kg m-3 into several hardness steps: depth hoar of
350 kg m-3 would be ice. A modelled hardness therefore stays inside the range the grain type
shows in field profiles (:data:`FIELD_HARDNESS_RANGE`): the span of hand hardness Geldsetzer &
Jamieson (2000) report per grain type and the usual ranges of the avalanche handbooks
(McClung & Schaerer 2006, The Avalanche Handbook, 3rd ed., Ch. 3 [mem]). Density is the *dry*
density (ice mass per volume), the quantity the regressions were made on: liquid water
makes snow softer, never harder.

Inside compiled kernels a layer's grain class is its index into
:data:`regionmap.snow.codes.GRAIN_CODES` and its crust kind the index into
:data:`regionmap.snow.codes.CRUST_KINDS`. The scalar functions here are numba-compiled so the
column kernel can call them; the ``*_array`` wrappers and the notation helpers are for
ordinary Python callers (profile import, plots).

References
----------
.. [1] Fierz, C., Armstrong, R. L., Durand, Y., Etchevers, P., Greene, E., McClung, D. M.,
   Nishimura, K., Satyawali, P. K. and Sokratov, S. A. (2009). The International
   Classification for Seasonal Snow on the Ground. IHP-VII Technical Documents in Hydrology
   No. 83, IACS Contribution No. 1, UNESCO-IHP, Paris.
.. [2] Geldsetzer, T. and Jamieson, J. B. (2000). Estimating dry snow density from grain form
   and hand hardness. Proceedings of the International Snow Science Workshop 2000,
   Big Sky, Montana, 121-127.
.. [3] Cuffey, K. M. and Paterson, W. S. B. (2010). The Physics of Glaciers, 4th ed.,
   Elsevier (pore close-off, firn to ice, near 830 kg m-3).
.. [4] McClung, D. and Schaerer, P. (2006). The Avalanche Handbook, 3rd ed., The
   Mountaineers, Seattle (hand hardness of the common grain types in field profiles).
.. [5] Jamieson, B. (2006). Formation of refrozen snowpack layers and their role in slab
   avalanche release. Reviews of Geophysics 44, RG2001, doi:10.1029/2005RG000176 (crusts
   from pencil to ice hardness).
"""

from __future__ import annotations

import math
import re

import numpy as np
from numba import njit

from regionmap.constants import RHO_ICE_KG_M3
from regionmap.errors import InputError
from regionmap.snow.codes import CRUST_KINDS, GRAIN_CODES, GRAIN_INDEX

__all__ = [
    "HARDNESS_LABELS",
    "HARDNESS_MODIFIER_STEP",
    "GELDSETZER2000_FITS",
    "FIELD_HARDNESS_RANGE",
    "CRUST_K_DENSITY_KG_M3",
    "CRUST_I_DENSITY_KG_M3",
    "hardness_index_from_density",
    "density_from_hardness",
    "hardness_index_from_density_array",
    "density_from_hardness_array",
    "parse_hand_hardness",
    "hardness_label",
]

#: Hand-hardness labels and their index, Fierz et al. (2009) [1].
HARDNESS_LABELS: dict[str, int] = {"F": 1, "4F": 2, "1F": 3, "P": 4, "K": 5, "I": 6}

#: A "+" or "-" after a label moves it one third of a step (our convention, see
#: :func:`parse_hand_hardness`).
HARDNESS_MODIFIER_STEP: float = 1.0 / 3.0

#: Linear fits density [kg m-3] = A + B * hardness index, per main grain class, as recalled
#: from Geldsetzer & Jamieson (2000) [2]. [mem, low confidence: verify against the paper].
GELDSETZER2000_FITS: dict[str, tuple[float, float]] = {
    "PP": (45.0, 36.0),
    "DF": (91.0, 35.0),
    "RG": (91.0, 71.0),
    "FC": (112.0, 46.0),
    "DH": (185.0, 25.0),
}

#: Which fit each grain code of GRAIN_CODES uses. Subclasses use their main class
#: (RGxf -> RG; FCxr, FCsf -> FC). SH and MF have no recalled fit of their own: SH uses the
#: FC fit (both kinetic growth forms) and MF the RG fit (both rounded forms) -- our choice,
#: not from [2]. MFcr and IF are handled by the crust and ice rules instead.
_FIT_OF_CODE: dict[str, str] = {
    "PP": "PP",
    "DF": "DF",
    "RG": "RG",
    "RGxf": "RG",
    "FC": "FC",
    "FCxr": "FC",
    "FCsf": "FC",
    "DH": "DH",
    "SH": "FC",
    "MF": "RG",
    "MFcr": "RG",  # only for an observed crust softer than K (see density_from_hardness)
}

#: Hand-hardness range (lowest, highest index) each grain class shows in field profiles:
#: Geldsetzer & Jamieson (2000) [2] and McClung & Schaerer (2006) [4], both [mem]. PP and SH
#: F-4F, DF F-1F, FC and DH F-1F, FCxr (rounding facets, harder) F-P, FCsf (near-surface
#: facets) F-4F, rounded grains 4F-K, melt forms F-K; crusts P-I ([5]; by density below) and
#: ice formations I.
FIELD_HARDNESS_RANGE: dict[str, tuple[float, float]] = {
    "PP": (1.0, 2.0),
    "DF": (1.0, 3.0),
    "RG": (2.0, 5.0),
    "RGxf": (2.0, 5.0),
    "FC": (1.0, 3.0),
    "FCxr": (1.0, 4.0),
    "FCsf": (1.0, 2.0),
    "DH": (1.0, 3.0),
    "SH": (1.0, 2.0),
    "MF": (1.0, 5.0),
    "MFcr": (4.0, 6.0),
    "IF": (6.0, 6.0),
}

#: Density at which a crust is K: the RG fit of [2] evaluated at K (index 5), so a crust is
#: never softer than rounded grains of the same density. Our choice.
CRUST_K_DENSITY_KG_M3: float = GELDSETZER2000_FITS["RG"][0] + 5.0 * GELDSETZER2000_FITS["RG"][1]
#: Density at which a crust counts as ice (I): pore close-off, firn turning to ice [3]. [mem]
CRUST_I_DENSITY_KG_M3: float = 830.0
#: Density of pure ice [kg m-3], used for ice formations (IF) when density is missing.

_N_CODES = len(GRAIN_CODES)
_FIT_A = np.full(_N_CODES, np.nan)
_FIT_B = np.full(_N_CODES, np.nan)
for _code, _fit in _FIT_OF_CODE.items():
    _FIT_A[GRAIN_INDEX[_code]], _FIT_B[GRAIN_INDEX[_code]] = GELDSETZER2000_FITS[_fit]
_RANGE_LO = np.full(_N_CODES, np.nan)
_RANGE_HI = np.full(_N_CODES, np.nan)
for _code, (_lo, _hi) in FIELD_HARDNESS_RANGE.items():
    _RANGE_LO[GRAIN_INDEX[_code]], _RANGE_HI[GRAIN_INDEX[_code]] = _lo, _hi
#: RG fit of [2] as the crusts' rule below K (refrozen melt forms are rounded polycrystals)
_CRUST_A, _CRUST_B = GELDSETZER2000_FITS["RG"]
_MFCR = GRAIN_INDEX["MFcr"]
_IF = GRAIN_INDEX["IF"]
_N_CRUSTS = len(CRUST_KINDS)


@njit(cache=True, nogil=True, error_model="numpy", inline="always")
def hardness_index_from_density(density_kg_m3, grain_code, crust_kind):
    """Hand-hardness index of a layer from its dry density, grain class and crust kind.

    Parameters
    ----------
    density_kg_m3 : float
        Dry density of the layer, ice mass per volume [kg m-3]: the regressions were made on
        dry snow, and the liquid water of a wet layer softens it rather than hardening it.
    grain_code : int
        Index into :data:`regionmap.snow.codes.GRAIN_CODES`.
    crust_kind : int
        Index into :data:`regionmap.snow.codes.CRUST_KINDS` (0 = none).

    Returns
    -------
    float
        Hand-hardness index, F = 1 ... I = 6 (Fierz et al. 2009) [dimensionless]. NaN for an
        unused slot (grain code 0), an unknown code or a NaN density. Never raises.

    Notes
    -----
    * Ice formations (IF) are I (6).
    * Crusts (grain MFcr, or any crust kind other than ``none``), pencil to ice by density
      (Jamieson 2006): the RG fit of Geldsetzer & Jamieson (2000) between P (4) and K (5),
      i.e. P up to 375 kg m-3 and K at :data:`CRUST_K_DENSITY_KG_M3`, then rising linearly
      to I (6) at :data:`CRUST_I_DENSITY_KG_M3` (pore close-off) -- our rule, continuous.
    * Other grain classes invert the fit ``density = A + B * h`` of Geldsetzer & Jamieson
      (2000), ``h = (density - A) / B``, kept inside the grain class's field range
      :data:`FIELD_HARDNESS_RANGE`. Coefficients and ranges recalled, low confidence
      ([mem]; see :data:`GELDSETZER2000_FITS`).

    References
    ----------
    Fierz et al. (2009), IHP-VII Tech. Doc. Hydrol. 83, UNESCO-IHP; Geldsetzer & Jamieson
    (2000), Proc. ISSW 2000, 121-127; McClung & Schaerer (2006), The Avalanche Handbook;
    Jamieson (2006), Rev. Geophys. 44, RG2001.
    """
    invalid = (
        (grain_code <= 0)
        | (grain_code >= _N_CODES)
        | (crust_kind < 0)
        | (crust_kind >= _N_CRUSTS)
        | math.isnan(density_kg_m3)
    )
    # every rule is evaluated and one selected (no branches: the kernel's loop vectorises)
    code = min(max(grain_code, 0), _N_CODES - 1)
    below_k = min(max((density_kg_m3 - _CRUST_A) * (1.0 / _CRUST_B), 4.0), 5.0)
    above_k = max(density_kg_m3 - CRUST_K_DENSITY_KG_M3, 0.0) * (
        1.0 / (CRUST_I_DENSITY_KG_M3 - CRUST_K_DENSITY_KG_M3)
    )
    crust_h = min(below_k + above_k, 6.0)
    fit_h = (density_kg_m3 - _FIT_A[code]) / _FIT_B[code]
    h = (
        6.0
        if grain_code == _IF
        else (
            crust_h
            if (grain_code == _MFCR) | (crust_kind > 0)
            else min(max(fit_h, _RANGE_LO[code]), _RANGE_HI[code])
        )
    )
    return np.nan if invalid else h


@njit(cache=True, nogil=True, error_model="numpy")
def density_from_hardness(hardness_index, grain_code):
    """Layer density estimated from hand hardness and grain class (for observed profiles).

    Parameters
    ----------
    hardness_index : float
        Hand-hardness index, F = 1 ... I = 6 (Fierz et al. 2009), intermediate values
        allowed [dimensionless].
    grain_code : int
        Index into :data:`regionmap.snow.codes.GRAIN_CODES`.

    Returns
    -------
    float
        Density [kg m-3]; NaN for grain code 0 or an unknown code, or a NaN hardness.
        Never raises; callers validate the hardness range (see
        :func:`density_from_hardness_array`).

    Notes
    -----
    * IF: 917 kg m-3 (pure ice), whatever the hardness.
    * MFcr at K or harder: the inverse of the crust rule of
      :func:`hardness_index_from_density`; an observed MFcr softer than K uses the RG fit.
    * Other classes: ``density = A + B * h``, Geldsetzer & Jamieson (2000), linear also
      outside the hardness range the fits were made on. Coefficients recalled, low
      confidence ([mem]; see :data:`GELDSETZER2000_FITS`).

    References
    ----------
    Geldsetzer & Jamieson (2000), Proc. ISSW 2000, 121-127; Fierz et al. (2009).
    """
    if grain_code <= 0 or grain_code >= _N_CODES or math.isnan(hardness_index):
        return np.nan
    if grain_code == _IF:
        return RHO_ICE_KG_M3
    if grain_code == _MFCR and hardness_index >= 5.0:
        return CRUST_K_DENSITY_KG_M3 + (hardness_index - 5.0) * (
            CRUST_I_DENSITY_KG_M3 - CRUST_K_DENSITY_KG_M3
        )
    return _FIT_A[grain_code] + _FIT_B[grain_code] * hardness_index


@njit(cache=True, nogil=True, error_model="numpy")
def _hardness_loop(density, grain, crust, out):
    for i in range(out.size):
        out[i] = hardness_index_from_density(density[i], grain[i], crust[i])


@njit(cache=True, nogil=True, error_model="numpy")
def _density_loop(hardness, grain, out):
    for i in range(out.size):
        out[i] = density_from_hardness(hardness[i], grain[i])


def _check_codes(name: str, codes: np.ndarray, n_valid: int, table: str) -> None:
    bad = (codes < 0) | (codes >= n_valid)
    if bad.any():
        raise InputError(
            f"{name}: expected integer indices 0..{n_valid - 1} into {table}, "
            f"got {codes[bad].ravel()[0].item()!r}; hint: convert code strings with "
            "regionmap.snow.codes first"
        )


def hardness_index_from_density_array(
    density_kg_m3: np.ndarray, grain_code: np.ndarray, crust_kind: np.ndarray
) -> np.ndarray:
    """Vectorised :func:`hardness_index_from_density` (broadcasting) for Python callers.

    Parameters
    ----------
    density_kg_m3 : array_like float
        Density [kg m-3].
    grain_code, crust_kind : array_like int
        Indices into GRAIN_CODES and CRUST_KINDS.

    Returns
    -------
    ndarray float64
        Hand-hardness index [1..6], NaN where the slot is unused (grain code 0).

    Raises
    ------
    InputError
        When a code is outside its table.
    """
    d, g, c = np.broadcast_arrays(
        np.asarray(density_kg_m3, dtype=np.float64),
        np.asarray(grain_code, dtype=np.int64),
        np.asarray(crust_kind, dtype=np.int64),
    )
    _check_codes("grain_code", g, _N_CODES, "GRAIN_CODES")
    _check_codes("crust_kind", c, _N_CRUSTS, "CRUST_KINDS")
    out = np.empty(d.shape, dtype=np.float64)
    _hardness_loop(d.ravel(), g.ravel(), c.ravel(), out.reshape(-1))
    return out


def density_from_hardness_array(
    hardness_index: np.ndarray, grain_code: np.ndarray, *, where: str = "hardness_index"
) -> np.ndarray:
    """Vectorised :func:`density_from_hardness` with input checks, for profile import.

    Parameters
    ----------
    hardness_index : array_like float
        Hand-hardness index; must lie within F- .. I+ (2/3 .. 19/3) [dimensionless].
    grain_code : array_like int
        Indices into GRAIN_CODES; 0 (unused) is not allowed here.
    where : str
        Name of the source (file, column) for error messages.

    Returns
    -------
    ndarray float64
        Density [kg m-3].

    Raises
    ------
    InputError
        For a hardness outside the scale, a NaN hardness, or an unused/unknown grain code.
    """
    h, g = np.broadcast_arrays(
        np.asarray(hardness_index, dtype=np.float64), np.asarray(grain_code, dtype=np.int64)
    )
    lo, hi = 1.0 - HARDNESS_MODIFIER_STEP, 6.0 + HARDNESS_MODIFIER_STEP
    bad = ~((h >= lo - 1e-12) & (h <= hi + 1e-12))
    if bad.any():
        raise InputError(
            f"{where}: expected a hand-hardness index between F- ({lo:.3f}) and I+ ({hi:.3f}), "
            f"got {h[bad].ravel()[0].item()!r}; hint: parse labels with parse_hand_hardness"
        )
    _check_codes(f"{where} grain_code", g, _N_CODES, "GRAIN_CODES")
    if (g == 0).any():
        raise InputError(
            f"{where}: a layer has no grain class (code 0); density from hardness needs the "
            "grain class; hint: give the layer's classification code (e.g. RG, FC)"
        )
    out = np.empty(h.shape, dtype=np.float64)
    _density_loop(h.ravel(), g.ravel(), out.reshape(-1))
    return out


_LABEL_RE = "|".join(sorted(HARDNESS_LABELS, key=len, reverse=True))
_SINGLE = re.compile(rf"^({_LABEL_RE})([+-]?)$")
_RANGE = re.compile(rf"^({_LABEL_RE})-({_LABEL_RE})$")


def parse_hand_hardness(text: str, *, where: str = "hand hardness") -> float:
    """Hand-hardness index from the trade's notation.

    Parameters
    ----------
    text : str
        ``F``, ``4F``, ``1F``, ``P``, ``K``, ``I`` (Fierz et al. 2009: 1..6); an intermediate
        step between two adjacent labels, ``4F-1F`` (either order), is half way (2.5);
        a ``+`` or ``-`` after a single label moves it up or down one third of a step
        (``1F+`` = 3 1/3, ``P-`` = 3 2/3). The one-third convention is ours: the
        classification uses the signs for "slightly harder / softer" without a number.
        Surrounding blanks are ignored; letters are case-insensitive.
    where : str
        Where the value came from (file, layer), for the error message.

    Returns
    -------
    float
        Hand-hardness index [dimensionless], 2/3 (F-) .. 19/3 (I+).

    Raises
    ------
    InputError
        When the text is not in this notation, naming the bad value.
    """
    if not isinstance(text, str):
        raise InputError(
            f"{where}: expected a hand-hardness label such as 'F', '4F-1F' or 'P+', "
            f"got {text!r} of type {type(text).__name__}"
        )
    s = text.strip().upper()
    m = _SINGLE.match(s)
    if m:
        step = {"+": HARDNESS_MODIFIER_STEP, "-": -HARDNESS_MODIFIER_STEP, "": 0.0}[m.group(2)]
        return HARDNESS_LABELS[m.group(1)] + step
    m = _RANGE.match(s)
    if m:
        a, b = HARDNESS_LABELS[m.group(1)], HARDNESS_LABELS[m.group(2)]
        if abs(a - b) == 1:
            return 0.5 * (a + b)
        raise InputError(
            f"{where}: an intermediate hand hardness joins two adjacent labels "
            f"(e.g. '4F-1F'), got {text!r}; hint: use one label or two neighbouring ones"
        )
    raise InputError(
        f"{where}: expected a hand-hardness label F, 4F, 1F, P, K or I, optionally with "
        f"'+'/'-' or as a step such as '4F-1F', got {text!r}"
    )


def hardness_label(index: float) -> str:
    """Nearest main hand-hardness label (F, 4F, 1F, P, K, I) for an index.

    Parameters
    ----------
    index : float
        Hand-hardness index [dimensionless]; values beyond the scale take its end labels.
        Exact half steps round up (2.5 -> ``1F``).

    Returns
    -------
    str
        The label of Fierz et al. (2009).

    Raises
    ------
    InputError
        For a NaN or non-numeric index.
    """
    try:
        x = float(index)
    except (TypeError, ValueError):
        raise InputError(f"hardness_label: expected a number, got {index!r}") from None
    if math.isnan(x):
        raise InputError("hardness_label: expected a finite hand-hardness index, got NaN")
    k = math.floor(min(max(x, 1.0), 6.0) + 0.5)
    return {v: key for key, v in HARDNESS_LABELS.items()}[k]

"""Grain-class and crust-kind codes.

Grain classes are those of the International Classification for Seasonal Snow on the Ground
(Fierz et al. 2009, IHP-VII Technical Documents in Hydrology 83, UNESCO-IHP, Paris): main
classes and the subclasses the column model can tell apart. Inside compiled kernels a layer's
class is the index into :data:`GRAIN_CODES`; files and users only ever see the code strings.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "GRAIN_CODES",
    "GRAIN_INDEX",
    "CRUST_KINDS",
    "CRUST_INDEX",
    "PERSISTENT_CODES",
    "grain_codes_to_strings",
    "grain_strings_to_codes",
    "crust_codes_to_strings",
    "crust_strings_to_codes",
]

#: Index 0 marks an unused layer slot.
GRAIN_CODES: tuple[str, ...] = (
    "",  # 0 unused
    "PP",  # 1 precipitation particles (new snow)
    "DF",  # 2 decomposing and fragmented precipitation particles
    "RG",  # 3 rounded grains
    "RGxf",  # 4 faceted rounded particles
    "FC",  # 5 faceted crystals
    "FCxr",  # 6 rounding faceted particles
    "FCsf",  # 7 near-surface faceted particles
    "DH",  # 8 depth hoar
    "SH",  # 9 surface hoar (buried)
    "MF",  # 10 melt forms
    "MFcr",  # 11 melt-freeze crust
    "IF",  # 12 ice formations (glaze, ice lens)
)
GRAIN_INDEX: dict[str, int] = {c: i for i, c in enumerate(GRAIN_CODES)}

CRUST_KINDS: tuple[str, ...] = ("none", "melt-freeze", "sun", "rain", "glaze")
CRUST_INDEX: dict[str, int] = {c: i for i, c in enumerate(CRUST_KINDS)}

#: Persistent grain types (weak layers that can stay reactive for weeks).
PERSISTENT_CODES: tuple[str, ...] = ("FC", "FCxr", "FCsf", "DH", "SH")


def grain_codes_to_strings(codes: np.ndarray) -> np.ndarray:
    """Map integer grain indices to their classification code strings (``""`` for unused)."""
    return np.asarray(GRAIN_CODES, dtype=object)[np.asarray(codes, dtype=np.intp)]


def grain_strings_to_codes(strings: np.ndarray) -> np.ndarray:
    """Map classification code strings back to integer grain indices.

    Raises
    ------
    KeyError
        When a string is not one of :data:`GRAIN_CODES`.
    """
    flat = np.asarray(strings, dtype=object).ravel()
    out = np.fromiter((GRAIN_INDEX[str(s)] for s in flat), dtype=np.int8, count=flat.size)
    return out.reshape(np.shape(strings))


def crust_codes_to_strings(codes: np.ndarray) -> np.ndarray:
    """Map integer crust indices to crust-kind strings."""
    return np.asarray(CRUST_KINDS, dtype=object)[np.asarray(codes, dtype=np.intp)]


def crust_strings_to_codes(strings: np.ndarray) -> np.ndarray:
    """Map crust-kind strings back to integer indices (``""`` counts as ``none``)."""
    flat = np.asarray(strings, dtype=object).ravel()
    out = np.fromiter((CRUST_INDEX[str(s) or "none"] for s in flat), dtype=np.int8, count=flat.size)
    return out.reshape(np.shape(strings))

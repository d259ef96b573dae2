"""Elevation-aspect roses the report's page draws itself, from compact embedded data.

A rose shows one quantity of one zone by elevation band (rings, highest band in the centre)
and aspect sector (clockwise from north at the top), like
:func:`regionmap.plots.overview.plot_overview`, but it is not drawn here: each band ×
aspect value is reduced to the index of its colour class — one character — and the report's
script turns the characters into SVG in the browser. A zone's rose for a layer of concern is
then a few dozen bytes, so every layer of every zone can have one in a report of a large
region, at no drawing cost when the report is written.

Colour classes are fixed physical scales where the quantity has one (shares 0–100 %, counts
of 0–6) and otherwise robust ones: equal steps up to a rounded 98th percentile of the band ×
aspect values of all zones, the last class open-ended, so that one outlier does not wash
out the rest. Each quantity has its own sequential ramp from the ColorBrewer schemes of
Harrower & Brewer (2003), single- or two-hue ramps whose lightness falls monotonically and
stay readable for the common colour-vision deficiencies; none runs through green, yellow,
orange and red, so no rose reads as a danger rating.

References
----------
.. [1] Harrower, M. & Brewer, C. A. (2003). ColorBrewer.org: an online tool for selecting
   colour schemes for maps. The Cartographic Journal 40(1), 27–37,
   doi:10.1179/000870403235002042. (The schemes as matplotlib ships them.)
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from regionmap.plots.style import METRIC_RAMPS, robust_top

__all__ = [
    "RoseScale",
    "ROSE_SCALES",
    "robust_scale",
    "presence_scale",
    "encode_classes",
    "zone_grid",
    "NO_TERRAIN",
]

#: character of a band × aspect without terrain in the zone (drawn hatched).
NO_TERRAIN = "."
#: character of a band × aspect with terrain but no value (e.g. no weak layer: drawn blank).
NO_VALUE = "-"
_DIGITS = "0123456789abcdefghijklmnopqrstuvwxyz"


@dataclass(frozen=True)
class RoseScale:
    """Colour classes of one quantity: ``edges`` (n + 1 class limits, printed units; the
    last class is open-ended when ``open_top``), ``colours`` (n hex colours), ``units``."""

    name: str
    label: str
    units: str
    edges: tuple[float, ...]
    colours: tuple[str, ...]
    open_top: bool = False
    decimals: int = 0

    def labels(self) -> list[str]:
        e = [f"{v:.{self.decimals}f}" for v in self.edges]
        out = [f"{e[k]}–{e[k + 1]}" for k in range(len(self.colours))]
        if self.open_top:
            out[-1] = f"≥ {e[-2]}"
        return out

    def classes(self, values: np.ndarray) -> np.ndarray:
        """Class index of each value (int; -1 where NaN)."""
        v = np.asarray(values, dtype=np.float64)
        k = np.clip(
            np.searchsorted(np.asarray(self.edges[1:-1]), v, side="right"), 0, len(self.colours) - 1
        )
        return np.where(np.isfinite(v), k, -1)

    def as_dict(self) -> dict:
        return {
            "label": self.label,
            "units": self.units,
            "colours": list(self.colours),
            "labels": self.labels(),
        }


def _ramp(cmap_name: str, n: int) -> tuple[str, ...]:
    """``n`` colours of a matplotlib ColorBrewer ramp, from its light end (skipping the
    near-white first tenth, so the lowest class stays visible on white)."""
    from matplotlib import colormaps
    from matplotlib.colors import to_hex

    cmap = colormaps[cmap_name]
    return tuple(to_hex(cmap(x)) for x in np.linspace(0.15, 1.0, n))


def presence_scale(
    name: str = "presence", label: str = "share of the terrain with the layer"
) -> RoseScale:
    """Shares 0–100 % in ten classes of 10 % (ColorBrewer Purples)."""
    return RoseScale(name, label, "%", tuple(np.arange(0, 101, 10.0)), _ramp("Purples", 10))


def robust_scale(
    name: str, label: str, units: str, values, cmap_name: str, *, n: int = 8
) -> RoseScale:
    """``n`` equal classes from 0 to a rounded high percentile of ``values``
    (:func:`regionmap.plots.style.robust_top`; NaN ignored), the last one open-ended."""
    top = robust_top(values)
    edges = tuple(np.linspace(0.0, top, n + 1))
    decimals = 0 if top / n >= 1 else 1
    return RoseScale(
        name, label, units, edges, _ramp(cmap_name, n), open_top=True, decimals=decimals
    )


#: the quantities drawn as roses per zone: (band_aspect.csv column, label, units, factor to
#: the printed units, fixed class edges or None for a robust scale); the ramp of each is
#: :data:`regionmap.plots.style.METRIC_RAMPS`.
ROSE_SCALES: tuple[tuple, ...] = (
    ("pwl_fraction", "persistent weak layer of concern", "%", 100.0, tuple(range(0, 101, 10))),
    ("depth_hoar_fraction", "depth hoar present", "%", 100.0, tuple(range(0, 101, 10))),
    ("pwl_depth_cm", "depth of the uppermost persistent weak layer of concern", "cm", 1.0, None),
    ("new_snow_72h_cm", "new snow, three observation days", "cm", 1.0, None),
    ("snow_depth_cm", "snow depth", "cm", 1.0, None),
    ("crust_count_mean", "crusts in the column (mean)", "count", 1.0, tuple(range(0, 7))),
)


def metric_scales(band_aspect: pd.DataFrame) -> dict[str, tuple[RoseScale, float]]:
    """The :data:`ROSE_SCALES` the band × aspect table has, each with its factor."""
    out = {}
    for col, label, units, factor, fixed in ROSE_SCALES:
        if col not in band_aspect.columns:
            continue
        ramp = METRIC_RAMPS[col]
        if fixed is not None:
            edges = tuple(float(e) for e in fixed)
            scale = RoseScale(col, label, units, edges, _ramp(ramp, len(edges) - 1))
        else:
            values = band_aspect[col].to_numpy(np.float64) * factor
            scale = robust_scale(col, label, units, values, ramp)
        out[col] = (scale, factor)
    return out


def zone_grid(
    band_aspect: pd.DataFrame, cells: pd.DataFrame, sectors: list[str]
) -> dict[str, dict]:
    """Per zone: its bands (highest first, from the highest to the lowest band with weighted
    terrain) and the sector order (compass sectors of the run, then ``flat`` when the zone
    has weighted flat terrain).

    Parameters
    ----------
    band_aspect : ``band_aspect.csv`` rows of one weighting (``zone``, ``band_lower_m``,
        ``aspect_sector``, ``area_km2`` = weighted area; rows without terrain may be absent).
    cells : the cell table (``zone``, ``band_lower_m``, ``band_upper_m``): the bands.
    sectors : compass sectors of the run in clockwise order.
    """
    grids = {}
    has = band_aspect[band_aspect["area_km2"] > 0]
    bands_all = cells[["zone", "band_lower_m", "band_upper_m"]].drop_duplicates()
    for zone, z in has.groupby("zone", sort=True):
        lo, hi = z["band_lower_m"].min(), z["band_lower_m"].max()
        b = bands_all[bands_all["zone"] == zone]
        b = b[(b["band_lower_m"] >= lo) & (b["band_lower_m"] <= hi)]
        b = b.sort_values("band_lower_m", ascending=False)
        order = list(sectors) + (["flat"] if (z["aspect_sector"] == "flat").any() else [])
        grids[zone] = {
            "band_lower_m": b["band_lower_m"].to_numpy(),
            "band_upper_m": b["band_upper_m"].to_numpy(),
            "sectors": order,
        }
    return grids


def encode_classes(classes: np.ndarray, terrain: np.ndarray) -> str:
    """One character per band × aspect (band-major): the class index in base 36,
    :data:`NO_VALUE` where the class is -1, :data:`NO_TERRAIN` where there is no terrain."""
    k = np.asarray(classes).ravel()
    chars = np.asarray(list(_DIGITS), dtype="<U1")[np.clip(k, 0, len(_DIGITS) - 1)]
    chars = np.where(k < 0, NO_VALUE, chars)
    chars = np.where(np.asarray(terrain).ravel(), chars, NO_TERRAIN)
    return "".join(chars.tolist())


def grid_values(rows: pd.DataFrame, grid: dict, column: str, *, fill: float = np.nan) -> np.ndarray:
    """(band, sector) array of ``rows[column]`` on a zone's grid (``fill`` where no row)."""
    bands = pd.Index(grid["band_lower_m"])
    sectors = pd.Index(grid["sectors"])
    out = np.full((bands.size, sectors.size), fill, dtype=np.float64)
    b = bands.get_indexer(rows["band_lower_m"].to_numpy())
    s = sectors.get_indexer(rows["aspect_sector"].to_numpy())
    ok = (b >= 0) & (s >= 0)
    out[b[ok], s[ok]] = rows[column].to_numpy(np.float64)[ok]
    return out

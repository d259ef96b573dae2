"""Observed snow profiles: CAAML v6 XML and regionmap's own CSV profile format.

Both readers return an :class:`ObservedProfile`: layers bottom first, in metres and SI
units, ready to replace a cell's snow column at the observation time (restart).

CAAML v6 (SnowProfileIOP, namespace ``http://caaml.org/Schemas/SnowProfileIOP/v6.0.3``) is
parsed with defusedxml: DTDs, entity declarations and external references are refused, so
nothing is expanded and nothing is fetched. Elements read (namespace prefix omitted)::

    SnowProfile/timeRef/recordTime/TimeInstant/timePosition             required
    SnowProfile/snowProfileResultsOf/SnowProfileMeasurements[@dir]      "top down" | "bottom up"
      profileDepth, snowPackCond/hS/Components/height                   optional (checks)
      weathercond/airTempPres                                           optional
      stratProfile/Layer: depthTop, thickness, grainFormPrimary,
                          grainSize/Components/avg, hardness            required
                          density, wetness                              optional
      tempProfile/Obs: depth, snowTemp                                  optional
      densityProfile/Layer: depthTop, thickness, density                optional

Our reading of the depth convention: with ``dir="top down"`` (the default) ``depthTop`` is
the depth of the layer's upper boundary below the snow surface; with ``dir="bottom up"`` it
is the *height of the layer's upper boundary above the ground*, and temperature-observation
``depth`` values are heights above the ground. A ``dir`` attribute on ``stratProfile``,
``tempProfile`` or ``densityProfile`` overrides the one of ``SnowProfileMeasurements``.
Lengths are read with their ``uom`` (``mm``, ``cm``, ``m``; default ``cm``), temperatures in
degC, densities in kg m-3.

Rules for what a profile does not state (documented in ``docs/profile_csv.md``):

* **Density** missing → from hand hardness and grain class, Geldsetzer & Jamieson (2000),
  via :func:`regionmap.snow.hardness.density_from_hardness_array`.
* **Temperature** missing → linear in depth between the observed points, the surface and
  0 °C at the ground. The surface takes the shallowest observed snow temperature; without any
  snow temperature, the observed air temperature capped at 0 °C; without that, 0 °C.
* **Wetness** (Fierz et al. 2009: D dry, M moist, W wet, V very wet, S soaked) → volumetric
  liquid water content at the class midpoint (:data:`WETNESS_LIQUID_FRAC`); an intermediate
  class such as ``M-W`` takes the mean of its two classes; missing = dry. A wet layer
  (anything but D) is at 0 °C whatever its thermometer said.
* **Grain subclasses** the column model does not carry (``FCso``, ``DHcp``, ``SHsu``,
  ``DFdc``, ``PPgp``, …) become their main class; ``RGxf``, ``FCxr``, ``FCsf``, ``MFcr`` are
  kept.

References
----------
.. [1] Fierz, C. et al. (2009). The International Classification for Seasonal Snow on the
   Ground. IHP-VII Technical Documents in Hydrology 83, UNESCO-IHP, Paris.
.. [2] Geldsetzer, T. and Jamieson, J. B. (2000). Estimating dry snow density from grain
   form and hand hardness. Proc. International Snow Science Workshop 2000, 121-127.
.. [3] CAAML: Canadian Avalanche Association Markup Language, SnowProfileIOP v6.0.3 schema,
   http://caaml.org/Schemas/SnowProfileIOP/v6.0.3 (open standard).
"""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET
from dataclasses import dataclass
from pathlib import Path

import defusedxml
import defusedxml.ElementTree as DET
import numpy as np
import pandas as pd

from regionmap.constants import RHO_ICE_KG_M3, RHO_WATER_KG_M3, T_MELT_K
from regionmap.errors import InputError
from regionmap.io.stations import _read_csv_lines
from regionmap.io.times import utc_datetime64
from regionmap.snow.codes import GRAIN_CODES, GRAIN_INDEX
from regionmap.snow.hardness import density_from_hardness_array, parse_hand_hardness

__all__ = [
    "CAAML_NAMESPACE",
    "WETNESS_LIQUID_FRAC",
    "ObservedProfile",
    "read_profile",
    "read_caaml_profile",
    "read_csv_profile",
]

CAAML_NAMESPACE = "http://caaml.org/Schemas/SnowProfileIOP/v6.0.3"
_NS_PREFIX = "http://caaml.org/Schemas/SnowProfileIOP/v6"

#: Volumetric liquid water content per wetness class [1]: midpoints of the ranges of
#: Fierz et al. (2009), Table 3.4 (dry 0; moist 0-3 %; wet 3-8 %; very wet 8-15 %; soaked
#: > 15 %). Soaked has no upper bound; 17.5 % is our choice (15 % plus half the width of the
#: class below).
WETNESS_LIQUID_FRAC: dict[str, float] = {"D": 0.0, "M": 0.015, "W": 0.055, "V": 0.115, "S": 0.175}

_GAP_TOLERANCE_M = 0.005
_LENGTH_M = {"mm": 1e-3, "cm": 1e-2, "m": 1.0, "": 1e-2}


@dataclass(frozen=True)
class ObservedProfile:
    """An observed snow profile, layers bottom first, SI units.

    Attributes
    ----------
    time : numpy.datetime64
        Observation time, UTC, seconds.
    source : str
        File the profile came from.
    thickness_m : ndarray (layer,) float64 [m]
    density_kg_m3 : ndarray (layer,) float64
        Bulk density, ice plus liquid [kg m-3].
    grain_code : ndarray (layer,) object
        Grain-class codes of :data:`regionmap.snow.codes.GRAIN_CODES` (``"FC"``, ``"MFcr"`` …).
    grain_size_mm : ndarray (layer,) float64 [mm]
    hardness_index : ndarray (layer,) float64
        Hand-hardness index, F = 1 … I = 6 [1].
    temperature_k : ndarray (layer,) float64 [K]
    liquid_frac : ndarray (layer,) float64
        Volumetric liquid water content [1].
    density_estimated : ndarray (layer,) bool
        True where density came from hardness and grain class.
    temperature_interpolated : ndarray (layer,) bool
        True where temperature was interpolated (or set to 0 °C for a wet layer).
    name : str
        Location name when the file gives one.
    """

    time: np.datetime64
    source: str
    thickness_m: np.ndarray
    density_kg_m3: np.ndarray
    grain_code: np.ndarray
    grain_size_mm: np.ndarray
    hardness_index: np.ndarray
    temperature_k: np.ndarray
    liquid_frac: np.ndarray
    density_estimated: np.ndarray
    temperature_interpolated: np.ndarray
    name: str = ""

    @property
    def n_layers(self) -> int:
        return int(self.thickness_m.size)

    @property
    def snow_depth_m(self) -> float:
        """Total snow depth [m]."""
        return float(self.thickness_m.sum())

    def liquid_kg_m2(self) -> np.ndarray:
        """Liquid water per layer, θw ρw h [kg m-2]."""
        return self.liquid_frac * RHO_WATER_KG_M3 * self.thickness_m

    def ice_kg_m2(self) -> np.ndarray:
        """Ice per layer, ρ h − liquid [kg m-2]."""
        return self.density_kg_m3 * self.thickness_m - self.liquid_kg_m2()


def read_profile(path: str | Path) -> ObservedProfile:
    """Read an observed profile: ``.xml``/``.caaml`` as CAAML v6, ``.csv`` as our CSV format.

    Raises
    ------
    InputError
        For another suffix, or any problem the format readers find.
    """
    path = Path(path)
    suffix = path.suffix.lower()
    if suffix in (".xml", ".caaml"):
        return read_caaml_profile(path)
    if suffix == ".csv":
        return read_csv_profile(path)
    raise InputError(
        f"Profile file {path}: unknown suffix {path.suffix!r}; expected .xml or .caaml "
        "(CAAML v6) or .csv (docs/profile_csv.md)."
    )


def _grain_code(text: str, where: str) -> str:
    """Classification code → one of GRAIN_CODES (subclasses the model lacks → main class)."""
    code = text.strip()
    if code in GRAIN_INDEX and code:
        return code
    main = code[:2]
    if re.fullmatch(r"[A-Z]{2}[a-z]{2}", code) and main in GRAIN_INDEX and main not in ("",):
        return main
    raise InputError(
        f"{where}: unknown grain class {text!r}; expected a code of the international "
        f"classification such as {', '.join(c for c in GRAIN_CODES if c)} (subclasses like "
        "FCso become their main class); machine-made snow (MM) is not supported."
    )


def _liquid_frac(text: str, where: str) -> float:
    s = text.strip().upper()
    if s == "":
        return 0.0
    if s in WETNESS_LIQUID_FRAC:
        return WETNESS_LIQUID_FRAC[s]
    parts = s.split("-")
    order = list(WETNESS_LIQUID_FRAC)
    if (
        len(parts) == 2
        and all(p in WETNESS_LIQUID_FRAC for p in parts)
        and abs(order.index(parts[0]) - order.index(parts[1])) == 1
    ):
        return 0.5 * (WETNESS_LIQUID_FRAC[parts[0]] + WETNESS_LIQUID_FRAC[parts[1]])
    raise InputError(
        f"{where}: unknown wetness {text!r}; expected D, M, W, V or S (Fierz et al. 2009) or "
        "two neighbours such as 'M-W'."
    )


def _build_profile(
    *,
    source: Path,
    time: np.datetime64,
    bottom_m: np.ndarray,
    top_m: np.ndarray,
    grain: list[str],
    grain_size_mm: np.ndarray,
    hardness: np.ndarray,
    density: np.ndarray,
    liquid: np.ndarray,
    layer_temp_k: np.ndarray,
    temp_height_m: np.ndarray,
    temp_k: np.ndarray,
    air_temp_k: float,
    snow_depth_m: float,
    where: list[str],
    name: str = "",
) -> ObservedProfile:
    """Shared checks and rules: order bottom first, contiguity, density and temperature."""
    order = np.argsort(bottom_m, kind="stable")
    bottom_m, top_m = bottom_m[order], top_m[order]
    grain = [grain[i] for i in order]
    where = [where[i] for i in order]
    grain_size_mm, hardness, density, liquid, layer_temp_k = (
        a[order] for a in (grain_size_mm, hardness, density, liquid, layer_temp_k)
    )
    _check_ranges(top_m, bottom_m, grain_size_mm, where)
    thickness = top_m - bottom_m
    if np.any(thickness <= 0):
        i = int(np.flatnonzero(thickness <= 0)[0])
        raise InputError(
            f"{where[i]}: the layer has no positive thickness ({thickness[i] * 100:.1f} cm)."
        )
    if abs(bottom_m[0]) > _GAP_TOLERANCE_M:
        raise InputError(
            f"{source}: the profile does not reach the ground (lowest layer starts "
            f"{bottom_m[0] * 100:.1f} cm above it); a restart needs the whole snowpack, so add "
            "the unobserved basal part as a layer with your best description."
        )
    joints = bottom_m[1:] - top_m[:-1]
    bad = np.flatnonzero(np.abs(joints) > _GAP_TOLERANCE_M)
    if bad.size:
        i = int(bad[0])
        kind = "gap" if joints[i] > 0 else "overlap"
        raise InputError(
            f"{source}: layers leave a {kind} of {abs(joints[i]) * 100:.1f} cm at "
            f"{top_m[i] * 100:.1f} cm above the ground ({where[i]} and {where[i + 1]}); layers "
            "must follow each other without gaps or overlaps."
        )
    total = float(top_m[-1])
    if np.isfinite(snow_depth_m) and abs(total - snow_depth_m) > _GAP_TOLERANCE_M:
        raise InputError(
            f"{source}: the layers add up to {total * 100:.1f} cm but the profile states a snow "
            f"depth of {snow_depth_m * 100:.1f} cm; a restart needs layers down to the ground."
        )
    codes = np.array([GRAIN_INDEX[g] for g in grain], dtype=np.int64)
    if np.isinf(density).any():
        i = int(np.flatnonzero(np.isinf(density))[0])
        raise InputError(f"{where[i]}: density {density[i]:g} kg m-3; expected (0, 917] or empty.")
    estimated = np.isnan(density)
    if estimated.any():
        idx = np.flatnonzero(estimated)
        density = density.copy()
        density[idx] = density_from_hardness_array(
            hardness[idx], codes[idx], where=f"{source} (density from hardness)"
        )
    ice_volume = (density - liquid * RHO_WATER_KG_M3) / RHO_ICE_KG_M3
    bad = (
        (density <= 0)
        | (density > RHO_ICE_KG_M3)
        | (ice_volume < 0)
        | (ice_volume + liquid > 1.0 + 1e-9)
    )
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(
            f"{where[i]}: density {density[i]:.0f} kg m-3 and liquid water {liquid[i] * 100:.1f} % "
            "by volume are inconsistent (density must lie in (0, 917] and hold the liquid)."
        )
    # temperatures: observed points (depth below surface) + surface rule + 0 degC at ground
    mid_depth = total - 0.5 * (bottom_m + top_m)
    known = np.isfinite(layer_temp_k)
    z_pts = np.concatenate([total - temp_height_m, mid_depth[known]])
    t_pts = np.concatenate([temp_k, layer_temp_k[known]])
    if z_pts.size:
        surface = t_pts[np.argmin(z_pts)]
    elif np.isfinite(air_temp_k):
        surface = min(air_temp_k, T_MELT_K)
    else:
        surface = T_MELT_K
    z_all = np.concatenate([[0.0], z_pts, [total]])
    t_all = np.concatenate([[surface], t_pts, [T_MELT_K]])
    sort = np.argsort(z_all, kind="stable")
    temperature = np.where(known, layer_temp_k, np.interp(mid_depth, z_all[sort], t_all[sort]))
    interpolated = ~known
    wet = liquid > 0
    interpolated |= wet & (temperature != T_MELT_K)
    temperature = np.where(wet, T_MELT_K, temperature)
    return ObservedProfile(
        time=time,
        source=str(source),
        thickness_m=thickness,
        density_kg_m3=density,
        grain_code=np.array(grain, dtype=object),
        grain_size_mm=grain_size_mm,
        hardness_index=hardness,
        temperature_k=temperature,
        liquid_frac=liquid,
        density_estimated=estimated,
        temperature_interpolated=interpolated,
        name=name,
    )


#: No seasonal snowpack reaches this depth; deeper layer boundaries are unit mix-ups
#: (cm read as m, or mm as cm) or typing errors.
MAX_SNOW_DEPTH_M = 20.0
#: Larger grains are not snow grains (depth hoar and surface hoar stay below a few cm).
MAX_GRAIN_SIZE_MM = 100.0


def _check_ranges(top_m, bottom_m, grain_size_mm, where: list[str]) -> None:
    """Refuse layer boundaries that are not finite or lie outside 0 .. 20 m, and grain sizes
    that are infinite, negative or above 100 mm (a missing size, NaN, is allowed)."""
    for name, values in (("top", top_m), ("bottom", bottom_m)):
        with np.errstate(invalid="ignore"):
            bad = ~((values >= -_GAP_TOLERANCE_M) & (values <= MAX_SNOW_DEPTH_M))
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(
                f"{where[i]}: the layer's {name} lies at {values[i]:g} m above the ground; "
                f"expected 0 to {MAX_SNOW_DEPTH_M:g} m (a unit mix-up, cm written as m?)."
            )
    with np.errstate(invalid="ignore"):
        bad = ~np.isnan(grain_size_mm) & ~(
            (grain_size_mm >= 0) & (grain_size_mm <= MAX_GRAIN_SIZE_MM)
        )
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise InputError(
            f"{where[i]}: grain size {grain_size_mm[i]:g} mm; expected 0 to "
            f"{MAX_GRAIN_SIZE_MM:g} mm (or leave it empty)."
        )


def _check_temperature(t_k: np.ndarray, where: str) -> None:
    bad = np.isfinite(t_k) & ((t_k > T_MELT_K) | (t_k < T_MELT_K - 70.0))
    if bad.any():
        raise InputError(
            f"{where}: snow temperature {t_k[bad][0] - T_MELT_K:.1f} °C is outside -70 … 0 °C; "
            "snow cannot be warmer than 0 °C (enter 0 for wet snow)."
        )


# ---------------------------------------------------------------------------------- CAAML
class _Caaml:
    """Small helpers around one parsed CAAML document."""

    def __init__(self, root: ET.Element, path: Path):
        self.path = path
        self.ns = root.tag[1:].split("}")[0] if root.tag.startswith("{") else ""
        self.root = root

    def q(self, path: str) -> str:
        return "/".join(f"{{{self.ns}}}{p}" for p in path.split("/"))

    def find(self, node: ET.Element, path: str) -> ET.Element | None:
        return node.find(self.q(path))

    def text(self, node: ET.Element, path: str) -> str | None:
        el = self.find(node, path)
        return None if el is None or el.text is None or not el.text.strip() else el.text.strip()

    def number(self, node: ET.Element, path: str, where: str, *, required: bool) -> float:
        text = self.text(node, path)
        if text is None:
            if required:
                raise InputError(f"{where}: required element {path!r} is missing or empty.")
            return np.nan
        try:
            return float(text)
        except ValueError:
            raise InputError(
                f"{where}: element {path!r} should be a number, got {text!r}."
            ) from None

    def length_m(
        self, node: ET.Element, path: str, where: str, *, required: bool, uom: str | None = None
    ) -> float:
        value = self.number(node, path, where, required=required)
        el = self.find(node, path)
        unit = uom if uom is not None else (el.get("uom", "cm") if el is not None else "cm")
        if unit not in _LENGTH_M:
            raise InputError(f"{where}: element {path!r} has unit {unit!r}; expected mm, cm or m.")
        return value * _LENGTH_M[unit]


def _direction(element: ET.Element | None, default: str, where: str) -> str:
    value = default if element is None else element.get("dir", default)
    if value not in ("top down", "bottom up"):
        raise InputError(
            f"{where}: attribute dir must be 'top down' or 'bottom up', got {value!r}."
        )
    return value


def read_caaml_profile(path: str | Path) -> ObservedProfile:
    """Read a CAAML v6 SnowProfileIOP file (defusedxml: no entities, no DTD, no network).

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    ObservedProfile

    Raises
    ------
    InputError
        Malformed XML, a DTD or entity declaration, a root element or namespace that is not
        CAAML v6 SnowProfile, a missing required element (time, layers, depthTop, thickness,
        grainFormPrimary, grainSize avg, hardness), bad values, or layers that do not cover
        the snowpack from the ground up.
    """
    path = Path(path)
    try:
        data = path.read_bytes()
    except FileNotFoundError:
        raise InputError(f"Profile file {path} does not exist; check the path.") from None
    try:
        root = DET.fromstring(data, forbid_dtd=True, forbid_entities=True, forbid_external=True)
    except defusedxml.DefusedXmlException as exc:
        raise InputError(
            f"Profile file {path}: refused XML with a DTD, entity declaration or external "
            f"reference ({type(exc).__name__}); CAAML profiles need none — remove the "
            "<!DOCTYPE …> block."
        ) from None
    except ET.ParseError as exc:
        raise InputError(
            f"Profile file {path}: malformed XML ({exc}); is the file complete?"
        ) from None
    doc = _Caaml(root, path)
    if not doc.ns.startswith(_NS_PREFIX) or root.tag != f"{{{doc.ns}}}SnowProfile":
        raise InputError(
            f"Profile file {path}: root element is {root.tag!r}; expected SnowProfile in the "
            f"CAAML v6 namespace {CAAML_NAMESPACE!r}."
        )
    time_text = doc.text(root, "timeRef/recordTime/TimeInstant/timePosition")
    if time_text is None:
        raise InputError(
            f"Profile file {path}: required element timeRef/recordTime/TimeInstant/timePosition "
            "(the observation time) is missing."
        )
    time = utc_datetime64(time_text, f"Profile file {path}, timePosition")
    meas = doc.find(root, "snowProfileResultsOf/SnowProfileMeasurements")
    if meas is None:
        raise InputError(
            f"Profile file {path}: required element snowProfileResultsOf/SnowProfileMeasurements "
            "is missing."
        )
    default_dir = _direction(meas, "top down", f"Profile file {path}, SnowProfileMeasurements")
    strat = doc.find(meas, "stratProfile")
    layers = [] if strat is None else strat.findall(doc.q("Layer"))
    if not layers:
        raise InputError(
            f"Profile file {path}: required element stratProfile with at least one Layer is "
            "missing."
        )
    strat_dir = _direction(strat, default_dir, f"Profile file {path}, stratProfile")
    hs = doc.length_m(
        meas, "snowPackCond/hS/Components/height", f"Profile file {path}", required=False
    )
    profile_depth = doc.length_m(meas, "profileDepth", f"Profile file {path}", required=False)
    air_c = doc.number(meas, "weathercond/airTempPres", f"Profile file {path}", required=False)
    n = len(layers)
    pos, thick = np.empty(n), np.empty(n)
    size, hard, rho, liquid = np.empty(n), np.empty(n), np.empty(n), np.empty(n)
    grain, where = [], []
    for i, layer in enumerate(layers):  # layers of one file, read once
        w = f"Profile file {path}, layer {i + 1}"
        where.append(w)
        pos[i] = doc.length_m(layer, "depthTop", w, required=True)
        thick[i] = doc.length_m(layer, "thickness", w, required=True)
        g = doc.text(layer, "grainFormPrimary")
        if g is None:
            raise InputError(f"{w}: required element 'grainFormPrimary' is missing or empty.")
        grain.append(_grain_code(g, w))
        size_el = doc.find(layer, "grainSize")
        size_unit = size_el.get("uom", "mm") if size_el is not None else "mm"
        size[i] = (
            doc.length_m(layer, "grainSize/Components/avg", w, required=True, uom=size_unit) * 1e3
        )
        h = doc.text(layer, "hardness")
        if h is None:
            raise InputError(f"{w}: required element 'hardness' is missing or empty.")
        hard[i] = parse_hand_hardness(h, where=f"{w}, hardness")
        rho[i] = doc.number(layer, "density", w, required=False)
        liquid[i] = _liquid_frac(doc.text(layer, "wetness") or "", f"{w}, wetness")
    if strat_dir == "top down":
        total = (
            hs
            if np.isfinite(hs)
            else (profile_depth if np.isfinite(profile_depth) else float(np.max(pos + thick)))
        )
        top = total - pos
    else:
        total = hs if np.isfinite(hs) else float(np.max(pos))
        top = pos
    if (
        strat_dir == "top down"
        and np.isfinite(profile_depth)
        and profile_depth < total - _GAP_TOLERANCE_M
    ):
        raise InputError(
            f"Profile file {path}: profileDepth {profile_depth * 100:.1f} cm is less than the snow "
            f"depth {total * 100:.1f} cm; a restart needs a profile down to the ground."
        )
    temp_height, temp_k = _caaml_temperatures(doc, meas, default_dir, total)
    density_profile = doc.find(meas, "densityProfile")
    if density_profile is not None:
        rho = _fill_from_density_profile(
            doc, density_profile, default_dir, total, top - thick, top, rho
        )
    return _build_profile(
        source=path,
        time=time,
        bottom_m=top - thick,
        top_m=top,
        grain=grain,
        grain_size_mm=size,
        hardness=hard,
        density=rho,
        liquid=liquid,
        layer_temp_k=np.full(n, np.nan),
        temp_height_m=temp_height,
        temp_k=temp_k,
        air_temp_k=air_c + T_MELT_K,
        snow_depth_m=total,
        where=where,
        name=doc.text(root, "locRef/name") or "",
    )


def _caaml_temperatures(doc: _Caaml, meas: ET.Element, default_dir: str, total_m: float):
    """Temperature observations as (height above ground [m], temperature [K])."""
    prof = doc.find(meas, "tempProfile")
    if prof is None:
        return np.empty(0), np.empty(0)
    where = f"Profile file {doc.path}, tempProfile"
    direction = _direction(prof, default_dir, where)
    unit = prof.get("uomDepth", "cm")
    if unit not in _LENGTH_M:
        raise InputError(f"{where}: uomDepth {unit!r}; expected mm, cm or m.")
    if prof.get("uomTemp", "degC") != "degC":
        raise InputError(f"{where}: uomTemp {prof.get('uomTemp')!r}; expected 'degC'.")
    obs = prof.findall(doc.q("Obs"))
    depth = np.array(
        [doc.number(o, "depth", f"{where}, Obs {k + 1}", required=True) for k, o in enumerate(obs)]
    )
    temp_c = np.array(
        [
            doc.number(o, "snowTemp", f"{where}, Obs {k + 1}", required=True)
            for k, o in enumerate(obs)
        ]
    )
    depth_m = depth * _LENGTH_M[unit]
    height = total_m - depth_m if direction == "top down" else depth_m
    if np.any(height < -_GAP_TOLERANCE_M) or np.any(height > total_m + _GAP_TOLERANCE_M):
        raise InputError(
            f"{where}: a temperature observation lies outside the snowpack (0 … "
            f"{total_m * 100:.1f} cm)."
        )
    temp_k = temp_c + T_MELT_K
    _check_temperature(temp_k, where)
    return height, temp_k


def _fill_from_density_profile(doc, prof, default_dir, total_m, bottom_m, top_m, rho):
    """Fill missing layer densities from a densityProfile (overlap-weighted mean)."""
    where = f"Profile file {doc.path}, densityProfile"
    direction = _direction(prof, default_dir, where)
    rows = prof.findall(doc.q("Layer"))
    rho = rho.copy()
    if not rows:
        return rho
    pos = np.array(
        [
            doc.length_m(r, "depthTop", f"{where}, Layer {k + 1}", required=True)
            for k, r in enumerate(rows)
        ]
    )
    th = np.array(
        [
            doc.length_m(r, "thickness", f"{where}, Layer {k + 1}", required=True)
            for k, r in enumerate(rows)
        ]
    )
    val = np.array(
        [
            doc.number(r, "density", f"{where}, Layer {k + 1}", required=True)
            for k, r in enumerate(rows)
        ]
    )
    d_top = total_m - pos if direction == "top down" else pos
    d_bot = d_top - th
    overlap = np.clip(
        np.minimum(top_m[:, None], d_top[None, :]) - np.maximum(bottom_m[:, None], d_bot[None, :]),
        0.0,
        None,
    )
    weight = overlap.sum(axis=1)
    mean = np.where(
        weight > 0, (overlap * val[None, :]).sum(axis=1) / np.where(weight > 0, weight, 1.0), np.nan
    )
    return np.where(np.isfinite(rho), rho, mean)


# ------------------------------------------------------------------------------------ CSV
_CSV_REQUIRED = ("top_cm", "bottom_cm", "grain_class", "grain_size_mm", "hardness")
_CSV_OPTIONAL = ("density_kg_m3", "temperature_degC", "wetness")
_META_RE = re.compile(r"^\s*#\s*(time|air_temperature_degC|name)\s*:\s*(.*?)\s*$")


def read_csv_profile(path: str | Path) -> ObservedProfile:
    """Read a profile in regionmap's CSV format (``docs/profile_csv.md``).

    Returns
    -------
    ObservedProfile

    Raises
    ------
    InputError
        Missing ``# time:`` line or required column, unknown column, bad numbers, grain
        classes, hardness or wetness, or layers that do not cover the snowpack — naming the
        file, line and column.
    """
    path = Path(path)
    table, lines = _read_csv_lines(path, "Profile")
    meta = {}
    for line in path.read_text(encoding="utf-8-sig").splitlines():
        m = _META_RE.match(line)
        if m:
            meta[m.group(1)] = m.group(2)
    if "time" not in meta:
        raise InputError(
            f"Profile file {path}: the observation time is missing; add a line "
            "'# time: 2026-02-10T09:30Z' above the header."
        )
    time = utc_datetime64(meta["time"], f"Profile file {path}, '# time:' line")
    air_k = np.nan
    if "air_temperature_degC" in meta:
        try:
            air_k = float(meta["air_temperature_degC"]) + T_MELT_K
        except ValueError:
            raise InputError(
                f"Profile file {path}, '# air_temperature_degC:' line: expected a number, got "
                f"{meta['air_temperature_degC']!r}."
            ) from None
    missing = [c for c in _CSV_REQUIRED if c not in table.columns]
    unknown = [c for c in table.columns if c not in _CSV_REQUIRED + _CSV_OPTIONAL]
    if missing or unknown:
        raise InputError(
            f"Profile file {path}: header must hold {list(_CSV_REQUIRED)} and optionally "
            f"{list(_CSV_OPTIONAL)}; missing {missing}, unknown {unknown}."
        )
    if table.empty:
        raise InputError(f"Profile file {path}: no layer rows.")
    where = [f"{path}, line {ln}" for ln in lines]

    def numbers(column: str, required: bool) -> np.ndarray:
        if column not in table.columns:
            return np.full(len(table), np.nan)
        text = table[column].str.strip()
        values = pd.to_numeric(text.where(text != ""), errors="coerce").to_numpy(dtype=np.float64)
        bad = np.isnan(values) & ((text != "").to_numpy() | required)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise InputError(
                f"{where[i]}, column '{column}': expected a number, got {text.iloc[i]!r}."
            )
        return values

    top = numbers("top_cm", True) / 100.0
    bottom = numbers("bottom_cm", True) / 100.0
    size = numbers("grain_size_mm", True)
    rho = numbers("density_kg_m3", False)
    layer_t = numbers("temperature_degC", False) + T_MELT_K
    _check_temperature(layer_t, f"Profile file {path}, column 'temperature_degC'")
    if np.any(size < 0):
        i = int(np.flatnonzero(size < 0)[0])
        raise InputError(f"{where[i]}, column 'grain_size_mm': expected a size ≥ 0, got {size[i]}.")
    grain = [
        _grain_code(g, f"{w}, column 'grain_class'")
        for g, w in zip(table["grain_class"], where, strict=True)
    ]
    hard = np.array(
        [
            parse_hand_hardness(h, where=f"{w}, column 'hardness'")
            for h, w in zip(table["hardness"], where, strict=True)
        ]
    )
    wet_text = table["wetness"] if "wetness" in table.columns else [""] * len(table)
    liquid = np.array(
        [_liquid_frac(t, f"{w}, column 'wetness'") for t, w in zip(wet_text, where, strict=True)]
    )
    return _build_profile(
        source=path,
        time=time,
        bottom_m=bottom,
        top_m=top,
        grain=grain,
        grain_size_mm=size,
        hardness=hard,
        density=rho,
        liquid=liquid,
        layer_temp_k=layer_t,
        temp_height_m=np.empty(0),
        temp_k=np.empty(0),
        air_temp_k=air_k,
        snow_depth_m=np.nan,
        where=where,
        name=meta.get("name", ""),
    )

"""Unit handling and the small conversions the forcing reader needs.

Units are parsed with pint through cf_xarray's CF-aware registry; the two gaps the design
notes (``degree_C`` spellings, and depth of water ↔ mass per area) are handled here
explicitly, never guessed. Every conversion is affine (``value * scale + offset``), so the
reader can apply it lazily and exactly.

Wind helpers (plain NumPy, float64): :func:`wind_from_components`,
:func:`components_from_wind`.
"""

from __future__ import annotations

import re

import numpy as np

from regionmap.constants import RHO_WATER_KG_M3

__all__ = [
    "normalise_units",
    "affine_conversion",
    "wind_from_components",
    "components_from_wind",
]

_CELSIUS = re.compile(r"^\s*(deg(ree)?s?[ _]?c(elsius)?|°\s?c|c(elsius)?)\s*$", re.IGNORECASE)


class UnitsProblem(ValueError):
    """Raised by :func:`affine_conversion`; the reader re-raises it with file and variable."""


def normalise_units(units: str) -> str:
    """Spell a CF units string so pint understands it.

    CF allows ``degree_C``, ``degrees_C``, ``degC``, ``Celsius`` (UDUNITS spellings) that
    cf_xarray's registry does not all know; they become ``degC``. ``%`` becomes ``percent``.
    """
    text = str(units).strip()
    if _CELSIUS.match(text):
        return "degC"
    if text == "%":
        return "percent"
    return text


_UREG = None


def _registry():
    """cf_xarray's CF-aware pint registry, without letting it replace pint's application
    registry (importing ``cf_xarray.units`` does that, which breaks MetPy quantities made
    before it)."""
    global _UREG
    if _UREG is None:
        import pint

        previous = pint.get_application_registry().get()
        from cf_xarray.units import units as ureg

        pint.set_application_registry(previous)
        _UREG = ureg
    return _UREG


def _quantity(values, units: str):
    ureg = _registry()
    try:
        return ureg.Quantity(np.asarray(values, dtype=np.float64), normalise_units(units))
    except Exception as exc:  # pint raises several unrelated types for bad strings
        raise UnitsProblem(
            f"units {units!r} are not understood ({type(exc).__name__}: {exc})"
        ) from None


def affine_conversion(units: str, target: str) -> tuple[float, float]:
    """Return ``(scale, offset)`` with ``value_target = value * scale + offset``.

    Parameters
    ----------
    units : str
        The file's units string (CF / UDUNITS spelling).
    target : str
        The canonical units, e.g. ``"K"``, ``"kg m-2"``, ``"kg m-2 s-1"``.

    Notes
    -----
    A depth of liquid water (``mm``, ``m``) converts to mass per area, and a depth rate
    (``mm h-1``, ``m s-1`` of water) to a mass flux, through the density of water
    ``RHO_WATER_KG_M3`` = 1000 kg m-3, explicitly: pint alone cannot know that the
    length is a water-equivalent thickness.

    Raises
    ------
    UnitsProblem
        Units not parseable, or not convertible to ``target``.
    """
    ureg = _registry()
    src = _quantity([0.0, 1.0], units)
    dst_units = ureg.Unit(normalise_units(target))
    mass_per_area = ureg.Unit("kg m-2").dimensionality
    if dst_units.dimensionality in (mass_per_area, (ureg.Unit("kg m-2 s-1")).dimensionality):
        water = ureg.Quantity(RHO_WATER_KG_M3, "kg m-3")
        if (src * water).dimensionality == dst_units.dimensionality:
            src = src * water
    try:
        out = src.to(dst_units).magnitude
    except Exception:
        raise UnitsProblem(
            f"units {units!r} ({src.dimensionality}) cannot be converted to {target!r} "
            f"({dst_units.dimensionality})"
        ) from None
    offset = float(out[0])
    return float(out[1] - out[0]), offset


def wind_from_components(u_m_s, v_m_s):
    """Speed [m s-1] and meteorological direction the wind blows *from* [deg, 0 = N].

    direction = atan2(-u, -v) mod 360 (WMO convention; calm air gets 0).
    """
    u = np.asarray(u_m_s, dtype=np.float64)
    v = np.asarray(v_m_s, dtype=np.float64)
    speed = np.hypot(u, v)
    direction = np.mod(np.degrees(np.arctan2(-u, -v)), 360.0)
    return speed, np.where(speed > 0, direction, 0.0)


def components_from_wind(speed_m_s, from_direction_deg):
    """Eastward and northward components [m s-1] of a wind blowing from a direction."""
    rad = np.radians(np.asarray(from_direction_deg, dtype=np.float64))
    speed = np.asarray(speed_m_s, dtype=np.float64)
    return -speed * np.sin(rad), -speed * np.cos(rad)

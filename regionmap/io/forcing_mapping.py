"""The ``[forcing.variables]`` mapping: which file variables give a standard quantity, and how.

A mapping entry names one variable or several that are summed (``name = ["RAINNC",
"RAINC"]``), and may say what the values are when the file does not: ``units``, ``kind``
(``"instantaneous"``, ``"mean"`` or ``"sum"`` over the interval that ends at the label),
``accumulated`` (summed since a reference time), ``mixing_ratio`` (a humidity given as
water-vapour mixing ratio, mapped under ``specific_humidity``) and ``rotation`` (two variables
holding the cosine and sine of the angle between the grid's y axis and true north, for winds
given relative to the grid). An explicit entry always wins over a variable found by its
``standard_name`` and over a product's own defaults (:mod:`regionmap.io.forcing_products`).
"""

from __future__ import annotations

import xarray as xr

from regionmap.errors import ConfigError, ForcingReadError
from regionmap.io import units as U

__all__ = [
    "MAPPING_KEYS",
    "KINDS",
    "normalise_mapping",
    "mapped_variable",
    "names_of",
    "ranked_alternatives",
    "with_kind",
    "PRODUCT_KEY",
]

MAPPING_KEYS = ("name", "units", "kind", "accumulated", "mixing_ratio", "rotation")
KINDS = {"instantaneous": "point", "mean": "mean", "sum": "sum"}
"""Mapping ``kind`` -> the CF cell method over time it stands for."""

# a flux and the time integral of the same quantity (CF standard names)
_FLUX_AMOUNT = {
    "precipitation_flux": "precipitation_amount",
    "lwe_precipitation_rate": "lwe_thickness_of_precipitation_amount",
    "surface_downwelling_shortwave_flux_in_air": (
        "integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air"
    ),
    "surface_downwelling_longwave_flux_in_air": (
        "integral_wrt_time_of_surface_downwelling_longwave_flux_in_air"
    ),
}
_AMOUNT_FLUX = {v: k for k, v in _FLUX_AMOUNT.items()}
_WIND_PAIR = {"eastward_wind": "northward_wind", "northward_wind": "eastward_wind"}
PRODUCT_KEY = "_product"
"""Marks an entry that a product reader supplied (an explicit entry ranks above it)."""


def names_of(entry) -> list[str]:
    """The file variable names of a mapping entry (one or several to be summed)."""
    name = entry["name"]
    return [name] if isinstance(name, str) else list(name)


def normalise_mapping(variables, targets, implied=None) -> dict:
    """Plain dicts per standard name; a product's ``implied`` entries under explicit ones.

    Raises
    ------
    ConfigError
        An unknown standard name or field, an entry without ``name``, or options that do not
        fit the quantity (``mixing_ratio`` other than on ``specific_humidity``, ``rotation``
        other than on both wind components alike, ``kind`` not among :data:`KINDS`).
    """
    out = {k: dict(v) for k, v in (implied or {}).items()}
    for key, entry in dict(variables or {}).items():
        if not isinstance(entry, dict):
            entry = {k: getattr(entry, k) for k in MAPPING_KEYS if hasattr(entry, k)}
        entry = {k: v for k, v in entry.items() if v is not None and v is not False}
        unknown = set(entry) - set(MAPPING_KEYS)
        if key not in targets or unknown or "name" not in entry:
            raise ConfigError(
                f"[forcing] variables.{key}: expected a key among {sorted(targets)} with fields "
                f"name (required), {', '.join(MAPPING_KEYS[1:])}; got {entry!r}"
            )
        out[key] = entry
    for key, entry in out.items():
        if entry.get("kind") is not None and entry["kind"] not in KINDS:
            raise ConfigError(
                f"[forcing] variables.{key}.kind = {entry['kind']!r}: expected one of "
                f"{sorted(KINDS)}"
            )
        if entry.get("mixing_ratio") and key != "specific_humidity":
            raise ConfigError(
                f"[forcing] variables.{key}.mixing_ratio: a mixing ratio is mapped under "
                f"specific_humidity (it is converted to q = w / (1 + w))"
            )
        if entry.get("rotation"):
            pair = _WIND_PAIR.get(key)
            if pair is None or out.get(pair, {}).get("rotation") != entry["rotation"]:
                raise ConfigError(
                    f"[forcing] variables.{key}.rotation: grid-relative winds are rotated as a "
                    f"pair: map both eastward_wind and northward_wind with the same rotation = "
                    f"[cosine, sine]"
                )
            if len(entry["rotation"]) != 2:
                raise ConfigError(
                    f"[forcing] variables.{key}.rotation: expected two variable names "
                    f"[cosine, sine], got {entry['rotation']!r}"
                )
    return out


def ranked_alternatives(alternatives, mapping):
    """Alternatives of a role ordered so that explicit entries come first, then a product's
    entries, then (unmapped) standard names."""

    def rank(alt):
        entries = [mapping.get(sn) for sn in alt]
        if all(e is not None and PRODUCT_KEY not in e for e in entries):
            return 0
        if all(e is not None for e in entries):
            return 1
        return 2

    return sorted(alternatives, key=rank)


def _variable(ds, name, key, path, entry):
    if name not in ds.variables:
        named = (
            f"(used for {key} in {entry[PRODUCT_KEY]} output)"
            if PRODUCT_KEY in entry
            else f"named in [forcing] variables.{key}"
        )
        raise ForcingReadError(
            f"forcing file {path!r}: variable {name!r} {named} is missing; found "
            f"{sorted(ds.data_vars)}; hint: map {key} in [forcing] variables"
        )
    return ds[name]


def _summed(ds, sn, entry, path):
    names = names_of(entry)
    parts = [_variable(ds, n, sn, path, entry) for n in names]
    units = {str(p.attrs.get("units")) for p in parts}
    if len(units) > 1 and not entry.get("units"):
        raise ForcingReadError(
            f"forcing file {path!r}: variables {names} summed for [forcing] variables.{sn} have "
            f"different units {sorted(units)}; expected the same units"
        )
    total = parts[0]
    for p in parts[1:]:
        total = total + p
    return total.rename("+".join(names)).assign_attrs(
        {k: v for k, v in parts[0].attrs.items() if k != "standard_name"}
    )


def mapped_variable(ds: xr.Dataset, sn: str, mapping: dict, path: str) -> xr.DataArray:
    """The (lazy) variable that mapping entry ``sn`` describes in ``ds``: names summed, winds
    rotated to earth-relative, a mixing ratio turned into specific humidity.

    Grid-relative components (u, v) become earth-relative with the local angle α between the
    grid's y axis and north: u_e = u cos α − v sin α, v_e = v cos α + u sin α (a plane
    rotation by α; the convention of WRF's COSALPHA/SINALPHA as WRF post-processing applies
    it, e.g. the xwrf package 0.0.5, ``postprocess._calc_base_diagnostics``).
    """
    entry = mapping[sn]
    var = _summed(ds, sn, entry, path)
    if entry.get("rotation"):
        other = _summed(ds, _WIND_PAIR[sn], mapping[_WIND_PAIR[sn]], path)
        cos, sin = (_variable(ds, n, sn, path, entry) for n in entry["rotation"])
        if sn == "eastward_wind":
            rotated = var * cos - other * sin
        else:
            rotated = var * cos + other * sin
        var = rotated.transpose(*var.dims).rename(var.name).assign_attrs(var.attrs)
    if entry.get("mixing_ratio"):
        units = entry.get("units") or var.attrs.get("units", "1")
        try:
            scale, offset = U.affine_conversion(units, "1")
        except U.UnitsProblem as exc:
            raise ForcingReadError(
                f"forcing file {path!r}, variable {var.name!r} (mixing ratio): {exc}"
            ) from None
        w = var * scale + offset
        var = (w / (1.0 + w)).rename(var.name).assign_attrs({**var.attrs, "units": "1"})
    return var


def with_kind(sn: str, entry: dict, units: str, target_of) -> str:
    """The standard name a mapped variable is read as, given its declared ``kind`` or units:
    an interval ``sum`` of a flux is the flux's time integral, a ``mean`` of an amount is the
    flux, and units that convert only to the other one (J m-2 for a shortwave flux) say which."""
    kind = entry.get("kind")
    if kind == "sum" and sn in _FLUX_AMOUNT:
        return _FLUX_AMOUNT[sn]
    if kind in ("mean", "instantaneous") and sn in _AMOUNT_FLUX:
        return _AMOUNT_FLUX[sn]
    other = _FLUX_AMOUNT.get(sn) or _AMOUNT_FLUX.get(sn)
    if other is None or kind is not None or not units:
        return sn
    for name in (sn, other):
        try:
            U.affine_conversion(units, target_of[name])
            return name
        except U.UnitsProblem:
            continue
    return sn

"""ERA5 single-level fields as the Copernicus climate data store delivers them in NetCDF.

Two layouts are in use: the older one (``time``, ``latitude``, ``longitude``; packed int16;
preliminary ERA5T data on an extra ``expver`` dimension where a request spans both) and the
current one (``valid_time``, with ``expver`` and ``number`` as coordinates). Both have
latitude descending and longitude 0–360, which the grid reader handles as such. The
variables keep ECMWF's short names without CF standard names, so this module says what they
are (ECMWF, ERA5 documentation, parameter table of the single-level fields; Hersbach et al.
2020, QJRMS 146, 1999–2049, doi:10.1002/qj.3803): accumulations (``tp`` in m, ``ssrd``/``strd``
in J m-2) are sums over the hour that ends at the valid time; the others are instantaneous.
"""

from __future__ import annotations

import xarray as xr

from regionmap.io.forcing_mapping import PRODUCT_KEY

__all__ = ["is_era5", "era5_dataset", "era5_mapping"]

# short name -> (standard name, mapping options)
_FIELDS = {
    "t2m": ("air_temperature", {}),
    "d2m": ("dew_point_temperature", {}),
    "u10": ("eastward_wind", {}),
    "v10": ("northward_wind", {}),
    "sp": ("surface_air_pressure", {}),
    "tp": ("precipitation_amount", {"kind": "sum"}),
    "ssrd": ("integral_wrt_time_of_surface_downwelling_shortwave_flux_in_air", {"kind": "sum"}),
    "strd": ("integral_wrt_time_of_surface_downwelling_longwave_flux_in_air", {"kind": "sum"}),
    "z": ("surface_geopotential", {}),
}
_CF_NAMED = {"air_temperature", "dew_point_temperature", "eastward_wind", "northward_wind"}


def is_era5(ds: xr.Dataset) -> bool:
    """ECMWF short names on a ``latitude``/``longitude`` grid, without CF standard names."""
    if not {"latitude", "longitude"} <= set(ds.coords):
        return False
    names = [n for n in _FIELDS if n in ds.data_vars]
    named = [n for n in names if ds[n].attrs.get("standard_name", "unknown") in _CF_NAMED]
    return (len(names) >= 2 and not named) or names == ["z"]


def era5_dataset(ds: xr.Dataset) -> xr.Dataset:
    """The fields on one time axis: an ``expver`` dimension (final ERA5 and preliminary ERA5T
    side by side, each NaN where the other holds data) is combined into one series."""
    if "expver" in ds.dims:
        parts = [ds.isel(expver=k, drop=True) for k in range(ds.sizes["expver"])]
        combined = parts[0]
        for part in parts[1:]:
            combined = combined.fillna(part)
        ds = combined.assign_attrs(ds.attrs)
    return ds


def era5_mapping(ds: xr.Dataset) -> dict:
    """Mapping entries for the ERA5 fields present in ``ds``."""
    return {
        sn: {"name": name, **opts, PRODUCT_KEY: "ERA5"}
        for name, (sn, opts) in _FIELDS.items()
        if name in ds.data_vars
    }

"""Forcing files as products distribute them, brought to the CF layout the reader works on.

Recognised without a mapping in the config: WRF ARW history output
(:mod:`~regionmap.io.forcing_wrf`), GRIB 1/2 (:mod:`~regionmap.io.forcing_grib`), ERA5
NetCDF from the climate data store (:mod:`~regionmap.io.forcing_era5`), and forecast cycles
on a reference-time × lead-time axis (:mod:`~regionmap.io.forcing_cycles`). Each gives the
reader datasets on valid time plus mapping entries for its variables; entries in
``[forcing.variables]`` rank above them. Plain CF files pass through unchanged.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from regionmap.errors import ForcingReadError
from regionmap.io import forcing_era5, forcing_grib, forcing_wrf
from regionmap.io.forcing_cycles import split_cycles

__all__ = ["Opened", "open_products"]


@dataclass
class Opened:
    """Datasets on valid time in the order the reader takes them (later ones win), a label
    per dataset for messages, the products' mapping entries and the products' names."""

    datasets: list
    paths: list[str]
    implied: dict
    products: set[str]


def open_products(paths, open_netcdf) -> Opened:
    """Open each path (GRIB by its first bytes, else ``open_netcdf(path)``) and bring the
    products among them to datasets on valid time."""
    datasets, labels, implied, products = [], [], {}, set()
    for p in paths:
        if forcing_grib.is_grib(p):
            ds, entries = forcing_grib.open_grib(p)
            _merge(implied, entries)
            products.add("GRIB")
        else:
            ds = open_netcdf(p)
        datasets.append(ds)
        labels.append(p)
    wrf = [forcing_wrf.is_wrf(ds) for ds in datasets]
    if any(wrf):
        if not all(wrf):
            other = labels[wrf.index(False)]
            raise ForcingReadError(
                f"forcing {other!r}: not WRF output among WRF files {labels[wrf.index(True)]!r}; "
                f"expected files of one kind in [forcing] path"
            )
        datasets, labels, entries = forcing_wrf.wrf_runs(datasets, labels)
        _merge(implied, entries)
        products.add("WRF")
    for k, ds in enumerate(datasets):
        if forcing_era5.is_era5(ds):
            datasets[k] = forcing_era5.era5_dataset(ds)
            _merge(implied, forcing_era5.era5_mapping(datasets[k]))
            products.add("ERA5")
    return _cycles(Opened(datasets, labels, implied, products))


def _merge(implied, entries):
    for sn, entry in entries.items():
        implied.setdefault(sn, entry)


def _cycles(opened: Opened) -> Opened:
    """Cycles split out and ordered by reference time (stable: a later file wins a tie)."""
    items = []
    for order, (ds, label) in enumerate(zip(opened.datasets, opened.paths, strict=True)):
        cycles = split_cycles(ds, label)
        if cycles is None:
            items.append((None, order, ds, label))
            continue
        opened.products.add("forecast cycles")
        for ref, one in cycles:
            items.append((ref, order, one, f"{label} (cycle {np.datetime_as_string(ref)})"))
    if any(ref is not None for ref, *_ in items):
        if any(ref is None for ref, *_ in items):
            raise ForcingReadError(
                f"forcing {opened.paths[0]!r}: forecast cycles mixed with files on valid time "
                f"only; expected one layout in [forcing] path"
            )
        items.sort(key=lambda item: (item[0], item[1]))
    opened.datasets = [ds for _, _, ds, _ in items]
    opened.paths = [label for *_, label in items]
    return opened

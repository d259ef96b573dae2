"""One exception family for regionmap.

Every error a user can cause derives from :class:`RegionmapError`; the CLI turns it into one
line on stderr and exit status 2. Classes also inherit the matching built-in (as rasterio's
``RasterioIOError`` is an ``OSError``) so callers can catch either.

Messages say what went wrong, where (file, variable or config key), what was expected, what
came, and, where there is one, the fix.
"""

from __future__ import annotations

import warnings

__all__ = [
    "RegionmapError",
    "InputError",
    "ConfigError",
    "GridMismatchError",
    "ForcingReadError",
    "ConvergenceError",
    "OutputError",
    "ClusterError",
    "RegionmapWarning",
    "warn",
]


class RegionmapError(Exception):
    """Root of all regionmap errors caused by input or environment (exit status 2)."""


class InputError(RegionmapError, ValueError):
    """An input file or value is malformed, out of range or inconsistent."""


class ConfigError(InputError):
    """The TOML configuration is invalid (unknown key, wrong type or range, missing file)."""


class GridMismatchError(RegionmapError, ValueError):
    """Two grids (DEM, forcing, state, cells) do not line up or do not cover each other."""


class ForcingReadError(RegionmapError, OSError):
    """A forcing file cannot be opened or read."""


class ConvergenceError(RegionmapError, RuntimeError):
    """An iterative solution did not converge where the caller required it."""


class OutputError(RegionmapError, OSError):
    """An output location cannot be written (not a regionmap folder, locked, no space)."""


class ClusterError(RegionmapError, RuntimeError):
    """The dask cluster lost the run's tasks (workers died, none came, the scheduler went)."""


class RegionmapWarning(UserWarning):
    """Something was repaired or approximated; the run goes on."""


def warn(message: str, stacklevel: int = 2) -> None:
    """Issue a :class:`RegionmapWarning` attributed to the caller's line."""
    warnings.warn(message, RegionmapWarning, stacklevel=stacklevel + 1)

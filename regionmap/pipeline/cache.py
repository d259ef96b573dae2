"""A cache of region preparations: terrain, cells with their sunlit tables, interpolation weights.

Preparing a region (terrain layers, cells, sunlit-fraction tables, the forcing grid's
interpolation weights) costs seconds to minutes and gives the same result every morning. It is
kept in a user cache folder under a key that fingerprints everything that shapes it:

* the bytes of the DEM and the zones files (SHA-256), the zone field and layer;
* the ``[terrain]`` and ``[cells]`` settings as the preparation receives them;
* the regionmap version and the source code of the preparation (the ``terrain``, ``cells``,
  DEM and zone readers and the weights' modules), so that an edited method never meets a
  stale entry;
* for the weights, also the forcing grid (its coordinates, CRS and shape) and the
  ``[downscale]`` interpolation settings.

Entries are pickles written atomically (temporary file, then rename). An entry that cannot be
read is prepared again and replaced. When the folder holds more than ``max_bytes`` the least
recently used entries are deleted. The folder is ``[run] cache_dir``, else
``$REGIONMAP_CACHE_DIR``, else ``$XDG_CACHE_HOME/regionmap``, else ``~/.cache/regionmap``;
deleting it clears the cache. Pickles run code when loaded: the cache is for the user's own
folder, never for files from elsewhere.
"""

from __future__ import annotations

import contextlib
import dataclasses
import hashlib
import json
import os
import pickle
import warnings
from pathlib import Path

import numpy as np
from pydantic import BaseModel

from regionmap import __version__
from regionmap.errors import OutputError, RegionmapWarning
from regionmap.io.atomic import atomic_path

__all__ = [
    "CACHE_MAX_BYTES",
    "PreparationCache",
    "default_cache_dir",
    "file_sha256",
    "preparation_cache",
]

#: the folder is pruned to this size, least recently used entries first
CACHE_MAX_BYTES = 8 * 2**30
#: raised when the layout of what is cached changes
_FORMAT = 1
_PACKAGE = Path(__file__).resolve().parent.parent
#: the code whose results are cached (relative to the package)
_PREPARATION_CODE = (
    "cells.py",
    "terrain",
    "io/dem.py",
    "io/zones.py",
    "downscale/weights.py",
    "downscale/pipeline.py",
    "pipeline/region.py",
)


def default_cache_dir() -> Path:
    """``$REGIONMAP_CACHE_DIR``, else ``$XDG_CACHE_HOME/regionmap``, else ``~/.cache/regionmap``."""
    if os.environ.get("REGIONMAP_CACHE_DIR"):
        return Path(os.environ["REGIONMAP_CACHE_DIR"]).expanduser()
    base = os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache"
    return Path(base).expanduser() / "regionmap"


def preparation_cache(cfg) -> PreparationCache:
    """The cache in ``[run] cache_dir``, else in :func:`default_cache_dir`."""
    return PreparationCache(cfg.run.cache_dir or default_cache_dir())


def file_sha256(path: str | os.PathLike) -> str:
    """SHA-256 of a file's bytes (hex)."""
    digest = hashlib.sha256()
    with open(path, "rb") as f:
        for block in iter(lambda: f.read(1 << 22), b""):
            digest.update(block)
    return digest.hexdigest()


def _code_fingerprint() -> str:
    digest = hashlib.sha256()
    for name in _PREPARATION_CODE:
        path = _PACKAGE / name
        for f in sorted(path.rglob("*.py")) if path.is_dir() else [path]:
            digest.update(f.relative_to(_PACKAGE).as_posix().encode())
            digest.update(f.read_bytes())
    return digest.hexdigest()


def _plain(value):
    """Settings as JSON-able values (settings sections, dataclasses, tuples, arrays, paths)."""
    if isinstance(value, BaseModel):
        return _plain(value.model_dump())
    if dataclasses.is_dataclass(value):
        return {f.name: _plain(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return hashlib.sha256(np.ascontiguousarray(value).tobytes()).hexdigest()
    return value if isinstance(value, (str, int, float, bool, type(None))) else repr(value)


def _key(parts: dict) -> str:
    text = json.dumps(parts, sort_keys=True, default=repr)
    return hashlib.sha256(text.encode()).hexdigest()[:32]


class PreparationCache:
    """Region preparations kept on disk (see the module text).

    Parameters
    ----------
    folder : the cache folder (created when first written).
    max_bytes : prune the folder to this size after each write.
    """

    def __init__(self, folder: str | os.PathLike, *, max_bytes: int = CACHE_MAX_BYTES):
        self.folder = Path(folder).expanduser()
        self.max_bytes = int(max_bytes)

    # ------------------------------------------------------------------ keys
    def region_key(self, cfg) -> str:
        """Key of a region's terrain and cells: input files, ``[terrain]`` and ``[cells]``,
        version, code."""
        r = cfg.region
        return _key(
            {
                "format": _FORMAT,
                "regionmap": __version__,
                "code": _code_fingerprint(),
                "dem_sha256": file_sha256(r.dem),
                "zones_sha256": file_sha256(r.zones),
                "zone_field": r.zone_field,
                "zone_layer": r.zone_layer,
                "terrain": _plain(cfg.terrain),
                "cells": _plain(cfg.cells),
            }
        )

    @staticmethod
    def weights_key(region_key: str, grid_forcing, downscale_settings) -> str:
        """Key of the interpolation weights: the region's key, the forcing grid's geometry and
        the interpolation settings."""
        grid = grid_forcing.grid
        return _key(
            {
                "region": region_key,
                "lon": _plain(np.asarray(grid.lon)),
                "lat": _plain(np.asarray(grid.lat)),
                "crs": str(getattr(grid.crs, "to_wkt", lambda: grid.crs)()),
                "shape": list(np.shape(grid_forcing.surface_altitude)),
                "interpolation": downscale_settings.interpolation,
                "lapse_radius": downscale_settings.grid_lapse_radius,
            }
        )

    # ------------------------------------------------------------------ entries
    def path(self, kind: str, key: str) -> Path:
        return self.folder / f"{kind}-{key}.pickle"

    def load(self, kind: str, key: str):
        """The cached object, or None when absent or unreadable (then it is deleted)."""
        path = self.path(kind, key)
        try:
            with open(path, "rb") as f:
                value = pickle.load(f)
        except FileNotFoundError:
            return None
        except Exception as exc:  # truncated, from an incompatible library: prepare again
            warnings.warn(
                f"region cache: {path} could not be read ({type(exc).__name__}); preparing again",
                RegionmapWarning,
                stacklevel=2,
            )
            with contextlib.suppress(OSError):
                path.unlink()
            return None
        with contextlib.suppress(OSError):
            os.utime(path)  # most recently used
        return value

    def save(self, kind: str, key: str, value) -> Path | None:
        """Store ``value`` atomically, then prune; None (with a warning) when the folder
        cannot be written: the run goes on without the cache."""
        path = self.path(kind, key)
        try:
            with atomic_path(path) as tmp, open(tmp, "wb") as f:
                pickle.dump(value, f, protocol=pickle.HIGHEST_PROTOCOL)
        except (OSError, OutputError) as exc:
            warnings.warn(
                f"region cache: cannot write {path} ({exc}); running without the cache",
                RegionmapWarning,
                stacklevel=2,
            )
            return None
        self.prune(keep=path)
        return path

    def entries(self) -> list[Path]:
        return sorted(self.folder.glob("*-*.pickle")) if self.folder.is_dir() else []

    def prune(self, *, keep: Path | None = None) -> list[Path]:
        """Delete the least recently used entries until the folder is within ``max_bytes``
        (``keep`` is never deleted). Returns the deleted files."""
        entries = []
        for p in self.entries():
            with contextlib.suppress(OSError):
                st = p.stat()
                entries.append((st.st_mtime, st.st_size, p))
        total = sum(size for _, size, _ in entries)
        deleted = []
        for _, size, p in sorted(entries):
            if total <= self.max_bytes:
                break
            if p == keep:
                continue
            with contextlib.suppress(OSError):
                p.unlink()
                deleted.append(p)
                total -= size
        return deleted

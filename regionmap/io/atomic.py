"""Atomic file writes: write beside the target, then rename over it.

An interrupted write leaves the previous file untouched and at most a hidden temporary file
(``.<name>.<random>.tmp<suffix>``, the suffix kept so GDAL picks the right driver) that the
next write of the same target removes.
"""

from __future__ import annotations

import contextlib
import errno
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path

from regionmap.errors import OutputError

__all__ = ["atomic_path", "atomic_write_text", "is_no_space", "no_space_error", "disk_errors"]

_UMASK = os.umask(0)
os.umask(_UMASK)


def _clean_leftovers(target: Path) -> None:
    for old in target.parent.glob(f".{target.name}.*.tmp{target.suffix}"):
        with contextlib.suppress(OSError):
            old.unlink()


def is_no_space(exc: BaseException | None) -> bool:
    """True when ``exc`` or one of its causes reports a full disk (``ENOSPC``/``EDQUOT``, or
    the "No space left on device" text that HDF5 and GDAL put in their own errors)."""
    seen = set()
    while exc is not None and id(exc) not in seen:
        seen.add(id(exc))
        if isinstance(exc, OSError) and exc.errno in (errno.ENOSPC, errno.EDQUOT):
            return True
        if "no space left on device" in str(exc).lower():
            return True
        exc = exc.__cause__ or exc.__context__
    return False


def no_space_error(path) -> OutputError:
    """The one-line error for a full disk while writing ``path``."""
    return OutputError(
        f"no space left on device while writing {path}; free some space or choose another "
        "--out (the previous output is unchanged)"
    )


@contextlib.contextmanager
def disk_errors(path: str | os.PathLike) -> Iterator[None]:
    """Turn a full disk while writing ``path`` into :class:`OutputError` (one line)."""
    try:
        yield
    except OutputError:
        raise
    except Exception as exc:
        if is_no_space(exc):
            raise no_space_error(path) from None
        raise


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike) -> Iterator[Path]:
    """Yield a temporary path in the target's folder; rename it onto ``path`` on success.

    On any exception the temporary file is removed and the old ``path`` (if any) is kept.

    Raises
    ------
    OutputError
        When the target folder cannot be created or written.
    """
    target = Path(path)
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        _clean_leftovers(target)
        fd, tmp_name = tempfile.mkstemp(
            prefix=f".{target.name}.", suffix=f".tmp{target.suffix}", dir=target.parent
        )
        os.close(fd)
        os.chmod(tmp_name, 0o666 & ~_UMASK)  # mkstemp makes 0600; outputs are shared files
    except OSError as exc:
        if is_no_space(exc):
            raise no_space_error(target) from None
        raise OutputError(f"cannot write {target}: {exc.strerror or exc}") from exc
    tmp = Path(tmp_name)
    try:
        yield tmp
        if not tmp.exists():
            raise OutputError(f"writing {target}: the writer produced no file")
        os.replace(tmp, target)
    except BaseException as exc:
        with contextlib.suppress(OSError):
            tmp.unlink()
        if not isinstance(exc, OutputError) and is_no_space(exc):
            raise no_space_error(target) from None
        raise


def atomic_write_text(path: str | os.PathLike, text: str) -> Path:
    """Write ``text`` (UTF-8) to ``path`` atomically and return the path."""
    with atomic_path(path) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return Path(path)

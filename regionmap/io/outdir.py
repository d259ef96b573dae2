"""The atomic output folder: a run's outputs appear all at once or not at all.

A run writes every file into a hidden sibling folder on the same filesystem and only when
all of them are written swaps it into place with two renames. A reader therefore sees either
the complete previous output or the complete new one, never a mix, whatever happens to the
writing process (``SIGKILL`` included).

Names next to the target folder ``OUT`` (all in its parent folder):

* ``.OUT.regionmap-lock``     — the lock file (PID and host of the run holding it);
* ``.OUT.regionmap-new-<id>`` — the folder being written;
* ``.OUT.regionmap-old-<id>`` — the previous output, moved aside during the swap;
* ``OUT/.regionmap-output``   — the marker file that identifies a regionmap output
  (JSON: program, version, created, complete, and the files the run wrote).

Rule for replacing ``OUT`` (exactly):

1. ``OUT`` missing, or an empty folder → written (an empty folder is removed with
   ``rmdir``, which cannot lose anything, and the new one renamed into its place).
2. ``OUT`` holds the marker and only the files its run wrote (the marker lists them) →
   replaced (the previous output is deleted after the swap). With other files in it (a
   user's notes), or no list (an older regionmap's output), it is treated as in 3 and 4:
   refused, or with ``force`` kept whole beside the new output.
3. ``OUT`` non-empty without the marker, ``force=False`` → :class:`OutputError`, nothing
   touched.
4. ``OUT`` non-empty without the marker, ``force=True`` → the new output is swapped in and
   the previous folder is **kept**, renamed to ``OUT.replaced-<UTC time>`` beside it; it is
   never deleted. A folder is only ever deleted by this module when its top level holds the
   marker file, and the marker is removed last, so a half-deleted folder still carries it.
5. ``OUT`` is a file or a symbolic link → :class:`OutputError`, with or without ``force``.

Recovery at start (under the lock): a ``-new-`` leftover is an interrupted write and is
deleted; an ``-old-`` leftover with ``OUT`` missing is an interrupted swap and is renamed back
to ``OUT``; an ``-old-`` leftover with ``OUT`` present is a finished swap whose clean-up was
interrupted and is deleted. Leftovers without the marker are left alone and reported. A
``force`` swap interrupted between its two renames leaves ``OUT`` missing and the foreign
folder kept as ``OUT.replaced-<time>``; it is not moved back automatically.
"""

from __future__ import annotations

import datetime as dt
import json
import os
import socket
import uuid
from pathlib import Path
from types import TracebackType

from regionmap import __version__
from regionmap.errors import OutputError, warn

__all__ = [
    "OutputFolder",
    "MARKER_NAME",
    "is_regionmap_output",
    "recover_leftovers",
    "foreign_files",
    "check_inputs_outside",
]

MARKER_NAME = ".regionmap-output"
_LOCK = ".{name}.regionmap-lock"
_NEW = ".{name}.regionmap-new-"
_OLD = ".{name}.regionmap-old-"


def is_regionmap_output(path: str | os.PathLike) -> bool:
    """True when ``path`` is a folder whose top level holds the regionmap marker file."""
    p = Path(path)
    return p.is_dir() and not p.is_symlink() and (p / MARKER_NAME).is_file()


def _files_of(folder: Path) -> list[str]:
    """Relative paths (POSIX) of every file under ``folder`` except the marker."""
    return sorted(
        p.relative_to(folder).as_posix()
        for p in folder.rglob("*")
        if (p.is_file() or p.is_symlink()) and p.name != MARKER_NAME
    )


def foreign_files(folder: str | os.PathLike) -> list[str] | None:
    """Files of a regionmap output folder that its run did not write (a user's notes...).

    Returns
    -------
    list of str or None
        Relative paths not listed in the marker's ``files``; None when the marker lists no
        files (written by an older regionmap), so that nothing in it is known to be ours.
    """
    folder = Path(folder)
    try:
        record = json.loads((folder / MARKER_NAME).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    listed = record.get("files") if isinstance(record, dict) else None
    if not isinstance(listed, list):
        return None
    known = set(listed)
    return [name for name in _files_of(folder) if name not in known]


def _write_marker(folder: Path, *, complete: bool) -> None:
    record = {
        "program": "regionmap",
        "version": __version__,
        "created": dt.datetime.now(dt.UTC).isoformat(timespec="seconds"),
        "complete": complete,
    }
    if complete:  # what the run wrote: anything else found here later is someone else's
        record["files"] = _files_of(folder)
    tmp = folder / (MARKER_NAME + ".tmp")
    with open(tmp, "w", encoding="utf-8") as fh:
        json.dump(record, fh)
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, folder / MARKER_NAME)


def _fsync_dir(folder: Path) -> None:
    fd = os.open(folder, os.O_RDONLY)
    try:
        os.fsync(fd)
    finally:
        os.close(fd)


def _fsync_tree(folder: Path) -> None:
    """Flush every file and folder under ``folder`` to disk (renames are only durable then)."""
    for root, _dirs, files in os.walk(folder):
        for name in files:
            fd = os.open(os.path.join(root, name), os.O_RDONLY)
            try:
                os.fsync(fd)
            finally:
                os.close(fd)
        _fsync_dir(Path(root))


def _remove_marked_tree(folder: Path) -> None:
    """Delete a regionmap output folder, its marker file last.

    Raises
    ------
    OutputError
        When ``folder`` holds no marker (this module never deletes such a folder).
    """
    if not is_regionmap_output(folder):
        raise OutputError(
            f"refusing to delete {folder}: it holds no {MARKER_NAME} marker, so it is not a "
            "regionmap output; remove it yourself if it is not needed"
        )
    marker = folder / MARKER_NAME
    for root, dirs, files in os.walk(folder, topdown=False):
        for name in files:
            path = os.path.join(root, name)
            if path != str(marker):
                os.unlink(path)
        for name in dirs:
            path = os.path.join(root, name)
            if os.path.islink(path):
                os.unlink(path)
            else:
                os.rmdir(path)
    os.unlink(marker)
    os.rmdir(folder)


def _pid_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def recover_leftovers(target: str | os.PathLike) -> list[str]:
    """Repair what an interrupted run left beside ``target``; return what was done.

    Call only while holding the lock (:class:`OutputFolder` does). See the module docstring
    for the rules.
    """
    target = Path(target)
    parent, name = target.parent, target.name
    actions: list[str] = []
    if not parent.is_dir():
        return actions
    new_prefix, old_prefix = _NEW.format(name=name), _OLD.format(name=name)
    leftovers = sorted(p for p in parent.iterdir() if p.name.startswith((new_prefix, old_prefix)))
    for p in leftovers:
        if not is_regionmap_output(p):
            actions.append(f"left {p} alone: it holds no {MARKER_NAME} marker")
            warn(f"output folder {target}: found {p} without a regionmap marker; left it alone")
            continue
        if p.name.startswith(new_prefix):
            _remove_marked_tree(p)
            actions.append(f"deleted the interrupted write {p.name}")
        elif not target.exists() and not target.is_symlink():
            os.rename(p, target)
            actions.append(f"restored the previous output from {p.name}")
        else:
            _remove_marked_tree(p)
            actions.append(f"deleted the previous output {p.name} left by a finished swap")
    if actions:
        _fsync_dir(parent)
    return actions


class OutputFolder:
    """Context manager that makes a run's output folder appear atomically.

    Parameters
    ----------
    path : str or os.PathLike
        The output folder (``[output] dir`` or ``--out``). Its parent is created if needed.
    force : bool
        Allow replacing a non-empty folder that is not a regionmap output; that folder is
        then kept as ``<path>.replaced-<UTC time>``, never deleted.

    Attributes
    ----------
    target : Path
        The final output folder.
    path : Path
        The temporary folder to write into while inside the ``with`` block.
    recovered : list of str
        What the start-up recovery did (empty when nothing was left over).
    kept_as : Path or None
        Where a non-regionmap folder replaced under ``force`` was kept.

    Raises
    ------
    OutputError
        On entry: the target is a file or a link, is a non-empty non-regionmap folder
        without ``force``, another live run holds the lock, or the parent cannot be written.

    Examples
    --------
    >>> with OutputFolder("out") as out:          # doctest: +SKIP
    ...     (out.path / "run.json").write_text("{}")
    """

    def __init__(self, path: str | os.PathLike, force: bool = False) -> None:
        self.target = Path(path).absolute()
        self.force = force
        self.path: Path | None = None
        self.recovered: list[str] = []
        self.kept_as: Path | None = None
        self._keep_previous = False  # the previous output holds files it did not write
        self._lock = self.target.parent / _LOCK.format(name=self.target.name)
        self._locked = False

    # -- lock ---------------------------------------------------------------------------
    def _acquire_lock(self) -> None:
        record = json.dumps({"pid": os.getpid(), "host": socket.gethostname()})
        for _attempt in range(3):
            try:
                fd = os.open(self._lock, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o644)
            except FileExistsError:
                self._break_stale_lock()
                continue
            with os.fdopen(fd, "w", encoding="utf-8") as fh:
                fh.write(record)
                fh.flush()
                os.fsync(fh.fileno())
            self._locked = True
            return
        raise OutputError(f"output folder {self.target}: could not take the lock {self._lock}")

    def _break_stale_lock(self) -> None:
        try:
            info = json.loads(self._lock.read_text(encoding="utf-8") or "{}")
        except FileNotFoundError:
            return
        except (OSError, ValueError):
            info = {}
        pid, host = info.get("pid"), info.get("host")
        if isinstance(pid, int) and host == socket.gethostname() and not _pid_alive(pid):
            # rename first so two runs recovering the same stale lock cannot both win
            stale = self._lock.with_name(self._lock.name + f".stale-{uuid.uuid4().hex}")
            try:
                os.rename(self._lock, stale)
            except FileNotFoundError:
                return
            os.unlink(stale)
            self.recovered.append(f"removed a stale lock of dead process {pid}")
            return
        who = f"process {pid} on {host}" if pid is not None else "an unreadable lock record"
        raise OutputError(
            f"output folder {self.target} is in use: the lock {self._lock} is held by {who}; "
            "wait for that run to finish, or delete the lock file if no run is active"
        )

    def _release_lock(self) -> None:
        if self._locked:
            try:
                os.unlink(self._lock)
            except FileNotFoundError:
                pass
            self._locked = False

    # -- checks -------------------------------------------------------------------------
    def _check_target(self) -> None:
        t = self.target
        if t.is_symlink() or (t.exists() and not t.is_dir()):
            raise OutputError(
                f"output folder {t}: expected a folder, found a "
                f"{'symbolic link' if t.is_symlink() else 'file'}; choose another --out"
            )
        if is_regionmap_output(t):
            foreign = foreign_files(t)
            if foreign == []:
                return
            if not self.force:
                what = (
                    f"files that regionmap did not write ({', '.join(foreign[:3])}"
                    f"{', ...' if len(foreign) > 3 else ''})"
                    if foreign
                    else "no list of the files it wrote (an older regionmap made it)"
                )
                raise OutputError(
                    f"output folder {t} is a regionmap output but holds {what}; replacing "
                    "it would delete them: move them out, choose another --out, or pass "
                    f"--force to keep the previous folder whole as {t.name}.replaced-<time>"
                )
            self._keep_previous = True
            return
        if t.is_dir() and any(t.iterdir()) and not self.force:
            raise OutputError(
                f"output folder {t} is not empty and is not a regionmap output (no "
                f"{MARKER_NAME} marker); choose an empty or new folder, or pass --force "
                "to put the output there (the existing folder is then kept beside it as "
                f"{t.name}.replaced-<time>, never deleted)"
            )

    # -- context protocol ---------------------------------------------------------------
    def __enter__(self) -> OutputFolder:
        parent = self.target.parent
        try:
            parent.mkdir(parents=True, exist_ok=True)
            self._acquire_lock()
        except OSError as exc:
            if isinstance(exc, OutputError):
                raise
            raise OutputError(
                f"output folder {self.target}: cannot write in {parent}: {exc.strerror or exc}"
            ) from exc
        try:
            self.recovered += recover_leftovers(self.target)
            self._check_target()
            self.path = parent / (_NEW.format(name=self.target.name) + uuid.uuid4().hex[:12])
            self.path.mkdir()
            _write_marker(self.path, complete=False)
        except BaseException as exc:
            self._release_lock()
            if isinstance(exc, OSError) and not isinstance(exc, OutputError):
                raise OutputError(f"output folder {self.target}: {exc.strerror or exc}") from exc
            raise
        return self

    def __exit__(
        self,
        exc_type: type[BaseException] | None,
        exc: BaseException | None,
        tb: TracebackType | None,
    ) -> None:
        try:
            if exc_type is None:
                self._commit()
            elif self.path is not None and self.path.exists():
                _remove_marked_tree(self.path)
        finally:
            self._release_lock()

    def _commit(self) -> None:
        assert self.path is not None
        new, target, parent = self.path, self.target, self.target.parent
        try:
            _write_marker(new, complete=True)
            _fsync_tree(new)
            if not target.exists():
                os.rename(new, target)
                _fsync_dir(parent)
                return
            if is_regionmap_output(target) and not self._keep_previous:
                aside = parent / (_OLD.format(name=target.name) + new.name.rsplit("-", 1)[-1])
            elif not any(target.iterdir()):
                os.rmdir(target)  # an empty folder holds nothing to keep
                os.rename(new, target)
                _fsync_dir(parent)
                return
            else:  # force=True, checked on entry: keep the folder, visibly
                stamp = dt.datetime.now(dt.UTC).strftime("%Y%m%dT%H%M%SZ")
                aside = parent / f"{target.name}.replaced-{stamp}"
                self.kept_as = aside
            os.rename(target, aside)
            os.rename(new, target)
            _fsync_dir(parent)
            if self.kept_as is None:
                _remove_marked_tree(aside)
            else:
                warn(f"output folder {target}: the previous folder was kept as {aside}")
        except OSError as exc:
            if isinstance(exc, OutputError):
                raise
            raise OutputError(
                f"output folder {target}: could not put the new output in place: "
                f"{exc.strerror or exc}"
            ) from exc
        finally:
            self.path = None


def check_inputs_outside(target: str | os.PathLike, inputs) -> None:
    """Refuse an output folder that holds one of the run's inputs: the run replaces the
    folder, which would delete them (e.g. ``regionmap run DIR/scenario/demo.toml --out DIR``).

    Parameters
    ----------
    target : the output folder.
    inputs : iterable of (what, path) (``("config", path)``); None paths are skipped.

    Raises
    ------
    OutputError
        Naming the first input found inside ``target``.
    """
    out = Path(target).absolute().resolve()
    for what, path in inputs:
        if path is None:
            continue
        p = Path(path).absolute().resolve()
        if p == out or out in p.parents:
            raise OutputError(
                f"output folder {target} holds this run's {what} ({path}); a run replaces its "
                "output folder, which would delete it: choose another --out (or move the "
                "inputs out of the folder)"
            )

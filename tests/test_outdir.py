"""The atomic output folder (regionmap.io.outdir).

The oracle here is the POSIX guarantee that rename(2) within one filesystem is atomic
(IEEE Std 1003.1, rename()): whatever instant a writer dies at, the folder must hold one
complete generation of files, never a mix, and the next run must start cleanly.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import textwrap
from pathlib import Path

import pytest

from regionmap.errors import OutputError, RegionmapWarning
from regionmap.io.outdir import MARKER_NAME, OutputFolder, is_regionmap_output

FILES = ("run.json", "cells.nc", "maps/snow_depth_cm.tif")


def _write_generation(folder: Path, gen: int) -> None:
    for name in FILES:
        p = folder / name
        p.parent.mkdir(parents=True, exist_ok=True)
        p.write_text(f"generation {gen} {name}\n" * 100)


def _generation(folder: Path) -> int:
    """The one generation all files of ``folder`` belong to; fails on a mix or a gap."""
    gens = set()
    for name in FILES:
        text = (folder / name).read_text()
        lines = text.splitlines()
        assert len(lines) == 100, f"{name} is truncated"
        gens |= {int(line.split()[1]) for line in lines}
    assert len(gens) == 1, f"mixed generations {gens}"
    assert is_regionmap_output(folder)
    return gens.pop()


def _siblings(target: Path) -> list[str]:
    return sorted(p.name for p in target.parent.iterdir() if p.name != target.name)


def test_fresh_write_then_replace(tmp_path):
    target = tmp_path / "out"
    with OutputFolder(target) as out:
        assert not target.exists()  # nothing visible until the block ends
        _write_generation(out.path, 1)
    assert _generation(target) == 1
    assert json.loads((target / MARKER_NAME).read_text())["complete"] is True
    with OutputFolder(target) as out:
        _write_generation(out.path, 2)
    assert _generation(target) == 2
    assert _siblings(target) == []  # no lock, no temporary or old folder left


def test_exception_inside_block_keeps_previous(tmp_path):
    target = tmp_path / "out"
    with OutputFolder(target) as out:
        _write_generation(out.path, 1)
    with pytest.raises(RuntimeError, match="boom"):
        with OutputFolder(target) as out:
            _write_generation(out.path, 2)
            raise RuntimeError("boom")
    assert _generation(target) == 1
    assert _siblings(target) == []


def test_refuses_foreign_folder_and_force_keeps_it(tmp_path):
    target = tmp_path / "out"
    target.mkdir()
    (target / "thesis.txt").write_text("precious")
    with pytest.raises(OutputError, match=r"not a regionmap output.*--force"):
        OutputFolder(target).__enter__()
    assert (target / "thesis.txt").read_text() == "precious"
    assert _siblings(target) == []  # the refused attempt released its lock
    with pytest.warns(RegionmapWarning, match="kept as"):
        with OutputFolder(target, force=True) as out:
            _write_generation(out.path, 1)
    assert _generation(target) == 1
    kept = [p for p in tmp_path.iterdir() if p.name.startswith("out.replaced-")]
    assert len(kept) == 1 and (kept[0] / "thesis.txt").read_text() == "precious"


def test_empty_folder_is_used_and_file_target_refused(tmp_path):
    target = tmp_path / "out"
    target.mkdir()
    with OutputFolder(target) as out:
        _write_generation(out.path, 1)
    assert _generation(target) == 1
    f = tmp_path / "afile"
    f.write_text("x")
    with pytest.raises(OutputError, match="expected a folder, found a file"):
        OutputFolder(f, force=True).__enter__()


def test_live_lock_refused_stale_lock_recovered(tmp_path):
    target = tmp_path / "out"
    with OutputFolder(target) as out:
        _write_generation(out.path, 1)
        with pytest.raises(OutputError, match="is in use.*held by process"):
            OutputFolder(target).__enter__()
    dead = subprocess.run(
        [sys.executable, "-c", "import os; print(os.getpid())"],
        capture_output=True,
        text=True,
        check=True,
    )
    import socket

    lock = tmp_path / ".out.regionmap-lock"
    lock.write_text(json.dumps({"pid": int(dead.stdout), "host": socket.gethostname()}))
    with OutputFolder(target) as out:
        _write_generation(out.path, 2)
    assert any("stale lock" in r for r in out.recovered)
    assert _generation(target) == 2 and _siblings(target) == []


# --- SIGKILL in every phase ----------------------------------------------------------
# The child writes generation 2 over generation 1 and stops (prints PAUSED, sleeps) at a
# chosen point by wrapping os.rename / os.unlink; the parent then kills it with SIGKILL.
CHILD = textwrap.dedent(
    """
    import os, sys, time
    from pathlib import Path
    from regionmap.io.outdir import OutputFolder
    target, phase = Path(sys.argv[1]), sys.argv[2]
    FILES = ("run.json", "cells.nc", "maps/snow_depth_cm.tif")

    def pause():
        print("PAUSED", flush=True)
        time.sleep(60)

    real_rename, real_unlink = os.rename, os.unlink
    renames = []
    def rename(src, dst, *a, **k):
        renames.append(dst)
        if phase == "before_swap" and len(renames) == 1:
            pause()
        if phase == "between_renames" and len(renames) == 2:
            pause()
        real_rename(src, dst, *a, **k)
        if phase == "after_rename" and len(renames) == 2:
            pause()
    deleted = []
    def unlink(path, *a, **k):
        if "regionmap-old" in str(path):
            deleted.append(path)
            if phase == "deleting_old" and len(deleted) == 2:
                pause()
        real_unlink(path, *a, **k)
    os.rename, os.unlink = rename, unlink

    with OutputFolder(target) as out:
        for i, name in enumerate(FILES):
            p = out.path / name
            p.parent.mkdir(parents=True, exist_ok=True)
            with open(p, "w") as fh:
                for _ in range(50):
                    fh.write(f"generation 2 {name}\\n")
                fh.flush()
                if phase == "writing" and i == 1:
                    pause()          # half of cells.nc written
                for _ in range(50):
                    fh.write(f"generation 2 {name}\\n")
    print("DONE", flush=True)
    """
)


@pytest.mark.parametrize(
    "phase, expected_after_kill",
    [
        ("writing", 1),  # still writing files: the old output must be untouched
        ("before_swap", 1),  # all files written, marker complete, nothing renamed yet
        ("between_renames", 1),  # old moved aside, new not yet in place: recovery restores old
        ("after_rename", 2),  # new in place, old not yet deleted: the new one is complete
        ("deleting_old", 2),  # old half deleted: it keeps its marker, recovery finishes it
    ],
)
def test_sigkill_in_each_phase(tmp_path, phase, expected_after_kill):
    target = tmp_path / "out"
    with OutputFolder(target) as out:
        _write_generation(out.path, 1)
    child = subprocess.Popen(
        [sys.executable, "-c", CHILD, str(target), phase], stdout=subprocess.PIPE, text=True
    )
    try:
        line = child.stdout.readline().strip()
        assert line == "PAUSED", f"child did not reach phase {phase}: {line!r}"
        os.kill(child.pid, signal.SIGKILL)
        assert child.wait(timeout=30) == -signal.SIGKILL
    finally:
        if child.poll() is None:
            child.kill()
            child.wait()
    # Right after the kill: one complete generation is at the target, or (only in the
    # instant between the two renames) the previous one is intact in its aside folder.
    if phase == "between_renames":
        assert not target.exists()
        aside = [p for p in tmp_path.iterdir() if "regionmap-old" in p.name]
        assert len(aside) == 1 and _generation(aside[0]) == 1
    else:
        assert _generation(target) == expected_after_kill
    assert (tmp_path / ".out.regionmap-lock").exists()  # the dead run's lock is still there
    # The next run recovers the stale lock and the leftovers, then writes cleanly.
    with OutputFolder(target) as out:
        assert _generation(target) == expected_after_kill
        assert [
            s for s in _siblings(target) if "regionmap-new" not in s and "regionmap-lock" not in s
        ] == []
        _write_generation(out.path, 3)
    assert any("stale lock" in r for r in out.recovered)
    assert _generation(target) == 3
    assert _siblings(target) == []


def test_files_a_user_put_into_an_output_are_never_deleted(tmp_path):
    target = tmp_path / "out"
    with OutputFolder(target) as out:
        _write_generation(out.path, 1)
    marker = json.loads((target / MARKER_NAME).read_text())
    assert sorted(marker["files"]) == sorted(FILES)  # the marker lists what the run wrote
    (target / "maps" / "my_notes.txt").write_text("precious")
    with pytest.raises(OutputError, match=r"did not write \(maps/my_notes\.txt\).*--force"):
        OutputFolder(target).__enter__()
    assert (target / "maps" / "my_notes.txt").read_text() == "precious"
    assert _siblings(target) == []
    with pytest.warns(RegionmapWarning, match="kept as"):
        with OutputFolder(target, force=True) as out:
            _write_generation(out.path, 2)
    assert _generation(target) == 2
    kept = [p for p in tmp_path.iterdir() if p.name.startswith("out.replaced-")]
    assert len(kept) == 1 and (kept[0] / "maps" / "my_notes.txt").read_text() == "precious"


def test_an_output_without_a_file_list_is_not_replaced_without_force(tmp_path):
    # an older regionmap's marker lists no files: nothing in the folder is known to be ours
    target = tmp_path / "out"
    with OutputFolder(target) as out:
        _write_generation(out.path, 1)
    record = json.loads((target / MARKER_NAME).read_text())
    del record["files"]
    (target / MARKER_NAME).write_text(json.dumps(record))
    with pytest.raises(OutputError, match="no list of the files it wrote"):
        OutputFolder(target).__enter__()
    assert _generation(target) == 1


def test_an_output_folder_holding_the_run_inputs_is_refused(tmp_path):
    from regionmap.io.outdir import check_inputs_outside

    inputs = [("config", tmp_path / "cfg.toml"), ("DEM", tmp_path / "d" / "scenario" / "dem.tif")]
    check_inputs_outside(tmp_path / "out", inputs)  # elsewhere: fine
    with pytest.raises(OutputError, match=r"holds this run's DEM \(.*scenario/dem\.tif\)"):
        check_inputs_outside(tmp_path / "d", inputs)
    with pytest.raises(OutputError, match=r"holds this run's config"):
        check_inputs_outside(tmp_path, inputs)

"""CLI frame: one clear line and exit 2 for bad input, --help everywhere, the caution shown."""

import subprocess
import sys

import pytest

from regionmap import CAUTION
from regionmap.cli import build_parser, main


def test_help_carries_the_caution(capsys):
    with pytest.raises(SystemExit) as info:
        main(["--help"])
    assert info.value.code == 0
    out = " ".join(capsys.readouterr().out.split())
    assert "substitute for field observations" in out and "professional" in out


def test_every_subcommand_has_help():
    parser = build_parser()
    sub = next(a for a in parser._actions if a.dest == "command")
    for name, sp in sub.choices.items():
        assert sp.format_help(), name


def test_bad_input_is_one_line_and_exit_2(tmp_path):
    bad = tmp_path / "not_a_dem.tif"
    bad.write_text("this is not a raster")
    proc = subprocess.run(
        [sys.executable, "-m", "regionmap", "terrain", str(bad), "--out", str(tmp_path / "t")],
        capture_output=True, text=True,
    )
    assert proc.returncode == 2
    lines = proc.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("regionmap: error:") and "not_a_dem.tif" in lines[0]
    assert "Traceback" not in proc.stderr
    assert not (tmp_path / "t").exists()


def test_caution_text_defers_to_professionals():
    assert "avalanche service" in CAUTION and "field observations" in CAUTION

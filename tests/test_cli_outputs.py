"""What the CLI prints after a run: the machine-readable summary (--json) and the banner for
invented data. The small scenario of test_run (one demo zone, a week of the demo season)."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from test_run import config, scenario  # noqa: F401  (session fixture of the small scenario)

from regionmap import CAUTION, INVENTED_DATA
from regionmap.cli import main, print_outcome
from regionmap.pipeline.execute import RunOutcome


def test_run_json_prints_only_json_on_stdout(scenario, tmp_path, capsys):  # noqa: F811
    cfg = config(scenario, "json")
    out = tmp_path / "out"
    assert main(["run", str(cfg.source), "--out", str(out), "--json", "--quiet"]) == 0
    captured = capsys.readouterr()
    summary = json.loads(captured.out)  # the whole of stdout is one JSON document
    assert summary["out_dir"] == str(out) and summary["invented_data"] is False
    run_json = json.loads((out / "run.json").read_text())
    assert summary["cells"] == run_json["cell_count"]
    assert summary["map_time_utc"] == run_json["period"]["map_time"][:19] + "Z"
    assert [z["zone"] for z in summary["zones"]] == ["Yrlen Cirque"]
    assert summary["files"]["run.json"] == str(out / "run.json")
    assert summary["caution"] == CAUTION
    # the human text went to stderr
    assert "Outputs in" in captured.err and "Outputs in" not in captured.out


def test_bad_config_with_json_is_one_line_on_stderr_and_nothing_on_stdout(tmp_path, capsys):
    bad = tmp_path / "bad.toml"
    bad.write_text("[region]\ndem = 'x.tif'\nzones = 'z.geojson'\nzone_fild = 'name'\n")
    assert main(["run", str(bad), "--json"]) == 2
    captured = capsys.readouterr()
    assert captured.out == ""
    assert len(captured.err.strip().splitlines()) == 1 and "zone_fild" in captured.err


def _outcome(invented: bool) -> RunOutcome:
    zones = pd.DataFrame({"zone": ["A"], "snow_depth_cm": [120.0], "depth_hoar_fraction": [np.nan]})
    return RunOutcome(
        "out", zones, [], np.datetime64("2026-02-15T06:00"), False, 3, 1.0, invented_data=invented
    )


@pytest.mark.parametrize("invented", [True, False])
def test_console_banner_for_invented_data(invented, capsys):
    print_outcome(_outcome(invented))
    out = capsys.readouterr().out
    assert (INVENTED_DATA in out) is invented
    if invented:  # first, before the table
        assert out.splitlines()[0] == f"*** {INVENTED_DATA} ***"


def test_json_summary_holds_plain_values():
    from regionmap.cli import outcome_summary

    summary = outcome_summary(_outcome(True))
    text = json.dumps(summary, allow_nan=False)  # NaN would not be valid JSON (RFC 8259)
    assert json.loads(text)["zones"] == [
        {"zone": "A", "snow_depth_cm": 120.0, "depth_hoar_fraction": None}
    ]
    assert summary["invented_data"] is True and summary["map_time_utc"] == "2026-02-15T06:00:00Z"

"""CSV tables: texts that a spreadsheet would run as a formula are neutralised."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd

from regionmap.io.tables import spreadsheet_safe


def test_formula_starts_are_prefixed_and_numbers_kept():
    # the characters of OWASP's "CSV Injection" page: = + - @ tab and carriage return
    frame = pd.DataFrame(
        {
            "zone": ['=HYPERLINK("http://x")', "+1+2", "-2+3", "@SUM(A1)", "\tTAB", "North"],
            "station_id": ["ST1", "=1", "a=b", None, "", "-"],
            "value": [-1.5, 2.0, np.nan, 4.0, -0.0, 6.0],
        }
    )
    safe = spreadsheet_safe(frame)
    assert safe["zone"].tolist() == [
        '\'=HYPERLINK("http://x")',
        "'+1+2",
        "'-2+3",
        "'@SUM(A1)",
        "'\tTAB",
        "North",
    ]
    assert safe["station_id"].tolist()[:3] == ["ST1", "'=1", "a=b"]
    assert safe["station_id"].isna().tolist()[3] and safe["station_id"].tolist()[4:] == ["", "'-"]
    np.testing.assert_array_equal(safe["value"].to_numpy(), frame["value"].to_numpy())
    assert frame["zone"].iloc[0].startswith("=")  # the caller's frame is not changed
    wide = pd.DataFrame({"=cmd": [1], "N": [2]})
    assert spreadsheet_safe(wide).columns.tolist() == ["'=cmd", "N"]


def test_every_csv_table_goes_through_the_one_neutralising_writer(tmp_path):
    # a static guard: pandas' to_csv is called in one place only, io.writers.write_csv, and
    # that writer neutralises formulas
    from regionmap.io.writers import write_csv

    package = Path(__file__).parents[1] / "regionmap"
    calls = [
        path.relative_to(package).as_posix()
        for path in package.rglob("*.py")
        for line in path.read_text(encoding="utf-8").splitlines()
        if re.search(r"\.to_csv\(", line)
    ]
    assert calls == ["io/writers.py"], calls
    path = write_csv(
        tmp_path / "t.csv", pd.DataFrame({"zone": ["=1+1", "North"], "v": [-1.0, 2.0]})
    )
    assert path.read_text(encoding="utf-8").splitlines()[1:] == ["'=1+1,-1.0", "North,2.0"]

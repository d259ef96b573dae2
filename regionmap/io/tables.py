"""CSV tables that spreadsheets open safely.

A spreadsheet program runs a cell whose text starts with ``=``, ``+``, ``-`` or ``@`` (or a
tab or carriage return) as a formula, so a zone named ``=HYPERLINK(...)`` in a CSV table
could act when the table is opened ("CSV injection", OWASP Foundation, *CSV Injection*,
https://owasp.org/www-community/attacks/CSV_Injection). Every CSV table regionmap writes
goes through :func:`spreadsheet_safe`, which prefixes such texts with an apostrophe, the
mark spreadsheets read as "this is text". Numbers are left alone.
"""

from __future__ import annotations

import pandas as pd

__all__ = ["spreadsheet_safe", "FORMULA_STARTS"]

#: First characters that make a spreadsheet read a cell as a formula.
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")


def _safe_text(values: pd.Series) -> pd.Series:
    is_text = values.map(type).eq(str)
    risky = is_text & values.where(is_text, "").str.startswith(FORMULA_STARTS)
    return values.where(~risky, "'" + values.where(risky, ""))


def spreadsheet_safe(frame: pd.DataFrame) -> pd.DataFrame:
    """A copy of ``frame`` whose text cells and column names cannot start a formula.

    Text that begins with one of :data:`FORMULA_STARTS` is prefixed with ``'``; numbers,
    dates and missing values are unchanged.
    """
    out = frame.copy()
    for column in out.columns:
        if out[column].dtype == object or pd.api.types.is_string_dtype(out[column]):
            out[column] = _safe_text(out[column])
    out.columns = _safe_text(pd.Series(out.columns.astype(object), dtype=object)).tolist()
    return out

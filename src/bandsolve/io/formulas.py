"""Spreadsheet formula injection: text cells that a spreadsheet would run as a formula.

A CSV cell starting with ``=``, ``+``, ``-`` or ``@`` (or a tab or carriage return, which
some spreadsheets skip before such a character) is evaluated as a formula when the file is
opened in a spreadsheet program, so a sample id like ``=HYPERLINK(...)`` in a results file
could run or leak something on the reviewer's computer. Following the OWASP guidance, such
text cells (and column names) are written with a leading apostrophe, which spreadsheets show
as plain text. Numbers are never changed: numeric columns are left alone, and a text cell
that is a plain decimal number such as ``-0.5`` or ``+1e-3`` is not a formula and is kept.

References
----------
OWASP Foundation. CSV Injection.
https://owasp.org/www-community/attacks/CSV_Injection
"""

from __future__ import annotations

import re

import pandas as pd

__all__ = ["RISKY_STARTS", "neutralise_text", "neutralise_formulas"]

RISKY_STARTS = ("=", "+", "-", "@", "\t", "\r")


_NUMBER = re.compile(r"[+-](\d+\.?\d*|\.\d+)([eE][+-]?\d+)?")


def neutralise_text(text: str) -> str:
    """``text`` with an apostrophe in front when a spreadsheet would read it as a formula."""
    if text.startswith(RISKY_STARTS) and not _NUMBER.fullmatch(text):
        return "'" + text
    return text


def neutralise_formulas(frame: pd.DataFrame) -> pd.DataFrame:
    """A copy of ``frame`` whose text cells and column names cannot start a formula.

    Cells are screened by their first character at array speed; only the few that start like
    a formula go through :func:`neutralise_text` (a results table of 200,000 rows took 1 s
    cell by cell).
    """
    text = [c for c in frame.columns if frame[c].dtype == object or pd.api.types.is_string_dtype(
        frame[c].dtype)]
    changed = {}
    for name in text:
        column = frame[name]
        risky = _may_start_formula(column)
        if risky.any():
            changed[name] = column.mask(risky, column[risky].map(neutralise_text))
    out = frame.assign(**changed) if changed else frame
    names = [neutralise_text(str(c)) for c in out.columns]
    return out.set_axis(names, axis=1) if names != list(out.columns) else out


def _may_start_formula(column: pd.Series) -> pd.Series:
    """True for the text cells of ``column`` that start with a :data:`RISKY_STARTS` character."""
    try:
        return column.str.startswith(RISKY_STARTS, na=False).astype(bool)
    except AttributeError:  # no text at all (an object column of numbers, say)
        return column.map(lambda v: isinstance(v, str) and v.startswith(RISKY_STARTS)).astype(bool)

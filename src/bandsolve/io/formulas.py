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
    """A copy of ``frame`` whose text cells and column names cannot start a formula."""
    text = [c for c in frame.columns if frame[c].dtype == object or pd.api.types.is_string_dtype(
        frame[c].dtype)]
    changed = {c: frame[c].map(lambda v: neutralise_text(v) if isinstance(v, str) else v)
               for c in text}
    out = frame.assign(**changed) if changed else frame
    names = [neutralise_text(str(c)) for c in out.columns]
    return out.set_axis(names, axis=1) if names != list(out.columns) else out

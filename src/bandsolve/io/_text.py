"""Shared plumbing of the text readers: cells, comments, delimiter and decimal sniffing.

Rules (common practice for spreadsheet and instrument exports):

* Blank lines and lines starting with ``#`` are skipped. A comment of the form
  ``# key: value`` before the first data line is kept as metadata (lower-case key).
* The delimiter is the first of tab, semicolon, comma or runs of whitespace that splits the
  first data line into several cells and, among those, gives the most numeric cells.
* The decimal mark is a comma when the delimiter is not a comma and cells such as ``1,234``
  outnumber cells with a decimal point.
* A cell may be enclosed in double quotes, which protect delimiters; a quote inside a quoted
  cell is written twice (RFC 4180, Shafranovich 2005).

Decoding (UTF-8, Latin-1, UTF-16 with byte-order mark) is done by :mod:`bandsolve.io._source`.
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass

import numpy as np

from bandsolve.errors import FormatError, where

_DELIMITERS: tuple[str | None, ...] = ("\t", ";", ",", None)  # None: runs of whitespace
_COMMA_DECIMAL = re.compile(r"^[+-]?\d*,\d+(?:[eE][+-]?\d+)?$")
_DOT_DECIMAL = re.compile(r"^[+-]?\d*\.\d+(?:[eE][+-]?\d+)?$")
_META = re.compile(r"^#\s*([A-Za-z_][A-Za-z0-9_ ]*?)\s*[:=]\s*(.*?)\s*$")
_SNIFF_LINES = 50
_SPACES = " \t"


@dataclass(frozen=True)
class Dialect:
    """How a text table is written: ``delimiter`` (None = whitespace) and ``decimal`` mark."""

    delimiter: str | None
    decimal: str

    def split(self, line: str) -> list[str]:
        """Cells of one line, stripped of outer spaces; quoted cells as in RFC 4180.

        Raises
        ------
        ValueError
            When a quoted cell is not closed on its line.
        """
        if '"' not in line:
            return [c.strip() for c in line.split(self.delimiter)]
        return [c.strip() for c in _quoted_cells(line, self.delimiter)]


@dataclass(frozen=True)
class Row:
    """One data line: its 1-based ``line`` number in the file and its ``cells``."""

    line: int
    cells: list[str]


def _quoted_cells(line: str, delimiter: str | None) -> list[str]:
    """Cells of a line holding double quotes.

    The rules are those of pandas' C tokenizer with ``skipinitialspace=True``, so the compiled
    reader and this one agree cell by cell: spaces before an opening quote are skipped, text
    after a closing quote is kept, a quote inside an unquoted cell is an ordinary character.
    """
    skip = _SPACES if delimiter is None else " "
    ends = _SPACES if delimiter is None else delimiter
    cells: list[str] = []
    k, n = 0, len(line)
    while True:
        while k < n and line[k] in skip:
            k += 1
        text: list[str] = []
        if k < n and line[k] == '"':
            start, k = k, k + 1
            while True:
                if k >= n:
                    raise ValueError(f"the quoted cell {line[start:start + 20]!r} is not closed "
                                     "on its line")
                if line[k] == '"' and line[k + 1:k + 2] == '"':
                    text.append('"')
                    k += 2
                elif line[k] == '"':
                    k += 1
                    break
                else:
                    text.append(line[k])
                    k += 1
        while k < n and line[k] not in ends:
            text.append(line[k])
            k += 1
        cells.append("".join(text))
        if k >= n:
            return cells
        k += 1
        if delimiter is None:
            while k < n and line[k] in _SPACES:
                k += 1
            if k >= n:
                return cells


def data_text(raw: str) -> str:
    """The data of one line: stripped text, or "" for a blank or comment line."""
    text = raw.strip().lstrip("\ufeff")
    return "" if text.startswith("#") else text


def data_lines(lines: Iterable[str], meta: dict[str, str], start: int = 1
               ) -> Iterator[tuple[int, str]]:
    """Yield ``(line_number, text)`` of data lines; ``# key: value`` comments before the first
    data line go into ``meta`` (later comments are skipped like any other)."""
    header = True
    for number, raw in enumerate(lines, start=start):
        text = data_text(raw)
        if text:
            header = False
            yield number, text
        elif header:
            read_meta(raw, meta)


def read_meta(raw: str, meta: dict[str, str]) -> None:
    """Add a ``# key: value`` comment line to ``meta`` (the first value of a key is kept)."""
    m = _META.match(raw.strip().lstrip("\ufeff"))
    if m:
        meta.setdefault(m.group(1).strip().lower().replace(" ", "_"), m.group(2))


def is_number(cell: str, decimal: str) -> bool:
    if decimal == ",":
        cell = cell.replace(",", ".")
    try:
        float(cell)
    except ValueError:
        return False
    return "_" not in cell


def sniff(lines: Sequence[str], source: str) -> Dialect:
    """Choose the delimiter and decimal mark from the first data lines (see module notes)."""
    sample = list(lines[:_SNIFF_LINES])
    if not sample:
        raise FormatError(f"{where(source)}no data lines (the file is empty or all comments)")
    best: tuple[tuple[float, float], Dialect] | None = None
    for delim in _DELIMITERS:
        rows = [_cells(line, Dialect(delim, ".")) for line in sample]
        width = len(rows[0])
        if width < 2:
            continue
        cells = [c for r in rows for c in r]
        decimal = _decimal_mark(cells, delim)
        consistent = sum(len(r) == width for r in rows) / len(rows)
        numeric = sum(is_number(c, decimal) for c in cells) / max(len(cells), 1)
        score = (consistent, numeric)
        if best is None or score > best[0]:
            best = (score, Dialect(delim, decimal))
    if best is None:
        raise FormatError(
            f"{where(source, row=1)}only one column found; separate the columns by comma, "
            "semicolon, tab or spaces (sample id column, then one column per axis value)"
        )
    return best[1]


def _cells(line: str, dialect: Dialect) -> list[str]:
    try:
        return dialect.split(line)
    except ValueError:
        return line.split(dialect.delimiter)


def _decimal_mark(cells: Sequence[str], delimiter: str | None) -> str:
    if delimiter == ",":
        return "."
    commas = sum(bool(_COMMA_DECIMAL.match(c)) for c in cells)
    dots = sum(bool(_DOT_DECIMAL.match(c)) for c in cells)
    return "," if commas > dots else "."


def split_rows(numbered: Iterable[tuple[int, str]], dialect: Dialect, width: int | None,
               source: str) -> list[Row]:
    """Split lines into cells; every row must have ``width`` cells (the first row's if None)."""
    rows: list[Row] = []
    for number, text in numbered:
        try:
            cells = dialect.split(text)
        except ValueError as exc:
            raise FormatError(f"{where(source, row=number)}{exc}; close the quote (a quote "
                              "inside a quoted cell is written twice)") from None
        if width is None:
            width = len(cells)
        if len(cells) != width:
            raise FormatError(
                f"{where(source, row=number)}{len(cells)} cells where the table has {width}; "
                "every line needs the same number of delimiter-separated cells (check for a "
                "stray delimiter, a missing value or a decimal comma in a comma-separated file)"
            )
        rows.append(Row(number, cells))
    return rows


def to_numbers(cells: Sequence[str], dialect: Dialect, *, source: str, line: int | None,
               names: Sequence[str] | None = None, what: str = "value",
               sample: str | None = None) -> np.ndarray:
    """Parse cells as finite floats; errors name the line, the ``sample`` (when the line
    belongs to one) and the column (``names``).

    Raises
    ------
    FormatError
        For an empty, non-numeric or non-finite cell.
    """
    texts = [c.replace(",", ".") for c in cells] if dialect.decimal == "," else list(cells)
    try:
        numbers = np.array(texts, dtype=float)
        ok = bool(np.all(np.isfinite(numbers))) and not any("_" in t for t in texts)
    except (ValueError, OverflowError):
        numbers, ok = np.empty(0), False
    if ok:
        return numbers
    for k, cell in enumerate(cells):
        if is_number(cell, dialect.decimal) and np.isfinite(float(texts[k])):
            continue
        column = f" in column {names[k]!r}" if names is not None else f" (cell {k + 1})"
        problem = "is empty" if not cell else f"{cell[:40]!r} is not a finite number"
        raise FormatError(
            f"{where(source, row=line, sample=sample)}{what}{column} {problem}; fill in a number "
            f"(decimal mark {dialect.decimal!r})"
        )
    raise FormatError(f"{where(source, row=line)}{what} could not be read as numbers")

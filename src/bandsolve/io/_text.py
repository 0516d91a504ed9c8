"""Shared plumbing of the text readers: decoding, comments, delimiter and decimal sniffing.

Rules (common practice for spreadsheet and instrument exports):

* Blank lines and lines starting with ``#`` are skipped. A comment of the form
  ``# key: value`` is kept as metadata (lower-case key).
* The delimiter is the first of tab, semicolon, comma or runs of whitespace that splits the
  first data line into several cells and, among those, gives the most numeric cells.
* The decimal mark is a comma when the delimiter is not a comma and cells such as ``1,234``
  outnumber cells with a decimal point.
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from bandsolve.errors import FormatError, where

_DELIMITERS: tuple[str | None, ...] = ("\t", ";", ",", None)  # None: runs of whitespace
_COMMA_DECIMAL = re.compile(r"^[+-]?\d*,\d+(?:[eE][+-]?\d+)?$")
_DOT_DECIMAL = re.compile(r"^[+-]?\d*\.\d+(?:[eE][+-]?\d+)?$")
_META = re.compile(r"^#\s*([A-Za-z_][A-Za-z0-9_ ]*?)\s*[:=]\s*(.*?)\s*$")
_SNIFF_LINES = 50


@dataclass(frozen=True)
class Dialect:
    """How a text table is written: ``delimiter`` (None = whitespace) and ``decimal`` mark."""

    delimiter: str | None
    decimal: str

    def split(self, line: str) -> list[str]:
        """Cells of one line, stripped of spaces and of one pair of enclosing quotes."""
        cells = line.split(self.delimiter)
        return [_unquote(c.strip()) for c in cells]


@dataclass(frozen=True)
class Row:
    """One data line: its 1-based ``line`` number in the file and its ``cells``."""

    line: int
    cells: list[str]


def _unquote(cell: str) -> str:
    if len(cell) >= 2 and cell[0] == cell[-1] and cell[0] in "\"'":
        return cell[1:-1].strip()
    return cell


def read_text(path: str | Path) -> str:
    """Whole file as text: UTF-8 (with or without byte-order mark), else Latin-1.

    Raises
    ------
    FormatError
        When the file cannot be opened or holds binary data (NUL bytes).
    """
    try:
        data = Path(path).read_bytes()
    except OSError as exc:
        raise FormatError(f"{path}: cannot read the file ({exc.strerror or exc})") from None
    if b"\x00" in data:
        raise FormatError(
            f"{where(str(path))}the file holds binary data (NUL bytes); export the spectra as "
            "text (CSV) or JCAMP-DX"
        )
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError:
        return data.decode("latin-1")


def data_lines(lines: Iterable[str], meta: dict[str, str]) -> Iterator[tuple[int, str]]:
    """Yield ``(line_number, text)`` of data lines; ``# key: value`` comments go into ``meta``."""
    for number, raw in enumerate(lines, start=1):
        text = raw.strip().lstrip("\ufeff")
        if not text:
            continue
        if text.startswith("#"):
            m = _META.match(text)
            if m:
                meta.setdefault(m.group(1).strip().lower().replace(" ", "_"), m.group(2))
            continue
        yield number, text


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
        rows = [line.split(delim) for line in sample]
        width = len(rows[0])
        if width < 2:
            continue
        cells = [c.strip() for r in rows for c in r]
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
        cells = dialect.split(text)
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

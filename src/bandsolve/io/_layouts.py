"""The layouts of delimited text other than wide, parsed line by line, and layout detection.

The wide layout, the one that grows large, is parsed by :mod:`bandsolve.io._wide`.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import numpy as np

from bandsolve.errors import FormatError, where
from bandsolve.io._text import Dialect, Row, to_numbers

__all__ = ["detect_layout", "PARSERS"]


def _numeric(cells: Sequence[str], dialect: Dialect) -> bool:
    try:
        to_numbers(cells, dialect, source="", line=None)
    except FormatError:
        return False
    return True


def _monotonic(cells: Sequence[str], dialect: Dialect) -> bool:
    if not _numeric(cells, dialect):
        return False
    d = np.diff(to_numbers(cells, dialect, source="", line=None))
    return bool(np.all(d > 0) or np.all(d < 0))


def detect_layout(rows: list[Row], dialect: Dialect, source: str) -> str:
    width = len(rows[0].cells)
    first_col = [r.cells[0] for r in rows[1:]]
    header_numeric = _numeric(rows[0].cells[1:], dialect)
    if width == 2 and all(_numeric(r.cells, dialect) for r in rows[1:]) and (
        len(rows) > 1 or header_numeric
    ):
        return "single"
    # Long: ids repeat down the first column; the first line is a text header or itself a
    # data line whose id recurs (a wide header's first cell does not reappear as an id).
    if width == 3 and len(first_col) > len(set(first_col)) and (
        not header_numeric or rows[0].cells[0] in first_col
    ) and all(_numeric(r.cells[1:], dialect) for r in rows[1:]):
        return "long"
    first_col_axis = len(first_col) > 1 and _monotonic(first_col, dialect)
    if header_numeric and not first_col_axis:
        return "wide"
    if first_col_axis and not header_numeric:
        return "transposed"
    fix = ("state the layout (--layout wide or --layout transposed; layout='wide' or "
           "layout='transposed' in Python)")
    if header_numeric and first_col_axis:
        raise FormatError(
            f"{where(source, row=rows[0].line)}both the header and the first column are numeric "
            f"axes, so the layout is ambiguous; {fix}"
        )
    raise FormatError(
        f"{where(source, row=rows[0].line)}cannot tell the layout: expected a header of axis "
        "values (wide), a numeric first column with sample ids in the header (transposed), "
        f"three columns id/axis/signal (long) or two numeric columns (single); {fix}"
    )


def _need_data(rows: list[Row], source: str, layout: str) -> None:
    if len(rows) < 2:
        raise FormatError(
            f"{where(source, row=rows[0].line)}a {layout} table needs a header line and at "
            "least one data line"
        )


def _transposed(rows: list[Row], dialect: Dialect, source: str):
    _need_data(rows, source, "transposed")
    ids = rows[0].cells[1:]
    axis = np.concatenate([
        to_numbers(r.cells[:1], dialect, source=source, line=r.line, what="axis value")
        for r in rows[1:]
    ])
    values = np.vstack([
        to_numbers(r.cells[1:], dialect, source=source, line=r.line, names=ids)
        for r in rows[1:]
    ]).T
    return axis, values, ids, [f"column {k + 2}" for k in range(len(ids))]


def _long(rows: list[Row], dialect: Dialect, source: str):
    if len(rows[0].cells) != 3:
        raise FormatError(f"{where(source)}the long layout needs exactly three columns: sample "
                          "id, axis value, signal")
    if not _numeric(rows[0].cells[1:], dialect):
        rows = rows[1:]  # header line
    if not rows:
        raise FormatError(f"{where(source)}no data lines after the header")
    points: dict[str, dict[float, float]] = {}
    for r in rows:
        x, y = to_numbers(r.cells[1:], dialect, source=source, line=r.line,
                          names=["axis", "signal"], sample=r.cells[0] or None)
        spectrum = points.setdefault(r.cells[0], {})
        if x in spectrum:
            raise FormatError(f"{where(source, row=r.line, sample=r.cells[0])}axis value {x:g} "
                              "appears twice for this sample; remove the repeated line")
        spectrum[x] = y
    ids = list(points)
    axis = np.array(sorted(points[ids[0]]))
    for s in ids[1:]:
        if len(points[s]) != axis.size or not np.array_equal(sorted(points[s]), axis):
            raise FormatError(
                f"{where(source, sample=s)}{len(points[s])} axis points that differ from the "
                f"{axis.size} points of sample {ids[0]!r}; every sample needs the same axis"
            )
    values = np.array([[points[s][x] for x in axis] for s in ids])
    return axis, values, ids, [f"sample block {s!r}" for s in ids]


def _single(rows: list[Row], dialect: Dialect, source: str):
    if len(rows[0].cells) != 2:
        raise FormatError(f"{where(source)}a single-spectrum file needs two columns (axis, "
                          f"signal), found {len(rows[0].cells)}")
    if not _numeric(rows[0].cells, dialect):
        rows = rows[1:]
    if not rows:
        raise FormatError(f"{where(source)}no data lines after the header")
    table = np.array([
        to_numbers(r.cells, dialect, source=source, line=r.line, names=["axis", "signal"])
        for r in rows
    ])
    stem = Path(source).stem if not source.startswith("<") else "spectrum"
    return table[:, 0], table[:, 1][np.newaxis, :], [stem or "spectrum"], ["the file"]


PARSERS = {"transposed": _transposed, "long": _long, "single": _single}


"""Spectra in delimited text files: wide, transposed, long and single-spectrum layouts.

Layouts
-------
wide
    First column the sample id, header cells of the other columns the axis values, one row
    per spectrum.
transposed
    First column the axis, one column per sample, header cells the sample ids.
long
    Three columns: sample id, axis value, signal (one line per point; ids repeat).
single
    Two numeric columns, axis and signal (an optional text header is ignored); the sample id
    is the file name without extension.

``layout="auto"`` decides from the header and the first column and refuses when more than one
layout fits. Header comment lines ``# axis_unit: cm-1``, ``# quantity: transmittance`` and
``# path_length_cm: 1.0`` are honoured for options the caller leaves as None.
"""

from __future__ import annotations

import io
from collections.abc import Iterator, Sequence
from pathlib import Path

import numpy as np

from bandsolve.errors import FormatError, where
from bandsolve.io._build import Options, build, final_checks, options_from_file
from bandsolve.io._text import Dialect, Row, data_lines, read_text, sniff, split_rows, to_numbers
from bandsolve.io.atomic import atomic_write
from bandsolve.spectra import SpectralSet

__all__ = ["LAYOUTS", "read_spectra_text", "iter_spectra_chunks", "write_spectra_csv"]

LAYOUTS = ("auto", "wide", "transposed", "long", "single")


def read_spectra_text(text: str, source: str = "<stdin>", *, layout: str = "auto",
                      axis_unit: str | None = None, quantity: str | None = None,
                      path_length_cm: float | None = None, replicates: str = "error",
                      ) -> SpectralSet:
    """Read spectra from delimited text already in memory (for example standard input).

    Parameters
    ----------
    text : str
        File content.
    source : str
        Name used in messages and, for the single layout, as the sample id (its stem).
    layout : {"auto", "wide", "transposed", "long", "single"}
        See the module notes.
    axis_unit : str, optional
        ``nm``, ``um`` or ``cm-1``; default: the ``# axis_unit:`` line, else a guess from the
        axis range (nm when unclear, with a warning).
    quantity : str, optional
        ``absorbance`` (default), ``transmittance`` (fraction) or ``percent_transmittance``.
        Transmittance is kept as read; convert with :meth:`SpectralSet.to_absorbance`.
    path_length_cm : float, optional
        Cell path length in cm.
    replicates : {"error", "average"}
        What to do with spectra sharing an id.

    Returns
    -------
    SpectralSet
        Spectra of shape (n, p), axis ascending.

    Raises
    ------
    FormatError, DataError
        Naming the source, the line and/or sample, and how to fix it.
    """
    options = Options(axis_unit, quantity, path_length_cm, replicates)
    meta: dict[str, str] = {}
    numbered = list(data_lines(io.StringIO(text), meta))
    return final_checks(_parse(numbered, meta, options, layout, source))


def read_spectra_file(path: str | Path, **kwargs) -> SpectralSet:
    """Read a delimited text file of spectra; options as in :func:`read_spectra_text`."""
    return read_spectra_text(read_text(path), source=str(path), **kwargs)


def _parse(numbered: list[tuple[int, str]], meta: dict[str, str], options: Options,
           layout: str, source: str) -> SpectralSet:
    if layout not in LAYOUTS:
        raise FormatError(f"layout {layout!r} is not known; use one of {', '.join(LAYOUTS)}")
    dialect = sniff([t for _, t in numbered], source)
    rows = split_rows(numbered, dialect, None, source)
    filled = options_from_file(options, meta, source)
    if layout == "auto":
        layout = _detect(rows, dialect, source)
    parser = {"wide": _wide, "transposed": _transposed, "long": _long, "single": _single}[layout]
    axis, values, ids, places = parser(rows, dialect, source)
    return build(axis, values, ids, places, filled, source,
                 unit_from="argument" if options.axis_unit else "file")


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


def _detect(rows: list[Row], dialect: Dialect, source: str) -> str:
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


def _wide(rows: list[Row], dialect: Dialect, source: str):
    _need_data(rows, source, "wide")
    header = rows[0]
    axis = to_numbers(header.cells[1:], dialect, source=source, line=header.line,
                      what="header (axis value)")
    names = header.cells[1:]
    values = np.vstack([
        to_numbers(r.cells[1:], dialect, source=source, line=r.line, names=names,
                   sample=r.cells[0] or None)
        for r in rows[1:]
    ])
    return axis, values, [r.cells[0] for r in rows[1:]], [f"row {r.line}" for r in rows[1:]]


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


def iter_spectra_chunks(path: str | Path, chunk_size: int, *, axis_unit: str | None = None,
                        quantity: str | None = None, path_length_cm: float | None = None,
                        ) -> Iterator[SpectralSet]:
    """Stream a wide CSV file as sets of at most ``chunk_size`` spectra.

    Lines are read one at a time, so memory stays bounded by ``chunk_size`` whatever the file
    length. Options as in :func:`read_spectra_text`; replicate ids are not merged across
    chunks. Only the wide layout can be streamed.

    Yields
    ------
    SpectralSet
        Consecutive blocks of rows, all on the header's axis.
    """
    if not isinstance(chunk_size, int) or chunk_size < 1:
        raise FormatError(f"chunk_size must be a positive whole number, got {chunk_size!r}")
    source = str(path)
    try:
        handle = open(path, encoding="utf-8-sig", errors="replace", newline="")
    except OSError as exc:
        raise FormatError(f"{source}: cannot read the file ({exc.strerror or exc})") from None
    with handle:
        meta: dict[str, str] = {}
        lines = data_lines(handle, meta)
        head = [next(lines, None), next(lines, None)]
        numbered = [h for h in head if h is not None]
        dialect = sniff([t for _, t in numbered], source)
        header = split_rows(numbered[:1], dialect, None, source)[0]
        options = options_from_file(Options(axis_unit, quantity, path_length_cm), meta, source)
        block = split_rows(numbered[1:], dialect, len(header.cells), source)
        checked = False
        while True:
            for number, text in lines:
                block.extend(split_rows([(number, text)], dialect, len(header.cells), source))
                if len(block) >= chunk_size:
                    break
            if not block:
                if not checked:
                    raise FormatError(f"{where(source)}no spectra after the header line")
                return
            axis, values, ids, places = _wide([header, *block], dialect, source)
            chunk = build(axis, values, ids, places, options, source,
                          unit_from="argument" if axis_unit else "file")
            yield chunk if checked else final_checks(chunk)
            checked, block = True, []


def write_spectra_csv(spectra: SpectralSet, path: str | Path, layout: str = "wide") -> None:
    """Write spectra as comma-separated text that :func:`read_spectra_text` reads back.

    The axis unit, quantity and path length go into ``#`` header comment lines. Values are
    written with 17 significant digits, so a round trip is exact.

    Parameters
    ----------
    spectra : SpectralSet
        Spectra of shape (n, p).
    path : path-like
        Destination; written atomically (a reader never sees a partial file).
    layout : {"wide", "transposed"}
        One row per spectrum, or one column per spectrum.
    """
    if layout not in ("wide", "transposed"):
        raise FormatError(f"layout={layout!r} cannot be written; use 'wide' or 'transposed'")
    for s in spectra.sample_ids:
        if any(ch in s for ch in ',"\n\r') or s != s.strip() or s.startswith("#"):
            raise FormatError(
                f"sample id {s!r} cannot be written to CSV unchanged (it holds a comma, quote, "
                "line break, leading '#' or outer spaces); rename the sample"
            )
    lines = [f"# axis_unit: {spectra.axis_unit}", f"# quantity: {spectra.quantity}"]
    if spectra.path_length_cm is not None:
        lines.append(f"# path_length_cm: {spectra.path_length_cm!r}")
    axis = [repr(float(x)) for x in spectra.axis]
    if layout == "wide":
        lines.append(",".join(["sample", *axis]))
        for s, row in zip(spectra.sample_ids, spectra.values, strict=True):
            lines.append(",".join([s, *(repr(float(v)) for v in row)]))
    else:
        lines.append(",".join([spectra.axis_unit, *spectra.sample_ids]))
        for x, col in zip(axis, spectra.values.T, strict=True):
            lines.append(",".join([x, *(repr(float(v)) for v in col)]))
    with atomic_write(path, "w", newline="") as handle:
        handle.write("\n".join(lines) + "\n")

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

``layout="auto"`` decides from the first :data:`HEAD_LINES` data lines and refuses when more
than one layout fits. Header comment lines ``# axis_unit: cm-1``, ``# quantity:
transmittance`` and ``# path_length_cm: 1.0`` before the table are honoured for options the
caller leaves as None.

One reader, whatever the size
-----------------------------
A file read whole and the same file streamed (:func:`iter_spectra_chunks`) go through the
same steps: the bytes and their decoding (:mod:`bandsolve.io._source`), the first lines
(delimiter, decimal mark, layout, header), and for wide tables the same row parser
(:mod:`bandsolve.io._wide`) and the same check for repeated ids across the whole file. So
both accept or refuse the same files and return the same numbers; a streamed file may have
yielded some chunks before its error is found.
"""

from __future__ import annotations

import contextlib
import itertools
import warnings
from collections.abc import Iterator
from dataclasses import dataclass, replace
from pathlib import Path
from typing import BinaryIO

import numpy as np

from bandsolve.errors import BandsolveWarning, FormatError, where
from bandsolve.io._build import Options, build, final_checks, options_from_file
from bandsolve.io._layouts import PARSERS, detect_layout
from bandsolve.io._source import BLOCK_BYTES, Block, TextSource, as_source
from bandsolve.io._text import (
    Dialect,
    data_lines,
    data_text,
    is_number,
    read_meta,
    sniff,
    split_rows,
)
from bandsolve.io._wide import IdGuard, RowBlock, WideTable, header_of, parse_rows, row_blocks
from bandsolve.io.atomic import atomic_write
from bandsolve.spectra import SpectralSet

__all__ = ["LAYOUTS", "HEAD_LINES", "read_spectra_text", "read_spectra_file",
           "iter_spectra_chunks", "open_spectra_text", "WideRows", "write_spectra_csv"]

LAYOUTS = ("auto", "wide", "transposed", "long", "single")
#: Data lines read to choose the delimiter, the decimal mark and the layout.
HEAD_LINES = 64


@dataclass
class _Opened:
    """A text file after its first lines: how it is written, and the blocks still to read."""

    src: TextSource
    layout: str
    dialect: Dialect
    options: Options
    head: list
    blocks: Iterator[Block]
    unit_from: str

    def wide_table(self) -> WideTable:
        return header_of(split_rows(self.head[:2], self.dialect, None, self.src.source),
                         self.dialect, self.src.source)


def _open(src: TextSource, layout: str, options: Options) -> _Opened:
    if layout not in LAYOUTS:
        raise FormatError(f"layout {layout!r} is not known; use one of {', '.join(LAYOUTS)}")
    blocks = src.blocks()
    taken: list[Block] = []
    meta: dict[str, str] = {}
    head: list[tuple[int, str]] = []
    for block in blocks:
        taken.append(block)
        for number, raw in _lines(block, src):
            text = data_text(raw)
            if text:
                head.append((number, text))
            elif not head:
                read_meta(raw, meta)
            if len(head) >= HEAD_LINES:
                break
        if len(head) >= HEAD_LINES:
            break
    source = src.source
    dialect = sniff([t for _, t in head], source)
    _refuse_prose(head, dialect, source)
    rows = split_rows(head, dialect, None, source)
    filled = options_from_file(options, meta, source)
    if layout == "auto":
        layout = detect_layout(rows, dialect, source)
    return _Opened(src, layout, dialect, filled, head, itertools.chain(taken, blocks),
                   "argument" if options.axis_unit else "file")


def _refuse_prose(head: list[tuple[int, str]], dialect: Dialect, source: str) -> None:
    """A file without a single number below its first line is a note, not a table."""
    for _, text in head[1:]:
        try:
            cells = dialect.split(text)
        except ValueError:
            continue
        if any(is_number(c, dialect.decimal) for c in cells):
            return
    if len(head) > 1:
        raise FormatError(
            f"{where(source)}no numbers in the first {len(head)} lines below the first one, "
            "so this is not a table of spectra (a note or another document?); move it out of "
            "the folder or choose the spectra files by a pattern (--glob on the command line, "
            "pattern= in Python)"
        )


def _lines(block: Block, src: TextSource) -> Iterator[tuple[int, str]]:
    """Numbered lines of a block, decoded one at a time (the head needs only a few)."""
    start, number, data = 0, block.first_line, block.data
    while start < len(data):
        end = data.find(b"\n", start)
        end = len(data) if end < 0 else end
        yield number, src.decode(data[start:end])
        start, number = end + 1, number + 1


# ---------------------------------------------------------------------- whole files
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
    with as_source(text, source) as src:
        return _read_whole(src, layout, options)


def read_spectra_file(file: str | Path | BinaryIO, source: str | None = None, *,
                      layout: str = "auto", axis_unit: str | None = None,
                      quantity: str | None = None, path_length_cm: float | None = None,
                      replicates: str = "error") -> SpectralSet:
    """Read a delimited text file of spectra (a path, or a binary file open for reading such
    as :class:`bandsolve.io.fingerprint.HashingReader`); options as in
    :func:`read_spectra_text`."""
    options = Options(axis_unit, quantity, path_length_cm, replicates)
    with TextSource(file, source) as src:
        return _read_whole(src, layout, options)


def _read_whole(src: TextSource, layout: str, options: Options) -> SpectralSet:
    opened = _open(src, layout, options)
    if opened.layout != "wide":
        return _read_rest(opened)
    table = opened.wide_table()
    parts = list(_wide_parts(opened, table, guard=options.replicates == "error"))
    values = np.vstack([v for v, _, _ in parts])
    ids = [s for _, part, _ in parts for s in part]
    places = [f"row {n}" for _, _, lines in parts for n in lines.tolist()]
    return final_checks(build(table.axis, values, ids, places, opened.options, src.source,
                              unit_from=opened.unit_from))


def _read_rest(opened: _Opened) -> SpectralSet:
    """A non-wide table: every line, parsed by the layout's line-by-line parser."""
    src = opened.src
    numbered = [line for block in opened.blocks
                for line in data_lines(src.decode(block.data).split("\n"), {},
                                       start=block.first_line)]
    rows = split_rows(numbered, opened.dialect, None, src.source)
    axis, values, ids, places = PARSERS[opened.layout](rows, opened.dialect, src.source)
    return final_checks(build(axis, values, ids, places, opened.options, src.source,
                              unit_from=opened.unit_from))


def _wide_parts(opened: _Opened, table: WideTable, guard: bool = True
                ) -> Iterator[tuple[np.ndarray, list[str], np.ndarray]]:
    """Values, ids and line numbers of a wide table's rows, block by block."""
    ids_seen = IdGuard(opened.src.source) if guard else None
    for block in _row_blocks(opened, table):
        values, ids = parse_rows(table, block, ids_seen)
        yield values, ids, block.lines


def _row_blocks(opened: _Opened, table: WideTable) -> Iterator[RowBlock]:
    """The data rows below the header, in blocks; warns at the end when the last line of the
    file has no line end."""
    last = None
    for block in row_blocks(opened.blocks, opened.src, table.header_line):
        last = block
        yield block
    if last is not None and last.unterminated:
        warn_unterminated(opened.src.source, int(last.lines[-1]))


def warn_unterminated(source: str, line: int) -> None:
    """Warn that the last line of a file has no line end (the file may have been cut)."""
    warnings.warn(
        f"{where(source, row=line)}the last line has no line end, so the file may have been "
        "cut short while it was written; check that its last value is complete",
        BandsolveWarning, stacklevel=3,
    )


# ---------------------------------------------------------------------- streaming
@dataclass(frozen=True)
class WideRows:
    """Rows of a wide table still to parse, as consecutive blocks: what a parallel worker
    needs (picklable)."""

    table: WideTable
    options: Options
    blocks: tuple[RowBlock, ...]
    unit_from: str = "file"
    first: bool = False
    file: str | None = None  # the file's path, when blocks may be read back from it

    def __len__(self) -> int:
        return sum(len(b) for b in self.blocks)

    @property
    def lines(self) -> np.ndarray:
        """File line number of each row."""
        return np.concatenate([b.lines for b in self.blocks])

    def detached(self) -> WideRows:
        """The same rows without their text where the file can give it back (a light task for
        a worker process on this machine, which reads its rows itself)."""
        if self.file is None:
            return self
        return replace(self, blocks=tuple(b.detached() for b in self.blocks))

    def spectra(self) -> SpectralSet:
        """The rows as spectra (ids not checked against other blocks: see :class:`IdGuard`);
        the first block of a file also gets the warnings of :func:`final_checks`."""
        values = np.empty((len(self), self.table.axis.size))
        ids: list[str] = []
        for block in self.blocks:  # one block at a time: the parser's memory stays small
            block = block.attached(self.file, self.table.source)
            part, names = parse_rows(self.table, block)
            values[len(ids):len(ids) + len(names)] = part
            ids.extend(names)
        spectra = build(self.table.axis, values, ids,
                        [f"row {n}" for n in self.lines.tolist()], self.options,
                        self.table.source, unit_from=self.unit_from)
        return final_checks(spectra) if self.first else spectra


@contextlib.contextmanager
def open_spectra_text(file: str | Path | BinaryIO, *, layout: str = "auto",
                      axis_unit: str | None = None, quantity: str | None = None,
                      path_length_cm: float | None = None, source: str | None = None,
                      budget: int = BLOCK_BYTES) -> Iterator[Iterator[WideRows] | SpectralSet]:
    """A text file of spectra opened for parallel parsing.

    Gives an iterator of :class:`WideRows` (blocks of about ``budget`` bytes) for a wide
    table, else the spectra of the file read whole. The caller parses the blocks (in any
    process) and checks the ids across blocks with :class:`~bandsolve.io._wide.IdGuard`.
    """
    options = Options(axis_unit, quantity, path_length_cm)
    with TextSource(file, source, budget) as src:
        opened = _open(src, layout, options)
        if opened.layout != "wide":
            yield _read_rest(opened)
            return
        table = opened.wide_table()

        yield (WideRows(table, opened.options, (block,), opened.unit_from, first=k == 0,
                        file=src.path)
               for k, block in enumerate(_row_blocks(opened, table)))


def iter_spectra_chunks(file: str | Path | BinaryIO, chunk_size: int, *,
                        layout: str = "auto", axis_unit: str | None = None,
                        quantity: str | None = None, path_length_cm: float | None = None,
                        source: str | None = None, budget: int = BLOCK_BYTES,
                        ) -> Iterator[SpectralSet]:
    """Stream a text file of spectra as sets of at most ``chunk_size`` spectra.

    A wide table is read ``budget`` bytes at a time, so memory is bounded by bytes whatever
    the file length; other layouts are read whole and yielded as one set. The file is read
    exactly as :func:`read_spectra_file` reads it (see the module notes); an id repeated
    anywhere in the file is an error, found when the repeat is reached.

    Yields
    ------
    SpectralSet
        Consecutive blocks of rows, all on the header's axis.
    """
    if not isinstance(chunk_size, int) or chunk_size < 1:
        raise FormatError(f"chunk_size must be a positive whole number, got {chunk_size!r}")
    with open_spectra_text(file, layout=layout, axis_unit=axis_unit, quantity=quantity,
                           path_length_cm=path_length_cm, source=source,
                           budget=budget) as opened:
        if isinstance(opened, SpectralSet):
            yield opened
            return
        guard, first = None, True
        for rows in opened:
            table = rows.table
            guard = guard or IdGuard(table.source)
            values, ids = parse_rows(table, rows.blocks[0], guard)
            lines = rows.lines
            for start in range(0, len(ids), chunk_size):
                stop = start + chunk_size
                chunk = build(table.axis, values[start:stop], ids[start:stop],
                              [f"row {n}" for n in lines[start:stop].tolist()], rows.options,
                              table.source, unit_from=rows.unit_from)
                yield final_checks(chunk) if first else chunk
                first = False


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

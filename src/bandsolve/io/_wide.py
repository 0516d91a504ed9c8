"""Wide tables of spectra parsed by a compiled CSV engine, with careful explanations.

A wide table (sample id, then one column per axis value) is the one layout that grows to
hundreds of megabytes, so its body is parsed by pandas' C engine block by block
(:func:`parse_rows`). The engine is trusted only when its result passes every check (row
count, numbers in every cell, all finite); otherwise the block is parsed again, line by
line, by the careful reader of :mod:`bandsolve.io._text`, which either raises the precise
error (file, row, column, what, how to fix) or returns the same numbers. The decision for a
row therefore never depends on which block it falls into, which is what lets a streamed
file and a file read whole be read identically.

Repeated sample ids are found across the whole file with :class:`IdGuard`, which keeps two
64-bit hashes per row (16 bytes), not the ids themselves.
"""

from __future__ import annotations

import io
import warnings
import zlib
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass, field, replace

import numpy as np

from bandsolve.errors import DataError, FormatError, where
from bandsolve.io._source import Block, TextSource
from bandsolve.io._text import Dialect, Row, data_text, split_rows, to_numbers

__all__ = ["WideTable", "RowBlock", "row_blocks", "parse_rows", "IdGuard", "cut_rows"]

# First bytes of a line that may make it blank, a comment or indented (str.isspace, "#",
# and anything non-ASCII such as a no-break space or a byte-order mark).
_MAYBE_SKIPPED = np.zeros(256, dtype=bool)
_MAYBE_SKIPPED[[9, 10, 11, 12, 13, 28, 29, 30, 31, 32, ord("#")]] = True
_MAYBE_SKIPPED[128:] = True
_HASH_KEYS = ("bandsolve-ids-k1", "bandsolve-ids-k2")


@dataclass(frozen=True)
class WideTable:
    """What the header line of a wide table says: picklable, so workers can parse rows."""

    source: str
    dialect: Dialect
    names: tuple[str, ...]
    axis: np.ndarray
    header_line: int

    @property
    def width(self) -> int:
        return len(self.names) + 1


@dataclass(frozen=True)
class RowBlock:
    """Data lines of a wide table: ``data`` (bytes in ``encoding``, one row per line) and the
    file line number of each row.

    ``offset`` is where ``data`` starts in the file when it is the file's own bytes. Such a
    block can travel to a worker process without its text (:meth:`detached`, ``size`` bytes
    with checksum ``crc``) and be read back there (:meth:`attached`).
    """

    data: bytes
    lines: np.ndarray
    encoding: str = "utf-8"
    unterminated: bool = field(default=False, compare=False)
    offset: int | None = field(default=None, compare=False)
    size: int = field(default=0, compare=False)
    crc: int = field(default=0, compare=False)

    def __len__(self) -> int:
        return int(self.lines.size)

    def detached(self) -> RowBlock:
        """The block without its text, when the text can be read back from the file."""
        if self.offset is None or not self.data:
            return self
        return replace(self, data=b"", size=len(self.data), crc=zlib.crc32(self.data))

    def attached(self, path: str | None, source: str) -> RowBlock:
        """The block with its text, read back from ``path`` if it was detached.

        Raises
        ------
        FormatError
            When the bytes read back differ from those read first (the file changed).
        """
        if self.data or not self.size or path is None or self.offset is None:
            return self
        try:
            with open(path, "rb") as handle:
                handle.seek(self.offset)
                data = handle.read(self.size)
        except OSError as exc:
            raise FormatError(f"{source}: cannot read the file ({exc.strerror or exc})"
                              ) from None
        if len(data) != self.size or zlib.crc32(data) != self.crc:
            raise FormatError(f"{where(source, row=int(self.lines[0]))}the file changed while "
                              "it was read; read it again once it is complete")
        return replace(self, data=data, size=0, crc=0)


def header_of(rows: Sequence[Row], dialect: Dialect, source: str) -> WideTable:
    """The :class:`WideTable` of a header row (axis values from its cells)."""
    if len(rows) < 2:
        raise FormatError(f"{where(source, row=rows[0].line)}a wide table needs a header line "
                          "and at least one data line")
    header = rows[0]
    axis = to_numbers(header.cells[1:], dialect, source=source, line=header.line,
                      what="header (axis value)")
    return WideTable(source, dialect, tuple(header.cells[1:]), axis, header.line)


def row_blocks(blocks: Iterable[Block], src: TextSource, after_line: int
               ) -> Iterator[RowBlock]:
    """Data rows of ``blocks`` (taken from ``src``) below line ``after_line``, without blank
    and comment lines."""
    for block in blocks:
        data, first = block.data, block.first_line
        if first <= after_line and first + data.count(b"\n") <= after_line:
            continue  # a block that ends before the header (counted only near the header)
        offset = block.offset
        if first <= after_line:  # drop the lines up to the header
            cut = 0
            for _ in range(after_line - first + 1):
                cut = data.index(b"\n", cut) + 1
            data, first = data[cut:], after_line + 1
            offset = None if offset is None else offset + cut
        if not data:
            continue
        rows = _data_rows(data, first, src.encoding or "utf-8", block, offset)
        if len(rows):
            yield rows


def _data_rows(data: bytes, first: int, encoding: str, block: Block,
               offset: int | None = None) -> RowBlock:
    arr = np.frombuffer(data, dtype=np.uint8)
    starts = np.flatnonzero(arr == 10) + 1
    starts = np.concatenate(([0], starts[starts < arr.size]))
    if not _MAYBE_SKIPPED[arr[starts]].any():
        cut = block.unterminated and not data.endswith(b"\n")
        return RowBlock(data, first + np.arange(starts.size), encoding, cut, offset)
    kept: list[str] = []
    numbers: list[int] = []
    for k, raw in enumerate(data.decode(encoding).split("\n")):
        text = data_text(raw)
        if text:
            kept.append(text)
            numbers.append(first + k)
    body = ("\n".join(kept) + "\n").encode(encoding) if kept else b""
    cut = block.unterminated and not data.endswith(b"\n") and bool(kept) and (
        numbers[-1] == first + data.count(b"\n"))
    return RowBlock(body, np.array(numbers, dtype=np.int64), encoding, cut)


def cut_rows(block: RowBlock, n: int) -> tuple[RowBlock, RowBlock]:
    """The first ``n`` rows of ``block`` and the rest."""
    ends = np.flatnonzero(np.frombuffer(block.data, dtype=np.uint8) == 10)
    cut = int(ends[n - 1]) + 1
    at = block.offset
    head = RowBlock(block.data[:cut], block.lines[:n], block.encoding, offset=at)
    rest = RowBlock(block.data[cut:], block.lines[n:], block.encoding, block.unterminated,
                    None if at is None else at + cut)
    return head, rest


# ---------------------------------------------------------------------- parsing
def parse_rows(table: WideTable, block: RowBlock, guard: IdGuard | None = None,
               ) -> tuple[np.ndarray, list[str]]:
    """Values (n, p) and stripped sample ids of the rows of ``block``.

    The first problem in row order is reported, whatever the block boundaries: a cell that is
    not a finite number, a row with the wrong number of cells, an empty id, or (with
    ``guard``) an id met before.

    Raises
    ------
    FormatError, DataError
        Naming the row (and the column, for a cell) and how to fix it.
    """
    parsed = _compiled(table, block)
    if parsed is not None and all(parsed[1]):
        if guard is not None:
            guard.add(parsed[1], block.lines)
        return parsed
    return _careful(table, block, guard)


def _compiled(table: WideTable, block: RowBlock) -> tuple[np.ndarray, list[str]] | None:
    import pandas as pd

    dialect = table.dialect
    dtypes = {0: object, **{k: np.float64 for k in range(1, table.width)}}
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            frame = pd.read_csv(
                io.BytesIO(block.data), engine="c", header=None,
                sep=r"\s+" if dialect.delimiter is None else dialect.delimiter,
                decimal=dialect.decimal, quotechar='"', doublequote=True,
                skipinitialspace=True, na_filter=False, dtype=dtypes, encoding=block.encoding,
                skip_blank_lines=False, low_memory=False)
    except (ValueError, TypeError, UnicodeError, pd.errors.ParserError):
        return None
    if frame.shape != (len(block), table.width):
        return None
    values = frame.iloc[:, 1:].to_numpy(dtype=np.float64)
    if not np.isfinite(values).all():
        return None
    return values, [str(s).strip() for s in frame[0].tolist()]


def _careful(table: WideTable, block: RowBlock, guard: IdGuard | None
             ) -> tuple[np.ndarray, list[str]]:
    """Row by row with the careful parser; the ids before a failing row are checked for
    repeats first, so the error reported is the first in row order."""
    texts = block.data.decode(block.encoding).split("\n")
    lines = block.lines.tolist()
    values, ids, failure = [], [], None
    for line, text in zip(lines, texts, strict=False):
        try:
            row = split_rows([(line, data_text(text))], table.dialect, table.width,
                             table.source)[0]
            values.append(to_numbers(row.cells[1:], table.dialect, source=table.source,
                                     line=line, names=table.names, sample=row.cells[0] or None))
            if not row.cells[0].strip():
                raise FormatError(f"{where(table.source)}row {line} has an empty sample id; "
                                  "give it an id")
        except FormatError as exc:
            failure = exc
            break
        ids.append(row.cells[0].strip())
    if guard is not None:
        guard.add(ids, block.lines[:len(ids)])
    if failure is not None:
        raise failure
    return np.array(values).reshape(len(ids), len(table.names)), ids


# ---------------------------------------------------------------------- repeated ids
def duplicate_error(source: str, sample: str, first: str, second: str) -> DataError:
    """The error for a sample id met twice (``first``/``second`` say where)."""
    return DataError(
        f"{where(source)}sample id {sample!r} appears twice ({first} and {second}); give each "
        "spectrum a unique id, or average the replicates (--replicates average; "
        "replicates='average' in Python)"
    )


class IdGuard:
    """Finds a sample id repeated anywhere in a file read in blocks.

    Ids are kept as two independent 64-bit hashes (pandas' SipHash-2-4 of the UTF-8 text,
    two keys) in sorted runs merged as they grow, so memory is 24 bytes per row (with the line
    number) and a false alarm needs a 128-bit collision.
    """

    def __init__(self, source: str) -> None:
        self.source = source
        self._runs: list[tuple[np.ndarray, np.ndarray, np.ndarray]] = []

    def add(self, ids: Sequence[str], lines: np.ndarray) -> None:
        """Record the stripped ids of consecutive rows; raise on the first repeat."""
        from pandas.util import hash_array

        if not len(ids):
            return
        keys = np.array(ids, dtype=object)
        h1, h2 = (hash_array(keys, hash_key=k, categorize=False) for k in _HASH_KEYS)
        lines = np.asarray(lines, dtype=np.int64)
        order = np.argsort(h1, kind="stable")
        run = (h1[order], h2[order], lines[order])
        self._check(keys, h1, h2, lines, run)
        self._runs.append(run)
        while len(self._runs) > 1 and self._runs[-2][0].size <= 2 * self._runs[-1][0].size:
            b, a = self._runs.pop(), self._runs.pop()
            merged = [np.concatenate([x, y]) for x, y in zip(a, b, strict=True)]
            order = np.argsort(merged[0], kind="stable")
            self._runs.append(tuple(m[order] for m in merged))

    def _check(self, keys, h1, h2, lines, run) -> None:
        earlier: dict[int, int] = {}  # row in this block -> line of its first occurrence
        s1, s2, sl = run
        same = np.flatnonzero((s1[1:] == s1[:-1]) & (s2[1:] == s2[:-1]))
        for k in same:  # a repeat inside the block: the later row repeats the earlier one
            row = int(np.flatnonzero(lines == sl[k + 1])[0])
            earlier.setdefault(row, int(sl[k]))
        for r1, r2, rl in self._runs:
            at = np.minimum(np.searchsorted(r1, h1), r1.size - 1)
            for row in np.flatnonzero((r1[at] == h1) & (r2[at] == h2)):
                earlier[int(row)] = min(earlier.get(int(row), 1 << 62), int(rl[at[row]]))
        if earlier:
            row = min(earlier)
            raise duplicate_error(self.source, keys[row], f"row {earlier[row]}",
                                  f"row {int(lines[row])}")

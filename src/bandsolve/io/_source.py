"""The bytes of a text file, cut into blocks of whole lines and decoded by one rule.

Every text reader, whether it reads a file whole or streams it, takes its bytes from
:class:`TextSource`, so a file is decoded and checked the same way whatever its size:

* A UTF-8 byte-order mark is dropped; a UTF-16 byte-order mark (either byte order) makes the
  file read as UTF-16 (transcoded to UTF-8 on the fly). NUL bytes elsewhere mean binary data,
  or UTF-16 without a byte-order mark, and are refused.
* The encoding of other files is decided at their first non-ASCII line: UTF-8 when that line
  is valid UTF-8, else Latin-1 (common for spreadsheet exports on Windows). A later line that
  is not valid UTF-8 in a UTF-8 file is refused (the file mixes encodings), so two different
  ids can never be decoded into one.
* A line longer than :data:`MAX_LINE_BYTES` is refused after reading at most that many bytes,
  so a file without line ends cannot exhaust memory.

Blocks hold whole lines (each ends with a line feed, except a final line without one) and
about ``budget`` bytes, so memory is bounded by bytes, not by a count of rows.
"""

from __future__ import annotations

import codecs
import io
import os
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import BinaryIO

from bandsolve.errors import FormatError, where
from bandsolve.io.fingerprint import open_hashed

__all__ = ["MAX_LINE_BYTES", "BLOCK_BYTES", "Block", "TextSource"]

#: Longest line accepted (bytes). A wide spectrum of 100 000 points written with 20
#: characters per value is 2 MB.
MAX_LINE_BYTES = 32 << 20
#: Default size of a block of lines handed to a parser (bytes).
BLOCK_BYTES = 4 << 20
_READ = 1 << 20
_BOMS = ((codecs.BOM_UTF8, "utf-8-sig"), (codecs.BOM_UTF16_LE, "utf-16-le"),
         (codecs.BOM_UTF16_BE, "utf-16-be"))


@dataclass(frozen=True)
class Block:
    """Whole lines of a file: ``data`` (bytes in :attr:`TextSource.encoding`), the 1-based
    number of its first line, whether the last line lacks a line end (end of file), and where
    ``data`` starts in the file when it is the file's own bytes (None when transcoded)."""

    data: bytes
    first_line: int
    unterminated: bool = False
    offset: int | None = None


class TextSource:
    """A text file read forward once, in blocks of whole lines.

    Parameters
    ----------
    file : path-like or binary file
        A path, or a binary file open for reading (for example a
        :class:`bandsolve.io.fingerprint.HashingReader`); the source reads it to the end.
    source : str, optional
        Name used in messages (default: the path).
    budget : int
        Approximate bytes per block (default :data:`BLOCK_BYTES`).
    """

    def __init__(self, file: str | Path | BinaryIO, source: str | None = None,
                 budget: int = BLOCK_BYTES) -> None:
        #: The file's path when it was given as one (workers may read byte ranges of it).
        self.path: str | None = None
        if isinstance(file, str | Path):
            self.source, self.path = source or str(file), os.path.abspath(file)
            try:
                self._raw: BinaryIO = open_hashed(file)  # fingerprints what is read
            except OSError as exc:
                raise FormatError(f"{file}: cannot read the file ({exc.strerror or exc})") from None
        else:
            self.source, self._raw = source or getattr(file, "name", "<stream>"), file
        self.budget = max(int(budget), 1)
        self.encoding: str | None = None  # "utf-8" or "latin-1" once decided
        self._utf16: codecs.IncrementalDecoder | None = None
        self._first = True
        self._eof = False
        self._offset = 0  # where the bytes not yet handed out start in the file

    def close(self) -> None:
        self._raw.close()

    def __enter__(self) -> TextSource:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    # ------------------------------------------------------------------ raw reading
    def _read(self, n: int) -> bytes:
        """Up to ``n`` more bytes (transcoded from UTF-16 when so marked); sets ``_eof``."""
        try:
            raw = self._raw.read(n)
        except OSError as exc:
            raise FormatError(f"{self.source}: cannot read the file ({exc.strerror or exc})"
                              ) from None
        self._eof = not raw
        if self._first:
            self._first = False
            raw = self._start(raw)
        if self._utf16 is None:
            return raw
        try:
            return self._utf16.decode(raw, final=self._eof).encode("utf-8")
        except UnicodeDecodeError:
            raise FormatError(f"{where(self.source)}the file declares UTF-16 (by its byte-order "
                              "mark) but holds bytes that are not UTF-16; save it again as "
                              "UTF-8") from None

    def _start(self, data: bytes) -> bytes:
        for bom, name in _BOMS:
            if data.startswith(bom):
                self._offset = len(bom)
                if name != "utf-8-sig":
                    self._utf16 = codecs.getincrementaldecoder(name)(errors="strict")
                    self.encoding = "utf-8"
                return data[len(bom):]
        if b"\x00" in data[:4096]:
            head = data[:4096]
            odd, even = head[1::2].count(0), head[0::2].count(0)
            if max(odd, even) > 0.9 * (len(head) // 2) and min(odd, even) == 0:
                raise FormatError(
                    f"{where(self.source)}the file looks like UTF-16 text without a byte-order "
                    "mark; save it as UTF-8 (or as UTF-16 with a byte-order mark)"
                )
        return data

    # ------------------------------------------------------------------ blocks
    def blocks(self) -> Iterator[Block]:
        """Blocks of whole lines, in file order (see the module notes for the checks).

        A block ends at the last line end within ``budget`` bytes, or after its first line
        when that line alone is longer.
        """
        data, line, newline = bytearray(), 1, False
        while True:
            while not self._eof and (len(data) < self.budget or not newline):
                chunk = self._read(max(self.budget - len(data), _READ))
                data += chunk
                newline = newline or b"\n" in chunk
                if not newline and len(data) > MAX_LINE_BYTES:
                    raise FormatError(
                        f"{where(self.source, row=line)}the line is longer than "
                        f"{MAX_LINE_BYTES >> 20} MB without a line end; this is not a table "
                        "of spectra (check the file, or its line ends)"
                    )
            if not data:
                return
            cut = (data.rfind(b"\n", 0, self.budget) + 1 or data.find(b"\n") + 1
                   or len(data))
            block = bytes(data[:cut])
            del data[:cut]
            newline = b"\n" in data
            self._check(block, line)
            yield Block(block, line, unterminated=not data and not block.endswith(b"\n"),
                        offset=None if self._utf16 else self._offset)
            line += block.count(b"\n")
            self._offset += len(block)

    def _check(self, block: bytes, line: int) -> None:
        if b"\x00" in block:
            row = line + block.count(b"\n", 0, block.index(b"\x00"))
            raise FormatError(
                f"{where(self.source, row=row)}the file holds binary data (NUL bytes); export "
                "the spectra as text (CSV) or JCAMP-DX"
            )
        if block.isascii() or self.encoding == "latin-1":
            return
        try:
            block.decode("utf-8")
        except UnicodeDecodeError as exc:
            first = next(k for k, b in enumerate(block) if b >= 0x80)
            if self.encoding is None and exc.start == first:
                self.encoding = "latin-1"
                return
            self.encoding = "utf-8"
            row = line + block.count(b"\n", 0, exc.start)
            raise FormatError(
                f"{where(self.source, row=row)}this line is not valid UTF-8 while earlier lines "
                "are: the file mixes text encodings; save it again in one encoding (UTF-8)"
            ) from None
        self.encoding = "utf-8"

    def decode(self, data: bytes) -> str:
        """Text of bytes taken from :meth:`blocks` (ASCII when no encoding was decided)."""
        return data.decode(self.encoding or "ascii")

    def read_text(self) -> str:
        """The whole file as text, checked as by :meth:`blocks`."""
        parts = [b.data for b in self.blocks()]
        return self.decode(b"".join(parts))


def read_text(file: str | Path | BinaryIO, source: str | None = None) -> str:
    """Whole text of a file decoded by the rules of :class:`TextSource`."""
    with TextSource(file, source) as src:
        return src.read_text()


def as_source(text: str, source: str) -> TextSource:
    """A :class:`TextSource` over text already in memory (for example standard input)."""
    return TextSource(io.BytesIO(text.encode("utf-8", "surrogatepass")), source)

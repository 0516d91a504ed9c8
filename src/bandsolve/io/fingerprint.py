"""Fingerprints of input files taken from the very bytes that were read.

A record of a run must name the content its results came from. Hashing the file again after
the run is not enough (the file may have been replaced in between), so the readers read
through :class:`HashingReader`, which updates a SHA-256 digest with every byte it hands out.
When the reader has consumed the file to its end, :meth:`HashingReader.hexdigest` is the
fingerprint of exactly what was parsed.

References
----------
NIST (2015). FIPS PUB 180-4, Secure Hash Standard (SHS), section 6.2 (SHA-256).
"""

from __future__ import annotations

import hashlib
import io
from pathlib import Path
from typing import BinaryIO

__all__ = ["HashingReader", "open_hashed"]


class HashingReader(io.RawIOBase):
    """A read-only binary file that hashes what it returns.

    Parameters
    ----------
    raw : binary file
        Open for reading; closed with this object.

    Notes
    -----
    Only forward reading is supported (no seek), so every byte is hashed once and in order.
    ``complete`` tells whether the end of the file was reached: a digest taken before that
    covers only the part read so far.
    """

    def __init__(self, raw: BinaryIO) -> None:
        super().__init__()
        self._raw = raw
        self._digest = hashlib.sha256()
        self.bytes_read = 0
        self.complete = False

    def readable(self) -> bool:
        return True

    def readinto(self, buffer) -> int:  # type: ignore[override]
        view = memoryview(buffer).cast("B")
        n = self._raw.readinto(view)
        if n is None:
            return None  # type: ignore[return-value]
        if n == 0 and len(view):
            self.complete = True
        self._digest.update(view[:n])
        self.bytes_read += n
        return n

    def read_all(self) -> bytes:
        """The rest of the file (hashed), marking the reader complete."""
        chunks = []
        while chunk := self.read(1 << 20):
            chunks.append(chunk)
        self.complete = True
        return b"".join(chunks)

    def close(self) -> None:
        if not self.closed:
            self._raw.close()
        super().close()

    def hexdigest(self) -> str:
        """SHA-256 (hex) of every byte returned so far."""
        return self._digest.hexdigest()


def open_hashed(path: str | Path) -> HashingReader:
    """Open ``path`` for reading through a :class:`HashingReader` (unbuffered: wrap it in
    :class:`io.BufferedReader` for many small reads)."""
    return HashingReader(open(path, "rb", buffering=0))

"""Fingerprints of input files taken from the very bytes that were read.

A record of a run must name the content its results came from. Hashing the file again after
the run is not enough (the file may have been replaced in between), so the readers read
through :class:`HashingReader`, which updates a SHA-256 digest with every byte it hands out.
When the reader has consumed the file to its end, :meth:`HashingReader.hexdigest` is the
fingerprint of exactly what was parsed.

A reader opened with :func:`open_hashed` also *offers* its fingerprint, when it is closed, to
every active :class:`Fingerprints` collector: this is how the results ledger learns what each
input held without the readers knowing about the ledger.

Examples
--------
>>> with Fingerprints() as seen:                       # doctest: +SKIP
...     data = read_input_bytes("batch.csv")
>>> seen.get("batch.csv").sha256                       # doctest: +SKIP

References
----------
NIST (2015). FIPS PUB 180-4, Secure Hash Standard (SHS), section 6.2 (SHA-256).
"""

from __future__ import annotations

import hashlib
import io
import os
import threading
from dataclasses import dataclass
from pathlib import Path
from typing import BinaryIO

__all__ = ["Fingerprint", "Fingerprints", "HashingReader", "open_hashed", "read_input_bytes",
           "record_bytes"]

_LOCK = threading.Lock()
_ACTIVE: list[Fingerprints] = []


@dataclass(frozen=True)
class Fingerprint:
    """SHA-256 (hex) of the bytes read from one input, their count, and whether that was all."""

    sha256: str
    n_bytes: int
    complete: bool


def _key(name: str | os.PathLike[str]) -> str:
    text = os.fspath(name)
    return text if text == "-" else os.path.abspath(text)


class Fingerprints:
    """Collects the fingerprint of every input read (in any thread) while it is active.

    Use as a context manager; :meth:`get` returns the latest fingerprint of a path (or of
    ``"-"`` for standard input), or None when that input was not read.
    """

    def __init__(self) -> None:
        self._seen: dict[str, Fingerprint] = {}

    def __enter__(self) -> Fingerprints:
        with _LOCK:
            _ACTIVE.append(self)
        return self

    def __exit__(self, *exc: object) -> None:
        with _LOCK:
            if self in _ACTIVE:
                _ACTIVE.remove(self)

    def get(self, name: str | os.PathLike[str]) -> Fingerprint | None:
        """Latest fingerprint of ``name`` (complete or not), None when it was never read."""
        return self._seen.get(_key(name))


def _offer(name: str, fingerprint: Fingerprint) -> None:
    with _LOCK:
        for collector in _ACTIVE:
            collector._seen[_key(name)] = fingerprint


class HashingReader(io.RawIOBase):
    """A read-only binary file that hashes what it returns.

    Parameters
    ----------
    raw : binary file
        Open for reading; closed with this object.
    name : str, optional
        Path (or ``"-"``) under which the fingerprint is offered to active
        :class:`Fingerprints` collectors when this reader is closed.

    Notes
    -----
    Only forward reading is supported (no seek), so every byte is hashed once and in order.
    ``complete`` tells whether the end of the file was reached: a digest taken before that
    covers only the part read so far.
    """

    def __init__(self, raw: BinaryIO, name: str | None = None) -> None:
        super().__init__()
        self._raw = raw
        self.name = name
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
            if self.name is not None:
                _offer(self.name, self.fingerprint())
        super().close()

    def hexdigest(self) -> str:
        """SHA-256 (hex) of every byte returned so far."""
        return self._digest.hexdigest()

    def fingerprint(self) -> Fingerprint:
        """What was read so far, as a :class:`Fingerprint`."""
        return Fingerprint(self.hexdigest(), self.bytes_read, self.complete)


def open_hashed(path: str | Path) -> HashingReader:
    """Open ``path`` for reading through a :class:`HashingReader` that offers its fingerprint
    on close (unbuffered: wrap it in :class:`io.BufferedReader` for many small reads)."""
    return HashingReader(open(path, "rb", buffering=0), name=os.fspath(path))


def read_input_bytes(path: str | Path) -> bytes:
    """The whole content of an input file, fingerprinted as it is read."""
    with open_hashed(path) as reader:
        return reader.read_all()


def record_bytes(name: str, data: bytes) -> Fingerprint:
    """Fingerprint bytes read from elsewhere (standard input) under ``name``."""
    fingerprint = Fingerprint(hashlib.sha256(data).hexdigest(), len(data), True)
    _offer(name, fingerprint)
    return fingerprint

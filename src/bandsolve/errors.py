"""Exceptions and warnings raised by bandsolve.

Every error a user can cause derives from :class:`BandsolveError`, so the command line can
catch one type and print its one-line message. Messages say *what* is wrong, *where* (file,
row, sample) and *how to fix it*.
"""

from __future__ import annotations

__all__ = [
    "BandsolveError",
    "BandsolveWarning",
    "DataError",
    "FormatError",
    "ModelFileError",
    "ModelError",
]


class BandsolveError(ValueError):
    """Base class of every error caused by user input or a user file."""


class DataError(BandsolveError):
    """Spectral or concentration data that cannot be used as given."""


class FormatError(BandsolveError):
    """A file whose layout or syntax cannot be read."""


class ModelError(BandsolveError):
    """A model that cannot be built or applied to the given data."""


class ModelFileError(BandsolveError):
    """A model file that is damaged, tampered with, or of an unknown schema."""


class BandsolveWarning(UserWarning):
    """Data that can be used but looks suspicious (the message says why)."""


def where(source: str | None = None, row: int | None = None, sample: str | None = None) -> str:
    """Format a location prefix such as ``"spectra.csv, row 12 (sample 'mix-3'): "``.

    Parameters
    ----------
    source : str, optional
        File name or other label of where the data came from.
    row : int, optional
        1-based row number in that file.
    sample : str, optional
        Sample identifier.
    """
    parts = []
    if source:
        parts.append(str(source))
    if row is not None:
        parts.append(f"row {row}")
    text = ", ".join(parts)
    if sample is not None:
        text = f"{text} (sample {sample!r})" if text else f"sample {sample!r}"
    return f"{text}: " if text else ""

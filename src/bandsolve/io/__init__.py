"""Readers and writers for spectra, concentration and absorptivity tables.

:func:`read_spectra` is the one entry point for spectra: a ``.jdx``/``.dx``/``.jcm``/``.jcamp``
file is read as JCAMP-DX, anything else as delimited text (wide, transposed, long or
single-spectrum layout; delimiter and decimal mark sniffed), and a folder as every spectra
file below it (:func:`~bandsolve.io.single.read_folder`; the same meaning in every command).
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

from bandsolve.io.csv_spectra import iter_spectra_chunks as _iter_csv_chunks
from bandsolve.io.csv_spectra import read_spectra_text, write_spectra_csv
from bandsolve.io.jcamp import JCAMP_SUFFIXES, read_jcamp
from bandsolve.io.single import expand_inputs, read_file, read_folder
from bandsolve.io.tables import read_absorptivities, read_concentrations, write_concentrations_csv
from bandsolve.spectra import SpectralSet

__all__ = [
    "read_spectra",
    "read_spectra_text",
    "expand_inputs",
    "iter_spectra_chunks",
    "read_jcamp",
    "read_concentrations",
    "read_absorptivities",
    "write_spectra_csv",
    "write_concentrations_csv",
]


def read_spectra(path: str | Path, *, layout: str = "auto", axis_unit: str | None = None,
                 quantity: str | None = None, path_length_cm: float | None = None,
                 replicates: str = "error", pattern: str | None = None) -> SpectralSet:
    """Read spectra from a text file, a JCAMP-DX file or a folder of spectra files.

    Parameters
    ----------
    path : path-like
        File or folder.
    layout : {"auto", "wide", "transposed", "long", "single"}
        Layout of text files (see :mod:`bandsolve.io.csv_spectra`).
    axis_unit : str, optional
        ``nm``, ``um`` or ``cm-1``. Default: what the file states (``# axis_unit:`` line or
        ``##XUNITS``), else a guess from the range (nm when unclear, with a warning).
    quantity : str, optional
        ``absorbance`` (default), ``transmittance`` or ``percent_transmittance``; kept as
        read (convert with :meth:`SpectralSet.to_absorbance`). Default: what the file states.
    path_length_cm : float, optional
        Cell path length in cm.
    replicates : {"error", "average"}
        Spectra sharing an id are an error (naming the rows) or are averaged.
    pattern : str, optional
        File pattern inside a folder (for example ``"*.csv"``); default: every file with a
        spectra ending. Folders are always searched recursively.

    Returns
    -------
    SpectralSet
        Spectra of shape (n, p) on an ascending axis.

    Raises
    ------
    FormatError, DataError
        With the file, line and/or sample, what is wrong and how to fix it.

    Examples
    --------
    >>> spectra = read_spectra("standards.csv")  # doctest: +SKIP
    """
    options = dict(axis_unit=axis_unit, quantity=quantity, path_length_cm=path_length_cm,
                   replicates=replicates)
    if Path(path).is_dir():
        return read_folder(path, pattern=pattern, layout=layout, **options)
    return read_file(path, layout=layout, **options)


def iter_spectra_chunks(path: str | Path, chunk_size: int, **options) -> Iterator[SpectralSet]:
    """Yield the spectra of ``path`` in sets of at most ``chunk_size``.

    Text files are read in blocks of whole lines and, for a wide table, yielded block by block
    (memory bounded by bytes whatever the file length), exactly as :func:`read_spectra` reads
    them (options ``layout``, ``axis_unit``, ``quantity``, ``path_length_cm``, ``budget``);
    other inputs (JCAMP-DX files, folders) are read whole and yielded as one set.
    """
    if Path(path).is_dir() or Path(path).suffix.lower() in JCAMP_SUFFIXES:
        yield read_spectra(path, **options)
        return
    yield from _iter_csv_chunks(path, chunk_size, **options)

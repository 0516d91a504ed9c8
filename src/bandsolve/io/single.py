"""One spectrum per file: dispatch of a single file by its extension, and whole folders."""

from __future__ import annotations

import warnings
from pathlib import Path

from bandsolve.errors import BandsolveWarning, FormatError, where
from bandsolve.io._build import Options, build, final_checks
from bandsolve.io.csv_spectra import read_spectra_file
from bandsolve.io.jcamp import JCAMP_SUFFIXES, read_jcamp
from bandsolve.spectra import SpectralSet, concat

__all__ = ["read_file", "read_folder"]


def read_file(path: str | Path, *, layout: str = "auto", axis_unit: str | None = None,
              quantity: str | None = None, path_length_cm: float | None = None,
              replicates: str = "error") -> SpectralSet:
    """Read one file: JCAMP-DX by extension (``.jdx``, ``.dx``, ``.jcm``, ``.jcamp``), else text."""
    path = Path(path)
    options = dict(axis_unit=axis_unit, quantity=quantity, path_length_cm=path_length_cm,
                   replicates=replicates)
    if path.suffix.lower() in JCAMP_SUFFIXES:
        return read_jcamp(path, **options)
    return read_spectra_file(path, layout=layout, **options)


def read_folder(folder: str | Path, *, pattern: str = "*", recursive: bool = False,
                layout: str = "auto", axis_unit: str | None = None,
                quantity: str | None = None, path_length_cm: float | None = None,
                replicates: str = "error") -> SpectralSet:
    """Read a folder of one-spectrum files into one set; the sample id is the file stem.

    Files matching ``pattern`` (sorted by name; hidden files skipped) must each hold one
    spectrum, all on the same axis grid, unit and quantity. With ``recursive=True`` the ids
    are the paths relative to ``folder`` without extension (``day1/mix-3``).

    Raises
    ------
    FormatError, DataError
        For an empty folder, a file with several spectra, or mixed grids (naming both files).
    """
    root = Path(folder)
    found = root.rglob(pattern) if recursive else root.glob(pattern)
    files = sorted(p for p in found if p.is_file()
                   and not any(part.startswith(".") for part in p.relative_to(root).parts))
    if not files:
        raise FormatError(f"{where(str(root))}no files match {pattern!r}; check the folder and "
                          "the file pattern")
    sets = []
    for path in files:
        with warnings.catch_warnings():  # warn once, about the whole folder, below
            warnings.simplefilter("ignore", BandsolveWarning)
            one = read_file(path, layout=layout, axis_unit=axis_unit, quantity=quantity,
                            path_length_cm=path_length_cm)
        if one.n_samples != 1:
            raise FormatError(f"{where(str(path))}{one.n_samples} spectra in a file of a folder "
                              "of single spectra; keep one spectrum per file")
        sets.append(one)
    combined = concat(sets)
    ids = [p.relative_to(root).with_suffix("").as_posix() for p in files]
    options = Options(combined.axis_unit, combined.quantity, combined.path_length_cm, replicates)
    return final_checks(build(combined.axis, combined.values, ids,
                              [f"file {p.name}" for p in files], options, str(root),
                              unit_from=sets[0].metadata["axis_unit_from"]))

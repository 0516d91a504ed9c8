"""Files and folders: one file dispatched by its extension, and what a folder means."""

from __future__ import annotations

import dataclasses
import os
import warnings
from collections.abc import Sequence
from pathlib import Path

from bandsolve.errors import BandsolveWarning, FormatError, where
from bandsolve.io._build import Options, build, final_checks
from bandsolve.io.csv_spectra import read_spectra_file
from bandsolve.io.jcamp import JCAMP_SUFFIXES, read_jcamp
from bandsolve.spectra import SpectralSet, concat

__all__ = ["SPECTRA_SUFFIXES", "expand_inputs", "folder_files", "read_file", "read_folder"]


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


#: Endings of spectra files searched for in folders when no pattern is given.
SPECTRA_SUFFIXES = (".csv", ".txt", ".tsv", ".dat", ".prn", ".jdx", ".dx", ".jcamp", ".jcm")


def _broken_link(path: Path) -> bool:
    return path.is_symlink() and not path.exists()


def folder_files(folder: str | Path, pattern: str | None = None) -> list[Path]:
    """The spectra files below ``folder``, searched recursively, sorted by path.

    Hidden files and folders are skipped. Without ``pattern`` every file with an ending in
    :data:`SPECTRA_SUFFIXES` is taken; with it, the files matching that glob. Broken symbolic
    links are listed too (never skipped silently): reading them fails with their reason.

    Raises
    ------
    FormatError
        When nothing is found (naming the folder and the pattern).
    """
    root = Path(folder)
    found = root.rglob(pattern) if pattern else (
        p for p in root.rglob("*") if p.suffix.lower() in SPECTRA_SUFFIXES)
    files = sorted(p for p in found if (p.is_file() or _broken_link(p))
                   and not any(part.startswith(".") for part in p.relative_to(root).parts))
    if not files:
        raise FormatError(f"{where(str(root))}no spectra files"
                          + (f" match {pattern!r}" if pattern else
                             f" (endings {', '.join(SPECTRA_SUFFIXES)})")
                          + "; check the folder and the file pattern")
    return files


def expand_inputs(inputs: Sequence[str], pattern: str | None = None) -> list[str]:
    """Files to read: files (and ``-`` for standard input) as given, folders expanded by
    :func:`folder_files`."""
    files: list[str] = []
    for item in inputs:
        if item == "-" or not Path(item).is_dir():
            files.append(item)
        else:
            files.extend(str(p) for p in folder_files(item, pattern))
    return files


def read_folder(folder: str | Path, *, pattern: str | None = None, layout: str = "auto",
                axis_unit: str | None = None, quantity: str | None = None,
                path_length_cm: float | None = None, replicates: str = "error") -> SpectralSet:
    """Read every spectra file below ``folder`` (:func:`folder_files`) into one set.

    This is what a folder means everywhere in bandsolve: each file is read as it would be
    alone and may hold one spectrum or many. A file whose one spectrum is named after the
    file (two columns, axis and signal) takes its path relative to ``folder`` without the
    ending as its sample id (``mix-3``, or ``day1/mix-3`` in a sub-folder); other files keep
    the sample ids they hold. All files must share one axis grid, unit and quantity.

    Raises
    ------
    FormatError, DataError
        For an empty folder, mixed grids (naming both files) or repeated sample ids.
    """
    root = Path(folder)
    files = folder_files(root, pattern)
    sets, ids, rows = [], [], []
    broken = [p for p in files if _broken_link(p)]
    if broken:
        raise FormatError(f"{where(str(broken[0]))}a symbolic link to "
                          f"{os.readlink(broken[0])}, which does not exist; fix or remove the "
                          "link (or choose the files with a pattern)")
    for path in files:
        with warnings.catch_warnings():  # warn once, about the whole folder, below
            warnings.simplefilter("ignore", BandsolveWarning)
            one = read_file(path, layout=layout, axis_unit=axis_unit, quantity=quantity,
                            path_length_cm=path_length_cm)
        rel = path.relative_to(root).with_suffix("").as_posix()
        if one.n_samples == 1 and one.sample_ids[0] == path.stem:  # named after its file
            one = dataclasses.replace(one, sample_ids=(rel,))
        ids += list(one.sample_ids)
        rows += [f"file {rel}"] * one.n_samples
        sets.append(one)
    combined = concat(sets)
    options = Options(combined.axis_unit, combined.quantity, combined.path_length_cm, replicates)
    return final_checks(build(combined.axis, combined.values, ids, rows, options, str(root),
                              unit_from=sets[0].metadata["axis_unit_from"]))

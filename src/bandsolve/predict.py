"""Batch prediction over many input files: every good file predicted, every bad one reported."""

from __future__ import annotations

import os
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd

from .errors import BandsolveError, DataError
from .model import Calibration

__all__ = ["BatchFailure", "BatchResult", "expand_inputs", "predict_inputs"]

#: File endings read from folders when no pattern is given.
SPECTRA_SUFFIXES = (".csv", ".txt", ".tsv", ".dat", ".prn", ".jdx", ".dx", ".jcamp", ".jcm")


@dataclass(frozen=True)
class BatchFailure:
    """One input that could not be predicted, and why."""

    input: str
    reason: str


@dataclass
class BatchResult:
    """Results of a batch: one table for all good inputs, and the failures."""

    table: pd.DataFrame
    failures: list[BatchFailure] = field(default_factory=list)
    inputs: list[str] = field(default_factory=list)

    @property
    def n_flagged(self) -> int:
        """Number of result rows with at least one flag."""
        return int((self.table["flags"].astype(str) != "").sum()) if len(self.table) else 0


def expand_inputs(inputs: Sequence[str], pattern: str | None = None) -> list[str]:
    """Files to read: plain files as given, folders searched recursively.

    Parameters
    ----------
    inputs : sequence of str
        Files, folders, or ``-`` for standard input.
    pattern : str, optional
        Glob applied inside folders (default: every file with a spectra ending).
    """
    files: list[str] = []
    for item in inputs:
        path = Path(item)
        if item == "-" or not path.is_dir():
            files.append(item)
            continue
        found = sorted(path.rglob(pattern)) if pattern else sorted(
            p for p in path.rglob("*") if p.suffix.lower() in SPECTRA_SUFFIXES)
        found = [p for p in found if p.is_file() and not p.name.startswith(".")]
        if not found:
            raise DataError(f"{item}: folder holds no spectra files"
                            + (f" matching {pattern!r}" if pattern else ""))
        files.extend(str(p) for p in found)
    return files


def _read(item: str, read_options: dict[str, Any], stdin_text: str | None):
    from .io import read_spectra, read_spectra_text

    if item == "-":
        return read_spectra_text(stdin_text or "", source="<stdin>", **read_options)
    if not os.path.exists(item):
        raise DataError(f"{item}: no such file")
    return read_spectra(item, **read_options)


def predict_inputs(model: Calibration, inputs: Sequence[str], *,
                   read_options: dict[str, Any] | None = None, pattern: str | None = None,
                   stdin_text: str | None = None) -> BatchResult:
    """Predict every spectrum in ``inputs``; a bad file is recorded and skipped.

    Returns
    -------
    BatchResult
        ``table`` has the columns of :meth:`Calibration.predict` for all good inputs, in
        input order; ``failures`` names each input that could not be read or predicted.
    """
    files = expand_inputs(inputs, pattern)
    frames, failures = [], []
    for item in files:
        try:
            frames.append(model.predict(_read(item, read_options or {}, stdin_text)))
        except BandsolveError as exc:
            failures.append(BatchFailure(item, str(exc)))
    table = pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(
        columns=["sample", "source", "flags"])
    return BatchResult(table=table, failures=failures, inputs=files)

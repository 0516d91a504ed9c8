"""Concentration tables and absorptivity (pure-component) tables in delimited text."""

from __future__ import annotations

import io
import warnings
from collections.abc import Sequence
from dataclasses import replace
from pathlib import Path

import numpy as np

from bandsolve.concentrations import ConcentrationTable, split_unit
from bandsolve.errors import BandsolveWarning, DataError, FormatError, where
from bandsolve.io._source import read_text
from bandsolve.io._text import (
    Dialect,
    Row,
    data_lines,
    is_number,
    sniff,
    split_rows,
    to_numbers,
)
from bandsolve.io.atomic import atomic_write
from bandsolve.io.csv_spectra import read_spectra_text
from bandsolve.spectra import SpectralSet

__all__ = ["read_concentrations", "read_absorptivities", "write_concentrations_csv"]


def read_concentrations(path: str | Path, *,
                        label_columns: Sequence[str] = ()) -> ConcentrationTable:
    """Read known concentrations: first column the sample id, one column per analyte.

    The header cells are the analyte labels, unit bracket included (``dye A [mg/L]``); they
    are kept exactly. A label without a unit gives one :class:`BandsolveWarning` per table.
    Delimiter and decimal mark are sniffed as for spectra; ``#`` lines are comments.

    Parameters
    ----------
    path : path-like
        Text file, one row per sample.
    label_columns : sequence of str, optional
        Header labels of columns that hold text labels rather than concentrations (for
        example ``("batch",)`` for cross-validation groups). They are left out of the
        analytes and returned in :attr:`ConcentrationTable.labels`.

    Returns
    -------
    ConcentrationTable
        Values of shape (n samples, m analytes) in each analyte's unit; ``labels`` maps each
        label column to its n text labels.

    Raises
    ------
    FormatError
        For a missing header, an empty or non-numeric cell (naming the line and the column),
        a column of text not named in ``label_columns``, a named label column that does not
        exist, or an id given twice (naming both lines).
    DataError
        For a negative concentration (naming the line, sample and column).
    """
    source = str(path)
    numbered = list(data_lines(io.StringIO(read_text(path)), {}))
    dialect = sniff([t for _, t in numbered], source)
    rows = split_rows(numbered, dialect, None, source)
    header, body = rows[0], rows[1:]
    columns = header.cells[1:]
    for k, label in enumerate(columns):
        if not label:
            raise FormatError(f"{where(source, row=header.line)}column {k + 2} has no analyte "
                              "label; name it, e.g. 'dye A [mg/L]'")
    if not body:
        raise FormatError(f"{where(source)}no sample rows after the header line")
    wanted = [str(c) for c in label_columns]
    absent = [c for c in wanted if c not in columns]
    if absent:
        raise FormatError(
            f"{where(source, row=header.line)}no column {absent[0]!r} to read labels from; the "
            f"columns are {', '.join(repr(c) for c in columns)} (labels must match exactly)"
        )
    first_line = _sample_lines(body, source)
    is_label = [c in wanted for c in columns]
    analytes = [c for c, lab in zip(columns, is_label, strict=True) if not lab]
    _refuse_text_columns(body, columns, is_label, dialect, source)
    values = []
    for r in body:
        cells = [c for c, lab in zip(r.cells[1:], is_label, strict=True) if not lab]
        row = to_numbers(cells, dialect, source=source, line=r.line, names=analytes,
                         what="concentration", sample=r.cells[0])
        _refuse_negative(row, analytes, source, r)
        values.append(row)
    labels = {name: _label_column(body, 1 + columns.index(name), name, source)
              for name in dict.fromkeys(wanted)}
    _warn_missing_units(analytes, source)
    return ConcentrationTable(tuple(first_line), tuple(analytes), values, source, labels)


def _sample_lines(body: Sequence[Row], source: str) -> dict[str, int]:
    """Line number of each sample id; refuses empty and repeated ids."""
    first_line: dict[str, int] = {}
    for r in body:
        sample = r.cells[0]
        if not sample:
            raise FormatError(f"{where(source, row=r.line)}empty sample id; give the row an id")
        if sample in first_line:
            raise FormatError(
                f"{where(source, row=r.line, sample=sample)}sample id appears twice (lines "
                f"{first_line[sample]} and {r.line}); each sample needs one row"
            )
        first_line[sample] = r.line
    return first_line


def _refuse_text_columns(body: Sequence[Row], columns: Sequence[str], is_label: Sequence[bool],
                         dialect: Dialect, source: str) -> None:
    """A column with no number at all holds labels, not concentrations: say how to read it."""
    for k, name in enumerate(columns):
        cells = [r.cells[k + 1] for r in body]
        if is_label[k] or any(is_number(c, dialect.decimal) for c in cells):
            continue
        raise FormatError(
            f"{where(source)}column {name!r} holds text ({cells[0][:20]!r} in line "
            f"{body[0].line}), not concentrations; if it holds labels such as groups, read it "
            f"as a label column (--cv groups:{name} uses it for cross-validation; "
            f"label_columns=[{name!r}] in Python), else remove the column"
        )


def _refuse_negative(row: np.ndarray, analytes: Sequence[str], source: str, r: Row) -> None:
    negative = np.flatnonzero(row < 0)
    if negative.size:
        j = int(negative[0])
        raise DataError(
            f"{where(source, row=r.line, sample=r.cells[0])}concentration {row[j]:g} in column "
            f"{analytes[j]!r} is negative; a concentration cannot be below zero, so correct it "
            "(0 for absent)"
        )


def _label_column(body: Sequence[Row], k: int, name: str, source: str) -> tuple[str, ...]:
    for r in body:
        if not r.cells[k]:
            raise FormatError(f"{where(source, row=r.line, sample=r.cells[0])}label column "
                              f"{name!r} is empty; give every row a label")
    return tuple(r.cells[k] for r in body)


def _warn_missing_units(analytes: Sequence[str], source: str) -> None:
    bare = [a for a in analytes if split_unit(a)[1] is None]
    if bare:
        warnings.warn(
            f"{where(source)}column(s) {', '.join(repr(a) for a in bare)} state no unit; write "
            f"the unit in brackets, e.g. '{split_unit(bare[0])[0]} [mg/L]', so results carry "
            "units",
            BandsolveWarning,
            stacklevel=3,
        )


def read_absorptivities(path: str | Path, *, axis_unit: str | None = None) -> SpectralSet:
    """Read pure-component absorptivity spectra (the K matrix of CLS).

    Layout as wide spectra: first column the component label, header cells the axis values.

    Convention: the component label *is* the analyte label, unit bracket included
    (``dye A [mg/L]``), so it matches the concentration table's column. The values are
    absorbance per (concentration unit × cm), e.g. L mol⁻¹ cm⁻¹ for a ``[mol/L]`` label. A
    ``# unit: L/(mol cm)`` comment line, when present, is kept in ``metadata["unit"]``.

    Parameters
    ----------
    path : path-like
        Text file, one row per component.
    axis_unit : str, optional
        As for :func:`bandsolve.io.read_spectra`.

    Returns
    -------
    SpectralSet
        ``quantity="absorptivity"``, shape (k components, p points).
    """
    text = read_text(path)
    meta: dict[str, str] = {}
    for _ in data_lines(io.StringIO(text), meta):
        pass
    spectra = read_spectra_text(text, str(path), layout="wide", axis_unit=axis_unit,
                                quantity="absorptivity")
    if "unit" in meta:
        spectra = replace(spectra, metadata=dict(spectra.metadata, unit=meta["unit"]))
    return spectra


def write_concentrations_csv(table: ConcentrationTable, path: str | Path) -> None:
    """Write a concentration table as comma-separated text readable by
    :func:`read_concentrations` (17 significant digits, so the round trip is exact). Only the
    analyte columns are written, not :attr:`ConcentrationTable.labels`.

    The file is written atomically: a reader never sees a partial file.
    """
    for label in (*table.sample_ids, *table.analytes):
        if any(ch in label for ch in ',"\n\r') or label != label.strip() or label.startswith("#"):
            raise FormatError(
                f"label {label!r} cannot be written to CSV unchanged (it holds a comma, quote, "
                "line break, leading '#' or outer spaces); rename it"
            )
    lines = [",".join(["sample", *table.analytes])]
    for sample, row in zip(table.sample_ids, table.values, strict=True):
        lines.append(",".join([sample, *(repr(float(v)) for v in row)]))
    with atomic_write(path, "w", newline="") as handle:
        handle.write("\n".join(lines) + "\n")

"""Concentration tables and absorptivity (pure-component) tables in delimited text."""

from __future__ import annotations

import io
from dataclasses import replace
from pathlib import Path

from ..concentrations import ConcentrationTable
from ..errors import FormatError, where
from ..spectra import SpectralSet
from ._text import data_lines, read_text, sniff, split_rows, to_numbers
from .atomic import atomic_write
from .csv_spectra import read_spectra_text

__all__ = ["read_concentrations", "read_absorptivities", "write_concentrations_csv"]


def read_concentrations(path: str | Path) -> ConcentrationTable:
    """Read known concentrations: first column the sample id, one column per analyte.

    The header cells are the analyte labels, unit bracket included (``dye A [mg/L]``); they
    are kept exactly. Delimiter and decimal mark are sniffed as for spectra; ``#`` lines are
    comments.

    Parameters
    ----------
    path : path-like
        Text file, one row per sample.

    Returns
    -------
    ConcentrationTable
        Values of shape (n samples, m analytes) in each analyte's unit.

    Raises
    ------
    FormatError
        For a missing header, an empty or non-numeric cell (naming the line and the column),
        or an id given twice (naming both lines).
    """
    source = str(path)
    numbered = list(data_lines(io.StringIO(read_text(path)), {}))
    dialect = sniff([t for _, t in numbered], source)
    rows = split_rows(numbered, dialect, None, source)
    header, body = rows[0], rows[1:]
    analytes = header.cells[1:]
    for k, label in enumerate(analytes):
        if not label:
            raise FormatError(f"{where(source, row=header.line)}column {k + 2} has no analyte "
                              "label; name it, e.g. 'dye A [mg/L]'")
    if not body:
        raise FormatError(f"{where(source)}no sample rows after the header line")
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
    values = [to_numbers(r.cells[1:], dialect, source=source, line=r.line, names=analytes,
                         what="concentration") for r in body]
    return ConcentrationTable(tuple(first_line), tuple(analytes), values, source)


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
    :func:`read_concentrations` (17 significant digits, so the round trip is exact).

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

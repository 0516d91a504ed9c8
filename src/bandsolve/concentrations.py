"""Reference concentrations of the analytes, and matching them to spectra by sample id."""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from bandsolve.errors import DataError, where
from bandsolve.spectra import SpectralSet

__all__ = ["ConcentrationTable", "split_unit", "align"]

_UNIT_RE = re.compile(r"^(?P<name>.*?)\s*\[(?P<unit>[^\[\]]*)\]\s*$")


def split_unit(label: str) -> tuple[str, str | None]:
    """Split a column label such as ``"dye A [mg/L]"`` into ``("dye A", "mg/L")``.

    A label without a bracketed unit gives ``(label, None)``.
    """
    m = _UNIT_RE.match(label.strip())
    if m is None:
        return label.strip(), None
    return m.group("name").strip(), (m.group("unit").strip() or None)


@dataclass(frozen=True, eq=False)
class ConcentrationTable:
    """Known analyte concentrations, one row per sample.

    Parameters
    ----------
    sample_ids : sequence of str, length n
        Unique sample identifiers matching the spectra.
    analytes : sequence of str, length m
        Column labels exactly as given, unit bracket included (``"dye A [mg/L]"``). Every
        output column of a model carries these labels, so results join to reference tables.
    values : array_like, shape (n, m)
        Concentrations in each analyte's unit.
    source : str, optional
        File the table came from, for messages.
    labels : dict of str to sequence of str, optional
        Text columns that are not analytes, such as a batch or day used as cross-validation
        groups: column label → one text label per sample (length n, in ``sample_ids`` order).
        Stored as tuples; empty by default.
    """

    sample_ids: tuple[str, ...]
    analytes: tuple[str, ...]
    values: np.ndarray
    source: str | None = None
    labels: dict[str, tuple[str, ...]] = field(default_factory=dict)

    def __post_init__(self) -> None:
        ids = tuple(str(s) for s in self.sample_ids)
        analytes = tuple(str(a) for a in self.analytes)
        try:  # a copy, so freezing it never makes the caller's array read-only
            values = np.array(self.values, dtype=float)
        except (TypeError, ValueError) as exc:
            raise DataError(f"{where(self.source)}concentrations must be numbers ({exc})") from None
        if values.ndim == 1:
            values = values[:, np.newaxis]
        if values.shape != (len(ids), len(analytes)):
            raise DataError(
                f"{where(self.source)}table has shape {values.shape} but {len(ids)} samples and "
                f"{len(analytes)} analytes were named"
            )
        if not analytes:
            raise DataError(f"{where(self.source)}no analyte columns after the sample id column")
        dup = [a for a in set(analytes) if analytes.count(a) > 1]
        if dup:
            raise DataError(f"{where(self.source)}analyte column {dup[0]!r} appears twice")
        seen: dict[str, int] = {}
        for i, s in enumerate(ids):
            if s in seen:
                raise DataError(
                    f"{where(self.source, row=i + 2)}sample id {s!r} appears twice (rows "
                    f"{seen[s] + 2} and {i + 2}); each sample needs one row"
                )
            seen[s] = i
        bad = ~np.isfinite(values)
        if bad.any():
            i, j = np.argwhere(bad)[0]
            raise DataError(
                f"{where(self.source, row=i + 2, sample=ids[i])}concentration of "
                f"{analytes[j]!r} is missing or not a number; fill it in (0 for absent)"
            )
        labels = {str(k): tuple(str(v) for v in col) for k, col in dict(self.labels).items()}
        for name, col in labels.items():
            if name in analytes:
                raise DataError(f"{where(self.source)}column {name!r} is named both as an analyte "
                                "and as a label column; give it one role")
            if len(col) != len(ids):
                raise DataError(f"{where(self.source)}label column {name!r} has {len(col)} "
                                f"entries for {len(ids)} samples; give one label per sample")
        values.setflags(write=False)
        object.__setattr__(self, "labels", labels)
        object.__setattr__(self, "sample_ids", ids)
        object.__setattr__(self, "analytes", analytes)
        object.__setattr__(self, "values", values)

    @property
    def names(self) -> tuple[str, ...]:
        """Analyte names without units."""
        return tuple(split_unit(a)[0] for a in self.analytes)

    @property
    def units(self) -> tuple[str | None, ...]:
        """Units from the bracket in each column label (None where absent)."""
        return tuple(split_unit(a)[1] for a in self.analytes)

    def to_frame(self) -> pd.DataFrame:
        """Table with the sample id as index and one column per analyte label (label columns
        are left out; they are in :attr:`labels`)."""
        return pd.DataFrame(
            np.array(self.values), index=pd.Index(self.sample_ids, name="sample"),
            columns=list(self.analytes),
        )

    def subset(self, ids: Sequence[str]) -> ConcentrationTable:
        """Rows for ``ids``, in that order (label columns included)."""
        pos = {s: i for i, s in enumerate(self.sample_ids)}
        missing = [s for s in ids if s not in pos]
        if missing:
            raise DataError(
                f"{where(self.source)}no concentration row for sample(s) {_few(missing)}"
            )
        idx = [pos[s] for s in ids]
        labels = {name: tuple(col[i] for i in idx) for name, col in self.labels.items()}
        return ConcentrationTable(tuple(ids), self.analytes, self.values[idx], self.source,
                                  labels)


def align(
    spectra: SpectralSet, table: ConcentrationTable
) -> tuple[SpectralSet, ConcentrationTable]:
    """Match spectra and concentrations by sample id, in the spectra's order.

    Raises
    ------
    DataError
        When any concentration row has no spectrum or any spectrum has no concentration row;
        the message names the files and up to five of the unmatched ids.
    """
    spec_ids, conc_ids = set(spectra.sample_ids), set(table.sample_ids)
    no_spec = [s for s in table.sample_ids if s not in spec_ids]
    no_conc = [s for s in spectra.sample_ids if s not in conc_ids]
    problems = []
    if no_spec:
        problems.append(
            f"{len(no_spec)} sample(s) in {table.source or 'the concentration table'} have no "
            f"spectrum in {spectra.source or 'the spectra'}: {_few(no_spec)}"
        )
    if no_conc:
        problems.append(
            f"{len(no_conc)} spectrum/spectra in {spectra.source or 'the spectra'} have no row in "
            f"{table.source or 'the concentration table'}: {_few(no_conc)}"
        )
    if problems:
        raise DataError("; ".join(problems) + "; sample ids must match exactly (case included)")
    return spectra, table.subset(spectra.sample_ids)


def _few(ids: Sequence[str]) -> str:
    shown = ", ".join(repr(s) for s in ids[:5])
    return shown + (f" and {len(ids) - 5} more" if len(ids) > 5 else "")

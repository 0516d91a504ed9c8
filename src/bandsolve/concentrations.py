"""Reference concentrations of the analytes, and matching them to spectra by sample id."""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from bandsolve._spectra_checks import first_nonfinite
from bandsolve.errors import DataError, where
from bandsolve.spectra import SpectralSet

__all__ = ["ConcentrationTable", "split_unit", "align", "group_labels", "groups_in_order",
           "labels_from_ids", "range_text", "reference_matrix"]

_UNIT_RE = re.compile(r"^(?P<name>.*?)\s*\[(?P<unit>[^\[\]]*)\]\s*$")


def range_text(low: float, high: float) -> str:
    """A concentration range as people write it: ``"0 to 12"``, or ``"0 and above (no
    validated range stated)"`` when the top is infinite."""
    if np.isinf(high):
        return f"{low:g} and above (no validated range stated)"
    return f"{low:g} to {high:g}"


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
        first = first_nonfinite(values)
        if first is not None:
            i, j, _ = first
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


def reference_matrix(table: ConcentrationTable, analytes: Sequence[str]) -> np.ndarray:
    """The table's concentrations (n × m) in the order of ``analytes`` (exact labels).

    Raises
    ------
    DataError
        When a label has no column, saying which column holds that analyte in another unit.
    """
    by_name = {split_unit(a)[0]: a for a in table.analytes}
    columns = []
    for label in analytes:
        if label not in table.analytes:
            found = by_name.get(split_unit(label)[0])
            hint = (f"its column is {found!r}: convert to the unit {label!r} needs" if found
                    else f"add a column {label!r}")
            raise DataError(f"{table.source or 'the concentration table'} has no column "
                            f"{label!r}; {hint}")
        columns.append(table.analytes.index(label))
    return np.asarray(table.values)[:, columns]


def group_labels(table: ConcentrationTable, key: str) -> pd.Series:
    """Cross-validation group of each sample, as a Series indexed by sample id.

    Parameters
    ----------
    table : ConcentrationTable
    key : str
        A text column of the table (read with ``label_columns=[key]``), or ``~REGEX``: the
        first capture group (or the whole match) of the pattern in each sample id.

    Raises
    ------
    DataError
        When the column is missing or a sample id does not match the pattern.
    """
    if not key.startswith("~"):
        if key not in table.labels:
            raise DataError(f"{where(table.source)}no label column {key!r} for the groups; "
                            f"read the table with label_columns=[{key!r}] or name one of its "
                            "text columns")
        return pd.Series(table.labels[key], index=list(table.sample_ids), name=key)
    labels = labels_from_ids(table.sample_ids, key[1:], table.source)
    return pd.Series(labels, index=list(table.sample_ids), name=key)


def labels_from_ids(sample_ids: Sequence[str], pattern: str,
                    source: str | None = None) -> list[str]:
    """Group of each sample id: the first capture group (or the whole match) of ``pattern``.

    Raises
    ------
    DataError
        When the pattern is not a valid regular expression or a sample id does not match it
        (naming the sample, and ``source`` when given).
    """
    try:
        rx = re.compile(pattern)
    except re.error as exc:
        raise DataError(f"{where(source)}the group pattern {pattern!r} is not a valid regular "
                        f"expression ({exc})") from None
    labels = []
    for s in sample_ids:
        m = rx.search(s)
        if m is None:
            raise DataError(f"{where(source, sample=s)}sample id does not match the group "
                            f"pattern {pattern!r}; write a pattern every sample id matches")
        labels.append(m.group(1) if m.groups() else m.group(0))
    return labels


def groups_in_order(groups: Mapping[str, object] | pd.Series,
                    sample_ids: Sequence[str]) -> np.ndarray:
    """Group labels of ``sample_ids`` from labels keyed by sample id, in that order.

    Parameters
    ----------
    groups : mapping or pandas.Series
        Sample id → group label (a dict, or a Series indexed by sample id). A plain sequence
        is refused: its order could silently differ from the spectra's.
    sample_ids : sequence of str
        The samples whose groups are wanted.

    Raises
    ------
    DataError
        For a plain sequence, or when a sample has no group (naming up to five).
    """
    if isinstance(groups, pd.Series):
        groups = groups.to_dict()
    if not isinstance(groups, Mapping):
        raise DataError("groups must map each sample id to its group (a dict, or a pandas "
                        "Series indexed by sample id), not a list in some order; for example "
                        "concentrations.group_labels(table, 'batch')")
    missing = [s for s in sample_ids if s not in groups]
    if missing:
        unknown = [str(k) for k in groups if k not in set(sample_ids)]
        raise DataError(f"{len(missing)} sample(s) have no group: {_few(missing)}"
                        + (f"; the groups name unknown samples {_few(unknown)}"
                           if unknown else "") + "; key the groups by the exact sample ids")
    return np.asarray([groups[s] for s in sample_ids])

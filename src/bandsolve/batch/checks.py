"""Check standards in a batch: recovery of known values and acceptance of the batch.

A lab runs samples of known composition (*check standards*, QC samples) with every batch.
They are declared by a table of known values whose first column holds sample ids or glob
patterns (``QC-*`` matches ``QC-0412``), optionally with a text column marking which rows
are check standards. For every check standard and analyte the batch reports

    recovery = 100 % · found / expected

and whether the result lies inside its acceptance limits: a recovery range given by the user
(for example 95–105 %), or, by default, ``expected ± 3·SE`` with the SE the model reports
for that result (its validated SE when the model carries one). A batch with any check
outside its limits is flagged. The rows go to the results ledger with the run
(:meth:`bandsolve.batch.ledger.LedgerRecorder.record_checks`).

References
----------
Common practice of analytical quality control: ISO/IEC 17025:2017 §7.7 (monitoring the
validity of results) and the Eurachem guide *The Fitness for Purpose of Analytical Methods*
(2nd ed., 2014) describe check standards and control limits (from memory).
"""

from __future__ import annotations

import fnmatch
import math
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from bandsolve.calibration.model import result_columns
from bandsolve.concentrations import ConcentrationTable
from bandsolve.errors import DataError

__all__ = ["CheckStandards", "CheckSink", "CheckReport", "CHECK_COLUMNS", "SE_MULTIPLIER"]

#: Default acceptance half-width, in SEs of the result.
SE_MULTIPLIER = 3.0

#: Columns of :attr:`CheckReport.table` (and of the ledger's check table).
CHECK_COLUMNS = ("sample", "standard", "analyte", "expected", "found", "se", "recovery_pct",
                 "low", "high", "passed", "basis")

_YES = {"1", "yes", "y", "true", "x", "check", "qc"}


@dataclass(frozen=True)
class CheckStandards:
    """Which samples are check standards and what they should read.

    Parameters
    ----------
    known : ConcentrationTable
        Expected concentrations; its sample ids are exact ids or glob patterns (``*``,
        ``?``, ``[...]``; case-sensitive). Analyte columns must carry the model's labels.
    marker : str, optional
        A text column of ``known`` (in :attr:`ConcentrationTable.labels`) marking check
        standards (``yes``, ``1``, ``true``, ``x``); other rows are ignored.
    recovery_limits : (float, float), optional
        Acceptance range of the recovery in %; default ``expected ± 3·SE`` of each result.
    """

    known: ConcentrationTable
    marker: str | None = None
    recovery_limits: tuple[float, float] | None = None

    def __post_init__(self) -> None:
        if self.marker is not None and self.marker not in self.known.labels:
            raise DataError(f"{self.known.source or 'the check table'} has no text column "
                            f"{self.marker!r} marking check standards; name an existing column")
        lim = self.recovery_limits
        if lim is not None and not (0 <= lim[0] < lim[1]):
            raise DataError(f"check limits {lim[0]:g}-{lim[1]:g} % are not a range; give "
                            "LOW-HIGH in % recovery, for example 95-105")

    def rows(self) -> list[int]:
        """Rows of :attr:`known` that are check standards."""
        if self.marker is None:
            return list(range(len(self.known.sample_ids)))
        marks = self.known.labels[self.marker]
        return [i for i, v in enumerate(marks) if str(v).strip().lower() in _YES]

    def match(self, sample: str) -> int | None:
        """Row of :attr:`known` for a sample id (an exact id wins over a pattern), or None."""
        ids = self.known.sample_ids
        rows = self.rows()
        for i in rows:
            if ids[i] == sample:
                return i
        for i in rows:
            if fnmatch.fnmatchcase(sample, ids[i]):
                return i
        return None

    def basis(self) -> str:
        """How the acceptance limits were set, in words."""
        if self.recovery_limits is None:
            return f"expected ± {SE_MULTIPLIER:g} SE of the result"
        low, high = self.recovery_limits
        return f"recovery {low:g}-{high:g} % (given)"


@dataclass
class CheckReport:
    """Check-standard results of one batch.

    Attributes
    ----------
    table : pandas.DataFrame
        One row per check standard and analyte, columns :data:`CHECK_COLUMNS`
        (``recovery_pct`` NaN when the expected value is 0).
    declared : int
        Number of check-standard rows in the known-values table.
    """

    table: pd.DataFrame
    declared: int = 0
    notes: list[str] = field(default_factory=list)

    @property
    def passed(self) -> bool:
        """True when every check standard lies inside its limits (and there is at least one)."""
        return bool(len(self.table)) and bool(self.table["passed"].all())

    def failures(self) -> pd.DataFrame:
        """Rows outside their acceptance limits."""
        return self.table[~self.table["passed"].astype(bool)]

    def summary(self) -> list[str]:
        """One line per failure, or one line saying all passed (plain words)."""
        if not len(self.table):
            return ["no check standard found in this batch (none of the declared ids or "
                    "patterns matched a sample)"]
        n = self.table["sample"].nunique()
        lines = [f"{n} check standard(s): all {len(self.table)} results inside their limits"
                 ] if self.passed else []
        for r in self.failures().itertuples(index=False):
            rec = f"recovery {r.recovery_pct:.1f} %" if math.isfinite(r.recovery_pct) else \
                f"found {r.found:.4g}"
            lines.append(f"check standard {r.sample} out of limits: {r.analyte} {rec} "
                         f"(expected {r.expected:.4g}, accepted {r.low:.4g} to {r.high:.4g}; "
                         f"{r.basis})")
        return lines

    def to_dict(self) -> dict[str, Any]:
        """JSON-friendly form."""
        rows = self.table.replace({np.nan: None}).to_dict(orient="records")
        return {"passed": self.passed, "declared": self.declared, "results": rows}


class CheckSink:
    """A batch sink (:func:`bandsolve.batch.predict.run_batch`) that keeps check standards.

    Only the rows of check standards are kept, so memory does not grow with the batch.
    """

    def __init__(self, checks: CheckStandards, analytes: tuple[str, ...]) -> None:
        missing = [a for a in analytes if a not in checks.known.analytes]
        if missing:
            raise DataError(f"{checks.known.source or 'the check table'} has no column "
                            f"{missing[0]!r} for the model's analyte; name the columns "
                            "exactly as the model's analytes")
        self.checks = checks
        self.analytes = analytes
        self._rows: list[pd.DataFrame] = []
        self._open: list[pd.DataFrame] = []

    def begin_input(self, position: int, item: str) -> None:
        self._open = []

    def write(self, frame: pd.DataFrame) -> None:
        keep = frame["sample"].astype(str).map(lambda s: self.checks.match(s) is not None)
        if keep.any():
            self._open.append(frame[keep.to_numpy()])

    def discard_input(self) -> None:
        self._open = []

    def commit_input(self) -> None:
        self._rows.extend(self._open)
        self._open = []

    def report(self) -> CheckReport:
        """Recoveries and acceptance of every check standard seen in committed inputs."""
        known = self.checks.known
        rows: list[dict[str, Any]] = []
        for frame in self._rows:
            for rec in frame.to_dict(orient="records"):
                sample = str(rec["sample"])
                row = self.checks.match(sample)
                assert row is not None
                for label in self.analytes:
                    name, name_se, *_ = result_columns(label)
                    expected = float(known.values[row, known.analytes.index(label)])
                    rows.append(_judge(sample, known.sample_ids[row], label, expected,
                                       float(rec[name]), float(rec[name_se]), self.checks))
        table = pd.DataFrame(rows, columns=list(CHECK_COLUMNS))
        return CheckReport(table=table, declared=len(self.checks.rows()))


def _judge(sample: str, standard: str, analyte: str, expected: float, found: float,
           se: float, checks: CheckStandards) -> dict[str, Any]:
    recovery = 100.0 * found / expected if expected != 0 else math.nan
    if checks.recovery_limits is not None and expected != 0:
        low, high = (expected * v / 100.0 for v in checks.recovery_limits)
        basis = checks.basis()
    elif math.isfinite(se):
        low, high = expected - SE_MULTIPLIER * se, expected + SE_MULTIPLIER * se
        basis = f"expected ± {SE_MULTIPLIER:g} SE of the result"
    else:
        raise DataError(f"check standard {sample}: the result of {analyte} has no SE, so no "
                        "acceptance limits can be derived; give limits with --check-limits")
    return {"sample": sample, "standard": standard, "analyte": analyte, "expected": expected,
            "found": found, "se": se, "recovery_pct": recovery, "low": float(low),
            "high": float(high), "passed": bool(low <= found <= high), "basis": basis}

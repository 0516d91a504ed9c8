"""Drift watch over the results ledger: one control chart per check standard and analyte.

From the check-standard results a ledger holds for one model, each analyte of each check
standard becomes a series of one value per run (the mean recovery in % of that run's check
samples; the found concentration when the expected value is 0), charted by
:func:`bandsolve.monitor.charts.control_chart`. The spectral residual of routine samples is
watched the same way (log of each run's median residual ratio): an instrument or matrix
change usually shows there first. The state of every series is given in plain words and as
JSON.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from bandsolve.batch.ledger import list_checks, list_results
from bandsolve.errors import DataError
from bandsolve.monitor.charts import ChartDesign, ChartResult, control_chart

__all__ = ["DriftReport", "Series", "watch_ledger", "RESIDUAL"]

#: Name of the routine-sample residual series.
RESIDUAL = "spectral residual of routine samples"


@dataclass
class Series:
    """One watched series: what it is, the runs it covers and its chart (None: too few runs).

    Attributes
    ----------
    name : str
        ``"dye B [mg/L] (check standard QC-*)"`` or :data:`RESIDUAL`.
    runs : list of int
        Ledger run ids, oldest first.
    values : ndarray, shape (n,)
        Recovery in % (or found value, or log₁₀ median residual ratio) per run.
    unit : str
        ``"%"``, the analyte's unit, or ``"log10 ratio"``.
    chart : ChartResult or None
    """

    name: str
    runs: list[int]
    values: np.ndarray
    unit: str
    chart: ChartResult | None
    design: ChartDesign = field(default_factory=ChartDesign)

    def _level(self, values: np.ndarray) -> str:
        if self.unit == "log10 ratio":
            return f"median residual ratio {10 ** float(np.mean(values)):.2f}"
        if self.unit == "%":
            return f"recovery {float(np.mean(values)):.1f} %"
        return f"found {float(np.mean(values)):.4g} {self.unit}"

    def words(self) -> str:
        """The state in plain words."""
        if self.chart is None:
            return (f"{self.name}: {len(self.runs)} run(s) recorded; control limits need "
                    f"{self.design.phase_one} in-control reference runs")
        c = self.chart
        if c.in_control:
            # `since` is one past the last out-of-control run; never past the last run here
            return f"{self.name}: in control since run {self.runs[c.since]}"
        recent = self.values[c.since:]
        if len(recent) == 1:
            return (f"{self.name}: run {self.runs[c.since]} outside the control limits: "
                    f"{self._level(recent)}")
        return (f"{c.direction} drift in {self.name} since run {self.runs[c.since]}: "
                f"{self._level(recent)} over the last {len(recent)} runs")

    def to_dict(self) -> dict[str, Any]:
        """JSON-friendly form (run ids instead of positions)."""
        out: dict[str, Any] = {"series": self.name, "unit": self.unit, "runs": self.runs,
                               "values": [float(v) for v in self.values],
                               "state": self.words()}
        if self.chart is not None:
            chart = self.chart.to_dict()
            chart["since_run"] = self.runs[chart.pop("since_index")]
            for a in chart["alarms"]:
                a["run"] = self.runs[a.pop("index")]
            out["chart"] = chart
        return out


@dataclass
class DriftReport:
    """Every watched series of one model in one ledger."""

    ledger: str
    model_checksum: str
    series: list[Series]

    @property
    def in_control(self) -> bool:
        """True when every charted series is in control at its last run."""
        return all(s.chart is None or s.chart.in_control for s in self.series)

    def summary(self) -> list[str]:
        """One line per series."""
        return [s.words() for s in self.series]

    def to_dict(self) -> dict[str, Any]:
        """JSON-friendly form for pipelines."""
        return {"ledger": self.ledger, "model_checksum": self.model_checksum,
                "in_control": self.in_control, "series": [s.to_dict() for s in self.series]}


def _series(name: str, runs: list[int], values: np.ndarray, unit: str,
            design: ChartDesign) -> Series:
    chart = control_chart(values, design) if len(values) >= design.phase_one else None
    return Series(name, runs, values, unit, chart, design)


def _check_series(checks: pd.DataFrame, design: ChartDesign) -> list[Series]:
    out = []
    standards = checks["standard"].unique()
    for (standard, analyte), rows in checks.groupby(["standard", "analyte"], sort=False):
        use_recovery = bool(np.isfinite(rows["recovery_pct"].astype(float)).all())
        column = "recovery_pct" if use_recovery else "found"
        per_run = rows.groupby("run_id", sort=True)[column].mean()
        unit = "%" if use_recovery else (analyte.rsplit("[", 1)[-1].rstrip("]")
                                         if "[" in analyte else "")
        name = analyte if len(standards) == 1 else f"{analyte} (check standard {standard})"
        out.append(_series(name, [int(r) for r in per_run.index],
                           per_run.to_numpy(float), unit, design))
    return out


def _residual_series(results: pd.DataFrame, check_samples: set[tuple[int, str]],
                     design: ChartDesign) -> Series | None:
    if results.empty or "residual_ratio" not in results:
        return None
    routine = results[[(int(r), str(s)) not in check_samples
                       for r, s in zip(results["run_id"], results["sample"], strict=True)]]
    ratio = routine["residual_ratio"].astype(float)
    routine = routine[np.isfinite(ratio) & (ratio > 0)]
    if routine.empty:
        return None
    per_run = routine.groupby("run_id", sort=True)["residual_ratio"].median()
    return _series(RESIDUAL, [int(r) for r in per_run.index],
                   np.log10(per_run.to_numpy(float)), "log10 ratio", design)


def watch_ledger(path: str | os.PathLike[str], *, model_checksum: str | None = None,
                 design: ChartDesign | None = None) -> DriftReport:
    """Chart the recorded check standards (and routine residuals) of one model.

    Parameters
    ----------
    path : path-like
        A results ledger written by ``bandsolve predict --ledger``.
    model_checksum : str, optional
        The model to watch (a prefix is enough); default the model of the latest run that
        recorded check standards.
    design : ChartDesign, optional
        Reference runs, CUSUM and rules (:class:`bandsolve.monitor.charts.ChartDesign`).

    Raises
    ------
    DataError
        When the ledger records no check standards (for that model).
    """
    design = design or ChartDesign()
    checks = list_checks(path)
    if checks.empty:
        raise DataError(f"{path}: no check standards recorded; declare them with bandsolve "
                        "predict --checks FILE")
    if model_checksum is None:
        model_checksum = str(checks.sort_values("run_id")["model_checksum"].iloc[-1])
    chosen = checks[checks["model_checksum"].astype(str).str.startswith(model_checksum)]
    found = chosen["model_checksum"].unique()
    if len(found) != 1:
        held = ", ".join(sorted({str(c)[:12] for c in checks["model_checksum"]}))
        what = "no" if not len(found) else "more than one"
        raise DataError(f"{path}: {what} model matches {model_checksum!r}; models with check "
                        f"standards in this ledger: {held}")
    series = _check_series(chosen, design)
    results = list_results(path)
    results = results[results["model_checksum"] == found[0]] if len(results) else results
    samples = {(int(r), str(s)) for r, s in zip(chosen["run_id"], chosen["sample"],
                                                 strict=True)}
    residual = _residual_series(results, samples, design)
    if residual is not None:
        series.append(residual)
    return DriftReport(str(path), str(found[0]), series)

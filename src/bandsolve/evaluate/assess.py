"""Assessment of a calibration on an independent test set (the API behind ``bandsolve assess``).

Conventions (``e = ŷ − y``, n_p test samples): RMSEP ``√(Σe²/n_p)``; bias ``Σe/n_p`` with the
t-test ``t = |bias|√n_p/SEP`` on ``n_p − 1`` df; SEP (bias-corrected) ``√(Σ(e − bias)²/(n_p −
1))``; R² ``1 − Σe²/Σ(y − ȳ)²``; RPD ``SD(y)/SEP``; the line ``ŷ = a + b·y`` by ordinary least
squares with t intervals on ``n_p − 2`` df and the joint F-test of ``b = 1, a = 0`` on
``(2, n_p − 2)`` df. Consistency with the model's stored RMSECV: ``F = RMSEP²/RMSECV²`` against
``F(n_p, n_cal)`` (approximate: cross-validated errors are not independent).
"""

from __future__ import annotations

import dataclasses
import os
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from bandsolve.calibration.model import Calibration, result_columns
from bandsolve.concentrations import ConcentrationTable, groups_in_order, split_unit
from bandsolve.errors import BandsolveWarning, DataError
from bandsolve.flags import FLAG_COLUMN, split_flags
from bandsolve.merit import RegressionStatistics, regression_statistics
from bandsolve.reference_outliers import ReferenceOutlier, reference_outliers
from bandsolve.spectra import SpectralSet

__all__ = ["AnalyteAssessment", "Assessment", "SpectraFiles", "assess", "calibration_files",
           "read_spectra_files", "validated_model"]

#: Why figures computed on the calibration samples themselves prove little.
NOT_INDEPENDENT = "RMSEP on them is not an independent validation"


def _r2(value: float) -> str:
    """R² with enough decimals to show how far it is from 1 (0.999953, not 1.0000)."""
    if not np.isfinite(value) or value >= 1 or value <= 0.9:
        return f"{value:.4f}"
    return f"{value:.{max(4, int(np.floor(-np.log10(1 - value))) + 2)}f}"


@dataclass(frozen=True)
class SpectraFiles:
    """Spectra read from several files, and the files they came from (in order)."""

    spectra: SpectralSet
    files: tuple[str, ...]


def read_spectra_files(inputs: Sequence[str], read_options: dict[str, Any] | None = None,
                       pattern: str | None = None) -> SpectraFiles:
    """Read files and folders (searched as by ``bandsolve predict``) into one set.

    Parameters
    ----------
    inputs : sequence of str
        Spectra files (each may hold many spectra) and folders, searched recursively by
        :func:`bandsolve.io.expand_inputs`.
    read_options : dict, optional
        Keyword arguments of :func:`bandsolve.io.read_spectra`.
    pattern : str, optional
        Glob applied inside folders.

    Returns
    -------
    SpectraFiles
        The sets stacked in file order (:func:`bandsolve.spectra.concat`: one grid, unit,
        quantity and path length), and the files read.
    """
    from bandsolve.io import expand_inputs, read_spectra
    from bandsolve.spectra import concat

    files = expand_inputs(inputs, pattern)
    sets = [read_spectra(f, **(read_options or {})) for f in files]
    return SpectraFiles(sets[0] if len(sets) == 1 else concat(sets), tuple(files))


def calibration_files(cal: Calibration, files: Sequence[str]) -> tuple[str, ...]:
    """The ``files`` whose SHA-256 equals that of a file the model was built from."""
    from bandsolve.calibration.modelfile import sha256_file

    known = {f.get("sha256") for f in cal.provenance.get("training_files") or []
             if isinstance(f, dict)}
    known.discard(None)
    return tuple(f for f in files if known and os.path.isfile(f) and sha256_file(f) in known)


@dataclass(frozen=True)
class AnalyteAssessment:
    """Test-set statistics of one analyte.

    Attributes
    ----------
    analyte, unit : str
    statistics : RegressionStatistics
        RMSEP, bias and its t-test, SEP, R², RPD, slope/intercept with intervals, joint test.
    rmsecv : float or None
        RMSECV stored in the model's figures of merit.
    rmsep_ratio : float or None
        RMSEP / RMSECV.
    consistency_p : float or None
        ``P(F(n_p, n_cal) ≥ RMSEP²/RMSECV²)``: small when the test errors are larger than the
        calibration promised.
    covered, n_intervals : int
        Test samples whose reference lies inside the model's 95 % interval, out of those
        with an interval.
    coverage_ci : (float, float)
        Clopper–Pearson interval of the coverage at the assessment's level.
    model_error_sd, model_error_relative : float
        τ̂ (concentration units) and κ̂ (a fraction of the level), the model error this test
        set reveals beyond the calibration SE (``evaluate.validated``); ``--out-model`` stores.
    """

    analyte: str
    unit: str
    statistics: RegressionStatistics
    rmsecv: float | None
    rmsep_ratio: float | None
    consistency_p: float | None
    covered: int = 0
    n_intervals: int = 0
    coverage_ci: tuple[float, float] = (float("nan"), float("nan"))
    model_error_sd: float = float("nan")
    model_error_relative: float = float("nan")

    @property
    def coverage(self) -> float:
        """Share of references inside their 95 % interval (NaN without intervals)."""
        return self.covered / self.n_intervals if self.n_intervals else float("nan")


@dataclass(frozen=True)
class Assessment:
    """Result of :func:`assess`.

    Attributes
    ----------
    method : str
        ``"cls"`` or ``"pls"``.
    analytes : tuple of AnalyteAssessment
    n_samples, n_flagged : int
        Test spectra, and those whose result carries any flag.
    flag_counts : dict
        Spectra per flag code.
    samples : pandas.DataFrame
        Per sample: ``sample``, per analyte ``<label> reference``, ``<label>`` (predicted),
        ``<label> error``, ``<label> SE``, ``<label> low95``, ``<label> high95``,
        ``<label> SE (calibration)``; then ``flags``.
    alpha : float
        Level of the confidence intervals and tests.
    outliers : tuple of ReferenceOutlier
        Test samples whose reference value disagrees with their spectrum (studentized error,
        :mod:`bandsolve.reference_outliers`).
    calibration_files : tuple of str
        Given test files whose SHA-256 equals that of a file the model was built from (its
        ``provenance["training_files"]``); empty for an independent test set.
    """

    method: str
    analytes: tuple[AnalyteAssessment, ...]
    n_samples: int
    n_flagged: int
    flag_counts: dict[str, int]
    samples: pd.DataFrame
    alpha: float
    calibration_files: tuple[str, ...] = ()
    interval_basis: str = "calibration only"
    outliers: tuple[ReferenceOutlier, ...] = ()

    @property
    def independent(self) -> bool:
        """False when any test file is one of the model's calibration files."""
        return not self.calibration_files

    @property
    def note(self) -> str:
        """Why the figures are not an independent validation ('' when they are)."""
        if self.independent:
            return ""
        return (f"{', '.join(self.calibration_files)}: these are the model's calibration "
                f"data: {NOT_INDEPENDENT}")

    @property
    def fraction_flagged(self) -> float:
        """Share of test results carrying a flag (0..1)."""
        return self.n_flagged / self.n_samples

    def to_frame(self) -> pd.DataFrame:
        """One row per analyte: the statistics as named columns."""
        rows = []
        for a in self.analytes:
            s = a.statistics
            rows.append({
                "analyte": a.analyte, "unit": a.unit, "n": s.n, "RMSEP": s.rmse,
                "bias": s.bias, "bias t": s.bias_t, "bias p": s.bias_p, "SEP": s.sep,
                "R2": s.r2, "RPD": s.rpd, "slope": s.slope, "slope low": s.slope_ci[0],
                "slope high": s.slope_ci[1], "intercept": s.intercept,
                "intercept low": s.intercept_ci[0], "intercept high": s.intercept_ci[1],
                "line F": s.line_f, "line p": s.line_p, "RMSECV (model)": a.rmsecv,
                "RMSEP/RMSECV": a.rmsep_ratio, "consistency p": a.consistency_p,
                "coverage": a.coverage, "coverage low": a.coverage_ci[0],
                "coverage high": a.coverage_ci[1], "model error SD": a.model_error_sd,
                "model error relative": a.model_error_relative,
            })
        return pd.DataFrame(rows).set_index("analyte")

    def summary(self) -> str:
        """A readable table with the conventions stated."""
        pct = round((1 - self.alpha) * 100)
        kind = "an independent test set" if self.independent else "the calibration data"
        lines = [f"Assessment on {kind} ({self.method.upper()} model, {self.n_samples} spectra)"]
        if not self.independent:
            lines.append(f"note: {self.note}")
        for a in self.analytes:
            s = a.statistics
            u = a.unit
            lines += [
                f"{a.analyte} [{u}]",
                f"  RMSEP {s.rmse:.4g}   bias {s.bias:+.4g} (t = {s.bias_t:.3g}, p = "
                f"{s.bias_p:.3g})   SEP {s.sep:.4g}   R² {_r2(s.r2)}   RPD {s.rpd:.3g}",
                f"  predicted = {s.intercept:+.4g} + {s.slope:.4f} × reference;  slope "
                f"{pct} % CI {s.slope_ci[0]:.4f}..{s.slope_ci[1]:.4f}, intercept {pct} % CI "
                f"{s.intercept_ci[0]:+.4g}..{s.intercept_ci[1]:+.4g};  slope 1 and intercept 0 "
                f"jointly: F = {s.line_f:.3g}, p = {s.line_p:.3g}",
            ]
            if a.rmsecv is not None:
                lines.append(f"  model RMSECV {a.rmsecv:.4g}: RMSEP/RMSECV = "
                             f"{a.rmsep_ratio:.3g} (F-test p = {a.consistency_p:.3g})")
            if a.n_intervals:
                lines.append(
                    f"  95 % intervals cover {a.covered} of {a.n_intervals} references "
                    f"({100 * a.coverage:.0f} %, {pct} % CI {100 * a.coverage_ci[0]:.0f}–"
                    f"{100 * a.coverage_ci[1]:.0f} %); model error beyond the calibration SE: "
                    f"SD {a.model_error_sd:.3g} {u} and {100 * a.model_error_relative:.2g} % "
                    "of the level")
        flagged = ", ".join(f"{k} {v}" for k, v in sorted(self.flag_counts.items()))
        lines.append(f"flagged results: {self.n_flagged} of {self.n_samples} "
                     f"({100 * self.fraction_flagged:.0f} %)" + (f": {flagged}" if flagged else ""))
        lines += [f"reference outlier: {o.text()}" for o in self.outliers]
        lines.append(f"intervals: {self.interval_basis}")
        lines.append("conventions: RMSEP √(Σe²/n); bias test t = |bias|√n/SEP on n−1 df; SEP "
                     "bias-corrected (n−1); RPD = SD(reference)/SEP; line by OLS, joint F-test "
                     "on (2, n−2) df; e = predicted − reference")
        return "\n".join(lines)

    def to_dict(self) -> dict[str, Any]:
        """JSON-serialisable dictionary (the per-sample table as a list of records)."""
        return {
            "method": self.method,
            "n_samples": self.n_samples,
            "n_flagged": self.n_flagged,
            "fraction_flagged": self.fraction_flagged,
            "flag_counts": dict(self.flag_counts),
            "alpha": self.alpha,
            "independent": self.independent,
            "calibration_files": list(self.calibration_files),
            "note": self.note,
            "analytes": [{"analyte": a.analyte, "unit": a.unit,
                          "statistics": a.statistics.to_dict(), "rmsecv": a.rmsecv,
                          "rmsep_ratio": a.rmsep_ratio, "consistency_p": a.consistency_p,
                          "covered": a.covered, "n_intervals": a.n_intervals,
                          "coverage": a.coverage, "coverage_ci": list(a.coverage_ci),
                          "model_error_sd": a.model_error_sd,
                          "model_error_relative": a.model_error_relative}
                         for a in self.analytes],
            "interval_basis": self.interval_basis,
            "reference_outliers": [o.to_dict() for o in self.outliers],
            "samples": self.samples.to_dict(orient="records"),
        }


def _stored_rmsecv(cal: Calibration) -> list[float | None]:
    values = [row.rmsecv for row in cal.merit.analytes] if cal.merit is not None else []
    return values if len(values) == cal.n_analytes else [None] * cal.n_analytes


def assess(cal: Calibration, spectra: SpectralSet, table: ConcentrationTable,
           alpha: float = 0.05, files: Sequence[str] = ()) -> Assessment:
    """Predict an independent test set and compare with its reference concentrations.

    Parameters
    ----------
    cal : Calibration
        The model (its ``merit`` supplies the RMSECV for the consistency check).
    spectra : SpectralSet
        Test spectra (n_p ≥ 3), not used to build the model.
    table : ConcentrationTable
        Reference concentrations; sample ids must match the spectra, and one column per model
        analyte with the same label (unit included).
    alpha : float
        Level of the confidence intervals and tests.
    files : sequence of str
        The files ``spectra`` and ``table`` were read from. When one of them is a calibration
        file of the model (same SHA-256 as in ``cal.provenance["training_files"]``), a
        :class:`BandsolveWarning` is issued and the assessment is marked not independent.

    Returns
    -------
    Assessment

    References
    ----------
    Olivieri, A. C. et al. (2006). Uncertainty estimation and figures of merit for multivariate
    calibration. Pure Appl. Chem. 78, 633-661.
    ICH Q2(R2) (2023). Validation of analytical procedures (accuracy on an independent set).
    """
    from bandsolve.evaluate.validated import coverage_interval, model_error

    reference = cal.align(spectra, table).reference
    predicted = cal.predict(spectra)
    base = predicted if not cal.interval else dataclasses.replace(
        cal, interval=None).predict(spectra)  # calibration-only SE, for τ²
    n = len(predicted)
    n_cal = int(cal.provenance.get("n_calibration_samples") or 0)
    samples: dict[str, Any] = {"sample": predicted["sample"].tolist()}
    results = []
    for k, (label, cv) in enumerate(zip(cal.analytes, _stored_rmsecv(cal), strict=True)):
        y_hat = predicted[label].to_numpy(dtype=float)
        samples[f"{label} reference"] = reference[:, k]
        samples[label] = y_hat
        samples[f"{label} error"] = y_hat - reference[:, k]
        samples[f"{label} SE"] = predicted[f"{label} SE"].to_numpy(dtype=float)
        name_lo, name_hi = result_columns(label)[2:]
        low, high = (predicted[c].to_numpy(dtype=float) for c in (name_lo, name_hi))
        samples[name_lo], samples[name_hi] = low, high
        se_cal = base[f"{label} SE"].to_numpy(dtype=float)
        samples[f"{label} SE (calibration)"] = se_cal
        has = np.isfinite(low) & np.isfinite(high)
        covered = int(np.sum(has & (low <= reference[:, k]) & (reference[:, k] <= high)))
        try:
            tau, kappa = np.sqrt(model_error(y_hat - reference[:, k], se_cal, reference[:, k]))
        except DataError:  # no standard errors to compare with
            tau = kappa = float("nan")
        s = regression_statistics(reference[:, k], y_hat, alpha=alpha)
        ratio = p_value = None
        if cv is not None and cv > 0:
            ratio = s.rmse / cv
            p_value = float(stats.f.sf(ratio**2, n, n_cal)) if n_cal > 0 else None
        name, unit = split_unit(label)
        results.append(AnalyteAssessment(name, unit or "unit", s, cv, ratio, p_value, covered,
                                         int(has.sum()), coverage_interval(
                                             covered, int(has.sum()), alpha),
                                         float(tau), float(kappa)))
    samples[FLAG_COLUMN] = predicted[FLAG_COLUMN].tolist()
    counts: dict[str, int] = {}
    for text in samples[FLAG_COLUMN]:
        for code in split_flags(text):
            counts[code] = counts.get(code, 0) + 1
    n_flagged = sum(1 for text in samples[FLAG_COLUMN] if split_flags(text))
    frame = pd.DataFrame(samples)
    outliers = reference_outliers(
        np.column_stack([frame[f"{a} error"] for a in cal.analytes]),
        np.column_stack([frame[f"{a} SE"] for a in cal.analytes]), frame["sample"].tolist(),
        [split_unit(a)[0] for a in cal.analytes])
    result = Assessment(cal.method, tuple(results), n, n_flagged, counts, frame, float(alpha),
                        calibration_files(cal, files), cal.interval_basis, tuple(outliers))
    if not result.independent:
        warnings.warn(result.note, BandsolveWarning, stacklevel=2)
    return result


def validated_model(cal: Calibration, result: Assessment, files: Sequence[str],
                    runs: Any = None) -> Calibration:
    """A new model whose intervals carry the model error ``result`` revealed.

    Parameters
    ----------
    cal : Calibration
        The model that was assessed.
    result : Assessment
        Its assessment on an independent test set (refused when not independent: the
        calibration's own samples cannot reveal errors calibration cannot see).
    files : sequence of str
        The test files, fingerprinted (name, SHA-256) into the new model.
    runs : mapping or pandas.Series, optional
        Run (day) of each test sample keyed by sample id
        (:func:`bandsolve.concentrations.group_labels`): errors shared within a run count
        as fewer degrees of freedom.

    Returns
    -------
    Calibration
        See :func:`bandsolve.evaluate.validated.validated_calibration`.
    """
    from bandsolve.calibration.modelfile import sha256_file
    from bandsolve.evaluate.validated import validated_calibration

    if not result.independent:
        raise DataError(f"{result.note}; validate on samples the model was not built from")
    frame = result.samples
    errors, ses, levels = (np.column_stack([frame[f"{a} {column}"] for a in cal.analytes])
                           for column in ("error", "SE (calibration)", "reference"))
    prints = [{"name": os.path.basename(f), "sha256": sha256_file(f)} for f in files
              if os.path.isfile(f)]
    labels = None if runs is None else groups_in_order(runs, [str(s) for s in frame["sample"]])
    return validated_calibration(cal, errors, ses, prints, labels, levels)

"""The result of a CLS-versus-PLS comparison: errors per method, paired tests, the verdict.

:func:`bandsolve.evaluate.compare.compare_methods` returns a :class:`Comparison`, which renders
itself as a table (:meth:`~Comparison.to_frame`), a readable summary and a JSON-friendly
dictionary. Every type here is also importable from :mod:`bandsolve.evaluate.compare`.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Any

import numpy as np
import pandas as pd

from bandsolve.evaluate.evidence import AbsorberEvidence, Curvature

__all__ = ["Comparison", "MethodResult", "PairedComparison", "Recommendation"]


@dataclass(frozen=True)
class MethodResult:
    """Errors of one method, arrays of shape (m,) in each analyte's unit."""

    name: str
    rmsecv: np.ndarray
    bias_cv: np.ndarray
    rmsep: np.ndarray | None
    bias_test: np.ndarray | None


@dataclass(frozen=True)
class PairedComparison:
    """One CLS variant against PLS for one analyte (``statistic = mean(e²_CLS − e²_PLS)``)."""

    analyte: str
    method: str
    data: str
    statistic: float
    pvalue: float
    pvalue_holm: float


@dataclass(frozen=True)
class Recommendation:
    """The method to use for one analyte (or ``"all"``) and why, in plain words.

    ``evidence`` lists the absorber and curvature findings behind it (overall only).
    """

    analyte: str
    method: str
    text: str
    evidence: tuple[str, ...] = ()


@dataclass(frozen=True)
class Comparison:
    """Result of :func:`compare_methods`.

    Attributes
    ----------
    analytes : tuple of str
        Analyte labels (unit bracket included).
    methods : tuple of MethodResult
        CLS, CLS with baseline terms (when asked for), PLS.
    tests : tuple of PairedComparison
    evidence : AbsorberEvidence
    curvature : Curvature
        Curvature test of the plain CLS cross-validated errors.
    recommendations : tuple of Recommendation
        One per analyte.
    overall : Recommendation
    cv : str
        The cross-validation used by every method.
    n_calibration, n_test : int
    alpha : float
        Level of the tests (after Holm).
    """

    analytes: tuple[str, ...]
    methods: tuple[MethodResult, ...]
    tests: tuple[PairedComparison, ...]
    evidence: AbsorberEvidence
    curvature: Curvature
    recommendations: tuple[Recommendation, ...]
    overall: Recommendation
    cv: str
    n_calibration: int
    n_test: int
    alpha: float

    def to_frame(self) -> pd.DataFrame:
        """One row per analyte and method: RMSECV, CV bias, RMSEP, test bias, p vs PLS."""
        tests = {(t.analyte, t.method): t for t in self.tests}
        rows = []
        for k, label in enumerate(self.analytes):
            for meth in self.methods:
                t = tests.get((label, meth.name))
                rows.append({
                    "analyte": label, "method": meth.name, "RMSECV": meth.rmsecv[k],
                    "bias CV": meth.bias_cv[k],
                    "RMSEP": None if meth.rmsep is None else meth.rmsep[k],
                    "bias (test set)": None if meth.bias_test is None else meth.bias_test[k],
                    "p vs PLS": None if t is None else t.pvalue,
                    "p Holm": None if t is None else t.pvalue_holm,
                })
        return pd.DataFrame(rows)

    def summary(self) -> str:
        """Readable tables, the absorber evidence and the recommendations."""
        frame = self.to_frame()
        has_test = self.n_test > 0
        name_w = max(8, *(len(a) for a in self.analytes))
        meth_w = max(6, *(len(m.name) for m in self.methods))
        cols = ["RMSECV", "bias CV"] + (["RMSEP", "bias (test set)"] if has_test else []) + [
            "p vs PLS", "p Holm"]
        lines = [f"Method comparison on identical folds ({self.cv}; {self.n_calibration} "
                 f"calibration samples" + (f", {self.n_test} test samples" if has_test else "")
                 + ")",
                 f"{'analyte':<{name_w}}  {'method':<{meth_w}}" + "".join(f"  {c:>15}"
                                                                          for c in cols)]
        for row in frame.to_dict("records"):
            cells = ["-" if row[c] is None or pd.isna(row[c])
                     else "< 0.001" if c.startswith("p") and row[c] < 0.001
                     else f"{row[c]:.4g}" for c in cols]
            lines.append(f"{row['analyte']:<{name_w}}  {row['method']:<{meth_w}}"
                         + "".join(f"  {c:>15}" for c in cells))
        data = "test set" if has_test else "cross-validated"
        lines.append(f"p: two-sided paired randomization test on {data} squared errors "
                     "(van der Voet 1994), Holm-corrected across analytes; - : not "
                     "applicable (PLS is the reference every method is tested against)")
        ev = self.evidence
        lines.append(f"absorber check: {100 * ev.share_above_limit:.0f} % of CLS residuals above "
                     f"the PLS noise level; the largest common shape in the CLS residuals "
                     f"carries {100 * ev.structure.share:.0f} % of their variance, where noise "
                     f"alone gives about {100 * ev.structure.reference:.0f} % (p = "
                     f"{ev.structure.pvalue:.2g}; a small p means a shared unmodelled band); "
                     f"PLS needs {ev.pls_components} components for {ev.n_analytes} analytes")
        lines.append("curvature check (CLS errors against concentration, quadratic term, "
                     "Holm): p = " + ", ".join(f"{p:.2g}" for p in self.curvature.pvalues_holm))
        lines.append("recommendation:")
        lines += [f"  {r.analyte}: {r.text}" for r in self.recommendations]
        lines.append(f"  overall: {self.overall.text}")
        return "\n".join(lines)

    def to_dict(self) -> dict[str, Any]:
        """JSON-serialisable dictionary."""
        def arr(v: np.ndarray | None) -> list[float] | None:
            return None if v is None else [float(x) for x in v]

        return {
            "analytes": list(self.analytes), "cv": self.cv,
            "n_calibration": self.n_calibration, "n_test": self.n_test, "alpha": self.alpha,
            "methods": [{"name": m.name, "rmsecv": arr(m.rmsecv), "bias_cv": arr(m.bias_cv),
                         "rmsep": arr(m.rmsep), "bias_test": arr(m.bias_test)}
                        for m in self.methods],
            "tests": [asdict(t) for t in self.tests],
            "evidence": self.evidence.to_dict(),
            "curvature": self.curvature.to_dict(),
            "recommendations": [asdict(r) | {"evidence": list(r.evidence)}
                                for r in self.recommendations],
            "overall": asdict(self.overall) | {"evidence": list(self.overall.evidence)},
        }

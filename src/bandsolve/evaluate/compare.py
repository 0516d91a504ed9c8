"""CLS or PLS? Side-by-side comparison on identical folds (the API behind ``bandsolve compare``).

:func:`compare_methods` cross-validates CLS without and with baseline terms and PLS (component
count chosen by the usual rule) on one list of folds made once, optionally predicts an
independent test set with models fitted to all calibration samples, tests each CLS variant
against PLS per analyte (paired two-sided randomization test on squared errors, Holm correction
across analytes), looks for evidence of an absorber missing from CLS, and says in plain words
which method to use.

The decision uses the test set when one is given (independent errors), else the
cross-validated errors. CLS is preferred unless PLS is significantly better, because CLS needs
only pure standards and its figures of merit follow from Beer's law.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

import numpy as np
import pandas as pd

from bandsolve._estimator import clone
from bandsolve.calibration.build import training_arrays
from bandsolve.cls import BASELINE_TERMS, CLSRegressor
from bandsolve.concentrations import (
    ConcentrationTable,
    align,
    groups_in_order,
    reference_matrix,
)
from bandsolve.crossval import (
    cross_validate_estimator,
    cross_validate_pls,
    select_components,
)
from bandsolve.errors import DataError, ModelError
from bandsolve.evaluate.compare_result import (
    Comparison,
    MethodResult,
    PairedComparison,
    Recommendation,
)
from bandsolve.evaluate.evidence import (
    AbsorberEvidence,
    Curvature,
    ResidualStructure,
    absorber_evidence,
    curvature_evidence,
    holm,
    paired_pvalues,
    residual_structure,
)
from bandsolve.pls import PLSRegressor
from bandsolve.preprocess import SpectralPreprocessor
from bandsolve.progress import ProgressCallback, step
from bandsolve.spectra import SpectralSet
from bandsolve.splitters import FixedFolds, make_splitter

__all__ = ["AbsorberEvidence", "Comparison", "Curvature", "MethodResult", "PairedComparison",
           "Recommendation", "ResidualStructure", "compare_methods", "holm", "paired_pvalues",
           "residual_structure"]

#: Name of the PLS candidate in recommendations (CLS candidates carry their variant name).
PLS = "PLS"


def _test_arrays(spectra: SpectralSet, test_spectra: SpectralSet,
                 test_table: ConcentrationTable, analytes: tuple[str, ...]) -> tuple:
    test, table = align(test_spectra, test_table)
    return (test.on_grid(spectra.axis, spectra.axis_unit).values,
            reference_matrix(table, analytes))


def _cls_cv_residual_ss(est: CLSRegressor, Z: np.ndarray, C: np.ndarray,
                        folds: list) -> np.ndarray:
    """Cross-validated CLS spectral residual ``rᵀr`` per sample (first fold holding it out)."""
    rss = np.full(len(Z), np.nan)
    for train, test in folds:
        todo = test[np.isnan(rss[test])]
        if todo.size:
            rss[todo] = clone(est).fit(Z[train], C[train]).predict_detail(Z[todo]).residual_ss
    return rss


def _recommend(label: str, names: list[str], sq: dict[str, np.ndarray],
               tests: list[PairedComparison], evidence: AbsorberEvidence,
               alpha: float) -> Recommendation:
    best = min(names[:-1], key=lambda n: sq[n].mean())
    pls = names[-1]
    test = next(t for t in tests if t.method == best)
    ratio = float(np.sqrt(sq[best].mean() / sq[pls].mean()))
    p = "p < 0.001" if test.pvalue_holm < 0.001 else f"p = {test.pvalue_holm:.2g}"
    if test.pvalue_holm < alpha and ratio > 1:
        text = (f"PLS: {best} errors are {100 * (ratio - 1):.0f} % larger (RMSE ratio "
                f"{ratio:.3f}, {p})")
        if evidence.found:
            text += "; " + "; ".join(evidence.findings) + " — an absorber is missing from the "\
                    "CLS model"
        return Recommendation(label, PLS, text)
    if test.pvalue_holm < alpha:
        return Recommendation(label, best, f"{best}: errors {100 * (1 - ratio):.0f} % smaller "
                                           f"than PLS (RMSE ratio {ratio:.3f}, {p}) and it "
                                           "needs only pure standards")
    text = f"{best}: no significant difference from PLS ({p}) and it needs only pure standards"
    if evidence.found:
        text += "; but " + "; ".join(evidence.findings) + " — check for an unmodelled absorber"
    return Recommendation(label, best, text)


def _overall(names: list[str], sq: dict[str, np.ndarray], tests: list[PairedComparison],
             findings: tuple[str, ...], alpha: float) -> Recommendation:
    """The overall verdict; it never names a CLS variant that a significant test found worse.

    A CLS variant is admissible when no Holm-corrected test finds it worse than PLS for any
    analyte. None admissible: PLS. When the absorber or curvature checks found something and
    no admissible variant is significantly better than PLS for any analyte: PLS, since CLS
    misses part of the signal. Otherwise the admissible variant with the smallest error pooled
    over analytes (each relative to PLS), with the findings as a caution.
    """
    significant = [t for t in tests if t.pvalue_holm < alpha]
    worse = {t.method for t in significant if t.statistic > 0}
    better = {t.method for t in significant if t.statistic < 0}
    admissible = [n for n in names[:-1] if n not in worse]
    note = ("; " + "; ".join(findings)) if findings else ""
    if not admissible:
        lost = sorted({t.analyte for t in significant if t.statistic > 0})
        return Recommendation("all", PLS, "PLS: every CLS variant is significantly worse for "
                              f"at least one analyte ({', '.join(lost)}){note}", findings)
    if findings and not better.intersection(admissible):
        return Recommendation("all", PLS, "PLS: no CLS variant is significantly better, and "
                              f"the CLS model misses part of the signal{note}", findings)
    best = min(admissible, key=lambda n: float(np.mean(sq[n].mean(axis=0)
                                                        / sq[names[-1]].mean(axis=0))))
    text = (f"{best}: not significantly worse than PLS for any analyte, and CLS needs only "
            "pure standards")
    if findings:
        text += f"; but{note[1:]} — check before relying on CLS"
    return Recommendation("all", best, text, findings)


def compare_methods(spectra: SpectralSet, table: ConcentrationTable,
                    test_spectra: SpectralSet | None = None,
                    test_table: ConcentrationTable | None = None, cv: Any = "interleaved:10", *,
                    window: list[tuple[float, float]] | None = None, intercept: bool = False,
                    baseline: str = "linear", max_components: int = 15,
                    select: str = "randomization", select_alpha: float = 0.05,
                    alpha: float = 0.05,
                    groups: Mapping[str, Any] | pd.Series | None = None,
                    n_permutations: int = 999,
                    random_state: int = 0,
                    progress: ProgressCallback | None = None) -> Comparison:
    """Compare CLS (without and with baseline terms) and PLS on identical folds.

    The Holm correction runs across analytes for each CLS variant separately; the
    recommendation then picks a variant, so with two variants the family-wise error rate of
    the final choice can be up to twice the stated level. Read borderline p-values with that
    in mind.

    Parameters
    ----------
    spectra, table : SpectralSet, ConcentrationTable
        Calibration mixtures and their concentrations (matched by sample id).
    test_spectra, test_table : optional
        An independent test set; when given the decision uses its errors.
    cv : str or splitter
        :func:`~bandsolve.crossval.make_splitter` spec; the folds are made once and used by
        every method.
    window : list of (low, high), optional
        Axis ranges used by every method.
    intercept : bool
        CLS background term (both CLS variants).
    baseline : {"offset", "linear", "quadratic", "none"}
        Baseline terms of the second CLS variant (``"none"``: compare plain CLS only).
    max_components, select, select_alpha
        PLS2 component count: largest tried, rule, level of the randomization rule.
    alpha : float
        Level of the CLS-versus-PLS tests after Holm correction.
    groups : mapping or pandas.Series, optional
        Group label of each sample keyed by sample id, for ``groups`` specs (see
        :func:`bandsolve.concentrations.group_labels`).
    n_permutations, random_state
        Randomization test settings.
    progress : callable, optional
        ``progress(done, total, label)`` after each stage (:mod:`bandsolve.progress`).

    Returns
    -------
    Comparison

    References
    ----------
    van der Voet, H. (1994). Chemometr. Intell. Lab. Syst. 25, 313-323.
    Holm, S. (1979). Scand. J. Stat. 6, 65-70.
    Haaland, D. M. & Thomas, E. V. (1988). Anal. Chem. 60, 1193-1202.
    """
    if baseline not in BASELINE_TERMS:
        raise ModelError(f"baseline must be one of {sorted(BASELINE_TERMS)}, not {baseline!r}")
    if (test_spectra is None) != (test_table is None):
        raise DataError("give both test spectra and test concentrations, or neither")
    cal, C = training_arrays(spectra, table)
    if groups is not None:
        groups = groups_in_order(groups, cal.sample_ids)
    pre = SpectralPreprocessor(axis=cal.axis, window=window).fit(cal.values)
    Z = pre.transform(cal.values)
    n, p = Z.shape
    splitter = make_splitter(cv, groups, random_state, n_samples=n) if isinstance(cv, str) \
        else cv
    folds = list(splitter.split(Z, C, groups))
    fixed = FixedFolds(folds)
    variants = {"CLS": CLSRegressor(fit_intercept=intercept, wavelengths=pre.used_axis)}
    if baseline != "none":
        variants[f"CLS+{baseline}"] = CLSRegressor(fit_intercept=intercept, baseline=baseline,
                                                   wavelengths=pre.used_axis)
    total = len(variants) + 3
    results = {}
    for i, (name, est) in enumerate(variants.items()):
        results[name] = cross_validate_estimator(est, Z, C, cv=fixed)
        step(progress, i + 1, total, f"cross-validating {name}")
    rmsecv = {name: res.rmsecv[0] for name, res in results.items()}
    errors = {name: res.errors[0] for name, res in results.items()}
    a_max = int(min(max_components, n - 2, p))
    if a_max < 1:
        raise ModelError(f"{n} calibration samples are too few for PLS; measure more mixtures")
    pls_cv = cross_validate_pls(Z, C, a_max, cv=fixed)
    step(progress, len(variants) + 1, total, "cross-validating PLS")
    a = select_components(pls_cv, rule=select, alpha=select_alpha,
                          random_state=random_state).n_components
    pls_name = f"PLS ({a} comp.)"
    errors[pls_name] = pls_cv.errors[a - 1]
    rmsecv[pls_name] = pls_cv.rmsecv[a - 1]
    names = list(errors)
    test_errors: dict[str, np.ndarray] = {}
    if test_spectra is not None:
        x_test, c_test = _test_arrays(cal, test_spectra, test_table, table.analytes)
        z_test = pre.transform(x_test)
        fitted = {**variants, pls_name: PLSRegressor(n_components=a)}
        for name, est in fitted.items():
            pred = np.asarray(est.fit(Z, C).predict(z_test)).reshape(len(z_test), -1)
            test_errors[name] = pred - c_test
    decide = test_errors or errors
    tests = []
    for name in names[:-1]:
        stat, pv, ph = paired_pvalues(decide[name], decide[pls_name], n_permutations,
                                      random_state)
        tests += [PairedComparison(label, name, "test set" if test_errors else
                                   "cross-validation", float(s), float(x), float(y))
                  for label, s, x, y in zip(table.analytes, stat, pv, ph, strict=True)]
    step(progress, len(variants) + 2, total, "randomization tests")
    plain = clone(variants["CLS"]).fit(Z, C)
    design = np.column_stack([C, np.ones(n)]) if intercept else C
    evidence = absorber_evidence(
        _cls_cv_residual_ss(variants["CLS"], Z, C, folds), C.shape[1],
        plain.calibration_residuals(Z, C), design,
        pls_cv.q_residuals[a - 1], a, C.shape[1], random_state)
    step(progress, total, total, "absorber evidence")
    curvature = curvature_evidence(errors["CLS"], C + errors["CLS"], tuple(table.analytes))
    sq = {name: decide[name] ** 2 for name in names}
    recs = [_recommend(label, names, {nm: sq[nm][:, k] for nm in names},
                       [t for t in tests if t.analyte == label], evidence, alpha)
            for k, label in enumerate(table.analytes)]
    methods = tuple(MethodResult(
        name, rmsecv[name], errors[name].mean(axis=0),
        np.sqrt(np.mean(test_errors[name] ** 2, axis=0)) if test_errors else None,
        test_errors[name].mean(axis=0) if test_errors else None) for name in names)
    return Comparison(
        analytes=tuple(table.analytes), methods=methods, tests=tuple(tests), evidence=evidence,
        curvature=curvature, recommendations=tuple(recs),
        overall=_overall(names, sq, tests, evidence.findings + curvature.findings, alpha),
        cv=str(cv), n_calibration=n, n_test=len(next(iter(test_errors.values())))
        if test_errors else 0, alpha=float(alpha))

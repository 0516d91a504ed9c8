"""CLS-versus-PLS comparison: the tests behind it, the absorber evidence, the recommendation."""

from __future__ import annotations

import argparse
import itertools
import json

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats
from scipy.ndimage import uniform_filter1d
from sklearn.cross_decomposition import PLSRegression

from bandsolve.cli import compare_cmd
from bandsolve.concentrations import ConcentrationTable
from bandsolve.crossval import make_splitter
from bandsolve.evaluate.compare import compare_methods, holm, paired_pvalues, residual_structure
from bandsolve.io import write_concentrations_csv, write_spectra_csv
from bandsolve.spectra import SpectralSet

AXIS = np.linspace(400.0, 700.0, 121)
K = np.vstack([np.exp(-0.5 * ((AXIS - c) / w) ** 2)  # broad overlapping bands, AU per mg/L
               for c, w in ((480, 40), (530, 45), (590, 40))])
INTERFERENT = np.exp(-0.5 * ((AXIS - 640) / 30) ** 2)
LABELS = ("A [mg/L]", "B [mg/L]", "C [mg/L]")
SIGMA = 0.003
DESIGN = np.array(list(itertools.product([0.1, 0.4, 0.7, 1.0], repeat=3)))  # 4³ mixtures


def _set(rng, conc, prefix, interferent=False):
    ids = [f"{prefix}{i}" for i in range(len(conc))]
    x = conc @ K + SIGMA * rng.standard_normal((len(conc), AXIS.size))
    if interferent:
        x += np.outer(rng.uniform(0.2, 1.0, len(conc)), INTERFERENT)
    return SpectralSet(AXIS, x, ids), ConcentrationTable(ids, LABELS, conc)


def test_holm_matches_the_definition():
    # Holm (1979): sorted 0.01, 0.03, 0.04 → 3×0.01, 2×0.03, max(0.06, 1×0.04).
    np.testing.assert_allclose(holm([0.01, 0.04, 0.03]), [0.03, 0.06, 0.06])
    np.testing.assert_allclose(holm([0.5]), [0.5])  # one test: no correction


@settings(max_examples=80, deadline=None)
@given(st.lists(st.floats(0.0, 1.0), min_size=1, max_size=8))
def test_holm_properties(pvalues):
    adjusted = holm(pvalues)
    p = np.asarray(pvalues)
    # Holm (1979): p ≤ p̃ ≤ min(1, k p), and the order of the p-values is kept.
    assert np.all(adjusted >= p - 1e-15) and np.all(adjusted <= np.minimum(1, p.size * p) + 1e-15)
    order = np.argsort(p, kind="stable")
    assert np.all(np.diff(adjusted[order]) >= -1e-15)


def test_pvalues_are_uniform_when_errors_share_a_distribution():
    rng = np.random.default_rng(21)
    pvalues = []
    for _ in range(300):
        e_cls, e_pls = rng.standard_normal((2, 30, 1))
        pvalues.append(paired_pvalues(e_cls, e_pls, n_permutations=199,
                                      random_state=int(rng.integers(1 << 31)))[1][0])
    # A valid test has uniform p-values under H0 (van der Voet 1994); Kolmogorov-Smirnov.
    assert stats.kstest(pvalues, "uniform").pvalue > 0.01


def test_pvalues_are_small_when_one_method_is_clearly_better():
    rng = np.random.default_rng(22)
    for _ in range(20):
        e_pls = rng.standard_normal((30, 2))
        e_cls = 3.0 * rng.standard_normal((30, 2))
        stat, p, p_holm = paired_pvalues(e_cls, e_pls, n_permutations=499)
        # Squared errors 9× larger on 30 pairs: power is essentially 1 (theory).
        assert np.all(stat > 0) and np.all(p_holm < 0.01) and np.all(p_holm >= p)


@pytest.mark.slow
@pytest.mark.parametrize("smooth", [1, 5])
def test_residual_structure_reference_is_valid_for_regression_residuals(smooth):
    rng = np.random.default_rng(23 + smooth)
    pvalues = []
    for _ in range(60):
        noise = uniform_filter1d(rng.standard_normal((64, AXIS.size + 20)), smooth, axis=1)
        x = DESIGN @ K + SIGMA * noise[:, 10:-10]  # white (1) or smoothed (5) noise
        resid = x - DESIGN @ np.linalg.lstsq(DESIGN, x, rcond=None)[0]
        pvalues.append(residual_structure(resid, DESIGN, n_draws=99,
                                          random_state=int(rng.integers(1 << 31))).pvalue)
    # No common shape: Monte Carlo permutation p-values are uniform (Good 2005); KS test.
    assert stats.kstest(pvalues, "uniform").pvalue > 0.01


def test_clean_data_do_not_favour_pls_and_folds_are_identical():
    rng = np.random.default_rng(24)
    spectra, table = _set(rng, DESIGN, "cal")
    result = compare_methods(spectra, table, cv="random:5")
    # Every absorber is modelled: CLS is the efficient estimator (Haaland & Thomas 1988), so
    # PLS must not come out significantly better, and there is no absorber evidence.
    assert all(r.method != "PLS" for r in result.recommendations)
    assert result.overall.method.startswith("CLS") and not result.evidence.found
    folds = list(make_splitter("random:5").split(DESIGN))
    cls_pred, pls_pred = np.empty_like(DESIGN), np.empty_like(DESIGN)
    x = spectra.values
    a = result.evidence.pls_components
    for train, test in folds:
        k_hat = np.linalg.lstsq(DESIGN[train], x[train], rcond=None)[0]
        cls_pred[test] = np.linalg.lstsq(k_hat.T, x[test].T, rcond=None)[0].T
        pls_pred[test] = PLSRegression(a, scale=False).fit(x[train], DESIGN[train]).predict(
            x[test])
    # Brute-force references on the same folds: numpy CLS (Haaland & Thomas 1988) and
    # scikit-learn PLS; RMSECV = √(PRESS/n).
    by_name = {m.name: m for m in result.methods}
    np.testing.assert_allclose(by_name["CLS"].rmsecv,
                               np.sqrt(np.mean((cls_pred - DESIGN) ** 2, axis=0)), rtol=1e-8)
    np.testing.assert_allclose(by_name[f"PLS ({a} comp.)"].rmsecv,
                               np.sqrt(np.mean((pls_pred - DESIGN) ** 2, axis=0)), rtol=1e-6)


@pytest.mark.slow
def test_unmodelled_absorber_leads_to_pls_with_the_evidence_named():
    rng = np.random.default_rng(25)
    spectra, table = _set(rng, DESIGN, "cal", interferent=True)
    test_spectra, test_table = _set(rng, rng.uniform(0.1, 1.0, (3000, 3)), "t",
                                    interferent=True)
    result = compare_methods(spectra, table, test_spectra, test_table)
    assert all(r.method == "PLS" for r in result.recommendations)
    assert result.overall.method == "PLS" and "absorber" in result.recommendations[0].text
    ev = result.evidence
    # The absorber's band is in every calibration residual (theory): most residuals exceed the
    # PLS noise level and one residual component dominates.
    assert ev.share_above_limit > 0.5 and ev.structure.pvalue < 0.01
    assert any("exceed the noise level" in f for f in ev.findings)
    # Accuracy against the noise-limited bound with the absorber included (issue 3):
    # Gauss-Markov Cov(ĉ) = σ²(KKᵀ)⁻¹ (Aitken 1935, from memory; METHODS §9).
    k_full = np.vstack([K, INTERFERENT])
    bound = SIGMA * np.sqrt(np.diag(np.linalg.inv(k_full @ k_full.T)))[:3]
    pls = next(m for m in result.methods if m.name.startswith("PLS"))
    cls = next(m for m in result.methods if m.name == "CLS")
    assert np.all(pls.rmsep <= 1.2 * bound)  # METHODS §9 measured ≈1.10× for CV-chosen PLS
    assert np.all(cls.rmsep > 1.2 * bound)
    assert "PLS" in result.summary() and json.dumps(result.to_dict())


@pytest.mark.slow
def test_command_line(tmp_path, capsys):
    rng = np.random.default_rng(26)
    spectra, table = _set(rng, DESIGN, "cal")
    write_spectra_csv(spectra, tmp_path / "s.csv")
    write_concentrations_csv(table, tmp_path / "c.csv")
    parser = argparse.ArgumentParser()
    compare_cmd.register(parser.add_subparsers())
    args = parser.parse_args(["compare", "--spectra", str(tmp_path / "s.csv"),
                              "--concentrations", str(tmp_path / "c.csv"), "--cv", "interleaved:8",
                              "--json"])
    assert args.func(args) == 0
    printed = json.loads(capsys.readouterr().out)
    expected = compare_methods(spectra, table, cv="interleaved:8").to_dict()
    assert printed["overall"] == expected["overall"]
    assert printed["methods"][0]["rmsecv"] == pytest.approx(expected["methods"][0]["rmsecv"])


def test_curvature_test_equals_the_extra_sum_of_squares_f_test():
    # Draper & Smith (1998), extra sum of squares: F = (RSS_linear − RSS_quadratic) /
    # (RSS_quadratic/(n − 3)) on (1, n − 3) df equals the squared t of the quadratic term;
    # both fits here by numpy.polyfit, the tail by scipy.
    from scipy import stats as st

    from bandsolve.evaluate.evidence import curvature_evidence

    rng = np.random.default_rng(12)
    c = rng.uniform(0.1, 1.0, (30, 2))
    e = np.column_stack([0.02 * rng.standard_normal(30),
                         -0.5 * c[:, 1] ** 2 + 0.01 * rng.standard_normal(30)])
    result = curvature_evidence(e, c, ("a", "b"))
    for k in range(2):
        rss = [np.sum((e[:, k] - np.polyval(np.polyfit(c[:, k], e[:, k], d), c[:, k])) ** 2)
               for d in (1, 2)]
        f = (rss[0] - rss[1]) / (rss[1] / 27)
        assert result.pvalues[k] == pytest.approx(st.f.sf(f, 1, 27), rel=1e-8)
    assert result.findings and "b" in result.findings[0] and result.pvalues_holm[0] > 0.01


def test_overall_verdict_never_names_a_variant_a_test_found_worse():
    # A CLS variant with the smaller pooled error but significantly worse than PLS for one
    # analyte must not be recommended (the verdict follows its tests).
    from bandsolve.evaluate.compare import PairedComparison, _overall

    names = ["CLS", "CLS+linear", "PLS (3 comp.)"]
    sq = {"CLS": np.array([[1.0, 1.0], [1.0, 1.0]]),
          "CLS+linear": np.array([[2.0, 2.0], [2.0, 2.0]]),
          "PLS (3 comp.)": np.array([[1.5, 1.5], [1.5, 1.5]])}

    def test(method, analyte, stat, p):
        return PairedComparison(analyte, method, "cross-validation", stat, p, p)

    tests = [test("CLS", "a", 0.4, 0.001), test("CLS", "b", -0.5, 0.5),
             test("CLS+linear", "a", 0.5, 0.2), test("CLS+linear", "b", 0.5, 0.3)]
    assert _overall(names, sq, tests, (), 0.05).method == "CLS+linear"
    tests[2] = test("CLS+linear", "a", 0.5, 0.01)
    verdict = _overall(names, sq, tests, (), 0.05)
    assert verdict.method == "PLS" and "every CLS variant" in verdict.text
    # Evidence of a missing absorber with no CLS variant significantly better: PLS, and the
    # evidence is in the overall line and its record (the JSON).
    tests = [test("CLS", "a", 0.1, 0.5), test("CLS+linear", "a", 0.1, 0.5)]
    verdict = _overall(names, sq, tests, ("the CLS residual spectra share one shape",), 0.05)
    assert verdict.method == "PLS" and "share one shape" in verdict.text
    assert verdict.evidence == ("the CLS residual spectra share one shape",)

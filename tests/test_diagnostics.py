"""Tests of bandsolve.diagnostics against distribution theory and simulated spectra."""

from __future__ import annotations

import json

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from scipy import stats

from bandsolve import diagnostics as dg
from bandsolve.errors import DataError, ModelFileError

WAVELENGTHS = np.linspace(0.0, 1.0, 30)
BANDS = np.stack([np.exp(-0.5 * ((WAVELENGTHS - c) / 0.12) ** 2) for c in (0.25, 0.5, 0.75)])
SCORE_SD = np.array([3.0, 2.0, 1.0])
NOISE = 0.05
A = 3


def _draw(rng: np.random.Generator, n: int) -> np.ndarray:
    """Latent model: A Gaussian bands with random amounts plus isotropic white noise."""
    return (rng.normal(size=(n, A)) * SCORE_SD) @ BANDS + NOISE * rng.normal(size=(n, 30))


def _pca(x_cal: np.ndarray):
    """PCA of the calibration set by SVD (written here, independent of the package models)."""
    mean = x_cal.mean(axis=0)
    loadings = np.linalg.svd(x_cal - mean, full_matrices=False)[2][:A].T
    scores = (x_cal - mean) @ loadings
    residuals = x_cal - mean - scores @ loadings.T
    return mean, loadings, scores, residuals


def _project(x: np.ndarray, mean: np.ndarray, loadings: np.ndarray):
    t = (x - mean) @ loadings
    return t, x - mean - t @ loadings.T


@pytest.mark.slow
def test_limits_give_nominal_false_alarm_rate_on_new_samples():
    # Expected rate alpha = 0.05 for in-model samples: Hotelling T² exact F limit for a new
    # observation (Tracy, Young & Mason 1992); Q limits (Jackson & Mudholkar 1979; Box 1954).
    # Averaged over 8 calibration sets x 4000 new samples: binomial SD of the mean ~0.12 %.
    rng = np.random.default_rng(20240611)
    rates = {"t2": [], "jm": [], "box": []}
    n_cal = 400
    for _ in range(8):
        mean, loadings, t_cal, e_cal = _pca(_draw(rng, n_cal))
        lam = dg.residual_eigenvalues(e_cal)
        t_new, e_new = _project(_draw(rng, 4000), mean, loadings)
        q_new = dg.q_residuals(e_new)
        t2 = dg.hotelling_t2(t_new, t_cal)
        rates["t2"].append(np.mean(t2 > dg.t2_limit(A, n_cal, 0.05, kind="new")))
        rates["jm"].append(np.mean(q_new > dg.q_limit_jackson_mudholkar(lam, 0.05).value))
        rates["box"].append(np.mean(q_new > dg.q_limit_box(lam, 0.05).value))
    for name, values in rates.items():
        assert abs(np.mean(values) - 0.05) < 0.015, (name, np.mean(values))


def test_foreign_band_exceeds_q_limit():
    # An unmodelled absorber adds residual far above the noise (common practice: Q detects it).
    rng = np.random.default_rng(7)
    mean, loadings, _, e_cal = _pca(_draw(rng, 300))
    lam = dg.residual_eigenvalues(e_cal)
    foreign = 0.3 * np.exp(-0.5 * ((WAVELENGTHS - 0.9) / 0.03) ** 2)
    _, e_new = _project(_draw(rng, 2000) + foreign, mean, loadings)
    q_new = dg.q_residuals(e_new)
    for limit in (dg.q_limit_jackson_mudholkar(lam), dg.q_limit_box(lam)):
        assert np.mean(limit.ratio(q_new) > 1.0) > 0.99


def test_calibration_t2_limit_matches_beta_distribution():
    # Calibration-sample T² is exactly (n-1)²/n Beta(A/2, (n-A-1)/2) for Gaussian data
    # (Tracy, Young & Mason 1992): exceedance of the 5 % limit averages 5 %.
    rng = np.random.default_rng(3)
    n, a, hits = 30, 2, []
    for _ in range(2000):
        t = rng.normal(size=(n, a))
        t -= t.mean(axis=0)
        hits.append(np.mean(dg.hotelling_t2(t, t) > dg.t2_limit(a, n, 0.05, "calibration")))
    assert abs(np.mean(hits) - 0.05) < 0.005  # binomial SD ~0.001 over 60000 draws


def test_t2_limit_formula_values():
    # New-sample limit A(n²-1)/(n(n-A)) F(A, n-A) tends to the χ²_A quantile as n grows
    # (Tracy, Young & Mason 1992; limit of the F distribution, common practice).
    assert dg.t2_limit(3, 100000, 0.05) == pytest.approx(stats.chi2.ppf(0.95, 3), rel=1e-3)
    assert dg.t2_limit(3, 20, 0.05) > dg.t2_limit(3, 200, 0.05)
    with pytest.raises(DataError, match="kind"):
        dg.t2_limit(2, 20, kind="old")


@settings(max_examples=50, deadline=None)
@given(
    arrays(np.float64, (12, 3), elements=st.floats(-10, 10)),
    arrays(np.float64, (4, 3), elements=st.floats(-10, 10)),
)
def test_leverage_equals_hotelling_identity_and_hat_diagonal(t_raw, t_new):
    t_cal = t_raw - t_raw.mean(axis=0)
    # The two sides agree to about cond·eps; past 1e4 the check would test rounding, not the
    # identity (common practice).
    if np.linalg.matrix_rank(t_cal) < 3 or np.linalg.cond(t_cal) > 1e4:
        return
    n = t_cal.shape[0]
    h = dg.leverage(t_new, t_cal)
    # h = 1/n + T²/(n-1) (METHODS §4, algebraic identity).
    np.testing.assert_allclose(h, 1 / n + dg.hotelling_t2(t_new, t_cal) / (n - 1), rtol=1e-9)
    # Calibration leverages are the hat-matrix diagonal of [1, T] (Hoaglin & Welsch 1978).
    q = np.linalg.qr(np.column_stack([np.ones(n), t_cal]))[0]
    np.testing.assert_allclose(dg.leverage(t_cal, t_cal), np.sum(q**2, axis=1), atol=1e-9)


def test_leverage_limit_value():
    # 3(A+1)/n warning level (Hoaglin & Welsch 1978, from memory).
    assert dg.leverage_limit(2, 30) == pytest.approx(0.3)
    assert dg.leverage_limit(2, 30, factor=2) == pytest.approx(0.2)


@pytest.mark.parametrize("shape", [(40, 8), (8, 40)])
def test_residual_eigenvalues_match_numpy(shape):
    # Non-zero eigenvalues of EᵀE/(n-1) equal those of EEᵀ/(n-1) (linear algebra, common practice).
    e = np.random.default_rng(1).normal(size=shape)
    expected = np.sort(np.linalg.eigvalsh(e.T @ e / (shape[0] - 1)))[::-1][: min(shape)]
    np.testing.assert_allclose(dg.residual_eigenvalues(e), expected, atol=1e-10)


def test_box_limit_is_exact_for_equal_eigenvalues():
    # With k equal eigenvalues λ, Q = λ χ²_k exactly, and Box's g = λ, h = k (Box 1954).
    lam = np.full(7, 0.3)
    assert dg.q_limit_box(lam, 0.05).value == pytest.approx(0.3 * stats.chi2.ppf(0.95, 7))
    # Jackson-Mudholkar reduces to the Wilson-Hilferty cube-root approximation (h0 = 1/3):
    # within 1 % of the exact quantile for 7 df (Jackson & Mudholkar 1979).
    jm = dg.q_limit_jackson_mudholkar(lam, 0.05)
    assert jm.parameters["h0"] == pytest.approx(1 / 3)
    assert jm.value == pytest.approx(0.3 * stats.chi2.ppf(0.95, 7), rel=0.01)


def test_q_limits_match_weighted_chi2_quantile():
    # Q = Σ λ_j z_j² for Gaussian residuals (Jackson & Mudholkar 1979); compare both
    # approximations with the Monte Carlo quantile of 200000 draws (SE of quantile ~0.3 %).
    # Both are approximations: with a decaying eigenvalue spectrum (h0 ≈ 0.13) they were
    # within 3 % at alpha = 0.01 when measured, so allow 4 %.
    rng = np.random.default_rng(11)
    lam = 0.85 ** np.arange(25)
    q = (rng.normal(size=(200_000, lam.size)) ** 2) @ lam
    for alpha in (0.05, 0.01):
        target = np.quantile(q, 1 - alpha)
        assert dg.q_limit_jackson_mudholkar(lam, alpha).value == pytest.approx(target, rel=0.04)
        assert dg.q_limit_box(lam, alpha).value == pytest.approx(target, rel=0.04)


def test_q_limit_from_values_recovers_scaled_chi2():
    # Moment fit g = v/(2m), h = 2m²/v of values drawn from 0.2 χ²_6 recovers that quantile
    # (Nomikos & MacGregor 1995, from memory); 5000 values give a few per cent precision.
    values = 0.2 * np.random.default_rng(5).chisquare(6, size=5000)
    limit = dg.q_limit_from_values(values, 0.05)
    assert limit.parameters["h"] == pytest.approx(6, rel=0.1)
    assert limit.value == pytest.approx(0.2 * stats.chi2.ppf(0.95, 6), rel=0.05)


def _cls_fit(rng: np.random.Generator, n: int, p: int, pure: np.ndarray):
    c = rng.uniform(0.1, 1.0, size=(n, pure.shape[0]))
    a = c @ pure + NOISE * rng.normal(size=(n, p))
    k_hat = np.linalg.lstsq(c, a, rcond=None)[0]
    return k_hat, a - c @ k_hat


def _cls_residuals(a: np.ndarray, k_hat: np.ndarray) -> np.ndarray:
    c_hat = np.linalg.solve(k_hat @ k_hat.T, k_hat @ a.T).T
    return a - c_hat @ k_hat


def test_cls_residual_ratio_near_one_and_flags_interferent():
    # With white noise the F-ratio of an in-model sample has expectation ~1 (plus the small
    # error of K̂, about m/n) and an unmodelled band raises it (Haaland & Thomas 1988, from
    # memory). 200 calibration mixtures keep the K̂ term near 1 %.
    rng = np.random.default_rng(21)
    pure = BANDS[:2]
    k_hat, e_cal = _cls_fit(rng, 200, 30, pure)
    s2_cal = dg.cls_calibration_variance(e_cal, 2)
    assert s2_cal == pytest.approx(NOISE**2, rel=0.06)  # unbiased for σ² (common practice)
    new = rng.uniform(0.1, 1.0, size=(3000, 2)) @ pure + NOISE * rng.normal(size=(3000, 30))
    f_new = dg.cls_residual_ratio(_cls_residuals(new, k_hat), 2, s2_cal)
    assert np.mean(f_new) == pytest.approx(1.0, abs=0.06)
    nominal = dg.f_limit_nominal(30, 2, 200, alpha=0.05)
    assert nominal.value == pytest.approx(stats.f.ppf(0.95, 28, 30 * 198))  # definition
    assert abs(np.mean(f_new > nominal.value) - 0.05) < 0.02
    foreign = new[:200] + 0.5 * np.exp(-0.5 * ((WAVELENGTHS - 0.9) / 0.05) ** 2)
    f_bad = dg.cls_residual_ratio(_cls_residuals(foreign, k_hat), 2, s2_cal)
    limit = dg.f_limit_from_values(f_new, alpha=0.01, method="box")
    assert np.all(f_bad > limit.value)


def test_f_limit_from_values_methods():
    # F(28, 1140)-distributed values: the empirical 95th percentile and the moment-fitted
    # scaled χ² both approach scipy's F quantile (Box 1954).
    values = stats.f.rvs(28, 1140, size=20000, random_state=np.random.default_rng(2))
    target = stats.f.ppf(0.95, 28, 1140)
    assert dg.f_limit_from_values(values, 0.05).value == pytest.approx(target, rel=0.02)
    assert dg.f_limit_from_values(values, 0.05, "box").value == pytest.approx(target, rel=0.02)
    with pytest.raises(DataError, match="method"):
        dg.f_limit_from_values(values, 0.05, "median")


def test_residual_limit_json_round_trip_and_damage():
    lam = np.array([1.0, 0.5, 0.25])
    limit = dg.q_limit_jackson_mudholkar(lam, 0.01)
    again = dg.ResidualLimit.from_dict(json.loads(json.dumps(limit.to_dict())))
    assert again == limit
    with pytest.raises(ModelFileError, match="damaged"):
        dg.ResidualLimit.from_dict({"statistic": "Q", "method": "box"})


def test_input_errors_name_the_problem():
    with pytest.raises(DataError, match="components"):
        dg.hotelling_t2(np.zeros((2, 3)), np.ones((10, 2)))
    with pytest.raises(DataError, match="non-finite"):
        dg.q_residuals(np.array([[1.0, np.nan]]))
    with pytest.raises(DataError, match="probability"):
        dg.q_limit_box(np.ones(3), alpha=5)


def test_q_limit_from_values_keeps_h_within_the_spectrum():
    # Values from 0.01 χ²_300 moment-fit to h ≈ 300; a spectrum that leaves only 120 residual
    # degrees of freedom caps h at 120, and the limit is then (mean/120) χ²_120 at 1 − α
    # (reference quantile: scipy.stats.chi2).
    values = 0.01 * np.random.default_rng(9).chisquare(300, size=4000)
    free = dg.q_limit_from_values(values, 0.01)
    capped = dg.q_limit_from_values(values, 0.01, max_dof=120)
    assert free.parameters["h"] > 200 and capped.parameters["h"] == 120
    assert capped.value == pytest.approx(values.mean() / 120 * stats.chi2.ppf(0.99, 120),
                                         rel=1e-12)
    assert capped.value > free.value  # fewer degrees of freedom, heavier tail

"""Batched non-negative least squares against scipy's per-sample solvers."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import lsq_linear, nnls

from bandsolve.nnls import nnls_gram


def _bands(p: int, k: int) -> np.ndarray:
    axis = np.linspace(0.0, 1.0, p)
    centres = np.linspace(0.2, 0.8, k)
    return np.vstack([np.exp(-0.5 * ((axis - c) / 0.12) ** 2) for c in centres])


def _concentrations(rng, scenario: str, n: int, k: int) -> np.ndarray:
    """Invented concentrations: spread over [−0.3, 1] (about a quarter below zero), or each
    analyte truly absent (exactly 0) from half the samples."""
    if scenario == "spread":
        return rng.uniform(-0.3, 1.0, (n, k))
    return np.where(rng.random((n, k)) < 0.5, 0.0, rng.uniform(0.05, 1.0, (n, k)))


@pytest.mark.parametrize(("scenario", "k"), [("spread", 4), ("absent", 8)])
def test_equals_scipy_nnls_on_ten_thousand_spectra(scenario, k):
    rng = np.random.default_rng(20)
    K = _bands(120, k)
    X = _concentrations(rng, scenario, 10_000, k) @ K + 0.01 * rng.standard_normal((10_000, 120))
    res = nnls_gram(K @ K.T, X @ K.T)
    # Reference library: scipy.optimize.nnls (Lawson & Hanson 1974) on each spectrum.
    ref = np.array([nnls(K.T, x)[0] for x in X])
    np.testing.assert_allclose(res.coef, ref, rtol=0, atol=1e-10)
    assert 0.1 < res.at_bound.mean() < 0.5  # the bound is really exercised
    assert len({row.tobytes() for row in res.at_bound}) > k  # in many combinations
    np.testing.assert_array_equal(res.at_bound, ref == 0.0)
    # Theory: objective + ‖x‖² is the residual sum of squares ‖x − Kᵀc‖².
    rss = ((X - res.coef @ K) ** 2).sum(axis=1)
    np.testing.assert_allclose(res.objective + (X**2).sum(axis=1), rss, rtol=1e-9, atol=1e-12)


@settings(max_examples=80, deadline=None)
@given(k=st.integers(1, 7), p=st.integers(8, 40), n=st.integers(1, 30),
       collinear=st.floats(0.0, 0.999), n_free=st.integers(0, 2),
       random_state=st.integers(0, 2**32 - 1))
def test_identity_with_scipy_for_random_problems(k, p, n, collinear, n_free, random_state):
    rng = np.random.default_rng(random_state)
    # Full row rank; with collinear near 1 the bands become nearly alike.
    K = (1.0 - collinear) * (rng.standard_normal((k, p)) + 2.0 * np.eye(k, p))
    K += collinear * rng.standard_normal(p)
    X = rng.standard_normal((n, p)) * rng.uniform(0.01, 100.0)
    # Degenerate rows: a zero spectrum, one with Kx < 0 for every band (theory: all
    # concentrations at the bound), and a repeated spectrum.
    away = -K.T @ np.linalg.solve(K @ K.T, np.ones(k))  # h = K x = −1 for every band
    X = np.vstack([X, np.zeros(p), away, X[:1]])
    constrained = np.arange(k) >= min(n_free, k - 1)
    res = nnls_gram(K @ K.T, X @ K.T, constrained)
    # Reference library: scipy.optimize.nnls, or lsq_linear (bounded-variable least squares)
    # when some coefficients are free; the minimizer is unique (G positive definite).
    if constrained.all():
        ref = np.array([nnls(K.T, x)[0] for x in X])
    else:
        lower = np.where(constrained, 0.0, -np.inf)
        ref = np.array([lsq_linear(K.T, x, bounds=(lower, np.inf), method="bvls",
                                   tol=1e-15).x for x in X])
    # Theory: the normal equations lose digits as cond(K)², on top of 1e-9 relative.
    scale = max(1.0, np.abs(ref).max())
    atol = (1e-9 + 1e3 * np.finfo(float).eps * np.linalg.cond(K) ** 2) * scale
    np.testing.assert_allclose(res.coef, ref, rtol=0, atol=atol)
    assert (res.coef[:, constrained] >= 0).all()
    assert (res.coef[-3] == 0.0).all() or not constrained.all()  # zero spectrum: zero
    assert res.at_bound[-2].all() or not constrained.all()  # bands point away: all at bound
    # The same spectrum twice: the same answer, to the rounding of its product X Kᵀ.
    np.testing.assert_allclose(res.coef[-1], res.coef[0], rtol=0, atol=atol)


def test_exact_fallback_equals_scipy():
    rng = np.random.default_rng(24)
    K = _bands(60, 6)
    X = _concentrations(rng, "absent", 300, 6) @ K + 0.01 * rng.standard_normal((300, 60))
    # max_iter=0: no batched step at all, every spectrum goes to the one-by-one solver.
    res = nnls_gram(K @ K.T, X @ K.T, max_iter=0)
    # Reference library: scipy.optimize.nnls on the spectra themselves.
    ref = np.array([nnls(K.T, x)[0] for x in X])
    np.testing.assert_allclose(res.coef, ref, rtol=0, atol=1e-10)
    np.testing.assert_array_equal(res.at_bound, ref == 0.0)


def test_many_constrained_coefficients():
    rng = np.random.default_rng(25)
    k = 18  # more than 16 constrained: passive sets are told apart by sorting, not a table
    K = rng.standard_normal((k, 60)) + 3.0 * np.eye(k, 60)
    X = rng.standard_normal((50, 60))
    res = nnls_gram(K @ K.T, X @ K.T)
    # Reference library: scipy.optimize.nnls.
    ref = np.array([nnls(K.T, x)[0] for x in X])
    np.testing.assert_allclose(res.coef, ref, rtol=0, atol=1e-10)
    assert 0.2 < res.at_bound.mean() < 0.8


def test_spectra_with_missing_values_get_no_estimate():
    rng = np.random.default_rng(26)
    K = _bands(40, 3)
    H = rng.normal(size=(5, 40)) @ K.T
    H[2, 1] = np.nan
    res = nnls_gram(K @ K.T, H)
    assert np.isnan(res.coef[2]).all() and not res.at_bound[2].any()
    # The other rows are solved as if alone (theory: rows are independent problems).
    clean = nnls_gram(K @ K.T, np.delete(H, 2, axis=0))
    np.testing.assert_array_equal(np.delete(res.coef, 2, axis=0), clean.coef)


def test_free_coefficients_equal_scipy_bounded_least_squares():
    rng = np.random.default_rng(21)
    K = np.vstack([_bands(80, 3), np.ones(80), np.linspace(-1, 1, 80)])  # 3 analytes + baseline
    C = np.column_stack([rng.uniform(-0.5, 1.0, (200, 3)), rng.normal(0, 0.2, (200, 2))])
    X = C @ K + 0.01 * rng.standard_normal((200, 80))
    constrained = np.array([True, True, True, False, False])
    res = nnls_gram(K @ K.T, X @ K.T, constrained)
    # Reference library: scipy.optimize.lsq_linear with bounds 0 ≤ c (analytes), free baseline.
    lower = np.where(constrained, 0.0, -np.inf)
    ref = np.array([lsq_linear(K.T, x, bounds=(lower, np.inf), tol=1e-14,
                               method="bvls").x for x in X])
    np.testing.assert_allclose(res.coef, ref, rtol=0, atol=1e-9)
    assert (res.coef[:, 3:] < 0).any()  # baseline terms do go negative
    assert not res.at_bound[:, 3:].any()


def test_karush_kuhn_tucker_conditions():
    rng = np.random.default_rng(22)
    K = _bands(60, 5)
    X = rng.uniform(-0.5, 1.0, (500, 5)) @ K + 0.02 * rng.standard_normal((500, 60))
    G, H = K @ K.T, X @ K.T
    res = nnls_gram(G, H)
    grad = H - res.coef @ G
    # Theory (Lawson & Hanson 1974, ch. 23): at the optimum the gradient vanishes on free
    # coefficients and points into the bound (≤ 0) on coefficients held at zero.
    tol = 1e-9 * np.abs(H).max()
    assert np.abs(grad[~res.at_bound]).max() < tol
    assert grad[res.at_bound].max(initial=-1.0) < tol
    assert (res.coef[res.at_bound] == 0.0).all()


def test_no_constraint_is_ordinary_least_squares():
    rng = np.random.default_rng(23)
    K = _bands(50, 3)
    X = rng.normal(size=(40, 50))
    res = nnls_gram(K @ K.T, X @ K.T, constrained=np.zeros(3, bool))
    # Reference library: numpy.linalg.lstsq.
    ref = np.linalg.lstsq(K.T, X.T, rcond=None)[0].T
    np.testing.assert_allclose(res.coef, ref, rtol=0, atol=1e-10)
    assert not res.at_bound.any()


@pytest.mark.parametrize("n", [1, 3])
def test_all_zero_when_every_band_points_away(n):
    K = np.eye(3, 8)
    X = -np.ones((n, 8))
    res = nnls_gram(K @ K.T, X @ K.T)
    # Theory: every gradient component is negative at c = 0, so 0 is optimal.
    assert (res.coef == 0.0).all() and res.at_bound.all()

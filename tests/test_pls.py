"""Tests of bandsolve.pls.PLSRegressor against scikit-learn, an exact PLS2 reference and theory."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.base import clone
from sklearn.cross_decomposition import PLSRegression
from sklearn.model_selection import GridSearchCV, KFold
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import FunctionTransformer
from sklearn.utils.estimator_checks import parametrize_with_checks

from bandsolve.errors import ModelError
from bandsolve.pls import PLSRegressor

from .conftest import dataset


def _mixtures(rng: np.random.Generator, n: int, p: int, m: int = 1, offset: float = 0.5):
    """Spectra of m+2 overlapping Gaussian bands (two unmodelled absorbers) plus white noise."""
    grid = np.linspace(0.0, 1.0, p)
    centres = np.linspace(0.2, 0.8, m + 2)
    bands = np.exp(-0.5 * ((grid[None, :] - centres[:, None]) / 0.15) ** 2)
    conc = rng.uniform(0.1, 1.0, size=(n, m + 2))
    X = offset + conc @ bands + 0.01 * rng.standard_normal((n, p))
    Y = conc[:, :m]
    return X, (Y[:, 0] if m == 1 else Y)


def _nipals_exact(X: np.ndarray, Y: np.ndarray, n_components: int) -> list[np.ndarray]:
    """Reference PLS2 written here: NIPALS with the weight taken as the exact dominant left
    singular vector of X_aᵀY_a (numpy SVD) instead of an iterated power method.
    Returns the coefficient matrix (p×m) for each component count 1..A."""
    xc, yc = X - X.mean(axis=0), Y - Y.mean(axis=0)
    W, P, Q = [], [], []
    coefs = []
    for _ in range(n_components):
        w = np.linalg.svd(xc.T @ yc, full_matrices=False)[0][:, 0]
        t = xc @ w
        p, q = xc.T @ t / (t @ t), yc.T @ t / (t @ t)
        xc, yc = xc - np.outer(t, p), yc - np.outer(t, q)
        W.append(w), P.append(p), Q.append(q)
        Wm, Pm, Qm = np.array(W).T, np.array(P).T, np.array(Q).T
        coefs.append(Wm @ np.linalg.solve(Pm.T @ Wm, Qm.T))
    return coefs


@pytest.mark.parametrize("algorithm", ["kernel", "wide", "auto"])
@pytest.mark.parametrize("scale", [False, True])
@pytest.mark.parametrize(("n", "p"), [(40, 15), (15, 60)])
def test_pls1_matches_sklearn_for_every_component_count(algorithm, scale, n, p):
    rng = np.random.default_rng(11)
    X, y = _mixtures(rng, n, p)
    X_new = _mixtures(rng, 7, p)[0]
    model = PLSRegressor(n_components=8, algorithm=algorithm, scale=scale).fit(X, y)
    assert model.n_components_ == 8
    for a in range(1, 9):
        ref = PLSRegression(n_components=a, scale=scale).fit(X, y)
        # Reference library: scikit-learn PLSRegression (NIPALS; exact for one response).
        np.testing.assert_allclose(model.predict(X_new, n_components=a),
                                   ref.predict(X_new).ravel(), rtol=0, atol=1e-8)
    # Scores span the same directions as scikit-learn's (same signs for PLS1 weights ∝ Xᵀy).
    ref = PLSRegression(n_components=8, scale=scale).fit(X, y)
    np.testing.assert_allclose(np.abs(model.transform(X_new)), np.abs(ref.transform(X_new)),
                               atol=1e-7)


@pytest.mark.parametrize("algorithm", ["kernel", "wide"])
@pytest.mark.parametrize(("n", "p"), [(50, 20), (20, 70)])
def test_pls2_matches_exact_nipals_reference(algorithm, n, p):
    rng = np.random.default_rng(5)
    X, Y = _mixtures(rng, n, p, m=3)
    model = PLSRegressor(n_components=6, algorithm=algorithm).fit(X, Y)
    X_new = _mixtures(rng, 9, p, m=3)[0]
    for a, coef in enumerate(_nipals_exact(X, Y, 6), start=1):
        expected = Y.mean(axis=0) + (X_new - X.mean(axis=0)) @ coef
        # Reference: NIPALS PLS2 with exact SVD weights (Höskuldsson 1988, J. Chemom. 2,
        # 211-228, from memory), written in this file.
        np.testing.assert_allclose(model.predict(X_new, n_components=a), expected, atol=1e-8)
    assert model.predict(X_new).shape == (9, 3)
    assert model.coef_.shape == (3, p) and model.coef_path_.shape == (6, 3, p)


@settings(max_examples=25, deadline=None)
@given(n=st.integers(6, 30), p=st.integers(3, 30), m=st.integers(1, 3),
       rs=st.integers(0, 2**31 - 1), scale=st.booleans())
def test_kernel_and_wide_forms_give_the_same_model(n, p, m, rs, scale):
    rng = np.random.default_rng(rs)
    X = rng.normal(size=(n, p)) + 3.0
    Y = rng.normal(size=(n, m))
    a_max = min(n - 1, p, 4)
    tall = PLSRegressor(a_max, algorithm="kernel", scale=scale).fit(X, Y)
    wide = PLSRegressor(a_max, algorithm="wide", scale=scale).fit(X, Y)
    # Theory: both compute the same PLS model (Lindgren, Geladi & Wold 1993; Dayal &
    # MacGregor 1997), so their nested predictions agree to rounding.
    assert tall.n_components_ == wide.n_components_
    np.testing.assert_allclose(tall.predict(X), wide.predict(X), atol=1e-8)
    # Theory: PLS training scores are mutually orthogonal (Höskuldsson 1988, from memory).
    gram = tall.x_scores_.T @ tall.x_scores_
    off = gram - np.diag(np.diag(gram))
    assert np.abs(off).max() <= 1e-8 * np.abs(np.diag(gram)).max()


def test_predict_is_linear_in_original_units_and_residuals_decompose():
    rng = np.random.default_rng(2)
    X, Y = _mixtures(rng, 30, 25, m=2, offset=3.0)
    model = PLSRegressor(4, scale=True).fit(X, Y)
    X_new = _mixtures(rng, 5, 25, m=2, offset=3.0)[0]
    # Definition of the fitted attributes (task contract): ŷ = X coefᵀ + intercept.
    np.testing.assert_allclose(model.predict(X_new), X_new @ model.coef_.T + model.intercept_,
                               atol=1e-10)
    # Q = ‖x_s − P Rᵀ x_s‖², written out here from the definition (METHODS §4).
    xs = (X_new - X.mean(axis=0)) / X.std(axis=0, ddof=1)
    resid = xs - xs @ model.x_rotations_[:, :2] @ model.x_loadings_[:, :2].T
    np.testing.assert_allclose(model.x_residual_ss(X_new, n_components=2),
                               (resid**2).sum(axis=1), rtol=1e-10)
    # Pythagoras on the training set: explained fractions + residual fraction = 1, since
    # scores are orthogonal to the residual (common practice).
    xs_cal = (X - X.mean(axis=0)) / X.std(axis=0, ddof=1)
    total = (xs_cal**2).sum()
    np.testing.assert_allclose(model.explained_variance_x_.sum()
                               + model.x_residual_ss(X).sum() / total, 1.0, atol=1e-10)


def test_components_stop_when_rank_runs_out():
    rng = np.random.default_rng(3)
    bands = rng.uniform(size=(2, 12))
    conc = rng.uniform(size=(10, 2))
    X = conc @ bands  # centred X has rank 2 exactly
    model = PLSRegressor(n_components=5).fit(X, conc[:, 0])
    # Theory: a rank-2 centred X supports at most 2 PLS components.
    assert model.n_components_ == 2
    # Noise-free, linear in 2 absorbers: 2 components reproduce y exactly (theory).
    np.testing.assert_allclose(model.predict(X), conc[:, 0], atol=1e-10)
    with pytest.raises(ModelError, match="has 2 component"):
        model.predict(X, n_components=3)
    # At full rank the X residual vanishes (theory).
    assert model.x_residual_ss(X).max() < 1e-20 * (X**2).sum()


@pytest.mark.parametrize("bad", [0, -1, 2.5, True])
def test_bad_parameters_raise_model_error(bad):
    X = np.random.default_rng(0).normal(size=(8, 4))
    with pytest.raises(ModelError, match="n_components"):
        PLSRegressor(n_components=bad).fit(X, X[:, 0])
    with pytest.raises(ModelError, match="algorithm"):
        PLSRegressor(algorithm="fast").fit(X, X[:, 0])


def test_works_with_clone_pipeline_and_grid_search():
    rng = np.random.default_rng(4)
    X, y = _mixtures(rng, 40, 30, m=1)
    pipe = make_pipeline(FunctionTransformer(np.log1p), PLSRegressor(3))
    pipe2 = clone(pipe).fit(X, y)
    direct = PLSRegressor(3).fit(np.log1p(X), y)
    # Pipeline contract of scikit-learn: the pipeline equals applying its steps by hand.
    np.testing.assert_allclose(pipe2.predict(X), direct.predict(np.log1p(X)), atol=1e-12)
    grid = GridSearchCV(PLSRegressor(), {"n_components": [1, 2, 3, 4]}, cv=KFold(4),
                        scoring="neg_mean_squared_error").fit(X, y)
    ref = GridSearchCV(PLSRegression(scale=False), {"n_components": [1, 2, 3, 4]},
                       cv=KFold(4), scoring="neg_mean_squared_error").fit(X, y)
    # Reference library: the same search with scikit-learn's PLSRegression.
    np.testing.assert_allclose(grid.cv_results_["mean_test_score"],
                               ref.cv_results_["mean_test_score"], rtol=1e-8)


def test_real_aromatics_standards_match_sklearn():
    folder = dataset("three-aromatics-ethanol")
    spectra = pd.read_csv(folder / "standards_spectra.csv")
    conc = pd.read_csv(folder / "standards_concentrations.csv")
    X = spectra.select_dtypes("number").to_numpy(dtype=float)
    Y = conc.select_dtypes("number").to_numpy(dtype=float)
    if X.shape[0] != Y.shape[0]:
        X = X.T  # spectra stored one column per sample
    if X.shape[0] != Y.shape[0]:
        pytest.skip("dataset layout not recognised")
    for y in Y.T:
        model = PLSRegressor(3).fit(X, y)
        # Reference library: scikit-learn PLSRegression on the same real spectra.
        ref = PLSRegression(3, scale=False).fit(X, y)
        np.testing.assert_allclose(model.predict(X), ref.predict(X).ravel(),
                                   rtol=0, atol=1e-8 * np.abs(y).max())


@parametrize_with_checks([PLSRegressor(), PLSRegressor(algorithm="wide", scale=True)])
def test_sklearn_estimator_contract(estimator, check):
    # Reference: scikit-learn's estimator checks (no checks need to be skipped).
    check(estimator)


def test_batched_gram_kernel_equals_the_primal_kernel_per_problem():
    from bandsolve._pls_kernels import gram_pls_batch, kernel_pls

    rng = np.random.default_rng(41)
    # One data set, three training subsets fitted together.  Rows 0-11 lie in a 3-dimensional
    # affine subspace, so the subset made of them has rank 3 after centring and stops early
    # while the others go on (as a fold whose training data run out of rank).
    X = np.vstack([rng.normal(size=(12, 3)) @ rng.normal(size=(3, 20)) + 4.0,
                   rng.normal(size=(10, 20))])
    Y = rng.normal(size=(22, 2)) + 1.0
    train = np.ones((3, 22), dtype=bool)
    train[0, 12:] = False
    train[1, 3:9] = False
    train[2, ::3] = False
    x0 = X - X[5]  # the Gram matrix may be centred with any fixed row
    fits = gram_pls_batch(x0 @ x0.T, Y, train, 6)
    for rows, fit in zip(train, fits, strict=True):
        mean, y_mean = X[rows].mean(axis=0), Y[rows].mean(axis=0)
        xc = X[rows] - mean
        ref = kernel_pls(xc.T @ xc, xc.T @ (Y[rows] - y_mean), 6)
        # Theory (Lindgren et al. 1993; Dayal & MacGregor 1997): the Gram and the XᵀX kernel
        # forms fit the same model, so the regression coefficients R Qᵀ agree...
        assert fit.tau.size == ref.tau.size
        np.testing.assert_allclose(xc.T @ fit.rotation_coords[rows] @ fit.y_loadings.T,
                                   ref.rotations @ ref.y_loadings.T, rtol=1e-7, atol=1e-9)
        # ...and every row's scores times Qᵀ (the prediction it adds) are those of
        # (x − training mean) R Qᵀ, the held-out rows included.
        np.testing.assert_allclose(fit.scores @ fit.y_loadings.T,
                                   (X - mean) @ ref.rotations @ ref.y_loadings.T,
                                   rtol=1e-7, atol=1e-9)
        # Coordinates live on the training rows only.
        assert np.all(fit.rotation_coords[~rows] == 0.0)
    assert fits[0].tau.size == 3
    assert fits[1].tau.size == fits[2].tau.size == 6

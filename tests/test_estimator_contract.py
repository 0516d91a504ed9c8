"""The scikit-learn estimator contract for CLSRegressor: estimator checks, clone, Pipeline and
GridSearchCV. (PLSRegressor's own contract tests live in tests/test_pls.py.)"""

from __future__ import annotations

import numpy as np
from sklearn.base import clone
from sklearn.model_selection import GridSearchCV, KFold
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import FunctionTransformer
from sklearn.utils.estimator_checks import parametrize_with_checks

from bandsolve.cls import CLSRegressor

from .conftest import gaussian_bands

AXIS = np.linspace(400.0, 700.0, 61)
PURE = gaussian_bands(AXIS, (480, 530, 590), (40, 45, 40))

# The plain model passes every check. With an intercept and a linear baseline, three
# components plus the intercept and baseline rows need more independent wavelengths than
# the checks' small random data sets offer (often 1-4 features), so fitting rightly
# refuses with a ModelError ("linearly dependent"); those checks exercise only data
# shapes that no spectrum has.
_TOO_FEW = ("refused: the check's data have too few features for the intercept and "
            "baseline rows plus the components")
BASELINE_EXPECTED_FAILED = {name: _TOO_FEW for name in (
    "check_estimators_overwrite_params", "check_estimators_fit_returns_self",
    "check_readonly_memmap_input", "check_fit2d_1feature", "check_fit_idempotent",
    "check_fit_check_is_fitted", "check_n_features_in")}
BASELINE_EXPECTED_FAILED["check_fit2d_1sample"] = (
    "the message names the cause in the trade's words (calibration spectra per model "
    "spectrum), not scikit-learn's '1 sample' wording")


def _expected_failed(est: CLSRegressor) -> dict[str, str]:
    return BASELINE_EXPECTED_FAILED if est.baseline != "none" else {}


@parametrize_with_checks([CLSRegressor(), CLSRegressor(fit_intercept=True, baseline="linear")],
                         expected_failed_checks=_expected_failed)
def test_scikit_learn_estimator_checks(estimator, check):
    check(estimator)


def _data(n: int, rs: int, offset: float = 0.0):
    rng = np.random.default_rng(rs)
    C = rng.uniform(0.1, 1.0, (n, 3))
    X = C @ PURE + offset + 0.002 * rng.standard_normal((n, AXIS.size))
    return X, C


def test_clone_keeps_parameters_and_drops_fitted_state():
    est = CLSRegressor(fit_intercept=True, baseline="offset", alpha=0.05).fit(*_data(20, 1))
    copy = clone(est)
    assert copy.get_params() == est.get_params()
    assert not hasattr(copy, "pure_spectra_")


def test_pipeline_equals_its_steps_and_numpy_least_squares():
    X, C = _data(25, 2)
    Xn, _ = _data(10, 3)
    keep = (AXIS >= 430) & (AXIS <= 650)
    window = FunctionTransformer(lambda A: A[:, keep])
    pipe = Pipeline([("window", window), ("cls", CLSRegressor())]).fit(X, C)
    # K-matrix CLS (Haaland & Thomas 1988): K̂ = lstsq(C, A), ĉ = lstsq(K̂ᵀ, a); numpy's
    # lstsq is the reference solver.
    K = np.linalg.lstsq(C, X[:, keep], rcond=None)[0]
    ref = np.linalg.lstsq(K.T, Xn[:, keep].T, rcond=None)[0].T
    np.testing.assert_allclose(pipe.predict(Xn), ref, rtol=1e-10, atol=1e-12)


def test_grid_search_prefers_the_offset_baseline_when_spectra_carry_one():
    X, C = _data(30, 4)
    rng = np.random.default_rng(5)
    X = X + rng.uniform(-0.05, 0.05, (30, 1))  # a different flat offset in every spectrum
    grid = GridSearchCV(CLSRegressor(), {"baseline": ["none", "offset"]}, cv=KFold(5),
                        scoring="neg_root_mean_squared_error").fit(X, C)
    # A flat baseline is modelled exactly by the offset term and biases CLS without it
    # (Haaland & Melgaard 2000, Appl. Spectrosc. 54, 1303).
    assert grid.best_params_ == {"baseline": "offset"}
    assert -grid.best_score_ < 0.05

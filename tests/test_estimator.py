"""bandsolve's estimator base (``_estimator``) against scikit-learn's own base classes.

The reference is scikit-learn itself: the same tags, parameters, representation, clone and
R² as ``BaseEstimator``/``RegressorMixin``/``TransformerMixin`` give, and inputs checked
exactly as ``validate_data`` checks them.
"""

from __future__ import annotations

import pickle
import re
import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp
from sklearn.base import BaseEstimator, RegressorMixin, TransformerMixin
from sklearn.base import clone as sklearn_clone
from sklearn.exceptions import NotFittedError
from sklearn.metrics import r2_score
from sklearn.pipeline import Pipeline, make_pipeline
from sklearn.utils import get_tags
from sklearn.utils.validation import validate_data

from bandsolve._estimator import (
    Estimator,
    Regressor,
    Transformer,
    check_fitted,
    clone,
    validated,
)
from bandsolve.cls import CLSRegressor
from bandsolve.pls import PLSRegressor
from bandsolve.preprocess import SpectralPreprocessor


def _pair(*bases_ours, bases_theirs):
    """The same small estimator on our bases and on scikit-learn's."""

    def init(self, width: int = 3, label: str = "a", axis=None):
        self.width, self.label, self.axis = width, label, axis

    ours = type("Probe", (*bases_ours, Estimator), {"__init__": init})
    theirs = type("Probe", (*bases_theirs, BaseEstimator), {"__init__": init})
    return ours, theirs


KINDS = {"estimator": ((), ()), "regressor": ((Regressor,), (RegressorMixin,)),
         "transformer": ((Transformer,), (TransformerMixin,)),
         "both": ((Transformer, Regressor), (TransformerMixin, RegressorMixin))}


@pytest.mark.parametrize("kind", sorted(KINDS))
def test_tags_params_and_repr_equal_scikit_learns(kind):
    ours, theirs = _pair(*KINDS[kind][0], bases_theirs=KINDS[kind][1])
    # Reference library: scikit-learn's get_tags on its own base classes.
    assert get_tags(ours()) == get_tags(theirs())
    a, b = ours(width=5, axis=[1.0, 2.0]), theirs(width=5, axis=[1.0, 2.0])
    assert a.get_params() == b.get_params()
    assert repr(a) == repr(b) == "Probe(axis=[1.0, 2.0], width=5)"
    a.set_params(label="b")
    b.set_params(label="b")
    assert a.get_params() == b.get_params()
    with pytest.raises(ValueError, match="Invalid parameter 'colour'"):
        a.set_params(colour="red")


def _sklearn_tags(*mixins, **target):
    tags = get_tags(type("Reference", (*mixins, BaseEstimator), {})())
    for key, value in target.items():
        setattr(tags.target_tags, key, value)
    return tags


def test_the_estimators_keep_the_tags_scikit_learns_bases_gave_them():
    # Reference library: scikit-learn's bases plus the target tags each class sets.
    assert get_tags(PLSRegressor()) == _sklearn_tags(
        TransformerMixin, RegressorMixin, single_output=False, multi_output=True, required=True)
    assert get_tags(CLSRegressor()) == _sklearn_tags(RegressorMixin, single_output=False,
                                                     multi_output=True)
    assert get_tags(SpectralPreprocessor()) == _sklearn_tags(TransformerMixin)


def test_clone_equals_scikit_learns_and_copies_parameters():
    axis = np.linspace(400.0, 700.0, 7)
    for est in (PLSRegressor(n_components=3, scale=True),
                CLSRegressor(baseline="linear", wavelengths=axis),
                SpectralPreprocessor(axis=axis, window=[(450.0, 650.0)])):
        mine, theirs = clone(est), sklearn_clone(est)  # reference library
        assert type(mine) is type(est)
        assert repr(mine) == repr(theirs)
        for key, value in mine.get_params().items():
            np.testing.assert_array_equal(value, theirs.get_params()[key])
            if isinstance(value, np.ndarray):
                assert value is not est.get_params()[key]  # deep copies, as sklearn's clone


def test_clone_hands_other_estimators_to_scikit_learn():
    pipe = make_pipeline(SpectralPreprocessor(), PLSRegressor(n_components=2))
    copy = clone(pipe)
    assert type(copy) is Pipeline and copy is not pipe
    assert copy.steps[1][1] is not pipe.steps[1][1]
    assert repr(copy) == repr(pipe)


def test_score_is_r2_with_weights():
    rng = np.random.default_rng(3)
    conc = rng.uniform(0.1, 1.0, (30, 2))
    X = conc @ rng.uniform(0.0, 1.0, (2, 12)) + 0.05 * rng.standard_normal((30, 12))
    model = PLSRegressor(n_components=1).fit(X, conc)
    w = rng.uniform(0.5, 2.0, 30)
    resid = conc - model.predict(X)
    mean = np.average(conc, axis=0, weights=w)
    # R² = 1 − SS_res/SS_tot per output, averaged uniformly (definition; scikit-learn).
    r2 = 1 - (w @ resid**2) / (w @ (conc - mean) ** 2)
    assert model.score(X, conc, sample_weight=w) == pytest.approx(r2.mean(), rel=1e-12)
    assert model.score(X, conc) == pytest.approx(r2_score(conc, model.predict(X)))


def test_unfitted_models_raise_scikit_learns_error():
    with pytest.raises(NotFittedError, match="not fitted yet"):
        PLSRegressor().predict(np.ones((2, 3)))
    with pytest.raises(NotFittedError):
        check_fitted(CLSRegressor(), "pure_spectra_")


def test_a_pickled_model_predicts_the_same():
    rng = np.random.default_rng(4)
    X, y = rng.uniform(0, 1, (12, 5)), rng.uniform(0, 1, 12)
    model = PLSRegressor(n_components=2).fit(X, y)
    again = pickle.loads(pickle.dumps(model))
    np.testing.assert_array_equal(again.predict(X), model.predict(X))


finite = st.floats(-1e6, 1e6, allow_nan=False)


@settings(max_examples=60, deadline=None)
@given(X=hnp.arrays(np.float64, hnp.array_shapes(min_dims=2, max_dims=2, min_side=1,
                                                  max_side=6), elements=finite),
       two_d=st.booleans(), min_samples=st.integers(1, 3))
def test_clean_arrays_pass_as_validate_data_returns_them(X, two_d, min_samples):
    y = X[:, :2].copy() if two_d else X[:, 0].copy()
    ours, theirs = PLSRegressor(), PLSRegressor()
    if X.shape[0] < min_samples:
        with pytest.raises(ValueError):
            validated(ours, X, y, multi_output=True, ensure_min_samples=min_samples)
        return
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        got = validated(ours, X, y, multi_output=True, y_numeric=True, dtype=np.float64,
                        ensure_min_samples=min_samples)
        # Reference library: scikit-learn's validate_data on the same arrays.
        want = validate_data(theirs, X, y, multi_output=True, y_numeric=True,
                             dtype=np.float64, ensure_min_samples=min_samples)
    for g, w in zip(got, want, strict=True):
        np.testing.assert_array_equal(g, w)
        assert g.shape == w.shape and g.dtype == w.dtype
    assert got[0] is X and got[1] is y  # nothing copied
    assert ours.n_features_in_ == theirs.n_features_in_
    assert validated(ours, X, reset=False) is X


@pytest.mark.parametrize("bad", [[[1.0, 2.0], [3.0, 4.0]], np.array([[1, 2], [3, 4]]),
                                 np.array([[1.0, np.nan], [3.0, 4.0]]), np.ones((2, 3)),
                                 np.ones(2)])
def test_other_inputs_get_scikit_learns_checks(bad):
    est = PLSRegressor().fit(np.arange(8.0).reshape(4, 2) ** 2, np.arange(4.0))
    try:
        want = validate_data(est, bad, reset=False, dtype=np.float64)  # reference library
    except ValueError as exc:
        with pytest.raises(type(exc), match=re.escape(str(exc)[:30])):
            validated(est, bad, reset=False, dtype=np.float64)
        return
    np.testing.assert_array_equal(validated(est, bad, reset=False, dtype=np.float64), want)


def test_feature_names_are_kept_and_forgotten_as_scikit_learn_does():
    X = pd.DataFrame(np.random.default_rng(5).uniform(0, 1, (6, 3)), columns=list("abc"))
    y = np.arange(6.0)
    model = PLSRegressor(n_components=1).fit(X, y)
    assert list(model.feature_names_in_) == ["a", "b", "c"]
    with pytest.warns(UserWarning, match="does not have valid feature names"):
        model.predict(X.to_numpy())  # scikit-learn's warning: the ndarray is not fast-pathed
    model.fit(X.to_numpy(), y)
    assert not hasattr(model, "feature_names_in_")


@pytest.mark.parametrize("display", ["diagram", "text"])
def test_notebooks_show_the_estimators_as_scikit_learns(display):
    # Reference library: a BaseEstimator has _repr_html_ only under display="diagram", and its
    # mime bundle holds the plain repr, plus the HTML diagram under "diagram".
    from sklearn import config_context

    ours, theirs = _pair(bases_theirs=())
    with config_context(display=display):
        assert hasattr(ours(), "_repr_html_") == hasattr(theirs(), "_repr_html_")
        mine, ref = ours(width=5)._repr_mimebundle_(), theirs(width=5)._repr_mimebundle_()
        assert sorted(mine) == sorted(ref) and mine["text/plain"] == ref["text/plain"]
        if display == "diagram":
            html = PLSRegressor(n_components=3)._repr_html_()
            assert "PLSRegressor" in html and "n_components" in html

"""Tests of bandsolve.cv_result: what a cross-validation result derives from its arrays."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.cross_decomposition import PLSRegression
from sklearn.model_selection import KFold

from bandsolve.crossval import cross_validate_pls, make_splitter
from bandsolve.splitters import FixedFolds

from .test_crossval import _data


@pytest.mark.parametrize("spec", ["contiguous:5", "interleaved:4", "loo"])
def test_held_out_leverage_matches_scikit_learn_refits(spec):
    # Reference: scikit-learn's PLSRegression refitted on each training fold; the leverage of
    # a held-out sample is 1/n_t + t(TᵀT)⁻¹tᵀ against that fold's training scores (Martens &
    # Næs 1989, from memory), which does not depend on the scores' sign or algorithm.
    rng = np.random.default_rng(8)
    X, Y = _data(rng, 23, 40)
    res = cross_validate_pls(X, Y, 4, cv=make_splitter(spec))
    expected = np.empty(len(X))
    for train, test in KFold(len(X)).split(X) if spec == "loo" else make_splitter(spec).split(X):
        ref = PLSRegression(n_components=3, scale=False, tol=1e-14, max_iter=5000).fit(
            X[train], Y[train])
        T, t = ref.x_scores_, ref.transform(X[test])
        expected[test] = 1.0 / train.size + np.einsum(
            "ij,jk,ik->i", t, np.linalg.inv(T.T @ T), t)
    np.testing.assert_allclose(res.leverage(2), expected, rtol=1e-8)


def test_held_out_leverage_of_overlapping_folds_uses_each_folds_training_set():
    # Reference: scikit-learn's PLSRegression refitted on each training set (as above); folds
    # whose test sets overlap and whose training sets are not the rest of the samples (as
    # ShuffleSplit with a train_size gives), so a sample's leverage is the mean over the
    # splits that held it out of 1/n_t + t(TᵀT)⁻¹tᵀ on that split's n_t training samples.
    rng = np.random.default_rng(11)
    X, Y = _data(rng, 18, 30)
    folds = [(np.arange(8, 18), np.arange(0, 8)), (np.arange(0, 5), np.arange(5, 12)),
             (np.arange(0, 11), np.arange(11, 18)), (np.arange(9, 18), np.arange(3, 9))]
    res = cross_validate_pls(X, Y, 3, cv=FixedFolds(folds))
    total, count = np.zeros(len(X)), np.zeros(len(X))
    for train, test in folds:
        ref = PLSRegression(n_components=2, scale=False, tol=1e-14, max_iter=5000).fit(
            X[train], Y[train])
        T, t = ref.x_scores_, ref.transform(X[test])
        total[test] += 1.0 / train.size + np.einsum("ij,jk,ik->i", t, np.linalg.inv(T.T @ T), t)
        count[test] += 1
    np.testing.assert_allclose(res.leverage(1), total / count, rtol=1e-8)

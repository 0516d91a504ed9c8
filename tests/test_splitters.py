"""bandsolve's own cross-validation folds give exactly scikit-learn's folds.

The reference library is ``sklearn.model_selection``: each bandsolve splitter replaces one of
its splitters, so every (train, test) pair must be identical, in the same order.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.model_selection import (
    GridSearchCV,
    GroupKFold,
    KFold,
    LeaveOneGroupOut,
    LeaveOneOut,
    RepeatedKFold,
)

from bandsolve.pls import PLSRegressor
from bandsolve.splitters import (
    ContiguousFolds,
    FixedFolds,
    GroupSplitter,
    InterleavedFolds,
    LeaveOneOutFolds,
    ShuffledFolds,
    make_splitter,
)


def _same_folds(ours, theirs, X, groups=None) -> None:
    got = list(ours.split(X))
    want = list(theirs.split(X, groups=groups))
    assert len(got) == len(want) == ours.get_n_splits(X)
    for (train, test), (ref_train, ref_test) in zip(got, want, strict=True):
        np.testing.assert_array_equal(train, ref_train)
        np.testing.assert_array_equal(test, ref_test)


@settings(max_examples=80, deadline=None)
@given(data=st.data(), n=st.integers(2, 60))
def test_contiguous_and_shuffled_folds_equal_kfold(data, n):
    k = data.draw(st.integers(2, n))
    repeats = data.draw(st.integers(1, 3))
    state = data.draw(st.integers(0, 2**31 - 1))
    X = np.zeros((n, 1))
    # Reference library: KFold, KFold(shuffle=True) and RepeatedKFold of scikit-learn.
    _same_folds(ContiguousFolds(k), KFold(k), X)
    _same_folds(make_splitter(f"contiguous:{k}"), KFold(k), X)
    _same_folds(ShuffledFolds(k, 1, state), KFold(k, shuffle=True, random_state=state), X)
    _same_folds(ShuffledFolds(k, repeats, state),
                RepeatedKFold(n_splits=k, n_repeats=repeats, random_state=state), X)
    _same_folds(make_splitter(f"random:{k}x{repeats}", random_state=state),
                RepeatedKFold(n_splits=k, n_repeats=repeats, random_state=state), X)


@settings(max_examples=80, deadline=None)
@given(labels=st.lists(st.integers(0, 9), min_size=2, max_size=40), data=st.data())
def test_group_folds_equal_leave_one_group_out_and_group_kfold(labels, data):
    groups = np.array(labels)
    X = np.zeros((groups.size, 1))
    n_groups = np.unique(groups).size
    if n_groups >= 2:
        _same_folds(GroupSplitter(groups), LeaveOneGroupOut(), X, groups)
        k = data.draw(st.integers(2, n_groups))
        # Reference library: GroupKFold (largest group first into the lightest fold).
        _same_folds(GroupSplitter(groups, k), GroupKFold(k), X, groups)


def test_leave_one_out_and_interleaved_folds_follow_their_definitions():
    X = np.zeros((7, 2))
    _same_folds(LeaveOneOutFolds(), LeaveOneOut(), X)  # reference library
    # Venetian blinds (common practice): sample i is held out in fold i mod k.
    for k, (train, test) in enumerate(InterleavedFolds(3).split(X)):
        np.testing.assert_array_equal(test, np.arange(k, 7, 3))
        np.testing.assert_array_equal(train, np.setdiff1d(np.arange(7), test))


@pytest.mark.parametrize("splitter", [ContiguousFolds(8), InterleavedFolds(8),
                                      ShuffledFolds(8), GroupSplitter([1, 1, 2], 3),
                                      GroupSplitter([1, 1, 1]), LeaveOneOutFolds()])
def test_impossible_splits_raise_value_error(splitter):
    X = np.zeros((1 if isinstance(splitter, LeaveOneOutFolds) else 3, 1))
    with pytest.raises(ValueError, match=r"n_splits|groups|LeaveOneOut"):
        list(splitter.split(X))


def test_fixed_folds_and_scikit_learn_use_the_splitters():
    X = np.random.default_rng(2).uniform(0, 1, (12, 4))
    y = X @ np.array([1.0, 0.5, 0.0, 0.2])
    folds = list(InterleavedFolds(4).split(X))
    assert [t.tolist() for _, t in FixedFolds(folds).split()] == [t.tolist() for _, t in folds]
    grid = GridSearchCV(PLSRegressor(), {"n_components": [1, 2]}, cv=ContiguousFolds(3))
    assert grid.fit(X, y).n_splits_ == 3  # scikit-learn accepts the splitter as it is
    assert repr(ShuffledFolds(5)) == "ShuffledFolds(n_repeats=1, n_splits=5, random_state=0)"


def test_every_splitter_has_scikit_learns_representation():
    # Reference library: scikit-learn's splitters print as Name(param=value, ...), sorted, and
    # LeaveOneOut, which takes no parameter, as "LeaveOneOut()".
    assert repr(LeaveOneOut()) == "LeaveOneOut()"
    assert repr(LeaveOneOutFolds()) == "LeaveOneOutFolds()"
    assert repr(make_splitter("loo")) == "LeaveOneOutFolds()"
    assert repr(ContiguousFolds(4)) == "ContiguousFolds(n_splits=4)"
    assert repr(GroupSplitter([1, 2], 2)) == "GroupSplitter(groups=[1, 2], n_splits=2)"


@pytest.mark.parametrize("k", [None, 2])
def test_group_labels_of_another_length_are_refused_as_scikit_learn_does(k):
    # Reference library: LeaveOneGroupOut and GroupKFold raise ValueError when there are not
    # as many group labels as samples (an index past the end, or samples silently never held
    # out, otherwise).
    X = np.zeros((5, 1))
    for labels in (["a", "a", "b", "b", "c", "c"], ["a", "a", "b"]):
        theirs = LeaveOneGroupOut() if k is None else GroupKFold(k)
        with pytest.raises(ValueError, match="inconsistent numbers of samples"):
            list(theirs.split(X, groups=labels))
        with pytest.raises(ValueError, match="inconsistent numbers of samples"):
            list(GroupSplitter(labels, k).split(X))


@pytest.mark.parametrize("ours, theirs", [
    (ContiguousFolds(3.5), lambda: KFold(3.5)),
    (ShuffledFolds(3, 0), lambda: RepeatedKFold(n_splits=3, n_repeats=0)),
    (ShuffledFolds(3, 1.5), lambda: RepeatedKFold(n_splits=3, n_repeats=1.5)),
    (InterleavedFolds("4"), lambda: KFold("4"))])
def test_fold_and_repeat_counts_must_be_whole_positive_numbers(ours, theirs):
    # Reference library: scikit-learn refuses these counts with ValueError (at construction;
    # ours when splitting), rather than a TypeError deep inside or no folds at all.
    with pytest.raises(ValueError):
        theirs()
    with pytest.raises(ValueError, match=r"whole number|at least 1"):
        list(ours.split(np.zeros((9, 1))))

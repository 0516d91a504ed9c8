"""Cross-validation folds: the schemes a calibration is cross-validated with.

Every splitter has scikit-learn's splitter interface (``split(X, y, groups)`` yielding
``(train, test)`` index arrays, ``get_n_splits``), so it can be passed to scikit-learn, and
any scikit-learn splitter can be passed where bandsolve takes one. They are written here,
rather than taken from ``sklearn.model_selection``, so that building a model does not import
scikit-learn (about 1.5 s); each gives exactly the folds of the scikit-learn splitter it
replaces (tested), so models built before and after are cross-validated alike.

Build one from a command-line string with :func:`make_splitter`.
"""

from __future__ import annotations

import inspect
import numbers
import re
from abc import ABC, abstractmethod
from collections.abc import Iterator, Sequence

import numpy as np

from bandsolve.errors import ModelError

__all__ = ["ContiguousFolds", "FixedFolds", "GroupSplitter", "InterleavedFolds",
           "LeaveOneOutFolds", "ShuffledFolds", "make_splitter"]


class _Described:
    """``__repr__`` from the ``__init__`` parameters, as scikit-learn's splitters print."""

    def __repr__(self) -> str:
        init = type(self).__init__
        names = ([] if init is object.__init__ else
                 [p for p in inspect.signature(init).parameters if p != "self"])
        shown = ", ".join(f"{k}={getattr(self, k)!r}" for k in sorted(names))
        return f"{type(self).__name__}({shown})"


class _Splitter(_Described, ABC):
    """``split`` from the test indices of each fold (``_tests``)."""

    @abstractmethod
    def _tests(self, n: int, groups) -> Iterator[np.ndarray]:
        """Test indices of each fold, for n samples (and their ``groups``)."""

    def split(self, X, y=None, groups=None) -> Iterator[tuple[np.ndarray, np.ndarray]]:
        """Yield ``(train, test)`` index arrays, both sorted, for the n samples of X."""
        n = len(X)
        for test in self._tests(n, groups):
            held = np.zeros(n, dtype=bool)
            held[test] = True
            yield np.flatnonzero(~held), np.flatnonzero(held)


class _Folds(_Splitter):
    """K folds of the samples; K is checked against n when splitting."""

    def __init__(self, n_splits: int = 10):
        self.n_splits = n_splits

    def _check(self, n: int) -> None:
        counts = {"n_splits": self.n_splits, "n_repeats": getattr(self, "n_repeats", 1)}
        for name, value in counts.items():
            if isinstance(value, bool) or not isinstance(value, numbers.Integral):
                raise ValueError(f"{name} must be a whole number, got {value!r} of type "
                                 f"{type(value).__name__}.")
        if counts["n_repeats"] < 1:
            raise ValueError(f"n_repeats must be at least 1, got {counts['n_repeats']}.")
        if self.n_splits < 2:
            raise ValueError(f"cross-validation needs at least 2 folds, got "
                             f"n_splits={self.n_splits}.")
        if self.n_splits > n:
            raise ValueError(f"Cannot have number of splits n_splits={self.n_splits} greater "
                             f"than the number of samples: n_samples={n}.")

    def split(self, X, y=None, groups=None) -> Iterator[tuple[np.ndarray, np.ndarray]]:
        """Yield ``(train, test)`` index arrays, both sorted, after checking K against n."""
        self._check(len(X))
        yield from super().split(X, y, groups)

    def get_n_splits(self, X=None, y=None, groups=None) -> int:
        """Number of folds."""
        return self.n_splits


class ContiguousFolds(_Folds):
    """K folds of consecutive samples, the first ``n mod K`` one sample larger.

    The folds of ``sklearn.model_selection.KFold(n_splits)`` (no shuffling).

    Parameters
    ----------
    n_splits : int, default=10
        Number of folds K (2 ≤ K ≤ n).
    """

    def _tests(self, n: int, groups) -> Iterator[np.ndarray]:
        yield from np.array_split(np.arange(n), self.n_splits)


class InterleavedFolds(_Folds):
    """Interleaved folds (venetian blinds): sample i is held out in fold ``i mod n_splits``.

    Parameters
    ----------
    n_splits : int, default=10
        Number of folds K (2 ≤ K ≤ n).
    """

    def _tests(self, n: int, groups) -> Iterator[np.ndarray]:
        for k in range(self.n_splits):
            yield np.arange(k, n, self.n_splits)


class ShuffledFolds(_Folds):
    """K contiguous folds of a random order of the samples, repeated with new orders.

    The folds of ``KFold(n_splits, shuffle=True, random_state=random_state)`` for one repeat
    and of ``RepeatedKFold(n_splits=n_splits, n_repeats=n_repeats, random_state=...)`` for
    several: each repeat shuffles with the next draws of one
    ``numpy.random.RandomState(random_state)`` stream.

    Parameters
    ----------
    n_splits : int, default=10
        Number of folds K per repeat.
    n_repeats : int, default=1
        Number of repeats R, each holding out every sample once.
    random_state : int, default=0
        Start of the fixed random stream.
    """

    def __init__(self, n_splits: int = 10, n_repeats: int = 1, random_state: int = 0):
        self.n_splits = n_splits
        self.n_repeats = n_repeats
        self.random_state = random_state

    def _tests(self, n: int, groups) -> Iterator[np.ndarray]:
        rng = np.random.RandomState(self.random_state)  # the stream scikit-learn's folds use
        for _ in range(self.n_repeats):
            order = np.arange(n)
            rng.shuffle(order)
            yield from np.array_split(order, self.n_splits)

    def get_n_splits(self, X=None, y=None, groups=None) -> int:
        """Number of folds over all repeats."""
        return self.n_splits * self.n_repeats


class LeaveOneOutFolds(_Splitter):
    """Each sample held out alone (``sklearn.model_selection.LeaveOneOut``)."""

    def _tests(self, n: int, groups) -> Iterator[np.ndarray]:
        if n < 2:
            raise ValueError(f"Cannot perform LeaveOneOut with n_samples={n}.")
        yield from np.arange(n)[:, None]

    def get_n_splits(self, X=None, y=None, groups=None) -> int:
        """Number of samples."""
        if X is None:
            raise ValueError("The 'X' parameter should not be None.")
        return len(X)


class GroupSplitter(_Splitter):
    """Leave-group-out with the groups fixed at construction.

    Replicate spectra of one physical sample share a group label and are always held out
    together. ``n_splits=None`` leaves out one group at a time (the folds of
    ``LeaveOneGroupOut``, groups in sorted order); with ``n_splits`` the groups are dealt to
    K folds, largest first, each to the fold with the fewest samples so far (the folds of
    ``GroupKFold(n_splits)``).

    Parameters
    ----------
    groups : array-like of shape (n,)
        Group label of each spectrum.
    n_splits : int, optional
        Number of folds; ``None`` leaves out one group at a time.
    """

    def __init__(self, groups, n_splits: int | None = None):
        self.groups = groups
        self.n_splits = n_splits

    def _tests(self, n: int, groups) -> Iterator[np.ndarray]:
        labels, index = np.unique(np.asarray(self.groups), return_inverse=True)
        index = index.ravel()
        if index.size != n:
            raise ValueError(f"Found input variables with inconsistent numbers of samples: "
                             f"[{n}, {index.size}] (spectra, group labels); give one group "
                             "label per spectrum.")
        if self.n_splits is None:
            if labels.size < 2:
                raise ValueError(f"The groups parameter contains fewer than 2 unique groups "
                                 f"({labels}). LeaveOneGroupOut expects at least 2.")
            for k in range(labels.size):
                yield np.flatnonzero(index == k)
            return
        if self.n_splits > labels.size:
            raise ValueError(f"Cannot have number of splits n_splits={self.n_splits} greater "
                             f"than the number of groups: {labels.size}.")
        sizes = np.bincount(index)
        largest_first = np.argsort(sizes, kind="stable")[::-1]
        fold_size = np.zeros(self.n_splits)
        fold_of_group = np.zeros(labels.size, dtype=int)
        for g in largest_first:
            lightest = int(np.argmin(fold_size))
            fold_size[lightest] += sizes[g]
            fold_of_group[g] = lightest
        fold = fold_of_group[index]
        for k in range(self.n_splits):
            yield np.flatnonzero(fold == k)

    def split(self, X, y=None, groups=None) -> Iterator[tuple[np.ndarray, np.ndarray]]:
        """Yield (train, test) index arrays; the ``groups`` argument is ignored."""
        return super().split(X, y, None)

    def get_n_splits(self, X=None, y=None, groups=None) -> int:
        """Number of folds."""
        if self.n_splits is not None:
            return self.n_splits
        return int(np.unique(np.asarray(self.groups)).size)


class FixedFolds(_Described):
    """Folds given as a list of ``(train, test)`` index arrays, used as they are."""

    def __init__(self, folds: Sequence[tuple[np.ndarray, np.ndarray]]):
        self.folds = folds

    def split(self, X=None, y=None, groups=None) -> Iterator[tuple[np.ndarray, np.ndarray]]:
        """Yield the stored ``(train, test)`` pairs."""
        for train, test in self.folds:
            yield np.asarray(train), np.asarray(test)

    def get_n_splits(self, X=None, y=None, groups=None) -> int:
        """Number of stored folds."""
        return len(self.folds)


_SPEC = re.compile(
    r"^(contiguous|interleaved|random|groups):(\d+)(?:x(\d+))?$|^(loo|groups)$")

#: Spellings of earlier versions, refused with the name that replaced them.
_RENAMED = {"blocks": "contiguous", "blinds": "interleaved"}


def make_splitter(spec: str, groups=None, random_state: int = 0,
                  n_samples: int | None = None) -> _Splitter:
    """Build a splitter from a command-line string.

    Parameters
    ----------
    spec : str
        ``"contiguous:K"`` (K folds of consecutive samples), ``"interleaved:K"`` (sample i in
        fold i mod K),
        ``"random:K"`` (shuffled K-fold), ``"random:KxR"`` (K-fold repeated R times with new
        shuffles), ``"loo"`` (leave one out), ``"groups"`` (leave one group out) or
        ``"groups:K"`` (K folds of whole groups).
    groups : array-like of shape (n,), optional
        Group labels; required by ``"groups"`` specs.
    random_state : int, default=0
        Random state of the shuffled splitters.
    n_samples : int, optional
        Number of samples, to check K against it now rather than at split time.

    Returns
    -------
    splitter
        A scikit-learn compatible cross-validator.

    Raises
    ------
    ModelError
        For an unknown spec, K < 2, R < 1, K > n_samples, or a ``groups`` spec without groups.
    """
    match = _SPEC.match(spec.strip().lower()) if isinstance(spec, str) else None
    old, colon, _ = spec.strip().lower().partition(":") if isinstance(spec, str) else ("", "", "")
    if match is None and colon and old in _RENAMED:
        new = spec.strip().lower().replace(old, _RENAMED[old], 1)
        raise ModelError(f"cross-validation spec {spec!r} is now written {new!r} ('{old}' was "
                         f"renamed '{_RENAMED[old]}', which says what the folds are).")
    if match is None:
        raise ModelError(f"cross-validation spec {spec!r} is not understood; use one of "
                         "'contiguous:K', 'interleaved:K', 'random:K', 'random:KxR', 'loo', "
                         "'groups' or 'groups:K' (for example 'interleaved:10').")
    kind = match.group(1) or match.group(4)
    k = int(match.group(2)) if match.group(2) else None
    repeats = int(match.group(3)) if match.group(3) else None
    if repeats is not None and kind != "random":
        raise ModelError(f"cross-validation spec {spec!r}: only 'random:KxR' takes repeats.")
    if k is not None and k < 2:
        raise ModelError(f"cross-validation spec {spec!r}: the number of folds must be at "
                         "least 2.")
    if repeats is not None and repeats < 1:
        raise ModelError(f"cross-validation spec {spec!r}: the number of repeats must be at "
                         "least 1.")
    if k is not None and n_samples is not None and k > n_samples:
        raise ModelError(f"cross-validation spec {spec!r} asks for {k} folds but there are "
                         f"only {n_samples} samples; use at most {n_samples} folds or 'loo'.")
    if kind == "groups":
        if groups is None:
            raise ModelError(f"cross-validation spec {spec!r} needs a group label for every "
                             "spectrum (e.g. a sample-id column); supply groups or use "
                             "'interleaved:K'.")
        n_groups = np.unique(np.asarray(groups)).size
        if k is not None and k > n_groups:
            raise ModelError(f"cross-validation spec {spec!r} asks for {k} folds but there "
                             f"are only {n_groups} groups; use at most {n_groups}.")
        return GroupSplitter(groups, k)
    if kind == "loo":
        return LeaveOneOutFolds()
    if kind == "contiguous":
        return ContiguousFolds(k)
    if kind == "interleaved":
        return InterleavedFolds(k)
    return ShuffledFolds(k, repeats or 1, random_state)

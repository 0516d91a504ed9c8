"""Cross-validation: splitters, the one-pass PLS engine, and choosing the number of components.

* Splitters (:mod:`bandsolve.splitters`) follow the scikit-learn interface (``split``,
  ``get_n_splits``); build one from a command-line string with :func:`make_splitter`.
* :func:`cross_validate_pls` returns the whole RMSECV curve for 1..A components from one PLS fit
  per fold (no refit per component count), with cross-validated Q residuals and Hotelling T².
* :func:`cross_validate_estimator` cross-validates any scikit-learn regressor (e.g. CLS).
* :func:`select_components` applies the minimum, one-standard-error or randomization rule;
  :func:`randomization_test` is the paired sign-flip test behind it.
"""

from __future__ import annotations

import numbers

import numpy as np

from bandsolve._cv_engine import (
    FoldOutput,
    TallEngine,
    WideEngine,
    put_path,
    rows_of,
)
from bandsolve._estimator import clone
from bandsolve._threads import single_blas_thread
from bandsolve.cv_result import CVResult
from bandsolve.errors import DataError, ModelError
from bandsolve.selection import (
    ComponentSelection,
    RandomizationResult,
    randomization_test,
    select_components,
)
from bandsolve.splitters import GroupSplitter, InterleavedFolds, make_splitter

__all__ = [
    "CVResult",
    "ComponentSelection",
    "GroupSplitter",
    "RandomizationResult",
    "InterleavedFolds",
    "cross_validate_estimator",
    "cross_validate_pls",
    "make_splitter",
    "randomization_test",
    "select_components",
]


def _as_xy(X, Y) -> tuple[np.ndarray, np.ndarray]:
    X = np.asarray(X, dtype=np.float64)
    Y = np.asarray(Y, dtype=np.float64)
    if X.ndim != 2:
        raise DataError(f"spectra must be a 2-D array (samples × wavelengths), got shape "
                        f"{X.shape}.")
    Y2 = Y.reshape(-1, 1) if Y.ndim == 1 else Y
    if Y2.ndim != 2 or Y2.shape[0] != X.shape[0]:
        raise DataError(f"concentrations have shape {Y.shape} but there are {X.shape[0]} "
                        "spectra; give one row of concentrations per spectrum.")
    for name, arr in (("spectra", X), ("concentrations", Y2)):
        bad = np.flatnonzero(~np.isfinite(arr).all(axis=1))
        if bad.size:
            raise DataError(f"{name}: sample(s) at row index {bad[:5].tolist()} contain NaN "
                            "or infinite values; remove or fix them before cross-validation.")
    return X, Y2


def _splits(cv, X, Y, groups) -> list[tuple[np.ndarray, np.ndarray]]:
    splitter = make_splitter(cv, groups, n_samples=X.shape[0]) if isinstance(cv, str) else cv
    try:
        splits = list(splitter.split(X, Y, groups))
    except ValueError as exc:
        raise ModelError(f"cross-validation {splitter!r} cannot split {X.shape[0]} samples: "
                         f"{exc}. Use fewer folds or supply the groups it needs.") from exc
    held_out = np.zeros(X.shape[0], dtype=int)
    for train, test in splits:
        if train.size < 2:
            raise ModelError(f"cross-validation {splitter!r} leaves fewer than 2 training "
                             "samples in a fold; use fewer folds.")
        if test.size == 0:
            raise ModelError(f"cross-validation {splitter!r} has a split that holds out no "
                             "sample (its error would be 0/0); remove empty splits or use "
                             "fewer folds.")
        held_out[test] += 1
    never = np.flatnonzero(held_out == 0)
    if never.size:
        raise ModelError(f"cross-validation {splitter!r} never holds out sample(s) at row "
                         f"index {never[:5].tolist()}; use a splitter that covers all samples.")
    return splits


def _held_out_counts(splits, n: int) -> np.ndarray:
    """How many times each of the n samples is held out."""
    return np.bincount(np.concatenate([test for _, test in splits]), minlength=n)


def _run(splits, Y: np.ndarray, settings: tuple, setting_name: str, fold_fn) -> CVResult:
    """Collect fold outputs into whole-set arrays.

    ``fold_fn(k, train, test)`` yields ``(rows, FoldOutput)`` pieces covering ``test``.  When
    every sample is held out exactly once (the usual case) each fold writes its rows
    directly (through a slice when they are consecutive); samples held out several times
    (repeats) are averaged.
    """
    n, m = Y.shape
    n_set = len(settings)
    count = _held_out_counts(splits, n)
    once = bool((count == 1).all())
    new = np.empty if once else np.zeros
    predictions = new((n_set, n, m))
    sum_sq = None if once else np.zeros((n_set, n, m))
    diag = None
    press = np.zeros((n_set, m))
    fold_mse = np.empty((n_set, len(splits), m))
    fold_index = np.full(n, -1)
    for k, (train, test) in enumerate(splits):
        fold_sq = np.zeros((n_set, m))
        for rows, out in fold_fn(k, train, test):
            sq = np.subtract(out.predictions, Y[rows])
            np.square(sq, out=sq)
            put_path(fold_sq, slice(None), sq.sum(axis=1), add=True)
            if diag is None and out.q_residuals is not None:
                diag = [new((n_set, n)) for _ in range(3)]
            put_path(predictions, rows, out.predictions, add=not once)
            if diag is not None:
                put_path(diag[0], rows, out.q_residuals, add=not once)
                put_path(diag[1], rows, out.hotelling_t2, add=not once)
                # Leverage on this fold's own training set, 1/n_t + T²/(n_t − 1).
                put_path(diag[2], rows, 1.0 / train.size
                         + out.hotelling_t2 / (train.size - 1), add=not once)
            if not once:
                put_path(sum_sq, rows, sq, add=True)
        press += fold_sq
        fold_mse[:, k] = fold_sq / test.size
        first = test[fold_index[test] < 0]
        fold_index[first] = k
    if once:
        mse = press / n
    else:
        predictions /= count[:, None]
        sum_sq /= count[:, None]
        mse = sum_sq.mean(axis=1)
        if diag is not None:
            for values in diag:
                values /= count
    return CVResult(
        settings=settings, setting_name=setting_name, reference=Y, predictions=predictions,
        rmsecv=np.sqrt(mse), rmsecv_total=np.sqrt(mse.mean(axis=1)), fold_mse=fold_mse,
        fold_index=fold_index, n_held_out=count,
        q_residuals=None if diag is None else diag[0],
        hotelling_t2=None if diag is None else diag[1], repeat_squared_errors=sum_sq,
        held_out_leverage=None if diag is None else diag[2])


def cross_validate_pls(X, Y, max_components: int, cv="interleaved:10", scale: bool = False,
                       algorithm: str = "auto", groups=None) -> CVResult:
    """Cross-validate PLS for every component count 1..``max_components`` in one pass.

    Each fold fits one PLS model with ``max_components`` components on its training samples,
    from cross-products downdated from those of the whole set (tall data, n ≥ p) or from the
    training block of the Gram matrix (wide data, p > n).  Because PLS models are nested, the
    predictions for every smaller count come from the same fit.  Centring (and scaling) uses
    the training fold only, so no validation information leaks into the model.

    Parameters
    ----------
    X : array-like of shape (n, p)
        Calibration spectra (absorbance), already preprocessed by row-wise transforms.
    Y : array-like of shape (n,) or (n, m)
        Reference concentrations.
    max_components : int
        Largest component count A_max.  Counts beyond the rank of a training fold repeat the
        last model that could be fitted.
    cv : str or splitter, default="interleaved:10"
        A :func:`make_splitter` spec or any scikit-learn splitter.
    scale : bool, default=False
        Autoscale X columns with each training fold's SD (ddof=1).
    algorithm : {"auto", "kernel", "wide"}, default="auto"
        ``"kernel"`` = downdated XᵀX form, ``"wide"`` = Gram-matrix form; ``"auto"`` picks
        ``"kernel"`` when n ≥ p.
    groups : array-like of shape (n,), optional
        Group labels passed to the splitter's ``split``.

    Returns
    -------
    CVResult
        ``settings = (1, ..., A_max)``, with cross-validated Q residuals (squared X residual of
        each held-out spectrum, centred/scaled with its training fold) and Hotelling T² of
        the held-out scores relative to the fold's training scores.

    References
    ----------
    .. [1] Engstrøm, O.-C. G., & Jensen, M. H. (2024). Fast partition-based cross-validation
       with centering and scaling for XᵀX and XᵀY. arXiv:2401.13185.
    .. [2] Liland, K. H., Stefansson, P., & Indahl, U. G. (2020). Much faster cross-validation
       in PLSR-modelling by avoiding redundant calculations. *J. Chemometrics*, 34, e3201.
    .. [3] Dayal, B. S., & MacGregor, J. F. (1997). Improved PLS algorithms. *Journal of
       Chemometrics*, 11(1), 73-85.
    """
    X, Y2 = _as_xy(X, Y)
    if (not isinstance(max_components, numbers.Integral) or isinstance(max_components, bool)
            or max_components < 1):
        raise ModelError(f"max_components must be a positive integer, got {max_components!r}.")
    if algorithm not in ("auto", "kernel", "wide"):
        raise ModelError(f"algorithm must be 'auto', 'kernel' or 'wide', got {algorithm!r}.")
    splits = _splits(cv, X, Y2, groups)
    n, p = X.shape
    tall = algorithm == "kernel" or (algorithm == "auto" and n >= p)
    settings = tuple(range(1, int(max_components) + 1))
    # Folds make many small BLAS calls, which stall with several threads (see _threads.py); the
    # one-off cross-products are small enough that a second thread gains little and risks the
    # same stalls on a busy machine.
    with single_blas_thread():
        if tall:
            once = bool((_held_out_counts(splits, n) == 1).all())
            engine = TallEngine(X, Y2, scale, splits, len(settings), once)
            return _run(splits, Y2, settings, "n_components", engine.fold)
        outputs = WideEngine(X, Y2, scale).fold_all(splits, len(settings))
        return _run(splits, Y2, settings, "n_components",
                    lambda k, train, test: [(rows_of(test), outputs[k])])


def cross_validate_estimator(estimator, X, Y, cv="interleaved:10", groups=None) -> CVResult:
    """Cross-validate any scikit-learn regressor (one setting; cloned and refitted per fold).

    Parameters
    ----------
    estimator : regressor
        Unfitted scikit-learn compatible regressor (e.g. a CLS model or a ``Pipeline``).
    X : array-like of shape (n, p)
        Spectra.
    Y : array-like of shape (n,) or (n, m)
        Reference concentrations; passed to ``fit`` with the given dimensionality.
    cv : str or splitter, default="interleaved:10"
        A :func:`make_splitter` spec or any scikit-learn splitter.
    groups : array-like of shape (n,), optional
        Group labels passed to the splitter's ``split``.

    Returns
    -------
    CVResult
        One setting, labelled with the estimator's class name; no Q residuals or T².
    """
    X, Y2 = _as_xy(X, Y)
    y_fit = np.asarray(Y, dtype=np.float64)
    splits = _splits(cv, X, Y2, groups)

    def fold(k, train, test):
        model = clone(estimator).fit(X[train], y_fit[train])
        pred = np.asarray(model.predict(X[test]), dtype=np.float64).reshape(test.size, -1)
        return [(rows_of(test), FoldOutput(pred[None], None, None))]

    return _run(splits, Y2, (type(estimator).__name__,), "estimator", fold)

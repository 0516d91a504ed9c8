"""Per-fold computations of the one-pass PLS cross-validation engine.

Each engine is built once from all the data, fits every fold together (one numpy call per
component for all folds), and then gives each fold's held-out predictions, Q residuals and
Hotelling T² for every component count 1..A.  Validation samples never enter the training
means, scales or cross-products.

* :class:`TallEngine` (n ≥ p): cross-products of globally pre-centred X are computed once; a
  fold subtracts its own cross-products and applies a rank-1 mean correction; the improved
  kernel algorithm then runs on the stacked p×p products of all folds (Engstrøm & Jensen 2024;
  Dayal & MacGregor 1997).  Held-out rows are evaluated in 1 MB blocks.
* :class:`WideEngine` (p > n): the Gram matrix ``XXᵀ`` is computed once; every fold works on
  n-vectors that are zero on its held-out rows, so one product with the whole-set Gram matrix
  serves all folds at each component and the training mean enters as a rank-one correction
  (the Gram-matrix kernel of Liland, Stefansson & Indahl 2020, without per-fold blocks).  With
  column scaling the Gram matrix depends on the fold's scale and is recomputed per fold.

Pre-centring X with the overall mean keeps the downdate accurate when spectra carry a large
absorbance offset (measured for this package: 2e-11 instead of 1e-7 relative error at a
20 AU offset).

References
----------
.. [1] Engstrøm, O.-C. G., & Jensen, M. H. (2024). Fast partition-based cross-validation with
   centering and scaling for XᵀX and XᵀY. arXiv:2401.13185 (J. Chemometrics 2025).
.. [2] Liland, K. H., Stefansson, P., & Indahl, U. G. (2020). Much faster cross-validation in
   PLSR-modelling by avoiding redundant calculations. *Journal of Chemometrics*, 34(3), e3201.
.. [3] Dayal, B. S., & MacGregor, J. F. (1997). Improved PLS algorithms. *Journal of
   Chemometrics*, 11(1), 73-85.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np

from bandsolve._pls_kernels import (
    GramFactors,
    KernelFactors,
    gram_pls_batch,
    kernel_pls_batch,
    residual_ss_path,
)


@dataclass
class FoldOutput:
    """Held-out results of one fold for component counts 1..A_f.

    ``predictions`` (A_f, n_v, m); ``q_residuals`` (A_f, n_v); ``hotelling_t2`` (A_f, n_v).
    A_f may be smaller than the A asked for: counts beyond the rank of the training data add
    nothing, so their model is the last row's, which :func:`put_path` repeats.  Without any
    component the single row holds the zero-component model (the training mean).
    """

    predictions: np.ndarray
    q_residuals: np.ndarray | None
    hotelling_t2: np.ndarray | None


def put_path(dest: np.ndarray, rows, path: np.ndarray, add: bool = False) -> None:
    """Write (or add) a fold's path over 1..A_f into ``dest[:, rows]``, repeating its last row."""
    a = path.shape[0]
    if add:
        dest[:a, rows] += path
        dest[a:, rows] += path[-1]
    else:
        dest[:a, rows] = path
        dest[a:, rows] = path[-1]


def _fold_output(x_val: np.ndarray, y_mean: np.ndarray, val_scores: np.ndarray,
                 x_loadings: np.ndarray, y_loadings: np.ndarray, tau: np.ndarray,
                 n_train: int) -> FoldOutput:
    """Assemble predictions, Q and T² for every component count from one fold's factors.

    ``x_val`` (n_v, p) are held-out spectra centred (and scaled) with the training statistics,
    ``val_scores`` (n_v, A_f) their scores.
    """
    n_val = x_val.shape[0]
    if val_scores.shape[1] == 0:
        return FoldOutput(np.broadcast_to(y_mean, (1, n_val, y_mean.size)),
                          np.einsum("ij,ij->i", x_val, x_val)[None], np.zeros((1, n_val)))
    # The models are nested: ŷ_a = ȳ + Σ_{j≤a} t_j q_jᵀ.  Running sums component by
    # component (whole contiguous rows) rather than np.cumsum along the first axis.
    pred = val_scores.T[:, :, None] * y_loadings.T[:, None, :]
    pred[0] += y_mean
    # Training scores are orthogonal, so S_T = TᵀT/(n−1) is diagonal with τ_a/(n−1).
    t2 = np.square(val_scores.T)
    t2 *= ((n_train - 1) / tau)[:, None]
    for a in range(1, pred.shape[0]):
        pred[a] += pred[a - 1]
        t2[a] += t2[a - 1]
    return FoldOutput(pred, residual_ss_path(x_val, val_scores, x_loadings), t2)


def _fold_scale(ss_diag: np.ndarray, n_train: int) -> np.ndarray:
    """Training-fold column SD (ddof=1; ones for constant columns)."""
    sd = np.sqrt(np.maximum(ss_diag, 0.0) / (n_train - 1))
    sd[sd == 0.0] = 1.0
    return sd


def _centre(engine: TallEngine | WideEngine, X: np.ndarray, Y: np.ndarray,
            scale: bool) -> None:
    """Whole-set means and centred Y (folds correct the means by rank-one terms)."""
    engine.x_mean = X.mean(axis=0)
    engine.y_offset = Y.mean(axis=0)
    engine.y0 = Y - engine.y_offset
    engine.scale = scale


def rows_of(test: np.ndarray) -> slice | np.ndarray:
    """``test`` as a slice when its rows are evenly spaced (consecutive, or interleaved folds):
    views and strided writes instead of gathered copies and scattered writes."""
    if test.size < 2:
        return slice(int(test[0]), int(test[0]) + 1) if test.size else test
    gap = int(test[1] - test[0])
    if gap >= 1 and test[-1] - test[0] == gap * (test.size - 1) and (np.diff(test) == gap).all():
        return slice(int(test[0]), int(test[-1]) + 1, gap)
    return test


#: Rows of X centred at a time while the cross-products are accumulated and the held-out rows
#: evaluated (≈ 1 MB blocks: larger temporaries are returned to the system after each block
#: and cost page faults when taken again).
_BLOCK_BYTES = 1 << 20
#: Working memory of the folds fitted together (bytes): the stacked p×p cross-products of the
#: tall engine, the n-vectors of the wide engine.  All folds of a usual CV fit in one batch.
_BATCH_BYTES = 1 << 25
#: Per-fold Gram matrices (autoscaled wide data) fitted together, at most (bytes): each
#: component reads all of them again, so they must stay in cache.
_GRAM_CACHE_BYTES = 1 << 21
#: Largest number of stored per-fold XᵀX elements (K·p², 128 MB) for the one-pass products.
_MAX_FOLD_PRODUCTS = 1 << 24


@dataclass
class _TallFold:
    """One fold's fitted model in the tall engine: training mean and scale, factors."""

    x_mean: np.ndarray
    y_mean: np.ndarray
    scale: np.ndarray | None
    factors: KernelFactors


class TallEngine:
    """Downdated cross-products + improved kernel PLS (for n ≥ p).

    X is never copied whole.  When the folds partition the samples (each held out once) and
    their K p×p products fit in memory, each fold's own products ``X_vᵀX_v`` are computed
    once and their sum is the whole-set ``XᵀX``, so the data are multiplied once instead of
    twice.  Otherwise the whole-set products are accumulated over row blocks and each fold
    computes its own.  Rows are centred with the whole-set mean as they are read.  The folds
    are fitted together (:func:`kernel_pls_batch`) when the engine is built; :meth:`fold`
    then evaluates one fold's held-out rows.

    Parameters
    ----------
    X : ndarray of shape (n, p)
    Y : ndarray of shape (n, m)
    scale : bool
        Autoscale X columns with each training fold's SD.
    splits : list of (train, test) index arrays
    n_components : int
        Largest number of components fitted in each fold.
    partition : bool
        True when every sample is held out exactly once.
    """

    def __init__(self, X: np.ndarray, Y: np.ndarray, scale: bool,
                 splits: list[tuple[np.ndarray, np.ndarray]], n_components: int,
                 partition: bool):
        _centre(self, X, Y, scale)
        self.X = X
        n, p = X.shape
        self.sy = self.y0.sum(axis=0)
        self.step = max(1, _BLOCK_BYTES // (8 * p))  # rows of X handled at a time
        if partition and len(splits) * p * p <= _MAX_FOLD_PRODUCTS:
            stored = self._stacked_products([rows_of(test) for _, test in splits])
            self.sxx, self.sxy, self.sx, _ = (part.sum(axis=0) for part in stored)
        else:
            stored = None
            self.sxx, self.sxy, self.sx, _ = self._products(slice(0, n))
        step = max(1, _BATCH_BYTES // (8 * p * p))
        self.folds: list[_TallFold] = []
        for start in range(0, len(splits), step):
            batch = splits[start:start + step]
            own = (self._stacked_products([rows_of(test) for _, test in batch])
                   if stored is None else [part[start:start + step] for part in stored])
            self.folds += self._fit(own, np.array([train.size for train, _ in batch]),
                                    n_components)

    def _blocks(self, rows: slice | np.ndarray):
        """Row blocks (≈ 1 MB of X each) of ``rows``, as slices or index arrays."""
        if isinstance(rows, slice):
            gap = rows.step or 1
            return [slice(i, min(i + self.step * gap, rows.stop), gap)
                    for i in range(rows.start, rows.stop, self.step * gap)]
        return [rows[i:i + self.step] for i in range(0, rows.size, self.step)]

    def _products(self, rows, out=None) -> tuple[np.ndarray, np.ndarray, np.ndarray,
                                                  np.ndarray]:
        """``X_rᵀX_r``, ``X_rᵀY_r``, ``X_rᵀ1`` and ``Y_rᵀ1`` of rows ``rows`` (centred data),
        written into ``out`` when given."""
        p, m = self.X.shape[1], self.y0.shape[1]
        sxx, sxy, sx, sy = out if out is not None else (np.zeros((p, p)), np.zeros((p, m)),
                                                         np.zeros(p), np.zeros(m))
        for block in self._blocks(rows):
            xb = np.subtract(self.X[block], self.x_mean)
            sxx += xb.T @ xb
            sxy += xb.T @ self.y0[block]
            sx += xb.sum(axis=0)
        sy += self.y0[rows].sum(axis=0)
        return sxx, sxy, sx, sy

    def _stacked_products(self, fold_rows: list) -> tuple[np.ndarray, ...]:
        """:meth:`_products` of several row sets, stacked: (K, p, p), (K, p, m), (K, p), (K, m)."""
        p, m = self.X.shape[1], self.y0.shape[1]
        k = len(fold_rows)
        stacked = (np.zeros((k, p, p)), np.zeros((k, p, m)), np.zeros((k, p)), np.zeros((k, m)))
        for i, rows in enumerate(fold_rows):
            self._products(rows, out=tuple(part[i] for part in stacked))
        return stacked

    def _fit(self, own: tuple[np.ndarray, ...], n_train: np.ndarray,
             n_components: int) -> list[_TallFold]:
        """Fit the folds whose held-out products are ``own`` (overwritten) together."""
        sxx_v, sxy_v, sx_v, sy_v = own
        sx_t = self.sx - sx_v
        sy_t = self.sy - sy_v
        mean_t = sx_t / n_train[:, None]
        # Training cross-products, centred with the training mean: whole − held-out − rank 1.
        cxx = np.subtract(self.sxx, sxx_v, out=sxx_v)
        for c, u, w in zip(cxx, sx_t, mean_t, strict=True):  # fold by fold: no K·p² temporary
            c -= np.outer(u, w)
        cxy = np.subtract(self.sxy, sxy_v, out=sxy_v)
        cxy -= sx_t[:, :, None] * (sy_t / n_train[:, None])[:, None, :]
        sd = None
        if self.scale:
            sd = np.stack([_fold_scale(np.diagonal(c).copy(), k)
                           for c, k in zip(cxx, n_train, strict=True)])
            cxx /= sd[:, :, None]
            cxx /= sd[:, None, :]
            cxy /= sd[:, :, None]
        fits = kernel_pls_batch(cxx, cxy, n_components)
        return [_TallFold(self.x_mean + mean_t[i], self.y_offset + sy_t[i] / n_train[i],
                          None if sd is None else sd[i], fit) for i, fit in enumerate(fits)]

    def fold(self, k: int, train: np.ndarray,
             test: np.ndarray) -> Iterator[tuple[slice | np.ndarray, FoldOutput]]:
        """Results for held-out ``test`` (fold ``k``) of the model fitted to ``train``.

        The held-out rows are centred and evaluated in blocks, each yielded with its rows, so
        no temporary grows with the size of the fold.
        """
        f = self.folds[k]
        for block in self._blocks(rows_of(test)):
            # The held-out rows, centred with the training mean (and scaled).
            xb = np.subtract(self.X[block], f.x_mean)
            if f.scale is not None:
                xb /= f.scale
            yield block, _fold_output(xb, f.y_mean, xb @ f.factors.rotations,
                                      f.factors.x_loadings, f.factors.y_loadings,
                                      f.factors.tau, train.size)


class WideEngine:
    """Gram-matrix PLS of all folds together (for p > n).

    The Gram matrix of the whole set is computed once and every fold works on n-vectors that
    are zero on its held-out rows (:func:`gram_pls_batch`): no fold copies a training block,
    and each component is one matrix product for all folds together.

    Parameters
    ----------
    X : ndarray of shape (n, p)
    Y : ndarray of shape (n, m)
    scale : bool
        Autoscale X columns with each training fold's SD (the Gram matrix is then rebuilt per
        fold, O(n²p)).
    """

    def __init__(self, X: np.ndarray, Y: np.ndarray, scale: bool):
        _centre(self, X, Y, scale)
        self.x0 = X - self.x_mean
        self.gram = None if scale else self.x0 @ self.x0.T

    def fold_all(self, splits: list[tuple[np.ndarray, np.ndarray]],
                 n_settings: int) -> list[FoldOutput]:
        """Results of every fold; up to :data:`_BATCH_BYTES` of fold vectors fitted at once."""
        (n, p), m = self.x0.shape, self.y0.shape[1]
        train = np.zeros((len(splits), n), dtype=bool)
        for k, (rows, _) in enumerate(splits):
            train[k, rows] = True
        tests = [test for _, test in splits]
        step = max(1, _BATCH_BYTES // (8 * (n * (4 * n_settings + 3 * m) + n_settings * p)))
        if self.scale:
            step = max(1, min(step, _GRAM_CACHE_BYTES // (8 * n * n)))
        outputs = []
        for start in range(0, len(splits), step):
            batch = slice(start, start + step)
            if self.scale:
                outputs += self._scaled_folds(train[batch], tests[batch], n_settings)
            else:
                fits = gram_pls_batch(self.gram, self.y0, train[batch], n_settings)
                outputs += self._finish(self.x0, train[batch], tests[batch], fits)
        return outputs

    def _scaled_folds(self, train: np.ndarray, tests: list[np.ndarray],
                      n_settings: int) -> list[FoldOutput]:
        """Folds of autoscaled data: one Gram matrix per fold, from the spectra scaled with
        its training SD (one scaled copy of the data at a time)."""
        n = train.shape[1]
        sds = [_fold_scale(np.var(self.x0[rows], axis=0) * rows.sum(), rows.sum())
               for rows in train]
        xs = np.empty_like(self.x0)
        grams = np.empty((len(sds), n, n))
        for gram, sd in zip(grams, sds, strict=True):
            np.matmul(np.divide(self.x0, sd, out=xs), xs.T, out=gram)
        fits = gram_pls_batch(grams, self.y0, train, n_settings)
        outputs = []
        for k, (sd, fit) in enumerate(zip(sds, fits, strict=True)):
            np.divide(self.x0, sd, out=xs)
            outputs += self._finish(xs, train[k:k + 1], tests[k:k + 1], [fit])
        return outputs

    def _finish(self, xs: np.ndarray, train: np.ndarray, tests: list[np.ndarray],
                fits: list[GramFactors]) -> list[FoldOutput]:
        """Held-out results of folds fitted together; ``xs`` are the (scaled) centred data."""
        n, p = xs.shape
        n_comp = max(fit.tau.size for fit in fits)
        # Pᵀ = TᵀX_t/τ; training scores sum to zero, so any centring of the rows gives the same
        # P.  One product with the data for all folds of the batch.
        coef = np.zeros((len(fits), n_comp, n))
        for c, rows, fit in zip(coef, train, fits, strict=True):
            c[:fit.tau.size] = fit.scores.T * (rows / fit.tau[:, None])
        loadings = (coef.reshape(-1, n) @ xs).reshape(len(fits), n_comp, p)
        n_train = train.sum(axis=1)
        weights = train / n_train[:, None]
        x_means, y_means = weights @ xs, self.y_offset + weights @ self.y0
        outputs = []
        for k, (test, fit) in enumerate(zip(tests, fits, strict=True)):
            held = rows_of(test)
            outputs.append(_fold_output(xs[held] - x_means[k], y_means[k], fit.scores[held],
                                        loadings[k, :fit.tau.size].T, fit.y_loadings,
                                        fit.tau, int(n_train[k])))
        return outputs

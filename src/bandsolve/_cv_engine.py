"""Per-fold computations of the one-pass PLS cross-validation engine.

Each engine is built once from all the data and then answers ``fold(train, test, A)`` with the
held-out predictions, Q residuals and Hotelling T² for every component count 1..A, from one
PLS fit on the training part.  Validation samples never enter the training means, scales or
cross-products.

* :class:`TallEngine` (n ≥ p): cross-products of globally pre-centred X are computed once; a
  fold subtracts its own cross-products and applies a rank-1 mean correction, then runs the
  improved kernel algorithm (Engstrøm & Jensen 2024; Dayal & MacGregor 1997).
* :class:`WideEngine` (p > n): the Gram matrix ``XXᵀ`` is computed once; a fold takes its
  training block, double-centres it with the training mean and runs the Gram-matrix kernel
  (Liland, Stefansson & Indahl 2020).  With column scaling the Gram matrix depends on the fold's
  scale and is recomputed per fold.

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

from dataclasses import dataclass

import numpy as np
import pandas as pd

from bandsolve._pls_kernels import (
    GramFactors,
    gram_pls_batch,
    kernel_pls,
    residual_ss_path,
)
from bandsolve.errors import ModelError


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
    # The models are nested: ŷ_a = ȳ + Σ_{j≤a} t_j q_jᵀ.
    terms = val_scores.T[:, :, None] * y_loadings.T[:, None, :]
    pred = np.cumsum(terms, axis=0, out=terms)
    pred += y_mean
    q_res = residual_ss_path(x_val, val_scores, x_loadings)
    # Training scores are orthogonal, so S_T = TᵀT/(n−1) is diagonal with τ_a/(n−1).
    t2 = np.square(val_scores.T)
    t2 /= tau[:, None] / (n_train - 1)
    return FoldOutput(pred, q_res, np.cumsum(t2, axis=0, out=t2))


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
    """``test`` as a slice when it is a run of consecutive rows (views instead of copies)."""
    if test.size and test[-1] - test[0] + 1 == test.size and (np.diff(test) == 1).all():
        return slice(int(test[0]), int(test[-1]) + 1)
    return test


#: Rows of X centred at a time while the cross-products are accumulated (≈ 4 MB blocks).
_BLOCK_BYTES = 1 << 22
#: Gram blocks fitted together by the wide engine, at most (bytes): small folds are batched
#: to share the per-call overhead, but the batch must stay in cache, as each component reads
#: all of it again (one fold of 450 samples already fills this).
_BATCH_BYTES = 1 << 21
#: Largest number of stored per-fold XᵀX elements (K·p², 128 MB) for the one-pass products.
_MAX_FOLD_PRODUCTS = 1 << 24


class TallEngine:
    """Downdated cross-products + improved kernel PLS (for n ≥ p).

    X is never copied whole.  When the folds partition the samples (each held out once) and
    their K p×p products fit in memory, each fold's own products ``X_vᵀX_v`` are computed
    once and their sum is the whole-set ``XᵀX``, so the data are multiplied once instead of
    twice.  Otherwise the whole-set products are accumulated over row blocks and each fold
    computes its own.  Rows are centred with the whole-set mean as they are read.

    Parameters
    ----------
    X : ndarray of shape (n, p)
    Y : ndarray of shape (n, m)
    scale : bool
        Autoscale X columns with each training fold's SD.
    tests : list of ndarray, optional
        Held-out rows of each fold, when every sample is held out exactly once.
    """

    def __init__(self, X: np.ndarray, Y: np.ndarray, scale: bool,
                 tests: list[np.ndarray] | None = None):
        _centre(self, X, Y, scale)
        self.X = X
        n, p = X.shape
        self.sy = self.y0.sum(axis=0)
        self.step = max(1, _BLOCK_BYTES // (8 * p))  # rows of X handled at a time
        if tests is not None and len(tests) * p * p <= _MAX_FOLD_PRODUCTS:
            self.fold_products = [self._products(rows_of(test)) for test in tests]
            self.sxx, self.sxy, self.sx, _ = (sum(parts) for parts in
                                              zip(*self.fold_products, strict=True))
        else:
            self.fold_products = None
            self.sxx, self.sxy, self.sx, _ = self._products(slice(0, n))

    def _blocks(self, rows: slice | np.ndarray):
        """Row blocks (≈ 4 MB of X each) of ``rows``, as slices or index arrays."""
        if isinstance(rows, slice):
            return [slice(i, min(i + self.step, rows.stop))
                    for i in range(rows.start, rows.stop, self.step)]
        return [rows[i:i + self.step] for i in range(0, rows.size, self.step)]

    def _products(self, rows) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """``X_rᵀX_r``, ``X_rᵀY_r``, ``X_rᵀ1`` and ``Y_rᵀ1`` of rows ``rows`` (centred data)."""
        p, m = self.X.shape[1], self.y0.shape[1]
        sxx, sxy, sx = np.zeros((p, p)), np.zeros((p, m)), np.zeros(p)
        for block in self._blocks(rows):
            xb = np.subtract(self.X[block], self.x_mean)
            sxx += xb.T @ xb
            sxy += xb.T @ self.y0[block]
            sx += xb.sum(axis=0)
        return sxx, sxy, sx, self.y0[rows].sum(axis=0)

    def fold(self, k: int, train: np.ndarray, test: np.ndarray,
             n_settings: int) -> FoldOutput:
        """Results for held-out ``test`` (fold ``k``) of the model fitted to ``train``.

        The held-out rows are centred and evaluated in blocks, so no temporary grows with
        the size of the fold.
        """
        rows = rows_of(test)
        n_train = train.size
        sxx_v, sxy_v, sx_v, sy_v = (self._products(rows) if self.fold_products is None
                                    else self.fold_products[k])
        sx_t = self.sx - sx_v
        sy_t = self.sy - sy_v
        cxx = self.sxx - sxx_v
        cxx -= np.outer(sx_t, sx_t / n_train)
        cxy = self.sxy - sxy_v
        cxy -= np.outer(sx_t, sy_t / n_train)
        sd = _fold_scale(np.diag(cxx).copy(), n_train) if self.scale else None
        if sd is not None:
            cxx /= np.outer(sd, sd)
            cxy /= sd[:, None]
        f = kernel_pls(cxx, cxy, n_settings)
        parts = []
        for block in self._blocks(rows):
            # The held-out rows, centred with the training mean (and scaled).
            xb = np.subtract(self.X[block], self.x_mean)
            xb -= sx_t / n_train
            if sd is not None:
                xb /= sd
            parts.append(_fold_output(xb, self.y_offset + sy_t / n_train, xb @ f.rotations,
                                      f.x_loadings, f.y_loadings, f.tau, n_train))
        if len(parts) == 1:
            return parts[0]
        return FoldOutput(*(np.concatenate([getattr(part, name) for part in parts], axis=1)
                            for name in ("predictions", "q_residuals", "hotelling_t2")))


def _without(gram: np.ndarray, rows: slice | np.ndarray, train: np.ndarray) -> np.ndarray:
    """The training block ``gram[train][:, train]``: four block copies when the held-out
    rows are consecutive, else two row/column gathers (both far cheaper than ``np.ix_``)."""
    if not isinstance(rows, slice):
        return gram.take(train, axis=0).take(train, axis=1)
    a, b = rows.start, rows.stop
    out = np.empty((train.size, train.size))
    out[:a, :a], out[:a, a:] = gram[:a, :a], gram[:a, b:]
    out[a:, :a], out[a:, a:] = gram[b:, :a], gram[b:, b:]
    return out


class WideEngine:
    """Gram-matrix PLS of all folds together (for p > n).

    Parameters
    ----------
    X : ndarray of shape (n, p)
    Y : ndarray of shape (n, m)
    scale : bool
        Autoscale X columns with each training fold's SD (the Gram matrix is then rebuilt per
        fold, O(n_t²p)).
    """

    def __init__(self, X: np.ndarray, Y: np.ndarray, scale: bool):
        _centre(self, X, Y, scale)
        self.x0 = X - self.x_mean
        self.sx = self.x0.sum(axis=0)
        self.gram = None if scale else self.x0 @ self.x0.T

    def fold_all(self, splits: list[tuple[np.ndarray, np.ndarray]],
                 n_settings: int) -> list[FoldOutput]:
        """Results of every fold, their PLS fits run together (:func:`gram_pls_batch`).

        Folds with the same number of training samples form one batch, up to
        :data:`_BATCH_BYTES` of Gram blocks at a time.
        """
        sizes = np.array([train.size for train, _ in splits])
        outputs: list = [None] * len(splits)
        for size in np.unique(sizes):
            same = np.flatnonzero(sizes == size)
            step = max(1, _BATCH_BYTES // (8 * int(size) ** 2))
            for start in range(0, same.size, step):
                group = same[start:start + step]
                inputs = [self._inputs(*splits[i]) for i in group]
                fits = gram_pls_batch(_stacked([f.gram_tt for f in inputs]),
                                      _stacked([f.yc for f in inputs]), n_settings)
                for i, f, fit in zip(group, inputs, fits, strict=True):
                    outputs[i] = self._finish(f, fit)
        return outputs

    def _inputs(self, train: np.ndarray, test: np.ndarray) -> _WideFold:
        """What one fold's fit needs: centred Gram blocks, held-out spectra, centred y."""
        n_train = train.size
        xv = self.x0[rows_of(test)]
        x_mean = (self.sx - xv.sum(axis=0)) / n_train
        if self.scale:
            xt = self.x0[train] - x_mean
            sd = _fold_scale(np.einsum("ij,ij->j", xt, xt), n_train)
            xt /= sd
            x_val = (xv - x_mean) / sd
            gram_tt = xt @ xt.T
            gram_vt = x_val @ xt.T
            x_rows, rows = xt, slice(None)
        else:
            x_val = xv - x_mean
            # Double-centre the stored Gram blocks with the training mean only.
            held = rows_of(test)
            gram_tt = _without(self.gram, held, train)
            k_mean = gram_tt.mean(axis=0)
            gram_vt = self.gram[held].take(train, axis=1)
            gram_vt -= k_mean
            gram_vt -= gram_vt.mean(axis=1, keepdims=True)
            gram_tt -= k_mean[:, None]
            gram_tt -= k_mean - k_mean.mean()
            # The training rows of the stored data, reached without copying them.
            x_rows, rows = self.x0, train
        yt = self.y0[train]
        y_mean = yt.mean(axis=0)
        return _WideFold(x_val, gram_tt, gram_vt, yt - y_mean, self.y_offset + y_mean, x_rows,
                         rows)

    def _finish(self, f: _WideFold, fit: GramFactors) -> FoldOutput:
        # Pᵀ = TᵀX_t/τ; training scores sum to zero, so any centring of the rows gives the same P.
        coef = np.zeros((fit.tau.size, f.x_rows.shape[0]))
        coef[:, f.rows] = fit.scores.T / fit.tau[:, None]
        return _fold_output(f.x_val, f.y_mean, f.gram_vt @ fit.rotation_coords,
                            (coef @ f.x_rows).T, fit.y_loadings, fit.tau, f.yc.shape[0])


def _stacked(arrays: list[np.ndarray]) -> np.ndarray:
    """``np.stack`` without a copy for a single array."""
    return arrays[0][None] if len(arrays) == 1 else np.stack(arrays)


@dataclass
class _WideFold:
    """One fold's inputs in the Gram form (see :meth:`WideEngine._inputs`)."""

    x_val: np.ndarray
    gram_tt: np.ndarray
    gram_vt: np.ndarray
    yc: np.ndarray
    y_mean: np.ndarray
    x_rows: np.ndarray
    rows: slice | np.ndarray


@dataclass
class CVResult:
    """Cross-validated predictions and error curves for one or more model settings.

    Attributes
    ----------
    settings : tuple
        The settings compared: component counts ``(1, ..., A_max)`` for PLS, or the
        estimator's class name for :func:`~bandsolve.crossval.cross_validate_estimator`.
    setting_name : str
        ``"n_components"`` or ``"estimator"``.
    reference : ndarray of shape (n, m)
        Reference concentrations y.
    predictions : ndarray of shape (n_settings, n, m)
        Cross-validated predictions ŷ.  With repeated splitters each sample is held out once
        per repeat and this is the mean over repeats.
    rmsecv : ndarray of shape (n_settings, m)
        Root mean squared error of cross-validation per analyte, ``√(PRESS/n)``; with repeats,
        from the squared errors of every held-out prediction (not of the averaged prediction,
        which would be optimistic).
    rmsecv_total : ndarray of shape (n_settings,)
        ``√(mean over analytes of MSE)``, on the concentration scales as given: analytes with
        large concentration values dominate it, so compare it only when units are alike.
    fold_mse : ndarray of shape (n_settings, n_splits, m)
        Mean squared error of each split.
    fold_index : ndarray of shape (n,)
        Index of the split in which each sample was (first) held out.
    n_held_out : ndarray of shape (n,)
        How many times each sample was held out (the number of repeats).
    q_residuals : ndarray of shape (n_settings, n) or None
        Cross-validated Q: squared X residual of each held-out spectrum after centring (and
        scaling) with its training fold.  None for generic estimators.
    hotelling_t2 : ndarray of shape (n_settings, n) or None
        Hotelling T² of each held-out sample's scores relative to its training fold's scores
        (``Σ_a t_a² / (τ_a/(n_t − 1))``).  None for generic estimators.
    repeat_squared_errors : ndarray of shape (n_settings, n, m) or None
        Mean over repeats of each sample's squared error, kept only when some sample was held
        out more than once (otherwise it is ``errors²``); read it as :attr:`squared_errors`.

    Notes
    -----
    :attr:`errors` and :attr:`squared_errors` are computed when read rather than stored, so a
    result holds one (n_settings, n, m) array instead of three.
    """

    settings: tuple
    setting_name: str
    reference: np.ndarray
    predictions: np.ndarray
    rmsecv: np.ndarray
    rmsecv_total: np.ndarray
    fold_mse: np.ndarray
    fold_index: np.ndarray
    n_held_out: np.ndarray
    q_residuals: np.ndarray | None
    hotelling_t2: np.ndarray | None
    repeat_squared_errors: np.ndarray | None = None

    @property
    def errors(self) -> np.ndarray:
        """``predictions − reference``, shape (n_settings, n, m)."""
        return self.predictions - self.reference

    @property
    def squared_errors(self) -> np.ndarray:
        """Each sample's squared prediction error, shape (n_settings, n, m).

        The mean over repeats when samples were held out several times (not the square of the
        averaged prediction, which would be optimistic).  Used by the selection rules.
        """
        if self.repeat_squared_errors is not None:
            return self.repeat_squared_errors
        errors = self.errors
        return np.square(errors, out=errors)

    def to_frame(self, analytes: list[str] | None = None) -> pd.DataFrame:
        """RMSECV table: one row per setting, one column per analyte plus the total.

        Parameters
        ----------
        analytes : list of str, optional
            Analyte names for the column headers (default ``analyte 1`` …).

        Returns
        -------
        pandas.DataFrame
        """
        m = self.rmsecv.shape[1]
        names = analytes if analytes is not None else [f"analyte {j + 1}" for j in range(m)]
        if len(names) != m:
            raise ModelError(f"{len(names)} analyte names given for {m} analytes; give one "
                             "name per concentration column.")
        frame = pd.DataFrame(self.rmsecv, columns=[f"RMSECV {a}" for a in names],
                             index=pd.Index(self.settings, name=self.setting_name))
        frame["RMSECV total"] = self.rmsecv_total
        return frame

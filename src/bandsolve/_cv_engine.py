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
absorbance offset (METHODS §9).

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

from bandsolve._pls_kernels import gram_pls, kernel_pls, residual_ss_path
from bandsolve.errors import ModelError


@dataclass
class FoldOutput:
    """Held-out results of one fold for component counts 1..A.

    ``predictions`` (A, n_v, m); ``q_residuals`` (A, n_v); ``hotelling_t2`` (A, n_v).
    """

    predictions: np.ndarray
    q_residuals: np.ndarray
    hotelling_t2: np.ndarray


def _pad(path: np.ndarray, n_settings: int, zero_value: np.ndarray) -> np.ndarray:
    """Extend a path over 1..A_eff components to 1..n_settings by repeating its last model.

    Counts beyond the rank of the training data add nothing, so their model equals the last one
    (or the zero-component value when no component could be extracted).
    """
    missing = n_settings - path.shape[0]
    if missing == 0:
        return path
    last = path[-1] if path.shape[0] else zero_value
    return np.concatenate([path, np.broadcast_to(last, (missing, *last.shape))])


def _fold_output(x_val: np.ndarray, y_mean: np.ndarray, val_scores: np.ndarray,
                 x_loadings: np.ndarray, y_loadings: np.ndarray, tau: np.ndarray,
                 n_train: int, n_settings: int) -> FoldOutput:
    """Assemble predictions, Q and T² for every component count from one fold's factors.

    ``x_val`` (n_v, p) are held-out spectra centred (and scaled) with the training statistics,
    ``val_scores`` (n_v, A_eff) their scores.
    """
    n_val = x_val.shape[0]
    # The models are nested: ŷ_a = ȳ + Σ_{j≤a} t_j q_jᵀ.
    terms = val_scores.T[:, :, None] * y_loadings.T[:, None, :]
    pred = y_mean + np.cumsum(terms, axis=0)
    pred = _pad(pred, n_settings, np.broadcast_to(y_mean, (n_val, y_mean.size)))
    q_res = residual_ss_path(x_val, val_scores, x_loadings)
    q_res = _pad(q_res, n_settings, np.einsum("ij,ij->i", x_val, x_val))
    # Training scores are orthogonal, so S_T = TᵀT/(n−1) is diagonal with τ_a/(n−1).
    t2 = np.cumsum(val_scores.T**2 / (tau[:, None] / (n_train - 1)), axis=0)
    t2 = _pad(t2, n_settings, np.zeros(n_val))
    return FoldOutput(pred, q_res, t2)


def _fold_scale(ss_diag: np.ndarray, n_train: int, scale: bool) -> np.ndarray:
    """Training-fold column SD (ddof=1, ones for constant columns), or ones without scaling."""
    if not scale:
        return np.ones(ss_diag.size)
    sd = np.sqrt(np.maximum(ss_diag, 0.0) / (n_train - 1))
    sd[sd == 0.0] = 1.0
    return sd


def _centre(engine: TallEngine | WideEngine, X: np.ndarray, Y: np.ndarray,
            scale: bool) -> None:
    """Centre X and Y once with the whole-set means (folds correct them by rank-one terms)."""
    engine.x0 = X - X.mean(axis=0)
    engine.y_offset = Y.mean(axis=0)
    engine.y0 = Y - engine.y_offset
    engine.scale = scale


class TallEngine:
    """Downdated cross-products + improved kernel PLS (for n ≥ p).

    Parameters
    ----------
    X : ndarray of shape (n, p)
    Y : ndarray of shape (n, m)
    scale : bool
        Autoscale X columns with each training fold's SD.
    """

    def __init__(self, X: np.ndarray, Y: np.ndarray, scale: bool):
        _centre(self, X, Y, scale)
        self.sxx = self.x0.T @ self.x0
        self.sxy = self.x0.T @ self.y0
        self.sx = self.x0.sum(axis=0)
        self.sy = self.y0.sum(axis=0)

    def fold(self, train: np.ndarray, test: np.ndarray, n_settings: int) -> FoldOutput:
        """Results for held-out ``test`` of the model fitted to ``train`` (index arrays)."""
        xv, yv = self.x0[test], self.y0[test]
        n_train = train.size
        sx_t = self.sx - xv.sum(axis=0)
        sy_t = self.sy - yv.sum(axis=0)
        cxx = self.sxx - xv.T @ xv - np.outer(sx_t, sx_t) / n_train
        cxy = self.sxy - xv.T @ yv - np.outer(sx_t, sy_t) / n_train
        sd = _fold_scale(np.diag(cxx).copy(), n_train, self.scale)
        if self.scale:
            cxx = cxx / np.outer(sd, sd)
            cxy = cxy / sd[:, None]
        f = kernel_pls(cxx, cxy, n_settings)
        x_val = (xv - sx_t / n_train) / sd
        return _fold_output(x_val, self.y_offset + sy_t / n_train, x_val @ f.rotations,
                            f.x_loadings, f.y_loadings, f.tau, n_train, n_settings)


class WideEngine:
    """Gram-matrix PLS per fold (for p > n).

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
        self.sx = self.x0.sum(axis=0)
        self.gram = None if scale else self.x0 @ self.x0.T

    def fold(self, train: np.ndarray, test: np.ndarray, n_settings: int) -> FoldOutput:
        """Results for held-out ``test`` of the model fitted to ``train`` (index arrays)."""
        n_train = train.size
        xv = self.x0[test]
        x_mean = (self.sx - xv.sum(axis=0)) / n_train
        if self.scale:
            xt = self.x0[train] - x_mean
            sd = _fold_scale(np.einsum("ij,ij->j", xt, xt), n_train, True)
            xt /= sd
            x_val = (xv - x_mean) / sd
            gram_tt = xt @ xt.T
            gram_vt = x_val @ xt.T
            x_rows, rows = xt, slice(None)
        else:
            x_val = xv - x_mean
            # Double-centre the stored Gram blocks with the training mean only.
            k_rows = self.gram[train]
            gram_tt = k_rows[:, train]
            k_mean = gram_tt.mean(axis=0)
            gram_vt = k_rows[:, test].T - k_mean
            gram_vt -= gram_vt.mean(axis=1, keepdims=True)
            gram_tt -= k_mean[:, None]
            gram_tt -= k_mean - k_mean.mean()
            # The training rows of the stored data, reached without copying them.
            x_rows, rows = self.x0, train
        yt = self.y0[train]
        y_mean = yt.mean(axis=0)
        f = gram_pls(gram_tt, yt - y_mean, n_settings)
        # Pᵀ = TᵀX_t/τ; training scores sum to zero, so any centring of the rows gives the same P.
        coef = np.zeros((f.tau.size, x_rows.shape[0]))
        coef[:, rows] = f.scores.T / f.tau[:, None]
        return _fold_output(x_val, self.y_offset + y_mean, gram_vt @ f.rotation_coords,
                            (coef @ x_rows).T, f.y_loadings, f.tau, n_train, n_settings)


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
    errors : ndarray of shape (n_settings, n, m)
        ``predictions − reference``.
    squared_errors : ndarray of shape (n_settings, n, m)
        Mean over repeats of each sample's squared prediction error (equal to ``errors²`` when
        every sample is held out once).  Used by the selection rules.
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
    """

    settings: tuple
    setting_name: str
    reference: np.ndarray
    predictions: np.ndarray
    errors: np.ndarray
    squared_errors: np.ndarray
    rmsecv: np.ndarray
    rmsecv_total: np.ndarray
    fold_mse: np.ndarray
    fold_index: np.ndarray
    n_held_out: np.ndarray
    q_residuals: np.ndarray | None
    hotelling_t2: np.ndarray | None

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

"""Partial least squares regression (PLS1 and PLS2) for calibration from mixture spectra.

:class:`PLSRegressor` follows the scikit-learn estimator contract, so it works in ``Pipeline``,
``clone`` and ``GridSearchCV``.  It fits every component count 1..A at once; the nested models
are kept in ``coef_path_`` so that predictions for fewer components need no refit.
"""

from __future__ import annotations

import numbers
from dataclasses import dataclass
from typing import ClassVar

import numpy as np

from bandsolve._estimator import Estimator, Regressor, Transformer, check_fitted, validated
from bandsolve._pls_kernels import gram_pls, kernel_pls
from bandsolve._scan import ScanParts
from bandsolve._state import RecordedState
from bandsolve.errors import ModelError
from bandsolve.score_diagnostics import leverage as score_leverage

__all__ = ["PLSPrediction", "PLSRegressor"]

_ALGORITHMS = ("auto", "kernel", "wide")
_ROW_BLOCK = 4096  # rows per block when forming residuals, to bound memory for large batches


def column_scale(xc: np.ndarray) -> np.ndarray:
    """Sample standard deviation (ddof=1) of each column, with 1 for constant columns.

    Parameters
    ----------
    xc : ndarray of shape (n, p)
        Centred spectra.

    Returns
    -------
    ndarray of shape (p,)
    """
    sd = np.sqrt(np.einsum("ij,ij->j", xc, xc) / max(xc.shape[0] - 1, 1))
    sd[sd == 0.0] = 1.0
    return sd


@dataclass(frozen=True)
class PLSPrediction:
    """Predictions and per-sample statistics from :meth:`PLSRegressor.detail_from_scan`.

    Attributes
    ----------
    concentrations : ndarray, shape (n, m)
    scores : ndarray, shape (n, A)
    q : ndarray, shape (n,)
        Q residual ``‖x_s − P Rᵀ x_s‖²`` (AU² without scaling).
    t2 : ndarray, shape (n,)
        Hotelling T² against the training scores.
    leverage : ndarray, shape (n,)
        ``h = 1/n + T²/(n − 1)`` (n calibration samples).
    dof : int
        ``n − A − 1``, the degrees of freedom of MSEC.
    """

    concentrations: np.ndarray
    scores: np.ndarray
    q: np.ndarray
    t2: np.ndarray
    leverage: np.ndarray
    dof: int


class PLSRegressor(RecordedState, Transformer, Regressor, Estimator):
    """Partial least squares regression of concentrations on spectra.

    X and Y are mean-centred; with ``scale=True`` the columns of X (wavelengths) are also
    divided by their sample standard deviation (ddof=1).  Y is never scaled, so for several
    analytes (PLS2) the relative size of their concentration units matters.

    Parameters
    ----------
    n_components : int, default=2
        Number of latent components A.  Fewer are used when X or the X-Y covariance runs out of
        rank (for example A > n − 1); ``n_components_`` then says how many were extracted.
    algorithm : {"auto", "kernel", "wide"}, default="auto"
        ``"kernel"``: improved kernel algorithm 2 on the p×p matrix XᵀX (fast for n ≥ p).
        ``"wide"``: the n×n Gram-matrix form (fast for p > n).  ``"auto"`` picks ``"kernel"`` when
        n ≥ p, else ``"wide"``.  Both give the same model to rounding error.
    scale : bool, default=False
        Autoscale the columns of X.

    Attributes
    ----------
    n_features_in_ : int
        Number of wavelengths p.
    n_components_ : int
        Number of components actually extracted (≤ ``n_components``).
    x_mean_ : ndarray of shape (p,)
        Mean training spectrum (absorbance units).
    x_scale_ : ndarray of shape (p,)
        Column scale (ones when ``scale=False``).
    y_mean_ : ndarray of shape (m,)
        Mean training concentration of each analyte.
    x_weights_ : ndarray of shape (p, A)
        Unit weight vectors W.
    x_rotations_ : ndarray of shape (p, A)
        Rotations R = W(PᵀW)⁻¹, so that scores are ``T = X_s R`` with X_s centred and scaled.
    x_loadings_ : ndarray of shape (p, A)
        X loadings P (X_s ≈ T Pᵀ).
    y_loadings_ : ndarray of shape (m, A)
        Y loadings Q (Y_c ≈ T Qᵀ).
    x_scores_ : ndarray of shape (n, A)
        Training scores T (mutually orthogonal columns).
    coef_ : ndarray of shape (m, p)
        Regression coefficients in the original units of X (concentration per absorbance unit).
    intercept_ : ndarray of shape (m,)
        Intercepts, so that ``predict(X) = X @ coef_.T + intercept_``.
    coef_path_ : ndarray of shape (A, m, p)
        ``coef_path_[a - 1]`` are the coefficients of the model with a components.
    intercept_path_ : ndarray of shape (A, m)
        Matching intercepts.
    explained_variance_x_ : ndarray of shape (A,)
        Fraction of the total (scaled, centred) X sum of squares explained by each component.

    See Also
    --------
    bandsolve.crossval.cross_validate_pls : fast cross-validation of all component counts.

    References
    ----------
    .. [1] Dayal, B. S., & MacGregor, J. F. (1997). Improved PLS algorithms. *Journal of
       Chemometrics*, 11(1), 73-85.
    .. [2] Lindgren, F., Geladi, P., & Wold, S. (1993). The kernel algorithm for PLS. *Journal
       of Chemometrics*, 7(1), 45-59.
    .. [3] Rännar, S., Lindgren, F., Geladi, P., & Wold, S. (1994). A PLS kernel algorithm for
       data sets with many variables and fewer objects. Part 1. *Journal of Chemometrics*, 8(2),
       111-125.

    Examples
    --------
    >>> import numpy as np
    >>> from bandsolve.pls import PLSRegressor
    >>> rng = np.random.default_rng(0)
    >>> conc = rng.uniform(0, 1, size=(20, 2))
    >>> pure = rng.uniform(0, 1, size=(2, 50))
    >>> spectra = conc @ pure + 0.001 * rng.standard_normal((20, 50))
    >>> model = PLSRegressor(n_components=2).fit(spectra, conc[:, 0])
    >>> model.predict(spectra[:3]).shape
    (3,)
    """

    STATE_FIELDS: ClassVar[dict[str, str]] = {
        "x_mean": "x_mean_", "x_scale": "x_scale_", "y_mean": "y_mean_",
        "x_weights": "x_weights_", "x_rotations": "x_rotations_",
        "x_loadings": "x_loadings_", "y_loadings": "y_loadings_", "x_scores": "x_scores_",
        "coef": "coef_", "intercept": "intercept_", "coef_path": "coef_path_",
        "intercept_path": "intercept_path_", "explained_variance_x": "explained_variance_x_",
        "n_components": "n_components_", "n_features_in": "n_features_in_",
        "single_output": "_y_1d",
    }

    def __init__(self, n_components: int = 2, algorithm: str = "auto", scale: bool = False):
        self.n_components = n_components
        self.algorithm = algorithm
        self.scale = scale

    def _check_params(self) -> None:
        if (not isinstance(self.n_components, numbers.Integral) or isinstance(
                self.n_components, bool) or self.n_components < 1):
            raise ModelError(f"PLS n_components must be a positive integer, got "
                             f"{self.n_components!r}; choose it with cross-validation.")
        if self.algorithm not in _ALGORITHMS:
            raise ModelError(f"PLS algorithm must be one of {_ALGORITHMS}, got "
                             f"{self.algorithm!r}.")

    def fit(self, X: np.ndarray, y: np.ndarray) -> PLSRegressor:
        """Fit the model for 1..``n_components`` components.

        Parameters
        ----------
        X : array-like of shape (n, p)
            Calibration spectra (absorbance), already preprocessed.
        y : array-like of shape (n,) or (n, m)
            Reference concentrations; 1-D gives PLS1, 2-D with m > 1 gives PLS2.

        Returns
        -------
        self : PLSRegressor
        """
        self._check_params()
        X, y = validated(self, X, y, multi_output=True, y_numeric=True,
                             dtype=np.float64, ensure_min_samples=2)
        self._y_1d = y.ndim == 1
        Y = y.reshape(-1, 1) if y.ndim == 1 else y
        n, p = X.shape
        self.x_mean_ = X.mean(axis=0)
        self.y_mean_ = Y.mean(axis=0)
        xs = X - self.x_mean_
        self.x_scale_ = column_scale(xs) if self.scale else np.ones(p)
        xs /= self.x_scale_
        yc = Y - self.y_mean_
        use_kernel = self.algorithm == "kernel" or (self.algorithm == "auto" and n >= p)
        if use_kernel:
            f = kernel_pls(xs.T @ xs, xs.T @ yc, self.n_components)
            self.x_weights_, self.x_rotations_ = f.weights, f.rotations
            self.x_loadings_, tau = f.x_loadings, f.tau
            self.x_scores_ = xs @ f.rotations
        else:
            f = gram_pls(xs @ xs.T, yc, self.n_components)
            tau = f.tau
            self.x_weights_ = xs.T @ f.weight_coords
            self.x_rotations_ = xs.T @ f.rotation_coords
            self.x_scores_ = f.scores
            self.x_loadings_ = (xs.T @ f.scores) / tau
        self.y_loadings_ = f.y_loadings
        self.n_components_ = tau.size
        total_ss = float(np.einsum("ij,ij->", xs, xs))
        self.explained_variance_x_ = (tau * np.einsum("ij,ij->j", self.x_loadings_,
                                                      self.x_loadings_) / total_ss
                                      if total_ss > 0 else np.zeros(tau.size))
        # Nested models: B_a = Σ_{j≤a} r_j q_jᵀ, back in the original units of X.
        terms = np.einsum("pa,ma->amp", self.x_rotations_, self.y_loadings_)
        self.coef_path_ = np.cumsum(terms, axis=0) / self.x_scale_
        self.intercept_path_ = self.y_mean_ - self.coef_path_ @ self.x_mean_
        if self.n_components_ == 0:  # y constant or X without variance: predict the mean
            self.coef_, self.intercept_ = np.zeros((Y.shape[1], p)), self.y_mean_.copy()
        else:
            self.coef_, self.intercept_ = self.coef_path_[-1], self.intercept_path_[-1]
        return self

    def _n_used(self, n_components: int | None) -> int:
        if n_components is None:
            return self.n_components_
        if not 1 <= n_components <= self.n_components_:
            raise ModelError(
                f"n_components={n_components} is not available: this PLS model has "
                f"{self.n_components_} component(s); pass a number from 1 to "
                f"{self.n_components_} or refit with more.")
        return int(n_components)

    def _centred(self, X: np.ndarray) -> np.ndarray:
        check_fitted(self, "coef_path_")
        X = validated(self, X, reset=False, dtype=np.float64)
        return (X - self.x_mean_) / self.x_scale_

    def predict(self, X: np.ndarray, n_components: int | None = None) -> np.ndarray:
        """Predict concentrations.

        Parameters
        ----------
        X : array-like of shape (n, p)
            Spectra, preprocessed like the calibration spectra.
        n_components : int, optional
            Use the nested model with this many components (default: ``n_components_``).

        Returns
        -------
        ndarray of shape (n,) when fitted on 1-D y, else (n, m)
            Predicted concentrations, in the units of the calibration concentrations.
        """
        check_fitted(self, "coef_path_")
        X = validated(self, X, reset=False, dtype=np.float64)
        a = self._n_used(n_components)
        if a == 0:
            pred = np.tile(self.intercept_, (X.shape[0], 1))
        else:
            pred = X @ self.coef_path_[a - 1].T + self.intercept_path_[a - 1]
        return pred.ravel() if self._y_1d else pred

    def transform(self, X: np.ndarray) -> np.ndarray:
        """Scores of new spectra.

        Parameters
        ----------
        X : array-like of shape (n, p)

        Returns
        -------
        ndarray of shape (n, A)
            ``T = ((X − x_mean_) / x_scale_) @ x_rotations_``.
        """
        return self._centred(X) @ self.x_rotations_

    def x_residual_ss(self, X: np.ndarray, n_components: int | None = None) -> np.ndarray:
        """Sum of squared spectral residuals of each sample (the Q statistic).

        Parameters
        ----------
        X : array-like of shape (n, p)
        n_components : int, optional
            Number of components (default: ``n_components_``).

        Returns
        -------
        ndarray of shape (n,)
            ``‖x_s − P Rᵀ x_s‖²`` in the centred (and scaled) space, in squared absorbance units
            when ``scale=False``.  Formed explicitly in row blocks to stay exact.
        """
        xs = self._centred(X)
        a = self._n_used(n_components)
        rot, load = self.x_rotations_[:, :a], self.x_loadings_[:, :a]
        out = np.empty(xs.shape[0])
        for start in range(0, xs.shape[0], _ROW_BLOCK):
            block = xs[start:start + _ROW_BLOCK]
            resid = block - (block @ rot) @ load.T
            out[start:start + _ROW_BLOCK] = np.einsum("ij,ij->i", resid, resid)
        return out

    def scan_parts(self) -> ScanParts:
        """Product matrix ``[R/s, P/s, x̄/s²]`` and weights ``1/s²`` for :meth:`detail_from_scan`."""
        a = self.n_components_
        inv = 1.0 / self.x_scale_
        R, P = self.x_rotations_[:, :a], self.x_loadings_[:, :a]
        matrix = np.column_stack([R * inv[:, None], P * inv[:, None], self.x_mean_ * inv**2])
        return ScanParts(matrix, inv**2)

    def detail_from_scan(self, H: np.ndarray, ss: np.ndarray) -> PLSPrediction:
        """Predictions, scores, Q, T² and leverage from ``H = X @ scan_parts().matrix``.

        With x_s the centred, scaled spectrum: scores ``t = Rᵀx_s``, and
        ``Q = ‖x_s‖² − 2tᵀ(Pᵀx_s) + tᵀ(PᵀP)t``; exact in float64 to ~1e-9 relative for
        absorbance data. Predictions are ``ȳ + t Qᵀ`` (the nested PLS model); T² and the
        leverage ``h = 1/n + T²/(n − 1)`` are against the training scores.
        """
        a = self.n_components_
        mu = self.x_mean_ / self.x_scale_
        R, P = self.x_rotations_[:, :a], self.x_loadings_[:, :a]
        scores = H[:, :a] - mu @ R
        proj = H[:, a:2 * a] - mu @ P
        total = ss - 2.0 * H[:, -1] + mu @ mu
        q = total - 2.0 * np.einsum("ij,ij->i", scores, proj) + np.einsum(
            "ij,ij->i", scores @ (P.T @ P), scores)
        pred = self.y_mean_ + scores @ self.y_loadings_[:, :a].T
        n_cal = self.x_scores_.shape[0]
        t2 = np.einsum("ij,ij->i", scores @ self._t2_metric(), scores)
        lev = 1.0 / n_cal + t2 / (n_cal - 1)
        return PLSPrediction(pred, scores, np.maximum(q, 0.0), t2, lev, n_cal - a - 1)

    def _t2_metric(self) -> np.ndarray:
        """``S_T⁻¹`` of the calibration scores (``S_T = TᵀT/(n − 1)``), computed once per fit.

        Prediction evaluates spectra in blocks; the inverse is the same for every block.  It is
        kept with the scores it belongs to, so a refit (new scores) recomputes it.
        """
        cached = self.__dict__.get("_t2_cache")
        if cached is None or cached[0] is not self.x_scores_:
            t_cal = self.x_scores_
            cached = (t_cal, np.linalg.inv(t_cal.T @ t_cal / (t_cal.shape[0] - 1)))
            self._t2_cache = cached
        return cached[1]

    # ------------------------------------------------------------------ what the model holds
    @property
    def n_parameters(self) -> int:
        """A + 1: components plus the mean (the degrees of freedom RMSEC uses)."""
        check_fitted(self, "coef_path_")
        return int(self.n_components_) + 1

    def regression_vectors(self) -> np.ndarray:
        """Regression vectors b, shape (m, p), in concentration units per AU."""
        check_fitted(self, "coef_path_")
        return np.atleast_2d(self.coef_).copy()

    def net_analyte_signal(self) -> np.ndarray:
        """NAS vectors at unit concentration ``b/‖b‖²``, shape (m, p) (Faber 1998)."""
        b = self.regression_vectors()
        return b / np.sum(b**2, axis=1, keepdims=True)

    def leverage(self, X) -> np.ndarray:
        """Leverage ``1/n + tᵀ(TᵀT)⁻¹t`` of spectra X (n_new, p) against the training scores."""
        return score_leverage(self.transform(X), self.x_scores_)

    def residuals(self, X, unscaled: bool = False) -> np.ndarray:
        """Spectral residuals ``x_s − P Rᵀ x_s`` in the centred (and scaled) space, (n, p).

        With ``unscaled=True`` they are multiplied back by the column scales, in the units
        of X (AU), whether or not the model autoscales.
        """
        xs = self._centred(X)
        resid = xs - (xs @ self.x_rotations_) @ self.x_loadings_.T
        return resid * self.x_scale_ if unscaled else resid

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.target_tags.single_output = False
        tags.target_tags.multi_output = True
        tags.target_tags.required = True
        return tags

"""Classical least squares (CLS, K-matrix) calibration.

Beer's law for a mixture, ``a(λ) = b Σ_k ε_k(λ) c_k``, written for many samples as
``A = C K + E``: the rows of K are the pure-component spectra per unit concentration.
K is estimated from standards or calibration mixtures, ``K̂ = (CᵀC)⁻¹CᵀA``, and a new spectrum
is resolved by ``ĉ = (K̂K̂ᵀ)⁻¹K̂a`` (Haaland & Thomas 1988).
"""

from __future__ import annotations

import copy
from typing import Any, ClassVar

import numpy as np

from bandsolve._distributions import chi2_quantile, f_quantile
from bandsolve._estimator import Estimator, Regressor, check_fitted, validated
from bandsolve._state import RecordedState
from bandsolve.band_test import band_basis, band_limit
from bandsolve.cls_leverage import CLSLeverage
from bandsolve.cls_loo import LeaveOneOut, cls_leave_one_out, cross_validated_error_scale
from bandsolve.cls_predict import CLSPredicting, CLSPrediction
from bandsolve.diagnostics import cls_calibration_variance, f_limit_from_values
from bandsolve.errors import ModelError
from bandsolve.merit.signal import cls_net_analyte_signal

__all__ = ["BASELINE_TERMS", "CLSRegressor", "CLSPrediction"]

#: Number of polynomial baseline terms solved with the concentrations at prediction.
BASELINE_TERMS = {"none": 0, "offset": 1, "linear": 2, "quadratic": 3}


class CLSRegressor(CLSPredicting, CLSLeverage, RecordedState, Regressor, Estimator):
    """CLS (K-matrix) calibration with optional background and baseline terms.

    Parameters
    ----------
    fit_intercept : bool, default False
        Estimate a background spectrum (a ones column in C) that every sample shares, for
        example a solvent or cell absorbance not removed by the blank.
    baseline : {"none", "offset", "linear", "quadratic"}, default "none"
        Polynomial baseline solved together with the concentrations at prediction,
        ``K_aug = [K; 1ᵀ; (λ−λ̄)ᵀ; …]`` (Haaland & Thomas 1988, Anal. Chem. 60, 1193).
        Needs ``wavelengths`` for linear and
        quadratic terms on an uneven grid; an even grid is assumed otherwise.
    wavelengths : array_like of shape (p,), optional
        Axis of the columns of X, for the baseline polynomial.
    alpha : float, default 0.01
        Significance level of the spectral-residual limit.
    non_negative : bool, default False
        Constrain predicted concentrations to be ≥ 0 (for analytes that can only be present
        or absent), solved by the batched active-set method of :mod:`bandsolve.nnls`; baseline
        terms stay free.  A concentration held at the bound is reported as exactly 0 with no
        standard error (NaN, so no interval and the ``no_se`` flag): a bound estimate has no
        symmetric interval.  Concentrations above 0 keep the standard error of the
        unconstrained model, which is conservative when another analyte is at the bound
        (leaving a column out of K only narrows the others' variances).  K itself and the
        residual limit come from the unconstrained calibration; a constrained fit leaves a
        residual at least as large, so the residual flag can only fire more often.

    Attributes
    ----------
    pure_spectra_ : ndarray, shape (m, p)
        Estimated K: absorbance per unit concentration of each analyte.
    background_ : ndarray, shape (p,)
        Background spectrum (zeros without ``fit_intercept``).
    gram_inv_ : ndarray, shape (m′, m′) or None
        ``(CᵀC)⁻¹`` of the calibration design (None when built from absorptivities).
    n_calibration_ : int
        Number of calibration spectra (0 when built from absorptivities).
    s2_cal_ : float
        Calibration residual variance per channel, ``‖A − CK̂‖²_F / (p(n − m′))``, AU².
    residual_limit_ : float
        Limit of the F ratio, from leave-one-out calibration residuals (Box 1954 scaled χ²
        fitted by moments); for a model from absorptivities with blank noise, the F quantile
        ``F_{1−α}(p − m − q, ν_blank)``; NaN when there is nothing to compare with.
    cv_f_ratios_ : ndarray, shape (n,)
        Leave-one-out F ratios of the calibration samples that set the limit.
    band_basis_ : ndarray, shape (p, d) or None
        Band-shaped directions orthogonal to the augmented K̂ for the second residual test
        (:mod:`bandsolve.band_test`); None when the model has none (built from absorptivities,
        too few points or standards). With it, each of the two residual limits is set at α/2.
    band_limit_ : float
        Limit of the band ratio ``‖Uᵀr‖²/d / [s²_cal(1 + h_c)]`` (NaN without a band test).

    Notes
    -----
    **Standard error and residual ratio: K̂'s error counted once.** Write ``K̂ = K + Δ``;
    the columns of Δ are ``N(0, σ²(CᵀC)⁻¹)``, independent across wavelengths for white noise.
    For a new spectrum ``a = Kᵀc + e``, ``ĉ − c = (K̂K̂ᵀ)⁻¹K̂(e − Δᵀc)`` to first order, and
    every element of ``u = e − Δᵀc`` has variance ``σ²(1 + h_c)``, ``h_c = c̃ᵀ(CᵀC)⁻¹c̃``.
    Hence ``Cov(ĉ) ≈ σ²(1 + h_c)(K̂K̂ᵀ)⁻¹`` and the sample's own residual ``r = a − K̂ᵀĉ``
    has ``E[rᵀr] = σ²(1 + h_c)(p − m − q)``: the residual variance
    ``s² = rᵀr/(p − m − q)`` already estimates ``σ²(1 + h_c)``. The SE is therefore
    ``√(s²[(K̂K̂ᵀ)⁻¹]_kk)`` with no further ``(1 + h_c)``, which would count the error of K̂
    twice (1/0.7 too wide with pure standards). The residual test compares ``s²`` with what
    calibration predicts for this sample, ``s²_cal(1 + h_c)``: without that divisor, mixtures
    far from the standards' centre would be flagged for K̂'s error rather than for an
    absorber (Haaland & Thomas 1988, Anal. Chem. 60, 1193). The leave-one-out ratios that set the
    limit use the same form, each with the leverage it has as a new sample.

    **Errors the white-noise SE cannot see.** Real spectra also carry errors that are
    correlated across channels (baseline and gain changes from one measurement to the next),
    which a sample's own residual does not reveal. :meth:`error_scale` compares the
    leave-one-out errors of the calibration samples with the SEs their downdated models
    report; limits built from it (``EstimatorLimits.error_scale``) widen the SE by that ratio
    (the Birge ratio of the cross-validated errors, never below 1).

    References
    ----------
    Haaland, D. M.; Thomas, E. V. Anal. Chem. 1988, 60, 1193–1202.
    Haaland, D. M.; Melgaard, D. K. Appl. Spectrosc. 2000, 54, 1303–1312.
    Box, G. E. P. Ann. Math. Stat. 1954, 25, 290–302.
    Faber, N. M.; Kowalski, B. R. J. Chemom. 1997, 11, 181–238 (error propagation in K̂).
    Birge, R. T. Phys. Rev. 1932, 40, 207–227 (scaling SEs by the observed scatter).

    Examples
    --------
    >>> import numpy as np
    >>> K = np.array([[1.0, 0.5, 0.1], [0.1, 0.6, 1.0]])
    >>> C = np.array([[1.0, 0.0], [0.0, 1.0], [1.0, 1.0], [0.5, 2.0]])
    >>> model = CLSRegressor().fit(C @ K, C)
    >>> np.round(model.predict(np.array([[0.72, 1.02, 1.26]])), 6)
    array([[0.6, 1.2]])
    """

    STATE_FIELDS: ClassVar[dict[str, str]] = {
        "pure_spectra": "pure_spectra_", "background": "background_",
        "gram_inv": "gram_inv_", "n_calibration": "n_calibration_",
        "calibration_variance": "s2_cal_", "residual_limit": "residual_limit_",
        "loo_f_ratios": "cv_f_ratios_", "n_baseline_terms": "n_baseline_terms_",
        "augmented_spectra": "augmented_spectra_", "augmented_gram_inv": "aug_gram_inv_",
        "n_features_in": "n_features_in_", "single_output": "_single_output",
        "band_basis": "band_basis_", "band_limit": "band_limit_",
    }
    #: Fields absent from files written before the band test (schema ≤ 6): no band test.
    OPTIONAL_STATE: ClassVar[dict[str, Any]] = {"band_basis": None, "band_limit": float("nan")}

    def __init__(self, fit_intercept: bool = False, baseline: str = "none",
                 wavelengths=None, alpha: float = 0.01, non_negative: bool = False):
        self.fit_intercept = fit_intercept
        self.baseline = baseline
        self.wavelengths = wavelengths
        self.alpha = alpha
        self.non_negative = non_negative

    # ------------------------------------------------------------------ fitting
    def fit(self, X, y):
        """Estimate K from spectra X (n × p, AU) and concentrations y (n × m or n,)."""
        X, y = validated(self, X, y, multi_output=True, y_numeric=True)
        Y = np.asarray(y, dtype=float)
        self._single_output = Y.ndim == 1
        Y = Y.reshape(len(Y), -1)
        C = self._design(Y)
        n = X.shape[0]
        if n < C.shape[1]:
            raise ModelError(
                f"{n} calibration spectra cannot determine {C.shape[1]} model spectra; "
                "measure at least one standard per analyte (plus a blank with an intercept)"
            )
        gram = C.T @ C
        if np.linalg.matrix_rank(gram) < gram.shape[0]:
            raise ModelError(
                "the calibration concentrations are collinear (some analyte varies together "
                "with another or with the intercept); use a design where each analyte varies "
                "independently"
            )
        self.gram_inv_ = _inverse(gram)
        self.n_calibration_ = n
        coef = self.gram_inv_ @ (C.T @ X)
        self._set_spectra(coef)
        resid = X - C @ coef
        self.s2_cal_ = (cls_calibration_variance(resid, C.shape[1]) if n > C.shape[1]
                        else float("nan"))
        self._loo = self._leave_one_out(X, C, coef)
        self._training_y = Y
        self.cv_f_ratios_ = self._f_ratios(self._loo)
        self._set_band_test(C, resid)
        both = self.band_basis_ is not None  # two residual tests: α/2 each (Bonferroni)
        self.residual_limit_ = _residual_limit(self.cv_f_ratios_,
                                               self.alpha / 2 if both else self.alpha)
        return self

    def _set_band_test(self, C: np.ndarray, resid: np.ndarray) -> None:
        """Basis and limit of the band-shaped residual test (:mod:`bandsolve.band_test`)
        from the design C (n × m′) and the fitted calibration residuals (n × p)."""
        self.band_basis_, self.band_limit_ = None, float("nan")
        U = band_basis(self._axis(resid.shape[1]), self.augmented_spectra_)
        d = U.shape[1]
        if d == 0 or not np.isfinite(self.s2_cal_):
            return
        h = np.einsum("ij,jk,ik->i", C, self.gram_inv_, C)
        values = np.full(len(C), np.nan)
        keep = 1.0 - h > 1e-9  # a sample that alone carries an analyte has no residual
        values[keep] = ((resid[keep] @ U) ** 2).sum(axis=1) / d / (
            self.s2_cal_ * (1.0 - h[keep]))
        limit = band_limit(values, self.alpha / 2, d)
        if np.isfinite(limit):
            self.band_basis_, self.band_limit_ = U, limit

    @classmethod
    def from_pure_spectra(cls, pure_spectra, *, baseline: str = "none", wavelengths=None,
                          alpha: float = 0.01, noise_sd: float | None = None,
                          noise_dof: int | None = None,
                          non_negative: bool = False) -> CLSRegressor:
        """A fitted model from known pure spectra (absorptivity × path length), no standards.

        Parameters
        ----------
        pure_spectra : array_like, shape (m, p)
            Absorbance per unit concentration of each analyte in the measuring cell.
        noise_sd : float, optional
            Per-channel noise SD of the spectra (AU), e.g. from replicate blanks. With it the
            residual ratio compares ``rᵀr/(p − m − q)`` with ``noise_sd²``; without it no
            residual limit exists and unmodelled absorbers cannot be flagged.
        noise_dof : int, optional
            Degrees of freedom behind ``noise_sd`` (``(r − 1)p`` for r replicate blanks). The
            ratio of two independent variance estimates is referred to
            ``F_{1−α}(p − m − q, noise_dof)`` (white noise: the ratio of two
            independent χ² variance estimates, common practice); without it the noise
            is taken as known and the reference is ``χ²_{p−m−q}/(p − m − q)``, the F limit as
            ``noise_dof → ∞``.

        References
        ----------
        Olivieri, A. C. et al. Pure Appl. Chem. 2006, 78, 633–661 (σx from replicate blanks).
        """
        model = cls(fit_intercept=False, baseline=baseline, wavelengths=wavelengths, alpha=alpha,
                    non_negative=non_negative)
        K = np.asarray(pure_spectra, dtype=float)
        if K.ndim != 2 or not np.all(np.isfinite(K)):
            raise ModelError("pure spectra must be a finite 2-D array (components × points)")
        model.n_features_in_ = K.shape[1]
        model._single_output = False
        model.gram_inv_ = None
        model.n_calibration_ = 0
        model._set_spectra(K)
        model.cv_f_ratios_ = np.array([])
        model.band_basis_, model.band_limit_ = None, float("nan")
        model.s2_cal_ = float("nan")
        model.residual_limit_ = float("nan")
        dof = K.shape[1] - model.augmented_spectra_.shape[0]
        if noise_sd is not None and noise_sd > 0 and dof > 0:
            model.s2_cal_ = float(noise_sd) ** 2
            model.residual_limit_ = float(
                f_quantile(1 - alpha, dof, noise_dof) if noise_dof
                else chi2_quantile(1 - alpha, dof) / dof)
        return model

    def _design(self, Y: np.ndarray) -> np.ndarray:
        return np.column_stack([Y, np.ones(len(Y))]) if self.fit_intercept else Y

    def _set_spectra(self, coef: np.ndarray) -> None:
        m = coef.shape[0] - (1 if self.fit_intercept else 0)
        self.pure_spectra_ = coef[:m]
        self.background_ = coef[m] if self.fit_intercept else np.zeros(coef.shape[1])
        q = BASELINE_TERMS.get(self.baseline)
        if q is None:
            raise ModelError(
                f"baseline must be one of {sorted(BASELINE_TERMS)}, not {self.baseline!r}"
            )
        self.n_baseline_terms_ = q
        aug = np.vstack([self.pure_spectra_, self._baseline_rows(coef.shape[1])])
        self.augmented_spectra_ = aug
        if np.linalg.matrix_rank(aug) < aug.shape[0]:
            raise ModelError(
                "the pure spectra (with baseline terms) are linearly dependent over this "
                "wavelength range; widen the range or drop baseline terms"
            )
        self.aug_gram_inv_ = _inverse(aug @ aug.T)

    def _axis(self, p: int) -> np.ndarray:
        """The model's points: ``wavelengths``, or 0 … p − 1 without them."""
        x = np.arange(p, dtype=float) if self.wavelengths is None else np.asarray(
            self.wavelengths, dtype=float)
        if x.shape != (p,):
            raise ModelError(f"wavelengths has {x.size} points but the spectra have {p}")
        return x

    def _baseline_rows(self, p: int) -> np.ndarray:
        q = BASELINE_TERMS[self.baseline]
        x = self._axis(p)
        span = (x.max() - x.min()) / 2 or 1.0
        z = (x - (x.max() + x.min()) / 2) / span
        return np.vstack([z**k for k in range(q)]) if q else np.empty((0, p))

    def _leave_one_out(self, X: np.ndarray, C: np.ndarray, coef: np.ndarray
                       ) -> LeaveOneOut | None:
        """Leave-one-out predictions in closed form (:mod:`bandsolve.cls_loo`); None when
        the calibration has too few samples to leave any out."""
        if X.shape[0] <= C.shape[1] + 1:
            return None
        m = coef.shape[0] - (1 if self.fit_intercept else 0)
        return cls_leave_one_out(X, C, coef, self.gram_inv_, m,
                                 self._baseline_rows(X.shape[1]))

    def _f_ratios(self, loo: LeaveOneOut | None) -> np.ndarray:
        """``F_i = [r₍₋ᵢ₎ᵀr₍₋ᵢ₎/(p − m − q)] / [s²_cal(1 + h₍₋ᵢ₎)]`` of the calibration samples.

        A sample that alone carries an analyte (its only standard) cannot be left out: its
        ratio is NaN and the limit is set from the others.
        """
        dof = self.augmented_spectra_.shape[1] - self.augmented_spectra_.shape[0]
        if loo is None or dof < 1:  # nothing to leave out, or no spectral residual to test
            return np.array([])
        return loo.residual_ss / dof / (self.s2_cal_ * (1.0 + loo.leverage))

    def leave_one_out(self) -> LeaveOneOut | None:
        """Leave-one-out predictions and their SEs for the calibration samples from
        :meth:`fit` (closed form, no refits; NaN rows for samples that cannot be left out);
        None for a model loaded from a file or built from absorptivities (not kept)."""
        return getattr(self, "_loo", None)

    def error_scale(self) -> tuple[np.ndarray, np.ndarray, int]:
        """Error model from the leave-one-out errors, per analyte, and its df.

        ``Var(e) = κ²·SE² + (γ·c)²`` (:func:`bandsolve.cls_loo.error_model`) over the
        calibration samples that can be left out (all analytes of each, present or absent),
        with the number of those samples as degrees of freedom. Under the white-noise model
        the studentized errors have unit mean square, κ = 1 and γ = 0; errors shared across
        channels (baseline changes) make κ larger, errors proportional to the concentration
        (gain, path length, a standard's preparation) make γ larger. Ones, zeros and 0 df
        when fewer than 3 samples can be left out. See the class Notes.

        Returns
        -------
        kappa : ndarray, shape (m,)
            Factor ≥ 1 on the white-noise SE.
        gamma : ndarray, shape (m,)
            Relative error SD (fraction of the concentration), added in quadrature.
        dof : int
        """
        m = self.pure_spectra_.shape[0]
        if getattr(self, "_loo", None) is None:
            return np.ones(m), np.zeros(m), 0
        return cross_validated_error_scale(self._loo.concentrations - self._training_y,
                                           self._loo.standard_errors, self._training_y)

    # ------------------------------------------------------------------ what the model holds
    @property
    def n_parameters(self) -> int:
        """m′: model spectra estimated per channel (analytes, plus one with an intercept)."""
        check_fitted(self, "pure_spectra_")
        return self.pure_spectra_.shape[0] + int(bool(self.fit_intercept))

    @property
    def residual_limit(self) -> float:
        """Limit of the residual F ratio (NaN when it could not be set)."""
        check_fitted(self, "pure_spectra_")
        return float(self.residual_limit_)

    def residual_parameters(self) -> dict[str, float]:
        """Numbers behind the residual limits for the model record: the band test's limit and
        its number of directions (empty without a band test)."""
        if self.band_basis_ is None:
            return {}
        return {"band_limit": float(self.band_limit_),
                "band_directions": float(self.band_basis_.shape[1])}

    def residual_method(self) -> str:
        """How the residual limits were set, in words (summary, report, inspect)."""
        text = "Box scaled chi-squared fitted to leave-one-out calibration F ratios"
        if self.band_basis_ is None:
            return text
        return (f"{text}, at α/2; with the band-shaped part of the residual "
                f"({self.band_basis_.shape[1]} smooth directions) against its own limit "
                f"{self.band_limit_:.3g}, at α/2")

    @property
    def calibration_variance(self) -> float:
        """Calibration residual variance per channel s²_cal (AU²; NaN without residuals)."""
        check_fitted(self, "pure_spectra_")
        return float(self.s2_cal_)

    def component_spectra(self) -> np.ndarray:
        """K̂, shape (m, p): absorbance per unit concentration of each analyte."""
        check_fitted(self, "pure_spectra_")
        return self.pure_spectra_.copy()

    def for_path_factor(self, factor: float) -> CLSRegressor:
        """The same model for a cell ``factor`` times as long as the modelled one.

        Beer's law ``A = εbc`` makes absorbance proportional to the path length b, so the
        pure spectra scale exactly by ``factor``; the noise, and with it the residual limit,
        belongs to the instrument and stays. Only for models from pure spectra
        (:meth:`from_pure_spectra`): spectra of standards also carry the cell's own
        background, which does not scale.
        """
        check_fitted(self, "pure_spectra_")
        if self.from_standards:
            raise ModelError("a CLS model fitted to standards cannot be rescaled to another "
                             "path length")
        model = copy.deepcopy(self)  # noise, limits and settings stay as they are
        model._set_spectra(self.pure_spectra_ * factor)
        return model

    def model_spectra(self) -> np.ndarray:
        """``K_aug``, shape (m + q, p): the pure spectra followed by the q baseline rows."""
        check_fitted(self, "pure_spectra_")
        return self.augmented_spectra_.copy()

    def residuals(self, X) -> np.ndarray:
        """Spectral residuals ``x − bg − K_augᵀ[ĉ; baseline]`` of new spectra, shape (n, p)."""
        d = self.predict_detail(X)
        X = np.asarray(X, dtype=float)
        coef = np.hstack([d.concentrations, d.baseline])
        return X - self.background_ - coef @ self.augmented_spectra_

    def calibration_residuals(self, X, Y) -> np.ndarray:
        """Residuals ``A − C K̂ − bg`` of spectra with known concentrations Y (n × m), (n, p)."""
        check_fitted(self, "pure_spectra_")
        Y = np.asarray(Y, dtype=float).reshape(len(X), -1)
        return np.asarray(X, dtype=float) - Y @ self.pure_spectra_ - self.background_

    def net_analyte_signal(self) -> np.ndarray:
        """Net analyte signal vectors at unit concentration, shape (m, p).

        The part of each pure spectrum orthogonal to all other rows of ``K_aug`` (other
        analytes and baseline terms); Lorber 1986, Anal. Chem. 58, 1167–1172.
        """
        aug = self.model_spectra()
        return np.vstack([cls_net_analyte_signal(aug.T, k)
                          for k in range(self.pure_spectra_.shape[0])])

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.target_tags.single_output = False
        tags.target_tags.multi_output = True
        return tags


def _inverse(matrix: np.ndarray) -> np.ndarray:
    """``scipy.linalg.inv``, imported on first use: scipy.linalg adds ~0.05 s to the start-up
    of every command that imports this module, most of which never fit a CLS model."""
    from scipy import linalg

    return linalg.inv(matrix)


def _residual_limit(f_ratios: np.ndarray, alpha: float) -> float:
    """Box scaled-χ² limit of the finite leave-one-out F ratios; NaN with fewer than 3."""
    f_ratios = f_ratios[np.isfinite(f_ratios)]
    if f_ratios.size < 3:
        return float("nan")
    return f_limit_from_values(f_ratios, alpha, method="box").value

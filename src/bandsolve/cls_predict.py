"""Prediction half of the CLS estimator: concentrations, SEs and residuals from one scan.

:class:`CLSPredicting` is mixed into :class:`bandsolve.cls.CLSRegressor`; it reads the
fitted attributes that ``fit`` (or ``from_pure_spectra``) sets there. The derivation of the
standard error and the residual ratio is in the ``CLSRegressor`` Notes.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from bandsolve._estimator import check_fitted, validated
from bandsolve._scan import ScanParts, scan
from bandsolve.nnls import nnls_gram

__all__ = ["CLSPredicting", "CLSPrediction"]


@dataclass(frozen=True)
class CLSPrediction:
    """Concentrations and per-sample statistics from :meth:`CLSRegressor.predict_detail`.

    Attributes
    ----------
    concentrations : ndarray, shape (n, m)
        Estimated concentrations, in the units of the calibration.
    standard_errors : ndarray, shape (n, m)
        Standard error of each estimate; NaN where it cannot be estimated (see ``note``).
    dof : int
        Residual degrees of freedom per spectrum, ``p − m − q`` (q baseline terms); the
        Student t quantile for intervals uses it.
    residual_ss : ndarray, shape (n,)
        Sum of squared spectral residuals ``rᵀr`` (AU²).
    residual_ratio : ndarray, shape (n,)
        ``F_u / limit`` with ``F_u = [rᵀr/(p − m − q)] / [s²_cal(1 + h_c)]``: the sample's
        residual variance relative to what calibration noise plus the error of K̂ explain,
        divided by the limit; above 1 means an unmodelled absorber or baseline change.
        With a band test (``band_basis_``) the larger of that and the band ratio over its
        limit (:mod:`bandsolve.band_test`). NaN when the model has nothing to compare
        residuals with.
    leverage : ndarray, shape (n,)
        ``h_c = c̃ᵀ(CᵀC)⁻¹c̃``, the concentration leverage (0 for a model built from
        absorptivities).
    baseline : ndarray, shape (n, q)
        Fitted baseline coefficients (AU; polynomial in the centred, scaled axis).
    note : str
        Why standard errors are missing, when they are.
    """

    concentrations: np.ndarray
    standard_errors: np.ndarray
    dof: int
    residual_ss: np.ndarray
    residual_ratio: np.ndarray
    leverage: np.ndarray
    baseline: np.ndarray
    note: str = ""


class CLSPredicting:
    """Prediction methods of :class:`bandsolve.cls.CLSRegressor` (a mixin)."""

    def predict(self, X):
        """Concentrations (n, m) — or (n,) when fitted on a 1-D target."""
        conc = self.predict_detail(X).concentrations
        return conc[:, 0] if getattr(self, "_single_output", False) else conc

    def predict_detail(self, X) -> CLSPrediction:
        """Concentrations with standard errors, spectral residuals and leverage.

        ``Cov(ĉ) ≈ s²(K̂K̂ᵀ)⁻¹`` with ``s² = rᵀr/(p − m − q)`` from the sample's own
        residual, which already carries the error in K̂ (class Notes; Haaland & Thomas 1988,
        Anal. Chem. 60, 1193).
        """
        check_fitted(self, "pure_spectra_")
        return self.detail_checked(validated(self, X, reset=False))

    def detail_checked(self, X: np.ndarray) -> CLSPrediction:
        """:meth:`predict_detail` for a finite float array (n, p) checked by the caller."""
        H, ss, _ = scan(X, self.scan_parts())
        return self.detail_from_scan(H, ss)

    def scan_parts(self) -> ScanParts:
        """The product matrix ``[Kᵀ, bg, U]`` (U the band basis, when the model has one) and
        unit weights that :meth:`detail_from_scan` needs."""
        K, bg = self.augmented_spectra_, self.background_
        U = self._band_basis()
        return ScanParts(np.ascontiguousarray(np.column_stack([K.T, bg, U])), np.ones(K.shape[1]))

    def _band_basis(self) -> np.ndarray:
        U = self.band_basis_
        return np.empty((self.augmented_spectra_.shape[1], 0)) if U is None else U

    def detail_from_scan(self, H: np.ndarray, ss: np.ndarray) -> CLSPrediction:
        """Estimates from ``H = X @ [Kᵀ, bg, U]`` and ``ss = Σx²`` of each spectrum.

        With ``h = K(x − bg)`` and ``ĉ = (KKᵀ)⁻¹h``, the residual is
        ``‖x − bg − Kᵀĉ‖² = ‖x − bg‖² − ĉᵀh``, so no spectrum is read twice. In float64 this
        is exact to ~1e-10 relative for absorbance data (the cancellation factor
        ``‖x‖²/rᵀr`` is ~1e5). U is orthogonal to K, so ``Uᵀr = Uᵀ(x − bg)``.
        """
        m, q = self.pure_spectra_.shape[0], self.n_baseline_terms_
        K, bg = self.augmented_spectra_, self.background_
        k = K.shape[0]
        h = H[:, :k] - bg @ K.T
        coef, fit_ss, at_bound = self._solve(h)
        total = ss - 2.0 * H[:, k] + bg @ bg
        rss = np.maximum(total + fit_ss, 0.0)
        n = len(H)
        dof = K.shape[1] - m - q
        conc = coef[:, :m]
        lev = np.zeros(n) if self.gram_inv_ is None else self.composition_leverage(conc)
        note = ""
        if dof > 0:
            s2 = rss / dof
            se = np.sqrt(s2[:, None] * np.diag(self.aug_gram_inv_)[:m])
            ratio = (s2 / (self.s2_cal_ * (1.0 + lev))) / self.residual_limit_
            U = self._band_basis()
            if U.shape[1]:
                band = ((H[:, k + 1:] - bg @ U) ** 2).sum(axis=1) / U.shape[1]
                ratio = np.fmax(ratio, band / (self.s2_cal_ * (1.0 + lev)) / self.band_limit_)
        else:
            se = np.full_like(conc, np.nan)
            ratio = np.full(n, np.nan)
            note = (f"no standard error: {K.shape[1]} wavelengths for {m + q} unknowns leave no "
                    "residual degrees of freedom; use more wavelengths")
        if at_bound is not None and at_bound.any():
            se[at_bound] = np.nan
            note = "; ".join(filter(None, [note, (
                f"non-negative CLS: {int(at_bound.sum())} concentration(s) held at the zero "
                "bound, reported as 0 with no standard error (a bound estimate has no "
                "symmetric interval)")]))
        return CLSPrediction(conc, se, dof, rss, ratio, lev, coef[:, m:], note)

    def _solve(self, h: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
        """Coefficients for ``h = K(x − bg)``, the term t with ``rᵀr = ‖x − bg‖² + t``, and
        (non-negative models) which concentrations are held at zero."""
        if not self.non_negative:
            coef = h @ self.aug_gram_inv_
            return coef, -np.einsum("ij,ij->i", coef, h), None
        K, m = self.augmented_spectra_, self.pure_spectra_.shape[0]
        fit = nnls_gram(K @ K.T, h, np.arange(K.shape[0]) < m)
        return fit.coef, fit.objective, fit.at_bound[:, :m]

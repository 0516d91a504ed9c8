"""Cross-validated CLS: every calibration sample predicted by the model without it.

Leave-one-out in closed form, and leaving whole runs (days) out by refitting
(:func:`leave_runs_out`); both feed the error model that widens the white-noise SE
(:func:`error_model`).

Removing sample i from ``K̂ = (CᵀC)⁻¹CᵀA`` is a rank-one downdate (Sherman–Morrison):
``K̂₍₋ᵢ₎ = K̂ − u_i e_iᵀ`` with ``u_i = G c_i/(1 − h_ii)``, ``G = (CᵀC)⁻¹``, ``h_ii = c_iᵀGc_i``
and ``e_i = a_i − K̂ᵀc_i`` the fitted residual (Cook & Weisberg 1982, §2.2; the same identity
gives PRESS residuals in ordinary regression). Prediction of ``a_i`` with the downdated spectra
then needs only ``K_aug₍₋ᵢ₎K_aug₍₋ᵢ₎ᵀ`` and ``K_aug₍₋ᵢ₎a_i``, which are small (k × k and k)
corrections of products formed once for all samples. Nothing is refitted: the cost is
``O(npk)`` for the products plus n solves of size k, against n refits of ``O(npk)`` each.

References
----------
Sherman, J. & Morrison, W. J. (1950). Adjustment of an inverse matrix corresponding to a change
in one element of a given matrix. Ann. Math. Stat. 21, 124-127.
Cook, R. D. & Weisberg, S. (1982). Residuals and Influence in Regression. Chapman & Hall.
Haaland, D. M. & Thomas, E. V. (1988). Partial least-squares methods for spectral analyses. 1.
Anal. Chem. 60, 1193-1202.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from bandsolve._estimator import clone
from bandsolve.errors import BandsolveError, DataError
from bandsolve.variance_function import boundary_lr_p, effective_dof, fit_variance

__all__ = ["LeaveOneOut", "cls_leave_one_out", "cross_validated_error_scale", "error_model",
           "leave_runs_out"]

#: ``1 − h_ii`` below this: the sample alone determines a model term and cannot be left out.
_ALONE = 1e-9


@dataclass(frozen=True)
class LeaveOneOut:
    """Leave-one-out predictions of the calibration samples.

    Attributes
    ----------
    concentrations : ndarray, shape (n, m)
        ``ĉ₍₋ᵢ₎``: each sample predicted by the model fitted without it (concentration units);
        NaN rows for samples that alone carry a model term (an analyte's only standard).
    residual_ss : ndarray, shape (n,)
        ``‖a_i − bg₍₋ᵢ₎ − K_aug₍₋ᵢ₎ᵀĉ_aug‖²`` (AU²); NaN where the sample cannot be left out.
    leverage : ndarray, shape (n,)
        ``c̃ᵀ(C₍₋ᵢ₎ᵀC₍₋ᵢ₎)⁻¹c̃`` at the predicted composition ``c̃`` (with the intercept 1), the
        leverage the sample would get as a new sample; NaN where it cannot be left out.
    standard_errors : ndarray, shape (n, m)
        The standard error the downdated model reports for its prediction of sample i,
        ``√(s²_i[(K_aug₍₋ᵢ₎K_aug₍₋ᵢ₎ᵀ)⁻¹]_kk)`` with ``s²_i = r₍₋ᵢ₎ᵀr₍₋ᵢ₎/(p − m − q)``;
        NaN where the sample cannot be left out or no residual degrees of freedom remain.
    """

    concentrations: np.ndarray
    residual_ss: np.ndarray
    leverage: np.ndarray
    standard_errors: np.ndarray


def cls_leave_one_out(X: np.ndarray, design: np.ndarray, coef: np.ndarray, gram_inv: np.ndarray,
                      n_analytes: int, baseline_rows: np.ndarray) -> LeaveOneOut:
    """Closed-form leave-one-out CLS predictions (see the module docstring).

    Parameters
    ----------
    X : ndarray, shape (n, p)
        Calibration spectra (AU).
    design : ndarray, shape (n, m′)
        Concentrations, with a ones column last when the model has an intercept.
    coef : ndarray, shape (m′, p)
        ``K̂`` (first ``n_analytes`` rows) and, with an intercept, the background row.
    gram_inv : ndarray, shape (m′, m′)
        ``(CᵀC)⁻¹`` of ``design``.
    n_analytes : int
        m, the number of concentration columns.
    baseline_rows : ndarray, shape (q, p)
        Baseline polynomial rows solved with the concentrations at prediction.

    Returns
    -------
    LeaveOneOut
    """
    n, p = X.shape
    m, mp = n_analytes, design.shape[1]
    intercept = mp > m
    E = X - design @ coef                       # fitted residuals e_i, (n, p)
    h = np.einsum("ij,jk,ik->i", design, gram_inv, design)
    alone = 1.0 - h < _ALONE
    U = (design @ gram_inv) / np.where(alone, 1.0, 1.0 - h)[:, None]   # u_i, (n, m′)
    bg = coef[m] if intercept else np.zeros(p)
    K = np.vstack([coef[:m], baseline_rows])    # K_aug, (k, p)
    k = K.shape[0]
    Xb = X - bg
    ub = U[:, m] if intercept else np.zeros(n)  # background downdate: a_i = x_i − bg + ub e_i
    Ku = np.zeros((n, k))
    Ku[:, :m] = U[:, :m]                          # ũ_i: only analyte rows of K_aug change
    KE, KX = E @ K.T, Xb @ K.T                  # K_aug e_i and K_aug (x_i − bg), (n, k)
    ee = np.einsum("ij,ij->i", E, E)
    ex = np.einsum("ij,ij->i", E, Xb)
    xx = np.einsum("ij,ij->i", Xb, Xb)
    # K₍₋ᵢ₎K₍₋ᵢ₎ᵀ = KKᵀ − ũ(Ke)ᵀ − (Ke)ũᵀ + (eᵀe)ũũᵀ
    T = np.einsum("ia,ib->iab", Ku, KE)
    M = (K @ K.T)[None] - T - np.transpose(T, (0, 2, 1)) + ee[:, None, None] * np.einsum(
        "ia,ib->iab", Ku, Ku)
    Ka = KX + ub[:, None] * KE                  # K a_i
    ea = ex + ub * ee                           # e_iᵀa_i
    v = Ka - Ku * ea[:, None]                   # K₍₋ᵢ₎ a_i
    aa = xx + 2 * ub * ex + ub**2 * ee          # a_iᵀa_i
    ok = ~alone
    coef_i = np.full((n, k), np.nan)
    diag = np.full((n, m), np.nan)
    if ok.any():
        M_inv = np.linalg.inv(M[ok])
        coef_i[ok] = np.einsum("iab,ib->ia", M_inv, v[ok])
        diag[ok] = np.diagonal(M_inv, axis1=1, axis2=2)[:, :m]
    rss = np.maximum(aa - np.einsum("ij,ij->i", coef_i, v), 0.0)
    dof = p - k
    se = np.sqrt(rss[:, None] / dof * diag) if dof > 0 else np.full((n, m), np.nan)
    conc = coef_i[:, :m]
    ctil = np.column_stack([conc, np.ones(n)]) if intercept else conc
    gz = ctil @ gram_inv
    # (C₍₋ᵢ₎ᵀC₍₋ᵢ₎)⁻¹ = G + G c_i c_iᵀ G/(1 − h_ii)  (Sherman–Morrison)
    lev = np.einsum("ij,ij->i", gz, ctil) + np.einsum("ij,ij->i", gz, design) ** 2 / np.where(
        alone, 1.0, 1.0 - h)
    rss[alone] = np.nan
    lev[alone] = np.nan
    return LeaveOneOut(conc, rss, lev, se)


#: Level of the test that keeps the concentration term of :func:`error_model`.
RELATIVE_ERROR_ALPHA = 0.05


def error_model(errors: np.ndarray, standard_errors: np.ndarray,
                concentrations: np.ndarray, iterations: int = 3) -> tuple[float, float]:
    """Variance function ``Var(e) = κ²·SE² + (γ·c)²`` fitted to leave-one-out errors.

    The white-noise SE already grows with the sample's leverage; real spectra add errors
    that are proportional to the concentration (a gain or path-length change between the
    day K was measured and the sample was, a pipetting error in a standard), which no single
    scale can follow: it makes intervals too wide at the blank and too narrow at the top of
    the range. The squared errors are regressed on ``[SE², c²]`` by weighted least squares
    with ``κ² = 1 + a``, ``a ≥ 0``, ``γ² ≥ 0`` (non-negative least squares), reweighting by
    the inverse squared fitted variance a few times: the variance-function estimator of
    Carroll & Ruppert (1988, Transformation and Weighting in Regression, ch. 3) from squared
    residuals (:mod:`bandsolve.variance_function`). γ is kept only when the Gaussian
    likelihood-ratio test of ``γ = 0`` rejects at ``RELATIVE_ERROR_ALPHA`` (γ² = 0 is on the
    boundary, so the reference is the ½χ²₀ + ½χ²₁ mixture; Self & Liang 1987): fitted to white
    noise alone, a free γ is positive half the time and widens intervals for nothing.
    With γ = 0 the fit is the Birge ratio ``κ² = max(1, mean(e²/SE²))``.

    Parameters
    ----------
    errors, standard_errors, concentrations : ndarray, shape (n,)
        Leave-one-out errors, their white-noise SEs (> 0) and the samples' reference
        concentrations, for one analyte (concentration units).
    iterations : int
        Reweighting passes.

    Returns
    -------
    kappa, gamma : float
        κ ≥ 1 and the relative error SD γ ≥ 0 (a fraction of the concentration).
    """
    d, s2, c2 = errors**2, standard_errors**2, concentrations**2
    a0 = max(0.0, float(np.mean(d / s2)) - 1.0)
    a, g = fit_variance(d, s2, np.column_stack([s2, c2]), iterations)
    if g > 0 and boundary_lr_p(d, (1.0 + a) * s2 + g * c2,
                               (1.0 + a0) * s2) < RELATIVE_ERROR_ALPHA:
        return float(np.sqrt(1.0 + a)), float(np.sqrt(g))
    return float(np.sqrt(1.0 + a0)), 0.0


def cross_validated_error_scale(errors: np.ndarray, standard_errors: np.ndarray,
                                concentrations: np.ndarray, runs: np.ndarray | None = None
                                ) -> tuple[np.ndarray, np.ndarray, int]:
    """:func:`error_model` per analyte over the samples that could be predicted, and its df.

    Parameters
    ----------
    errors, standard_errors, concentrations : ndarray, shape (n, m)
        Cross-validated errors, their white-noise SEs and the reference concentrations.
    runs : ndarray, shape (n,), optional
        Run (day) of each sample when the errors come from leaving whole runs out: errors
        shared within a run then count as fewer degrees of freedom
        (:func:`bandsolve.variance_function.effective_dof`, the smallest over analytes,
        rounded down). Without runs, the number of samples; where a relative error γ is
        kept, no more than the samples that hold that analyte, the only ones its γ² rests on
        (5 of 20 pure standards).

    Returns
    -------
    kappa, gamma : ndarray, shape (m,)
        Ones and zeros when fewer than 3 samples could be predicted.
    dof : int
        0 when fewer than 3 samples could be predicted.
    """
    m = errors.shape[1]
    ok = np.isfinite(errors / standard_errors).all(axis=1) & (standard_errors > 0).all(axis=1)
    if ok.sum() < 3:
        return np.ones(m), np.zeros(m), 0
    e, s, c = errors[ok], standard_errors[ok], concentrations[ok]
    fits = np.array([error_model(e[:, k], s[:, k], c[:, k]) for k in range(m)])
    if runs is None:
        # γ rests only on the samples that hold the analyte (5 of 20 pure standards)
        informative = [int(np.count_nonzero(c[:, k])) for k in range(m) if fits[k, 1] > 0]
        return fits[:, 0], fits[:, 1], int(min([ok.sum(), *informative]))
    sd = np.sqrt((fits[:, 0] * s) ** 2 + (fits[:, 1] * c) ** 2)
    dof = min(effective_dof(e[:, k] / sd[:, k], np.asarray(runs)[ok]) for k in range(m))
    return fits[:, 0], fits[:, 1], int(np.floor(dof))


def leave_runs_out(estimator: Any, X: np.ndarray, Y: np.ndarray,
                   runs: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Each run's samples predicted by the model refitted without that run.

    Leaving one sample out keeps the rest of its run in the model, so an error the whole run
    shares (the day's gain, baseline, wavelength shift) partly cancels; leaving the run out
    shows it as later samples from another day will (leave-one-group-out cross-validation).

    Parameters
    ----------
    estimator : CLSRegressor
        The fitted model; copies with the same parameters (but without the non-negativity
        constraint) are refitted.
    X : ndarray, shape (n, p)
        The calibration spectra as the model was fitted to them.
    Y : ndarray, shape (n, m)
        Their concentrations.
    runs : ndarray, shape (n,)
        Run (day) label of each sample; at least 3 runs.

    Returns
    -------
    errors, standard_errors : ndarray, shape (n, m)
        ``ĉ − c`` and the white-noise SEs the refitted models report.

    Raises
    ------
    DataError
        Fewer than 3 runs, or a run without which the model cannot be fitted.
    """
    labels = np.asarray(runs)
    names = np.unique(labels)
    if names.size < 3:
        raise DataError(f"the runs name {names.size} run(s); leaving runs out needs at least 3 "
                        "(measure the calibration on 3 or more days, or give no runs)")
    errors, ses = np.full(Y.shape, np.nan), np.full(Y.shape, np.nan)
    for name in names:
        held = labels == name
        try:
            # unconstrained, as the closed-form leave-one-out: a concentration held at zero
            # by a non-negative solve has no SE, and the error model needs every one
            model = clone(estimator).set_params(non_negative=False).fit(X[~held], Y[~held])
        except BandsolveError as exc:
            raise DataError(f"without run {str(name)!r} the model cannot be fitted ({exc}); spread "
                            "each analyte's standards over two or more runs") from exc
        d = model.predict_detail(X[held])
        errors[held], ses[held] = d.concentrations - Y[held], d.standard_errors
    return errors, ses

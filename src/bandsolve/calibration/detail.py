"""Per-sample detail: what a calibration computes for each spectrum before it becomes a table.

:class:`Detail` is method-independent; :func:`cls_detail` and :func:`pls_detail` build it from
an estimator's own per-sample statistics and the stored limits.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from bandsolve.calibration.records import EstimatorLimits
from bandsolve.cls import CLSRegressor
from bandsolve.pls import PLSRegressor

__all__ = ["CLS_LEVERAGE_FACTOR", "Detail", "LEVERAGE_FACTOR", "cls_detail", "pls_detail"]

#: PLS leverage warning limit is LEVERAGE_FACTOR × (A + 1) / n (Hoaglin & Welsch 1978).
LEVERAGE_FACTOR = 3.0

#: How a PLS Q limit set on ``Q/(1 + h)`` is named in the model (files before it hold limits
#: on Q itself, under other names, and are read as they were written).
Q_PER_LEVERAGE = "moment-chi2 of Q/(1 + h)"

#: CLS leverage warning limit is CLS_LEVERAGE_FACTOR × the largest leverage of a composition
#: inside the calibrated ranges (:meth:`CLSRegressor.leverage_limit`).
CLS_LEVERAGE_FACTOR = 1.0


@dataclass(frozen=True)
class Detail:
    """Method-independent per-sample results, before they become a table.

    Attributes
    ----------
    concentrations, standard_errors : ndarray, shape (n, m)
    dof : ndarray, shape (m,)
        Degrees of freedom of the Student t quantile for each analyte's interval.
    residual_ratio : ndarray, shape (n,)
        Spectral residual (CLS F ratio, or PLS Q; ``Q/(1 + h)`` for limits set that way,
        :data:`Q_PER_LEVERAGE`) divided by its limit.
    t2_ratio : ndarray, shape (n,)
        Hotelling T² divided by its limit (NaN for CLS).
    leverage_ratio : ndarray, shape (n,)
        Leverage divided by its warning limit.
    notes : list of str
        Model-level remarks that apply to every row (for example why an SE is missing).
    max_absorbance : ndarray, shape (n,) or None
        Largest absorbance of each spectrum in the used range, for the ceiling flag.
    """

    concentrations: np.ndarray
    standard_errors: np.ndarray
    dof: np.ndarray
    residual_ratio: np.ndarray
    t2_ratio: np.ndarray
    leverage_ratio: np.ndarray
    notes: list[str] = field(default_factory=list)
    max_absorbance: np.ndarray | None = None


def cls_detail(model: CLSRegressor, limits: EstimatorLimits, H: np.ndarray,
               ss: np.ndarray) -> Detail:
    """Detail for a CLS model from its scan products (:meth:`CLSRegressor.scan_parts`).

    SE from each sample's own residual (:meth:`CLSRegressor.predict_detail`) times the
    calibration's error scale κ ≥ 1, with the relative error ``γ·|ĉ|`` added in quadrature
    (``limits.error_scale``, ``limits.relative_error``: the error model fitted to the
    leave-one-out errors, :func:`bandsolve.cls_loo.error_model`); where the model departs
    from white noise the t quantile takes the number of calibration samples behind it as
    degrees of freedom. F ratio and leverage ratio against the stored limits.
    """
    d = model.detail_from_scan(H, ss)
    n, m = d.concentrations.shape
    scale = np.asarray(limits.error_scale or np.ones(m), dtype=float)
    relative = np.asarray(limits.relative_error or np.zeros(m), dtype=float)
    dof = np.where((scale > 1.0) | (relative > 0), limits.error_scale_dof, d.dof)
    notes = [d.note] if d.note else []
    if model.from_standards:
        lev_ratio = d.leverage / limits.leverage
    else:
        lev_ratio = np.full(n, np.nan)  # no calibration set, so no leverage
        notes.append("model built from absorptivities: standard errors come from each "
                     "spectrum's own residual only")
    if np.isnan(model.residual_limit):
        notes.append(
            "no residual limit: the calibration left too few residual degrees of freedom "
            "to set one; measure more standards than analytes" if model.from_standards else
            "no residual limit, so an unmodelled absorber cannot be flagged: rebuild with "
            "replicate blank spectra (--blanks)")
    return Detail(
        concentrations=d.concentrations,
        standard_errors=np.sqrt((d.standard_errors * scale) ** 2
                                + (relative * d.concentrations) ** 2),
        dof=dof,
        residual_ratio=d.residual_ratio,
        t2_ratio=np.full(n, np.nan),
        leverage_ratio=lev_ratio,
        notes=notes,
    )


def pls_detail(models: Sequence[PLSRegressor], limits: Sequence[EstimatorLimits],
               scans: list[tuple[np.ndarray, np.ndarray]]) -> Detail:
    """Detail for PLS: one model (PLS2) or one per analyte (PLS1).

    The SE has the leverage form of Faber & Bro (2002), ``σ²(ŷ) ≈ (1 + h)σ²_e − σ²_ref``
    with ``h = 1/n + tᵀ(TᵀT)⁻¹t``, but the error variance σ²_e comes from the
    cross-validated residuals instead of MSEC: ``σ²_e = RMSECV²/(1 + (A + 1)/n)``, since
    RMSECV² estimates the prediction error of samples like the calibration ones, whose mean
    leverage is ``(A + 1)/n``. MSEC on ``n − A − 1`` pseudo-degrees of freedom shrinks as
    components are added while the true error grows (measured for this package: 45 % coverage
    for PLS1 with one component too many; Faber & Bro 2002, Chemom. Intell. Lab. Syst. 61,
    133, on the MSEC form); RMSECV rises with over-fitting, so the interval follows the
    real error on either side of the right count. Ratios of T², Q and leverage to their
    limits are the largest over the per-analyte models for PLS1. The Q ratio is
    ``[Q/(1 + h)]/limit`` for limits set that way (``Q_PER_LEVERAGE``): a new residual carries
    the loadings' estimation error in proportion to ``1 + h``. ``scans`` holds each
    model's scan products ``(H, ss)`` (:meth:`PLSRegressor.scan_parts`). A model
    cross-validated by leaving whole runs out carries an error model fitted to those errors
    (``lim.error_scale`` κ, ``lim.relative_error`` γ; ``build_pls._run_error_model``): the
    error variance is then ``κ²(1 + h)σ²_e + γ²ĉ²`` on the runs' degrees of freedom.

    References
    ----------
    Faber, N. M. & Bro, R. (2002). Standard error of prediction for multiway PLS: 1.
    Background and a simulation study. Chemom. Intell. Lab. Syst. 61, 133-149.
    Faber, N. M., Song, X.-H. & Hopke, P. K. (2003). Sample-specific standard error of
    prediction for partial least squares regression. TrAC 22, 330-334.
    Faber, N. M. & Kowalski, B. R. (1997). Propagation of measurement errors for the
    validation of predictions obtained by principal component regression and partial least
    squares. J. Chemom. 11, 181-238.
    """
    n = scans[0][0].shape[0]
    concs, ses, dofs = [], [], []
    q_ratio = np.zeros(n)
    t2_ratio = np.zeros(n)
    lev_ratio = np.zeros(n)
    for model, lim, (H, ss) in zip(models, limits, scans, strict=True):
        d = model.detail_from_scan(H, ss)
        n_cal = d.dof + model.n_parameters  # d.dof = n − A − 1
        error_var = np.asarray(lim.rmsecv, dtype=float) ** 2 / (1.0 + model.n_parameters / n_cal)
        s2_ref = (np.asarray(lim.reference_variance, dtype=float) if lim.reference_variance
                  else np.zeros_like(error_var))
        floor = (np.asarray(lim.noise_floor, dtype=float) if lim.noise_floor
                 else np.zeros_like(error_var))
        grow = (1 + d.leverage)[:, None]
        kappa = np.asarray(lim.error_scale or np.ones_like(error_var), dtype=float)
        gamma = np.asarray(lim.relative_error or np.zeros_like(error_var), dtype=float)
        var = np.maximum(grow * kappa**2 * error_var - s2_ref + (gamma * d.concentrations) ** 2,
                         grow * floor)
        concs.append(d.concentrations)
        ses.append(np.sqrt(np.maximum(var, 0.0)))
        # The noise floor's degrees of freedom where the floor exceeds the whole
        # cross-validated error; else those of that error (of its error model, when runs were
        # left out: how κ and γ share it does not change which of the two is larger).
        cv_dof = lim.error_scale_dof if lim.error_scale else d.dof
        dofs.extend(np.where((floor > 0) & (floor >= error_var - s2_ref), lim.noise_floor_dof,
                             cv_dof).tolist())
        q = d.q / (1.0 + d.leverage) if lim.residual_method == Q_PER_LEVERAGE else d.q
        q_ratio = np.maximum(q_ratio, q / lim.residual)
        t2_ratio = np.maximum(t2_ratio, d.t2 / lim.t2)
        lev_ratio = np.maximum(lev_ratio, d.leverage / lim.leverage)
    return Detail(
        concentrations=np.hstack(concs),
        standard_errors=np.hstack(ses),
        dof=np.asarray(dofs),
        residual_ratio=q_ratio,
        t2_ratio=t2_ratio,
        leverage_ratio=lev_ratio,
    )

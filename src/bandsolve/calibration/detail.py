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

__all__ = ["Detail", "LEVERAGE_FACTOR", "cls_detail", "pls_detail"]

#: Leverage warning limit is LEVERAGE_FACTOR × (parameters) / n (Hoaglin & Welsch 1978).
LEVERAGE_FACTOR = 3.0


@dataclass(frozen=True)
class Detail:
    """Method-independent per-sample results, before they become a table.

    Attributes
    ----------
    concentrations, standard_errors : ndarray, shape (n, m)
    dof : ndarray, shape (m,)
        Degrees of freedom of the Student t quantile for each analyte's interval.
    residual_ratio : ndarray, shape (n,)
        Spectral residual (CLS F ratio, or PLS Q) divided by its limit.
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

    SE from each sample's own residual, F-ratio and leverage ratios.
    """
    d = model.detail_from_scan(H, ss)
    n, m = d.concentrations.shape
    notes = [d.note] if d.note else []
    if model.from_standards:
        lev_ratio = d.leverage / limits.leverage
    else:
        lev_ratio = np.zeros(n)
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
        standard_errors=d.standard_errors,
        dof=np.full(m, d.dof),
        residual_ratio=d.residual_ratio,
        t2_ratio=np.full(n, np.nan),
        leverage_ratio=lev_ratio,
        notes=notes,
    )


def pls_detail(models: Sequence[PLSRegressor], limits: Sequence[EstimatorLimits],
               scans: list[tuple[np.ndarray, np.ndarray]]) -> Detail:
    """Detail for PLS: one model (PLS2) or one per analyte (PLS1).

    The SE is the Faber & Bro (2002) form ``σ(ŷ) ≈ √((1 + h)·MSEC − σ²_ref)`` with the
    leverage ``h = 1/n + tᵀ(TᵀT)⁻¹t``; ratios of T², Q and leverage to their limits are
    the largest over the per-analyte models for PLS1. ``scans`` holds each model's scan
    products ``(H, ss)`` (:meth:`PLSRegressor.scan_parts`).
    """
    n = scans[0][0].shape[0]
    concs, ses, dofs = [], [], []
    q_ratio = np.zeros(n)
    t2_ratio = np.zeros(n)
    lev_ratio = np.zeros(n)
    for model, lim, (H, ss) in zip(models, limits, scans, strict=True):
        d = model.detail_from_scan(H, ss)
        msec = np.asarray(lim.msec, dtype=float)
        s2_ref = (np.asarray(lim.reference_variance, dtype=float) if lim.reference_variance
                  else np.zeros_like(msec))
        var = (1 + d.leverage)[:, None] * msec[None, :] - s2_ref[None, :]
        concs.append(d.concentrations)
        ses.append(np.sqrt(np.maximum(var, 0.0)))
        dofs.extend([d.dof] * d.concentrations.shape[1])
        q_ratio = np.maximum(q_ratio, d.q / lim.residual)
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

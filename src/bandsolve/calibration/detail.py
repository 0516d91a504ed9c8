"""Per-method conversion of a fitted estimator's output into a method-independent Detail."""

from __future__ import annotations

from typing import Any

import numpy as np

from bandsolve.calibration.model import Detail
from bandsolve.cls import CLSRegressor

__all__ = ["cls_detail", "pls_detail", "LEVERAGE_FACTOR"]

#: Leverage warning limit is LEVERAGE_FACTOR × (parameters) / n (Hoaglin & Welsch 1978).
LEVERAGE_FACTOR = 3.0


def cls_detail(model: CLSRegressor, H: np.ndarray, ss: np.ndarray) -> Detail:
    """Detail for a CLS model from its scan products (:meth:`CLSRegressor.scan_parts`).

    SE from each sample's own residual, F-ratio and leverage ratios.
    """
    d = model.detail_from_scan(H, ss)
    n, m = d.concentrations.shape
    notes = [d.note] if d.note else []
    if model.gram_inv_ is None:
        lev_ratio = np.zeros(n)
        notes.append("model built from absorptivities: standard errors come from each "
                     "spectrum's own residual only")
    else:
        n_cal = model.n_calibration_
        lev_ratio = d.leverage / (LEVERAGE_FACTOR * model.gram_inv_.shape[0] / n_cal)
    if np.isnan(model.residual_limit_):
        notes.append(
            "no residual limit, so an unmodelled absorber cannot be flagged: rebuild with "
            "replicate blank spectra (--blanks)" if model.gram_inv_ is None else
            "no residual limit: the calibration left too few residual degrees of freedom "
            "to set one; measure more standards than analytes")
    return Detail(
        concentrations=d.concentrations,
        standard_errors=d.standard_errors,
        dof=np.full(m, d.dof),
        residual_ratio=d.residual_ratio,
        t2_ratio=np.full(n, np.nan),
        leverage_ratio=lev_ratio,
        notes=notes,
    )


def pls_detail(models: list[Any], limits: dict[str, Any],
               scans: list[tuple[np.ndarray, np.ndarray]]) -> Detail:
    """Detail for PLS: one model (PLS2) or one per analyte (PLS1).

    The SE is the Faber & Bro (2002) form ``σ(ŷ) ≈ √((1 + h)·MSEC − σ²_ref)`` with the
    leverage ``h = 1/n + tᵀ(TᵀT)⁻¹t``; ratios of T², Q and leverage to their limits are
    the largest over the per-analyte models for PLS1. ``scans`` holds each model's scan
    products ``(H, ss)`` (:meth:`PLSRegressor.scan_parts`).
    """
    from bandsolve.diagnostics import hotelling_t2

    n = scans[0][0].shape[0]
    concs, ses, dofs = [], [], []
    q_ratio = np.zeros(n)
    t2_ratio = np.zeros(n)
    lev_ratio = np.zeros(n)
    for model, lim, (H, ss) in zip(models, limits["models"], scans, strict=True):
        pred, scores, q = model.detail_from_scan(H, ss)
        train = model.x_scores_
        n_cal, a = train.shape
        t2 = hotelling_t2(scores, train)
        lev = 1.0 / n_cal + t2 / (n_cal - 1)
        msec = np.asarray(lim["msec"], dtype=float)
        s2_ref = np.asarray(lim.get("reference_variance", np.zeros_like(msec)), dtype=float)
        var = (1 + lev)[:, None] * msec[None, :] - s2_ref[None, :]
        concs.append(pred)
        ses.append(np.sqrt(np.maximum(var, 0.0)))
        dofs.extend([n_cal - a - 1] * pred.shape[1])
        q_ratio = np.maximum(q_ratio, q / lim["q_limit"])
        t2_ratio = np.maximum(t2_ratio, t2 / lim["t2_limit"])
        lev_ratio = np.maximum(lev_ratio, lev / lim["leverage_limit"])
    return Detail(
        concentrations=np.hstack(concs),
        standard_errors=np.hstack(ses),
        dof=np.asarray(dofs),
        residual_ratio=q_ratio,
        t2_ratio=t2_ratio,
        leverage_ratio=lev_ratio,
    )

"""Carrying what an independent validation learned into later intervals.

Calibration-only intervals rest on the noise model of the calibration (white noise, K̂ or the
PLS regression estimated from the calibration spectra). Errors that calibration cannot see —
day-to-day baseline and wavelength shifts, a gain change between the day K was measured and
the day samples are, matrix effects — show only on independent samples of known composition.

The validation residuals ``e_i = ĉ_i − c_i`` with calibration standard errors ``s_i`` are
modelled per analyte as ``e_i ~ N(0, s_i² + τ² + κ²c_i²)``: on top of what calibration
predicts, a model error with an additive part τ (concentration units) and a part κ proportional
to the level (a fraction of the result), the two-component error model of analytical chemistry
(Rocke & Lorenzato 1995). A gain change, a path-length or dilution error, a wrong slope all
grow with the concentration; a baseline shift does not. With an additive τ alone, its estimate
is an average over the validation levels: intervals are then too wide near zero and too narrow
at the top of the range, where release decisions are made.

τ² and κ² are maximum-likelihood estimates under the constraint τ², κ² ≥ 0, with the mean held
at zero (:mod:`bandsolve.variance_function`, the estimator that also fits the leave-one-out
error model of a CLS calibration): a systematic bias is not removed, it is part of the error
later samples will have (``assess`` reports it with its t-test). κ is estimated only when the
validation references of the analyte take at least :data:`MIN_LEVELS` distinct values;
otherwise κ = 0 and τ² alone is estimated (with equal ``s_i`` it is ``max(0, mean(e²) − s²)``).
Unlike the calibration's relative term, κ is not gated by a test: here τ and κ share the
error the validation saw, so a chance κ > 0 moves width towards the top of the range without
adding any, while a real proportional error missed by a test of 30 samples would leave the
top of the range under-covered. Later intervals are ``ĉ ± t_{ν}·√(s² + τ̂² + κ̂²ĉ²)`` with ν
the smaller of the calibration degrees of freedom and the validation's effective degrees of
freedom.

A calibration measured over several runs (``build --runs``, PLS ``--cv groups``) already
carries an error model of the day-to-day error in its SE, estimated with ν_c degrees of
freedom from its own runs. The validation is then a second, independent estimate of the same
error with ν_v degrees of freedom, not an error on top of it; adding its τ̂², κ̂² in full and
using ν_v alone would count the day-to-day error twice over (measured: coverage 0.986 instead
of 0.95). The two are pooled as in a pooled variance: later intervals are
``ĉ ± t_{ν_c+ν_v}·√(s² + w(τ̂² + κ̂²ĉ²))`` with ``w = ν_v/(ν_c + ν_v)``, the validation's
weight — exactly the pooled estimate ``[ν_c·s² + ν_v(s² + τ̂² + κ̂²ĉ²)]/(ν_c + ν_v)`` (a
validation that finds the SE too large cannot lower it: τ², κ² ≥ 0).

Errors that come from the day (a gain, a wavelength or baseline shift) are shared by every
sample measured that day, so 30 samples from 5 days carry far less than 29 degrees of freedom
about the model error. When the runs (days) of the validation samples are given, the effective
degrees of freedom are ``(n − 1)/deff`` with Kish's design effect ``deff = 1 + (n̄ − 1)ρ``, ρ
the intra-class correlation of the standardized errors ``e_i/√(s_i² + τ̂² + κ̂²c_i²)`` (one-way
ANOVA moment estimator, truncated to [0, 1]) and n̄ the mean run size; never fewer than
``runs − 1``. Without runs each sample counts as its own run (ν = n − 1), which is right only
when the samples were measured on independent occasions.

References
----------
Rocke, D. M. & Lorenzato, S. (1995). A two-component model for measurement error in analytical
chemistry. Technometrics 37, 176-184.
Kish, L. (1965). Survey Sampling. Wiley, New York (design effect of cluster samples, §5.4).
Searle, S. R., Casella, G. & McCulloch, C. E. (1992). Variance Components. Wiley (one-way
ANOVA estimators of the intra-class correlation).
Clopper, C. J. & Pearson, E. S. (1934). The use of confidence or fiducial limits illustrated
in the case of the binomial. Biometrika 26, 404-413.
"""

from __future__ import annotations

import dataclasses
from datetime import datetime, timezone
from typing import Any

import numpy as np
from scipy import stats

from bandsolve.calibration.interval import IntervalBasis
from bandsolve.calibration.model import Calibration
from bandsolve.errors import DataError
from bandsolve.variance_function import effective_dof, fit_variance

__all__ = ["MIN_LEVELS", "calibration_runs_dof", "model_error", "coverage_interval",
           "validated_calibration", "VALIDATED_METHOD"]

#: How the validated intervals are formed (stored in the model and shown with results).
VALIDATED_METHOD = ("two-component model error (additive + proportional to the result) from "
                    "validation residuals, maximum likelihood")

#: Distinct reference levels needed before the proportional part κ is estimated.
MIN_LEVELS = 3


def _usable(errors: np.ndarray, standard_errors: np.ndarray) -> np.ndarray:
    """Validation samples with a finite error and a positive finite standard error."""
    return np.isfinite(errors) & np.isfinite(standard_errors) & (standard_errors > 0)


def model_error(errors: np.ndarray, standard_errors: np.ndarray,
                levels: np.ndarray | None = None) -> tuple[float, float]:
    """Maximum-likelihood model-error variances τ² and κ² (module docstring).

    Parameters
    ----------
    errors : ndarray, shape (n,)
        Validation errors ``ĉ − c`` of one analyte (concentration units).
    standard_errors : ndarray, shape (n,)
        Their calibration-only standard errors (same units, positive).
    levels : ndarray, shape (n,), optional
        The reference concentrations. Without them, or with fewer than :data:`MIN_LEVELS`
        distinct values, κ² = 0.

    Returns
    -------
    (float, float)
        τ̂² ≥ 0 (concentration units²) and κ̂² ≥ 0 (dimensionless: κ is a fraction of the
        result).
    """
    e = np.asarray(errors, dtype=float)
    s = np.asarray(standard_errors, dtype=float)
    c = np.zeros_like(e) if levels is None else np.asarray(levels, dtype=float)
    ok = _usable(e, s) & np.isfinite(c)
    if ok.sum() < 2:
        raise DataError("the model error needs at least 2 validation samples with a finite "
                        "estimate and standard error")
    d, s2, c2 = e[ok] ** 2, s[ok] ** 2, c[ok] ** 2
    if np.unique(c[ok]).size < MIN_LEVELS:
        c2 = np.zeros_like(c2)
    tau2, kappa2 = fit_variance(d, s2, np.column_stack([np.ones_like(d), c2]), 200, 1e-10)
    return float(tau2), float(kappa2)


def calibration_runs_dof(cal: Calibration) -> float:
    """Degrees of freedom of the calibration's own error model of runs (the smallest over its
    estimators); 0 when it was not built with runs (``build --runs`` or ``--cv groups``)."""
    dofs = [m.error_scale_dof for m in cal.limits.models if m.error_scale_runs]
    return float(min(dofs)) if dofs else 0.0


def coverage_interval(covered: int, total: int, alpha: float = 0.05) -> tuple[float, float]:
    """Clopper–Pearson (exact binomial) ``1 − alpha`` interval of a coverage proportion."""
    if total < 1:
        return float("nan"), float("nan")
    ci = stats.binomtest(int(covered), int(total)).proportion_ci(1 - alpha, method="exact")
    return float(ci.low), float(ci.high)


def validated_calibration(cal: Calibration, errors: np.ndarray, standard_errors: np.ndarray,
                          fingerprints: list[dict[str, Any]],
                          runs: np.ndarray | None = None,
                          levels: np.ndarray | None = None) -> Calibration:
    """A new calibration whose intervals include the model error validation revealed.

    Parameters
    ----------
    cal : Calibration
        The model as built (its own ``interval`` record, if any, is replaced).
    errors, standard_errors : ndarray, shape (n, m)
        Validation errors and calibration-only standard errors, analytes in model order.
    fingerprints : list of dict
        Name and SHA-256 of the validation files, recorded in the model.
    runs : ndarray, shape (n,), optional
        Run (day) of each validation sample; sets the effective degrees of freedom.
    levels : ndarray, shape (n, m), optional
        Reference concentrations of the validation samples; without them only the additive
        part τ is estimated.

    Returns
    -------
    Calibration
        A copy whose ``interval`` record holds the method, τ, κ and the effective degrees of
        freedom per analyte, n, the runs and the files.
    """
    e = np.asarray(errors, dtype=float)
    s = np.asarray(standard_errors, dtype=float)
    c = np.zeros_like(e) if levels is None else np.asarray(levels, dtype=float)
    parts = [model_error(e[:, k], s[:, k], None if levels is None else c[:, k])
             for k in range(e.shape[1])]
    dofs = []
    for k, (tau2, kappa2) in enumerate(parts):
        ok = _usable(e[:, k], s[:, k]) & np.isfinite(c[:, k])
        z = e[ok, k] / np.sqrt(s[ok, k] ** 2 + tau2 + kappa2 * c[ok, k] ** 2)
        dofs.append(effective_dof(z, None if runs is None else np.asarray(runs)[ok]))
    nu_c = calibration_runs_dof(cal)
    if nu_c > 0:  # two estimates of the same day-to-day error: pool them
        parts = [(tau2 * v / (nu_c + v), kappa2 * v / (nu_c + v))
                 for (tau2, kappa2), v in zip(parts, dofs, strict=True)]
        dofs = [nu_c + v for v in dofs]
    record = IntervalBasis(
        method=VALIDATED_METHOD, model_error_sd=tuple(float(np.sqrt(t)) for t, _ in parts),
        relative_error=tuple(float(np.sqrt(k2)) for _, k2 in parts),
        n_validation=int(e.shape[0]),
        n_runs=0 if runs is None else int(np.unique(np.asarray(runs)).size),
        dof=float(min(dofs)), analyte_dof=tuple(float(v) for v in dofs),
        validation_files=tuple(dict(f) for f in fingerprints),
        created=datetime.now(timezone.utc).isoformat(timespec="seconds"),
        calibration_dof=nu_c)
    return dataclasses.replace(cal, interval=record)

"""Carrying what an independent validation learned into later intervals.

Calibration-only intervals rest on the noise model of the calibration (white noise, K̂ or the
PLS regression estimated from the calibration spectra). Errors that calibration cannot see —
day-to-day baseline and wavelength shifts, a gain change between the day K was measured and
the day samples are, matrix effects — show only on independent samples of known composition.

The validation residuals ``e_i = ĉ_i − c_i`` with calibration standard errors ``s_i`` are
modelled per analyte as ``e_i ~ N(0, s_i² + τ²)``: an additive model-error variance τ² on top
of what calibration predicts. τ² is the moment estimator with the mean held at zero, the
DerSimonian–Laird estimator of random-effects meta-analysis without a location parameter:
with weights ``w_i = 1/s_i²``, ``E[Σw_ie_i²] = n + τ²Σw_i``, so
``τ̂² = max(0, (Σw_ie_i² − n)/Σw_i)``. A systematic bias is not removed: it is part of the
error later samples will have, so it enters τ² (and ``assess`` reports it with its t-test).
Later intervals are ``ĉ ± t_{ν}·√(s² + τ̂²)`` with ν the smaller of the calibration degrees of
freedom and the validation's effective degrees of freedom.

Errors that come from the day (a gain, a wavelength or baseline shift) are shared by every
sample measured that day, so 30 samples from 5 days carry far less than 29 degrees of freedom
about τ². When the runs (days) of the validation samples are given, the effective degrees of
freedom are ``(n − 1)/deff`` with Kish's design effect ``deff = 1 + (n̄ − 1)ρ``, ρ the
intra-class correlation of the standardized errors ``e_i/√(s_i² + τ̂²)`` (one-way ANOVA
moment estimator, truncated to [0, 1]) and n̄ the mean run size; never fewer than
``runs − 1``. Without runs each sample counts as its own run (ν = n − 1), which is right only
when the samples were measured on independent occasions.

References
----------
DerSimonian, R. & Laird, N. (1986). Meta-analysis in clinical trials. Control. Clin. Trials 7,
177-188.
Viechtbauer, W. (2005). Bias and efficiency of meta-analytic variance estimators in the
random-effects model. J. Educ. Behav. Stat. 30, 261-293.
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

from bandsolve.calibration.model import Calibration
from bandsolve.calibration.records import IntervalBasis
from bandsolve.errors import DataError

__all__ = ["additive_model_error", "coverage_interval", "effective_dof",
           "validated_calibration", "VALIDATED_METHOD"]

#: How the validated intervals are formed (stored in the model and shown with results).
VALIDATED_METHOD = "additive model-error variance from validation residuals (moment estimator)"


def _usable(errors: np.ndarray, standard_errors: np.ndarray) -> np.ndarray:
    """Validation samples with a finite error and a positive finite standard error."""
    return np.isfinite(errors) & np.isfinite(standard_errors) & (standard_errors > 0)


def additive_model_error(errors: np.ndarray, standard_errors: np.ndarray) -> float:
    """Moment estimate of the additive model-error variance τ² (module docstring).

    Parameters
    ----------
    errors : ndarray, shape (n,)
        Validation errors ``ĉ − c`` of one analyte (concentration units).
    standard_errors : ndarray, shape (n,)
        Their calibration-only standard errors (same units, positive).

    Returns
    -------
    float
        τ̂² ≥ 0 (concentration units²).
    """
    e = np.asarray(errors, dtype=float)
    s = np.asarray(standard_errors, dtype=float)
    ok = _usable(e, s)
    if ok.sum() < 2:
        raise DataError("the model-error variance needs at least 2 validation samples with "
                        "a finite estimate and standard error")
    w = 1.0 / s[ok] ** 2
    return float(max(0.0, (np.sum(w * e[ok] ** 2) - ok.sum()) / np.sum(w)))


def effective_dof(standardized: np.ndarray, runs: np.ndarray | None) -> float:
    """Degrees of freedom of a variance estimated from errors clustered in runs.

    Parameters
    ----------
    standardized : ndarray, shape (n,)
        Errors divided by their total standard deviation (unit variance when the model holds).
    runs : ndarray, shape (n,) or None
        Run (day) label of each error; None: every error is its own run.

    Returns
    -------
    float
        ``(n − 1)/deff`` (module docstring), between ``runs − 1`` and ``n − 1``.
    """
    z = np.asarray(standardized, dtype=float)
    n = z.size
    if runs is None:
        return float(n - 1)
    labels, index = np.unique(np.asarray(runs), return_inverse=True)
    g = labels.size
    if g == 1:
        return 1.0  # one run: its errors say almost nothing about another day's
    if g == n:
        return float(n - 1)
    sizes = np.bincount(index).astype(float)
    means = np.bincount(index, weights=z) / sizes
    msb = np.sum(sizes * (means - z.mean()) ** 2) / (g - 1)
    msw = np.sum((z - means[index]) ** 2) / (n - g)
    n0 = (n - np.sum(sizes**2) / n) / (g - 1)  # unbalanced runs (Searle et al. 1992, §3.6)
    var_between = max(0.0, (msb - msw) / n0)
    rho = min(1.0, var_between / (var_between + msw)) if var_between + msw > 0 else 0.0
    deff = 1.0 + (n / g - 1.0) * rho
    return float(min(n - 1, max(g - 1, (n - 1) / deff)))


def coverage_interval(covered: int, total: int, alpha: float = 0.05) -> tuple[float, float]:
    """Clopper–Pearson (exact binomial) ``1 − alpha`` interval of a coverage proportion."""
    if total < 1:
        return float("nan"), float("nan")
    ci = stats.binomtest(int(covered), int(total)).proportion_ci(1 - alpha, method="exact")
    return float(ci.low), float(ci.high)


def validated_calibration(cal: Calibration, errors: np.ndarray, standard_errors: np.ndarray,
                          fingerprints: list[dict[str, Any]],
                          runs: np.ndarray | None = None) -> Calibration:
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

    Returns
    -------
    Calibration
        A copy whose ``interval`` record holds the method, τ per analyte, n, the runs, the
        effective degrees of freedom (the smallest over analytes) and the files.
    """
    e = np.asarray(errors, dtype=float)
    s = np.asarray(standard_errors, dtype=float)
    tau2 = [additive_model_error(e[:, k], s[:, k]) for k in range(e.shape[1])]
    dofs = []
    for k in range(e.shape[1]):
        ok = _usable(e[:, k], s[:, k])
        z = e[ok, k] / np.sqrt(s[ok, k] ** 2 + tau2[k])
        dofs.append(effective_dof(z, None if runs is None else np.asarray(runs)[ok]))
    record = IntervalBasis(
        method=VALIDATED_METHOD, model_error_sd=tuple(float(np.sqrt(t)) for t in tau2),
        n_validation=int(e.shape[0]),
        n_runs=0 if runs is None else int(np.unique(np.asarray(runs)).size),
        dof=float(min(dofs)),
        validation_files=tuple(dict(f) for f in fingerprints),
        created=datetime.now(timezone.utc).isoformat(timespec="seconds"))
    return dataclasses.replace(cal, interval=record)

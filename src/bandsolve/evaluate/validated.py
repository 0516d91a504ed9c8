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
freedom and ``n − 1``.

References
----------
DerSimonian, R. & Laird, N. (1986). Meta-analysis in clinical trials. Control. Clin. Trials 7,
177-188.
Viechtbauer, W. (2005). Bias and efficiency of meta-analytic variance estimators in the
random-effects model. J. Educ. Behav. Stat. 30, 261-293.
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

__all__ = ["additive_model_error", "coverage_interval", "validated_calibration",
           "VALIDATED_METHOD"]

#: How the validated intervals are formed (stored in the model and shown with results).
VALIDATED_METHOD = "additive model-error variance from validation residuals (moment estimator)"


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
    ok = np.isfinite(e) & np.isfinite(s) & (s > 0)
    if ok.sum() < 2:
        raise DataError("the model-error variance needs at least 2 validation samples with "
                        "a finite estimate and standard error")
    w = 1.0 / s[ok] ** 2
    return float(max(0.0, (np.sum(w * e[ok] ** 2) - ok.sum()) / np.sum(w)))


def coverage_interval(covered: int, total: int, alpha: float = 0.05) -> tuple[float, float]:
    """Clopper–Pearson (exact binomial) ``1 − alpha`` interval of a coverage proportion."""
    if total < 1:
        return float("nan"), float("nan")
    ci = stats.binomtest(int(covered), int(total)).proportion_ci(1 - alpha, method="exact")
    return float(ci.low), float(ci.high)


def validated_calibration(cal: Calibration, errors: np.ndarray, standard_errors: np.ndarray,
                          fingerprints: list[dict[str, Any]]) -> Calibration:
    """A new calibration whose intervals include the model error validation revealed.

    Parameters
    ----------
    cal : Calibration
        The model as built (its own ``interval`` record, if any, is replaced).
    errors, standard_errors : ndarray, shape (n, m)
        Validation errors and calibration-only standard errors, analytes in model order.
    fingerprints : list of dict
        Name and SHA-256 of the validation files, recorded in the model.

    Returns
    -------
    Calibration
        A copy whose ``interval`` record holds the method, τ per analyte, n and the files.
    """
    e = np.asarray(errors, dtype=float)
    s = np.asarray(standard_errors, dtype=float)
    tau = tuple(float(np.sqrt(additive_model_error(e[:, k], s[:, k])))
                for k in range(e.shape[1]))
    record = IntervalBasis(
        method=VALIDATED_METHOD, model_error_sd=tau, n_validation=int(e.shape[0]),
        validation_files=tuple(dict(f) for f in fingerprints),
        created=datetime.now(timezone.utc).isoformat(timespec="seconds"))
    return dataclasses.replace(cal, interval=record)

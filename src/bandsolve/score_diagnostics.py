"""Outlier diagnostics of scores: Hotelling T² and leverage of samples, and their limits.

Scores come from the models (PLS scores ``t = R^T (x - xbar)``); these functions only turn them
into statistics and warning limits, on plain arrays. Also importable from
:mod:`bandsolve.diagnostics`, with the residual diagnostics.
"""

from __future__ import annotations

import numpy as np

from bandsolve._distributions import beta_quantile, f_quantile
from bandsolve.errors import DataError
from bandsolve.merit.statistics import as_float_array, check_alpha

__all__ = ["hotelling_t2", "leverage", "leverage_limit", "t2_limit"]


def _scores_pair(scores: object, calibration_scores: object) -> tuple[np.ndarray, np.ndarray]:
    t = as_float_array(scores, "scores", (1, 2))
    t_cal = as_float_array(calibration_scores, "calibration_scores", 2)
    t = t[None, :] if t.ndim == 1 else t
    if t.shape[1] != t_cal.shape[1]:
        raise DataError(
            f"scores have {t.shape[1]} components but calibration_scores have "
            f"{t_cal.shape[1]}; use the same model for both."
        )
    if t_cal.shape[0] <= t_cal.shape[1]:
        raise DataError(
            f"{t_cal.shape[0]} calibration samples for {t_cal.shape[1]} components; "
            "use fewer components or more calibration samples."
        )
    return t, t_cal


def _quadratic_form(t: np.ndarray, cross_products: np.ndarray) -> np.ndarray:
    # Solve rather than invert: t (T^T T)^-1 t^T for every row of t.
    return np.einsum("ij,ji->i", t, np.linalg.solve(cross_products, t.T))


def hotelling_t2(scores: object, calibration_scores: object) -> np.ndarray:
    """Hotelling T² of samples relative to the calibration score distribution.

    ``T²_u = t_u^T S_T^-1 t_u`` with ``S_T = T^T T / (n - 1)`` (calibration scores are centred).

    Parameters
    ----------
    scores : array_like, shape (n_samples, A) or (A,)
        Scores of the samples to test.
    calibration_scores : array_like, shape (n, A)
        Scores of the calibration samples.

    Returns
    -------
    ndarray, shape (n_samples,)

    References
    ----------
    Tracy, N. D., Young, J. C. & Mason, R. L. (1992). Multivariate control charts for individual
    observations. J. Qual. Technol. 24, 88-95.
    """
    t, t_cal = _scores_pair(scores, calibration_scores)
    s_t = t_cal.T @ t_cal / (t_cal.shape[0] - 1)
    return _quadratic_form(t, s_t)


def t2_limit(
    n_components: int, n_calibration: int, alpha: float = 0.05, kind: str = "new"
) -> float:
    """Upper ``1 - alpha`` limit of Hotelling T² for normally distributed scores.

    ``kind="new"`` (a sample not in the calibration):
    ``A (n² - 1) / (n (n - A)) F_{1-alpha}(A, n - A)``;
    ``kind="calibration"``: ``(n - 1)² / n Beta_{1-alpha}(A/2, (n - A - 1)/2)``.

    References
    ----------
    Tracy, N. D., Young, J. C. & Mason, R. L. (1992). J. Qual. Technol. 24, 88-95.
    """
    a, n, alpha = int(n_components), int(n_calibration), check_alpha(alpha)
    if not 1 <= a < n - 1:
        raise DataError(f"T² limit needs 1 <= components ({a}) < calibration samples ({n}) - 1.")
    if kind == "new":
        return float(a * (n * n - 1) / (n * (n - a)) * f_quantile(1 - alpha, a, n - a))
    if kind == "calibration":
        return float((n - 1) ** 2 / n * beta_quantile(1 - alpha, a / 2, (n - a - 1) / 2))
    raise DataError(f"kind = {kind!r} is not known; use 'new' or 'calibration'.")


def leverage(scores: object, calibration_scores: object) -> np.ndarray:
    """Leverage ``h_u = 1/n + t_u^T (T^T T)^-1 t_u`` of samples on a centred model.

    Parameters
    ----------
    scores : array_like, shape (n_samples, A) or (A,)
    calibration_scores : array_like, shape (n, A)

    Returns
    -------
    ndarray, shape (n_samples,)
        Unitless; equals ``1/n + T²/(n - 1)``.

    References
    ----------
    Hoaglin, D. C. & Welsch, R. E. (1978). The hat matrix in regression and ANOVA.
    Am. Stat. 32, 17-22.
    """
    t, t_cal = _scores_pair(scores, calibration_scores)
    return 1.0 / t_cal.shape[0] + _quadratic_form(t, t_cal.T @ t_cal)


def leverage_limit(n_components: int, n_calibration: int, factor: float = 3.0) -> float:
    """Warning level ``factor (A + 1) / n`` for leverage (2 or 3 are usual).

    References
    ----------
    Hoaglin, D. C. & Welsch, R. E. (1978). Am. Stat. 32, 17-22.
    """
    return float(factor * (int(n_components) + 1) / int(n_calibration))

"""Outlier diagnostics on plain arrays: Hotelling T², leverage, Q residual and CLS F-ratio.

Scores, residuals and calibration values come from the models (PLS scores ``t = R^T (x - xbar)``
or CLS spectral residuals); this module only turns them into statistics and limits. A limit
that models must store is returned as a :class:`ResidualLimit`, which records how it was made
and serialises to JSON. The diagnostics of scores (Hotelling T², leverage and their limits) are
defined in :mod:`bandsolve.score_diagnostics` and importable from here too.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from bandsolve._distributions import chi2_quantile, f_quantile, normal_quantile
from bandsolve.errors import DataError, ModelFileError
from bandsolve.merit.statistics import as_float_array, check_alpha
from bandsolve.score_diagnostics import hotelling_t2, leverage, leverage_limit, t2_limit

__all__ = [
    "ResidualLimit",
    "cls_calibration_variance",
    "cls_residual_ratio",
    "f_limit_from_values",
    "f_limit_nominal",
    "hotelling_t2",
    "leverage",
    "leverage_limit",
    "q_limit_box",
    "q_limit_from_values",
    "q_limit_jackson_mudholkar",
    "q_residuals",
    "residual_eigenvalues",
    "t2_limit",
]


@dataclass(frozen=True)
class ResidualLimit:
    """How a residual limit was obtained, in a form a model file can store.

    Attributes
    ----------
    statistic : str
        ``"Q"`` (squared residual norm, AU²) or ``"F"`` (CLS residual ratio, unitless).
    method : str
        ``"jackson-mudholkar"``, ``"box"``, ``"moment-chi2"``, ``"quantile"`` or ``"nominal-F"``.
    alpha : float
        Probability that an in-model sample exceeds the limit.
    value : float
        The limit itself.
    parameters : dict of str to float
        Numbers the limit was computed from (e.g. ``theta1``, ``g``, ``h``, ``n_values``).
    """

    statistic: str
    method: str
    alpha: float
    value: float
    parameters: dict[str, float] = field(default_factory=dict)

    def ratio(self, values: object) -> np.ndarray:
        """Return ``values / limit``; above 1 means the limit is exceeded."""
        return as_float_array(values, "values", (0, 1)) / self.value

    def to_dict(self) -> dict[str, object]:
        """Return a JSON-serialisable dictionary (inverse of :meth:`from_dict`)."""
        return {
            "statistic": self.statistic,
            "method": self.method,
            "alpha": self.alpha,
            "value": self.value,
            "parameters": dict(self.parameters),
        }

    @classmethod
    def from_dict(cls, data: dict[str, object]) -> ResidualLimit:
        """Rebuild a limit from :meth:`to_dict` output; raise ModelFileError if damaged."""
        try:
            params = {str(k): float(v) for k, v in dict(data["parameters"]).items()}
            return cls(
                statistic=str(data["statistic"]),
                method=str(data["method"]),
                alpha=float(data["alpha"]),
                value=float(data["value"]),
                parameters=params,
            )
        except (KeyError, TypeError, ValueError) as exc:
            raise ModelFileError(
                f"residual limit entry is damaged ({exc!r}); refit and save the model again."
            ) from exc


def q_residuals(residuals: object) -> np.ndarray:
    """Q (squared prediction error) ``‖e_u‖²`` per row of a residual matrix (AU²).

    References
    ----------
    Jackson, J. E. & Mudholkar, G. S. (1979). Technometrics 21, 341-349.
    """
    e = as_float_array(residuals, "residuals", (1, 2))
    return np.einsum("...j,...j->...", e, e)


def residual_eigenvalues(residuals: object) -> np.ndarray:
    """Non-negative eigenvalues of ``E^T E / (n - 1)``, largest first.

    Uses the n×n Gram matrix ``E E^T`` when p > n (same non-zero eigenvalues, less work).

    Parameters
    ----------
    residuals : array_like, shape (n, p)
        Calibration residuals after the retained components (AU).

    Returns
    -------
    ndarray, shape (min(n, p),)
        Eigenvalues (AU²).

    References
    ----------
    Jackson, J. E. & Mudholkar, G. S. (1979). Technometrics 21, 341-349.
    """
    e = as_float_array(residuals, "residuals", 2)
    n, p = e.shape
    if n < 2:
        raise DataError("residual eigenvalues need at least 2 calibration samples.")
    gram = e @ e.T if p > n else e.T @ e
    values = np.linalg.eigvalsh(gram / (n - 1))[::-1]
    return np.clip(values, 0.0, None)


def _thetas(residual_eigenvalues: object) -> tuple[float, float, float]:
    lam = as_float_array(residual_eigenvalues, "residual_eigenvalues", 1)
    if lam.size == 0 or np.any(lam < 0) or lam.sum() == 0.0:
        raise DataError(
            "residual_eigenvalues must be non-negative and not all zero; "
            "the model leaves no residual variance (use fewer components)."
        )
    return float(lam.sum()), float(np.sum(lam**2)), float(np.sum(lam**3))


def q_limit_jackson_mudholkar(residual_eigenvalues: object, alpha: float = 0.05) -> ResidualLimit:
    """Q limit of Jackson & Mudholkar from the residual eigenvalues.

    ``theta_i = sum lambda_j^i``, ``h0 = 1 - 2 theta1 theta3 / (3 theta2²)``,
    ``Q_alpha = theta1 [z sqrt(2 theta2 h0²)/theta1 + 1 + theta2 h0 (h0 - 1)/theta1²]^(1/h0)``.

    Parameters
    ----------
    residual_eigenvalues : array_like, shape (k,)
        Eigenvalues of ``E^T E / (n - 1)`` (see :func:`residual_eigenvalues`), AU².
    alpha : float

    Returns
    -------
    ResidualLimit
        ``statistic="Q"``, value in AU².

    References
    ----------
    Jackson, J. E. & Mudholkar, G. S. (1979). Control procedures for residuals associated with
    principal component analysis. Technometrics 21, 341-349.
    """
    alpha = check_alpha(alpha)
    t1, t2, t3 = _thetas(residual_eigenvalues)
    h0 = 1.0 - 2.0 * t1 * t3 / (3.0 * t2**2)
    z = normal_quantile(1.0 - alpha)
    base = z * np.sqrt(2.0 * t2 * h0**2) / t1 + 1.0 + t2 * h0 * (h0 - 1.0) / t1**2
    params = {"theta1": t1, "theta2": t2, "theta3": t3, "h0": h0}
    return ResidualLimit("Q", "jackson-mudholkar", alpha, float(t1 * base ** (1.0 / h0)), params)


def _scaled_chi2(g: float, h: float, alpha: float) -> float:
    return float(g * chi2_quantile(1.0 - alpha, h))


def q_limit_box(residual_eigenvalues: object, alpha: float = 0.05) -> ResidualLimit:
    """Q limit from Box's scaled χ² approximation ``Q ≈ g χ²_h``.

    ``g = theta2 / theta1``, ``h = theta1² / theta2`` (exact when the eigenvalues are equal).

    References
    ----------
    Box, G. E. P. (1954). Some theorems on quadratic forms applied in the study of analysis of
    variance problems, I. Ann. Math. Stat. 25, 290-302.
    """
    alpha = check_alpha(alpha)
    t1, t2, _ = _thetas(residual_eigenvalues)
    g, h = t2 / t1, t1**2 / t2
    return ResidualLimit("Q", "box", alpha, _scaled_chi2(g, h, alpha), {"g": g, "h": h})


def _moment_fit(values: object, name: str, alpha: float,
                max_dof: float | None = None) -> tuple[float, float, float, float]:
    v = as_float_array(values, name, 1)
    if v.size < 3 or np.any(v < 0):
        raise DataError(f"{name}: need at least 3 non-negative calibration values.")
    mean, var = float(v.mean()), float(v.var(ddof=1))
    if var == 0.0:
        raise DataError(f"{name}: all values are equal; a χ² fit needs spread.")
    h = 2.0 * mean**2 / var
    if max_dof is not None and not max_dof > 0:
        raise DataError(f"{name}: max_dof = {max_dof} leaves no residual degrees of freedom; "
                        "the bound must be positive.")
    if max_dof is not None:
        h = min(h, float(max_dof))
    g = mean / h
    return g, h, _scaled_chi2(g, h, alpha), float(v.size)


def q_limit_from_values(q_values: object, alpha: float = 0.05,
                        max_dof: float | None = None) -> ResidualLimit:
    """Q limit by moment-matching ``g χ²_h`` to calibration Q values.

    ``h = 2 m² / v``, ``g = m / h`` with m, v the mean and variance (ddof=1) of the values
    (Nomikos & MacGregor 1995). Pass cross-validated Q values: fitted calibration residuals
    are shrunk.

    Parameters
    ----------
    q_values : array_like, shape (n,)
        Cross-validated Q of the calibration samples (AU², or any common scale).
    alpha : float
    max_dof : float, optional
        Upper bound on h. The Q of a p-point spectrum after A components has at most
        ``p − A`` degrees of freedom; from a few dozen values the variance is often
        under-estimated by chance, and an h above that bound would set too low a limit
        (common practice: an estimate is kept inside what the model allows).

    References
    ----------
    Nomikos, P. & MacGregor, J. F. (1995). Multivariate SPC charts for monitoring batch
    processes. Technometrics 37, 41-59.
    """
    alpha = check_alpha(alpha)
    g, h, value, n = _moment_fit(q_values, "q_values", alpha, max_dof)
    return ResidualLimit("Q", "moment-chi2", alpha, value, {"g": g, "h": h, "n_values": n})


def cls_calibration_variance(residuals: object, n_terms: int) -> float:
    """CLS calibration residual variance ``s²_cal = ‖A - C K‖²_F / (p (n - m'))`` (AU²).

    Parameters
    ----------
    residuals : array_like, shape (n, p)
        Calibration spectral residuals ``A - C K̂``.
    n_terms : int
        m' = number of analytes, plus one with an intercept.

    References
    ----------
    Haaland, D. M. & Thomas, E. V. (1988). Partial least-squares methods for spectral analyses.
    1. Anal. Chem. 60, 1193-1202.
    """
    e = as_float_array(residuals, "residuals", 2)
    n, p = e.shape
    if n <= n_terms:
        raise DataError(f"{n} calibration samples for {n_terms} CLS terms; add standards.")
    return float(np.sum(e**2) / (p * (n - n_terms)))


def cls_residual_ratio(residuals: object, n_terms: int, calibration_variance: float) -> np.ndarray:
    """Per-sample CLS spectral-residual ratio ``F_u = [r^T r / (p - m')] / s²_cal``.

    Parameters
    ----------
    residuals : array_like, shape (n_samples, p) or (p,)
        Spectral residuals ``r = a - K_aug^T ĉ_aug`` (AU).
    n_terms : int
        m' = number of fitted terms per spectrum (analytes plus baseline terms).
    calibration_variance : float
        ``s²_cal`` from :func:`cls_calibration_variance` (AU²).

    Returns
    -------
    ndarray, shape (n_samples,)
        Unitless ratio, about 1 for samples like the calibration set.

    References
    ----------
    Haaland, D. M. & Thomas, E. V. (1988). Anal. Chem. 60, 1193-1202.
    """
    q = np.atleast_1d(q_residuals(residuals))
    p = np.shape(residuals)[-1]
    if p <= n_terms or not calibration_variance > 0:
        raise DataError("F-ratio needs p > m' wavelengths and a positive calibration variance.")
    return q / (p - n_terms) / calibration_variance


def f_limit_nominal(
    n_wavelengths: int, n_terms: int, n_calibration: int, alpha: float = 0.01
) -> ResidualLimit:
    """Nominal ``F_{1-alpha}(p - m', p (n - m'))`` limit of the CLS residual ratio.

    Too permissive a reference when channels are correlated (far fewer effective degrees of
    freedom); prefer :func:`f_limit_from_values`.

    References
    ----------
    Haaland, D. M. & Thomas, E. V. (1988). Anal. Chem. 60, 1193-1202.
    """
    alpha = check_alpha(alpha)
    d1, d2 = n_wavelengths - n_terms, n_wavelengths * (n_calibration - n_terms)
    if d1 < 1 or d2 < 1:
        raise DataError("nominal F limit needs more wavelengths and samples than CLS terms.")
    value = float(f_quantile(1.0 - alpha, d1, d2))
    return ResidualLimit("F", "nominal-F", alpha, value, {"dfn": float(d1), "dfd": float(d2)})


def f_limit_from_values(
    f_values: object, alpha: float = 0.01, method: str = "quantile"
) -> ResidualLimit:
    """CLS residual-ratio limit from cross-validated calibration F values.

    Parameters
    ----------
    f_values : array_like, shape (n,)
        Cross-validated F ratios of the calibration samples.
    alpha : float
        Exceedance probability (0.01 gives the 99th percentile).
    method : {"quantile", "box"}
        Empirical ``1 - alpha`` quantile (linear interpolation), or Box's scaled χ² fitted by
        moments (smooth; better with few samples).

    References
    ----------
    Haaland, D. M. & Thomas, E. V. (1988). Anal. Chem. 60, 1193-1202.
    Box, G. E. P. (1954). Ann. Math. Stat. 25, 290-302.
    """
    alpha = check_alpha(alpha)
    if method == "quantile":
        v = as_float_array(f_values, "f_values", 1)
        if v.size < 2:
            raise DataError("f_values: need at least 2 cross-validated values for a quantile.")
        value = float(np.quantile(v, 1.0 - alpha))
        return ResidualLimit("F", "quantile", alpha, value, {"n_values": float(v.size)})
    if method == "box":
        g, h, value, n = _moment_fit(f_values, "f_values", alpha)
        return ResidualLimit("F", "moment-chi2", alpha, value, {"g": g, "h": h, "n_values": n})
    raise DataError(f"method = {method!r} is not known; use 'quantile' or 'box'.")

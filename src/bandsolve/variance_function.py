"""Variance functions fitted to squared errors: ``Var(e_i) = offset_i + Σ_j θ_j·x_ij``, θ ≥ 0.

Used wherever bandsolve learns an error model from observed errors of known size: the
leave-one-out errors of a CLS calibration (:func:`bandsolve.cls_loo.error_model`, a scale on
the white-noise SE and a part proportional to the concentration) and the errors of an
independent validation (:func:`bandsolve.evaluate.validated.model_error`, an additive and a
proportional model error on top of the calibration SE).

The squared errors ``d_i = e_i²`` have mean ``v_i`` and, for Gaussian errors, variance
``2v_i²``. Regressing ``d − offset`` on the columns by non-negative least squares with weights
``1/v²``, recomputing ``v`` from the fit and repeating, is the variance-function estimator of
Carroll & Ruppert (1988, ch. 3); run to convergence it solves the Gaussian likelihood
equations ``Σ(d_i − v_i)x_ij/v_i² = 0`` (Fisher scoring), so the result is the maximum-
likelihood θ on the non-negative orthant. The plain iteration can overshoot and swing
between two points, so each step is halved until the likelihood does not fall, the usual
safeguard of Fisher scoring for variance components (e.g. Jennrich & Sampson 1976). A term
is kept only when the likelihood-ratio test
of its absence rejects: θ_j = 0 lies on the boundary, so the reference distribution is the
mixture ½χ²₀ + ½χ²₁ (Self & Liang 1987).

Errors shared by the samples of one run (day) carry less information about a variance than
independent ones: :func:`effective_dof` gives the degrees of freedom of a variance estimated
from errors clustered in runs, ``(n − 1)/deff`` with Kish's design effect
``deff = 1 + (n̄ − 1)ρ``, ρ the intra-class correlation of the standardized errors (one-way
ANOVA moment estimator, truncated to [0, 1]), never fewer than ``runs − 1``.

References
----------
Carroll, R. J. & Ruppert, D. (1988). Transformation and Weighting in Regression. Chapman &
Hall, ch. 3.
Self, S. G. & Liang, K.-Y. (1987). Asymptotic properties of maximum likelihood estimators and
likelihood ratio tests under nonstandard conditions. J. Am. Stat. Assoc. 82, 605-610.
Lawson, C. L. & Hanson, R. J. (1974). Solving Least Squares Problems. Prentice-Hall (NNLS).
Jennrich, R. I. & Sampson, P. F. (1976). Newton-Raphson and related algorithms for maximum
likelihood variance component estimation. Technometrics 18, 11-17.
Kish, L. (1965). Survey Sampling. Wiley, New York (design effect of cluster samples, §5.4).
Searle, S. R., Casella, G. & McCulloch, C. E. (1992). Variance Components. Wiley (one-way
ANOVA estimators of the intra-class correlation).
"""

from __future__ import annotations

import numpy as np

from bandsolve._distributions import chi2_sf

__all__ = ["boundary_lr_p", "effective_dof", "fit_variance", "log_likelihood", "nnls2"]


def nnls2(A: np.ndarray, b: np.ndarray) -> np.ndarray:
    """``min ‖Aθ − b‖``, θ ≥ 0, for two columns: the best of the four active sets (exact).

    Each column is first divided by its largest magnitude, so that AᵀA neither underflows
    nor overflows whatever the units (squared concentrations in mol/L are ~1e-8).
    """
    scale = np.max(np.abs(A), axis=0)
    scale = np.where(scale > 0, scale, 1.0)
    A = A / scale
    gram, rhs = A.T @ A, A.T @ b
    candidates = [np.zeros(2)]
    for k in (0, 1):
        if gram[k, k] > 0:
            one = np.zeros(2)
            one[k] = max(0.0, rhs[k] / gram[k, k])
            candidates.append(one)
    if np.linalg.det(gram) > 1e-12 * gram[0, 0] * gram[1, 1]:
        both = np.linalg.solve(gram, rhs)
        if np.all(both >= 0):
            candidates.append(both)
    return min(candidates, key=lambda t: float(t @ gram @ t - 2.0 * t @ rhs)) / scale


def fit_variance(d: np.ndarray, offset: np.ndarray, columns: np.ndarray,
                 iterations: int = 3, rtol: float = 0.0) -> np.ndarray:
    """θ ≥ 0 of ``Var = offset + columns @ θ`` from squared errors (module docstring).

    Parameters
    ----------
    d : ndarray, shape (n,)
        Squared errors.
    offset : ndarray, shape (n,)
        The variance known without the fit (> 0).
    columns : ndarray, shape (n, 2)
        The two terms whose coefficients are fitted (a column of zeros fits one term).
    iterations : int
        Reweighting passes at most.
    rtol : float
        Stop early once no coefficient moves by more than ``rtol`` of its size.

    Returns
    -------
    ndarray, shape (2,)
    """
    var = offset.copy()
    theta = np.zeros(columns.shape[1])
    ll = log_likelihood(d, var)
    for _ in range(iterations):
        w = 1.0 / var
        new = nnls2(columns * w[:, None], (d - offset) * w)
        for _ in range(60):  # halve the step until the likelihood does not fall
            new_ll = log_likelihood(d, offset + columns @ new)
            if new_ll >= ll:
                break
            new = 0.5 * (new + theta)
        else:
            break  # no ascent left in this direction: θ is the maximum
        done = rtol > 0 and np.all(np.abs(new - theta) <= rtol * np.maximum(np.abs(new), 1e-300))
        theta, ll = new, new_ll
        var = offset + columns @ theta
        if done:
            break
    return theta


def log_likelihood(d: np.ndarray, var: np.ndarray) -> float:
    """Gaussian log-likelihood of zero-mean errors with squares ``d`` and variances ``var``
    (without the constant)."""
    return float(-0.5 * np.sum(np.log(var) + d / var))


def boundary_lr_p(d: np.ndarray, var_with: np.ndarray, var_without: np.ndarray) -> float:
    """p-value of the likelihood-ratio test of one variance term being zero (boundary
    reference ½χ²₀ + ½χ²₁, Self & Liang 1987); 1 when the term does not improve the fit."""
    lr = 2.0 * (log_likelihood(d, var_with) - log_likelihood(d, var_without))
    return 0.5 * chi2_sf(lr, 1) if lr > 0 else 1.0


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

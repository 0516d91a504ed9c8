"""Choosing the number of PLS components from a cross-validation result.

Public names are re-exported by :mod:`bandsolve.crossval`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from bandsolve.cv_result import CVResult
from bandsolve.errors import ModelError

_EXACT_MAX_N = 20  # enumerate all 2ⁿ sign vectors up to this many samples
_MC_CHUNK = 256  # sign vectors drawn per block in the Monte Carlo version
_RULES = ("min", "one-se", "randomization")


@dataclass
class RandomizationResult:
    """Result of a paired sign-flip randomization test.

    Attributes
    ----------
    statistic : float
        ``T = mean(d)``, with ``d_i = e_a,i² − e_b,i²``.
    pvalue : float
        Probability under H0 (``d`` symmetric about 0) of a statistic at least as extreme.
    n_permutations : int
        Number of sign vectors used (``2ⁿ`` when enumerated exactly).
    exact : bool
        True when all ``2ⁿ`` sign vectors were enumerated (n ≤ 20).
    """

    statistic: float
    pvalue: float
    n_permutations: int
    exact: bool


@dataclass
class ComponentSelection:
    """The chosen number of components and the evidence behind it.

    Attributes
    ----------
    n_components : int
        Chosen component count.
    rule : str
        ``"min"``, ``"one-se"`` or ``"randomization"``.
    alpha : float
        Significance level of the randomization rule (stored for every rule).
    evidence : dict
        JSON-serialisable: ``settings``, ``rmsecv`` (per setting, per analyte),
        ``rmsecv_total``, ``pooled_mse`` (the criterion actually compared), ``minimum_at``; plus
        ``standard_error`` and ``threshold`` for one-SE, or ``pvalues`` (None for counts ≥ the
        minimum) and ``n_permutations`` for randomization.
    """

    n_components: int
    rule: str
    alpha: float
    evidence: dict


def _sign_sums(d: np.ndarray) -> np.ndarray:
    """``Σ σ_i d_i`` for all 2ᵏ sign vectors σ (k = len(d))."""
    k = d.size
    bits = (np.arange(2**k)[:, None] >> np.arange(k)) & 1
    return (2 * bits - 1) @ d


def _paired_sign_test(d: np.ndarray, n_permutations: int, alternative: str,
                      random_state) -> RandomizationResult:
    """Sign-flip test of H0 "d is symmetric about 0" for paired differences d (n,)."""
    if alternative not in ("greater", "two-sided"):
        raise ModelError(f"alternative must be 'greater' or 'two-sided', got {alternative!r}.")
    n = d.size
    observed = d.sum()
    # Sums equal to the observed one up to rounding must count as "at least as extreme".
    tol = 1e-10 * np.abs(d).sum()

    def n_extreme(sums: np.ndarray) -> int:
        if alternative == "greater":
            return int(np.count_nonzero(sums >= observed - tol))
        return int(np.count_nonzero(np.abs(sums) >= abs(observed) - tol))

    if n <= _EXACT_MAX_N:
        half = n // 2
        sums = _sign_sums(d[:half])[:, None] + _sign_sums(d[half:])[None, :]
        return RandomizationResult(observed / n, n_extreme(sums) / 2**n, 2**n, True)
    if n_permutations < 1:
        raise ModelError(f"n_permutations must be at least 1, got {n_permutations}.")
    rng = np.random.default_rng(random_state)
    count = 0
    for start in range(0, n_permutations, _MC_CHUNK):
        size = min(_MC_CHUNK, n_permutations - start)
        signs = rng.integers(0, 2, size=(size, n)) * 2 - 1
        count += n_extreme(signs @ d)
    return RandomizationResult(observed / n, (1 + count) / (n_permutations + 1),
                               n_permutations, False)


def randomization_test(errors_a, errors_b, n_permutations: int = 999,
                       alternative: str = "greater", random_state=0) -> RandomizationResult:
    """Paired randomization test on squared prediction errors (van der Voet 1994).

    Tests whether predictions ``a`` have larger squared errors than predictions ``b`` of the
    same samples, by flipping the signs of ``d_i = e_a,i² − e_b,i²`` at random.

    Parameters
    ----------
    errors_a, errors_b : array-like of shape (n,)
        Prediction errors (ŷ − y) of two methods on the same samples, same units.
    n_permutations : int, default=999
        Random sign vectors M; ignored when n ≤ 20, where all 2ⁿ are enumerated.
    alternative : {"greater", "two-sided"}, default="greater"
        ``"greater"``: H1 "a is worse than b", ``p = (1 + #{T* ≥ T})/(M + 1)``.
        ``"two-sided"``: H1 "they differ", ``p = (1 + #{|T*| ≥ |T|})/(M + 1)``.
    random_state : int or numpy Generator, default=0
        Random state of the random sign vectors.

    Returns
    -------
    RandomizationResult

    References
    ----------
    .. [1] van der Voet, H. (1994). Comparing the predictive accuracy of models using a simple
       randomization test. *Chemometrics and Intelligent Laboratory Systems*, 25(2), 313-323.
    """
    e_a = np.asarray(errors_a, dtype=np.float64)
    e_b = np.asarray(errors_b, dtype=np.float64)
    if e_a.ndim != 1 or e_a.shape != e_b.shape or e_a.size == 0:
        raise ModelError(f"randomization test needs two 1-D error arrays of the same length "
                         f"(one error per sample), got shapes {e_a.shape} and {e_b.shape}.")
    return _paired_sign_test(e_a**2 - e_b**2, n_permutations, alternative, random_state)


def select_components(result: CVResult, rule: str = "randomization", alpha: float = 0.05,
                      n_permutations: int = 999, random_state=0) -> ComponentSelection:
    """Choose the number of PLS components from a cross-validation result.

    With several analytes, each sample's squared errors are divided by the variance of that
    analyte's reference values and averaged over analytes before any rule is applied, so that
    analytes in different units weigh equally.  With one analyte this scaling changes nothing.

    Parameters
    ----------
    result : CVResult
        From :func:`~bandsolve.crossval.cross_validate_pls`.
    rule : {"randomization", "one-se", "min"}, default="randomization"
        ``"min"``: the count A* with the smallest (pooled) MSE.
        ``"one-se"``: the smallest count with ``MSE(A) ≤ MSE(A*) + SE``, where
        ``SE = sd(ℓ_i(A*))/√n`` over the per-sample losses ℓ_i.
        ``"randomization"``: the smallest A < A* whose squared errors are not significantly
        larger than at A* (one-sided sign-flip test, p > alpha); else A*.
    alpha : float, default=0.05
        Significance level of the randomization rule.
    n_permutations : int, default=999
        Random sign vectors per test (exact enumeration when n ≤ 20).
    random_state : int, default=0
        Random state of the sign vectors.

    Returns
    -------
    ComponentSelection

    References
    ----------
    .. [1] van der Voet, H. (1994). Comparing the predictive accuracy of models using a simple
       randomization test. *Chemometrics and Intelligent Laboratory Systems*, 25, 313-323.
    .. [2] Breiman, L., Friedman, J., Olshen, R., & Stone, C. (1984). *Classification and
       Regression Trees*. Wadsworth.
    .. [3] Hastie, T., Tibshirani, R., & Friedman, J. (2009). *The Elements of Statistical
       Learning*, 2nd ed., §7.10. Springer.
    """
    if rule not in _RULES:
        raise ModelError(f"component selection rule must be one of {_RULES}, got {rule!r}.")
    if not 0.0 < alpha < 1.0:
        raise ModelError(f"alpha must be between 0 and 1 (e.g. 0.05), got {alpha!r}.")
    n, m = result.reference.shape
    var = result.reference.var(axis=0, ddof=1) if n > 1 else np.ones(m)
    var[var == 0.0] = 1.0
    loss = (result.squared_errors / var).mean(axis=2)  # (n_settings, n)
    mse = loss.mean(axis=1)
    best = int(np.argmin(mse))
    settings = [int(s) if isinstance(s, (int, np.integer)) else str(s) for s in result.settings]
    evidence = {
        "settings": settings,
        "rmsecv": result.rmsecv.tolist(),
        "rmsecv_total": result.rmsecv_total.tolist(),
        "pooled_mse": mse.tolist(),
        "minimum_at": settings[best],
    }
    chosen = best
    if rule == "one-se":
        se = float(loss[best].std(ddof=1) / np.sqrt(n)) if n > 1 else 0.0
        threshold = float(mse[best] + se)
        chosen = int(np.flatnonzero(mse <= threshold)[0])
        evidence.update(standard_error=se, threshold=threshold)
    elif rule == "randomization":
        pvalues: list[float | None] = [None] * len(settings)
        used = 0
        for a in range(best):
            res = _paired_sign_test(loss[a] - loss[best], n_permutations, "greater",
                                    random_state)
            pvalues[a], used = float(res.pvalue), res.n_permutations
        passing = [a for a in range(best) if pvalues[a] > alpha]
        chosen = passing[0] if passing else best
        evidence.update(pvalues=pvalues, n_permutations=used)
    return ComponentSelection(settings[chosen], rule, float(alpha), evidence)

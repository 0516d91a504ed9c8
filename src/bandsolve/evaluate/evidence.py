"""Statistics behind :mod:`bandsolve.evaluate.compare`: paired tests with a Holm correction, and the
evidence that an absorber is missing from a CLS model.

Public names are re-exported by :mod:`bandsolve.evaluate.compare`.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from bandsolve.crossval import randomization_test
from bandsolve.diagnostics import q_limit_from_values
from bandsolve.errors import DataError

__all__ = ["AbsorberEvidence", "Curvature", "ResidualStructure", "absorber_evidence",
           "curvature_evidence", "holm", "paired_pvalues", "residual_structure"]

#: Significance level of every absorber-evidence check.
EVIDENCE_ALPHA = 0.01


def holm(pvalues: object) -> np.ndarray:
    """Holm step-down adjusted p-values (family-wise error control), in the input order.

    ``p̃_(i) = max_{j ≤ i} min(1, (k − j + 1) p_(j))`` for the sorted p-values ``p_(1..k)``.

    References
    ----------
    Holm, S. (1979). A simple sequentially rejective multiple test procedure. Scand. J. Stat.
    6, 65-70.
    """
    p = np.asarray(pvalues, dtype=float)
    if p.ndim != 1 or np.any((p < 0) | (p > 1)) or np.any(~np.isfinite(p)):
        raise DataError("Holm correction needs a 1-D array of p-values between 0 and 1.")
    order = np.argsort(p)
    k = p.size
    stepped = np.maximum.accumulate(np.minimum(1.0, (k - np.arange(k)) * p[order]))
    out = np.empty(k)
    out[order] = stepped
    return out


def paired_pvalues(errors_a: object, errors_b: object, n_permutations: int = 999,
                   random_state: int = 0) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Two-sided paired randomization tests on squared errors, one per analyte, with Holm.

    Parameters
    ----------
    errors_a, errors_b : array_like, shape (n, m)
        Prediction errors of two methods on the same samples (or the same CV folds).
    n_permutations : int
        Random sign vectors (all 2ⁿ are enumerated when n ≤ 20).
    random_state : int
        Random state of the sign vectors.

    Returns
    -------
    statistic : ndarray, shape (m,)
        ``mean(e_a² − e_b²)``: positive when method a has larger errors.
    pvalue, pvalue_holm : ndarray, shape (m,)
        Raw and Holm-adjusted p-values.

    References
    ----------
    van der Voet, H. (1994). Comparing the predictive accuracy of models using a simple
    randomization test. Chemometr. Intell. Lab. Syst. 25, 313-323.
    """
    e_a = np.asarray(errors_a, dtype=float)
    e_b = np.asarray(errors_b, dtype=float)
    e_a, e_b = (e.reshape(len(e), -1) for e in (e_a, e_b))
    results = [randomization_test(e_a[:, k], e_b[:, k], n_permutations=n_permutations,
                                  alternative="two-sided", random_state=random_state)
               for k in range(e_a.shape[1])]
    p = np.array([r.pvalue for r in results])
    return np.array([r.statistic for r in results]), p, holm(p)


@dataclass(frozen=True)
class ResidualStructure:
    """Share of residual variance in the first principal component, against a reference.

    Attributes
    ----------
    share : float
        ``σ₁²/‖R‖²_F`` of the residual matrix R (n × p).
    reference : float
        Mean share after shifting every residual spectrum circularly by its own random offset.
    pvalue : float
        ``(1 + #{reference draws ≥ share})/(draws + 1)``.
    n_draws : int
    """

    share: float
    reference: float
    pvalue: float
    n_draws: int


def _top_eigenvalue(r: np.ndarray) -> float:
    """σ₁² of r from the smaller cross-product matrix (cheaper than an SVD)."""
    gram = r @ r.T if r.shape[0] <= r.shape[1] else r.T @ r
    return float(np.linalg.eigvalsh(gram)[-1])


def residual_structure(residuals: object, design: object | None = None, n_draws: int = 199,
                       random_state: int = 0) -> ResidualStructure:
    """Is there one spectral shape common to the residual spectra?

    An absorber missing from the model leaves its band in every residual spectrum, scaled by
    its concentration, so the residual matrix has one dominant principal component. The
    reference keeps each residual spectrum's own values and smoothness (correlated noise along
    the axis is common in real spectra, which a white-noise bound such as Marchenko–Pastur
    would mistake for structure) but breaks any shape shared across samples: every row is
    shifted circularly by an independent random offset. Under "no common shape" the observed
    share is exchangeable with the shifted ones, so the p-value is a Monte Carlo permutation
    p-value.

    Parameters
    ----------
    residuals : array_like, shape (n, p)
        Residual spectra (AU), e.g. fitted CLS calibration residuals ``A − C K̂``.
    design : array_like, shape (n, m′), optional
        The regression design that produced them. Fitted residuals ``(I − H)E`` are correlated
        across samples; rotating them onto an orthonormal basis U of the design's orthogonal
        complement (``Uᵀ R = Uᵀ E``) gives n − m′ independent rows with the same singular
        values, which the shifts then treat as exchangeable. Without it the rows are taken as
        independent.
    n_draws : int
        Shifted reference matrices.
    random_state : int

    Returns
    -------
    ResidualStructure

    References
    ----------
    Good, P. (2005). Permutation, Parametric and Bootstrap Tests of Hypotheses, 3rd ed.
    Springer (Monte Carlo permutation p-values).
    Haaland, D. M. & Melgaard, D. K. (2000). Appl. Spectrosc. 54, 1303-1312 (principal
    components of CLS residuals as unmodelled shapes).
    """
    r = np.asarray(residuals, dtype=float)
    if r.ndim != 2 or min(r.shape) < 2:
        raise DataError(f"residuals must be an (n, p) matrix with n, p ≥ 2; got {r.shape}.")
    if design is not None:
        d = np.asarray(design, dtype=float).reshape(r.shape[0], -1)
        if d.shape[1] >= r.shape[0] - 1:
            raise DataError(f"a design with {d.shape[1]} columns leaves too few residual "
                            f"degrees of freedom among {r.shape[0]} samples.")
        # R = (I − H)E = U Uᵀ E: Uᵀ R has independent rows and the same singular values.
        basis = np.linalg.qr(d, mode="complete")[0][:, d.shape[1]:]
        r = basis.T @ r
    total = float(np.sum(r**2))
    if total == 0.0:
        return ResidualStructure(0.0, 0.0, 1.0, 0)
    share = _top_eigenvalue(r) / total
    rng = np.random.default_rng(random_state)
    n, p = r.shape
    cols = np.arange(p)
    draws = np.empty(n_draws)
    for j in range(n_draws):
        shift = rng.integers(0, p, size=n)
        shifted = r[np.arange(n)[:, None], (cols[None, :] + shift[:, None]) % p]
        draws[j] = _top_eigenvalue(shifted) / total
    pvalue = (1 + int(np.count_nonzero(draws >= share))) / (n_draws + 1)
    return ResidualStructure(share, float(draws.mean()), float(pvalue), int(n_draws))


@dataclass(frozen=True)
class AbsorberEvidence:
    """Signs that the CLS model lacks an absorber present in the samples.

    Attributes
    ----------
    share_above_limit : float
        Share of calibration samples whose cross-validated CLS residual variance per channel
        exceeds the noise level PLS leaves (its cross-validated Q limit per channel at
        ``EVIDENCE_ALPHA``).
    share_pvalue : float
        One-sided binomial p-value of that share against ``EVIDENCE_ALPHA``.
    structure : ResidualStructure
        First-principal-component share of the CLS residual spectra versus its reference.
    pls_components, n_analytes : int
    findings : tuple of str
        Plain-language statements of the checks that were significant (empty: none).
    """

    share_above_limit: float
    share_pvalue: float
    structure: ResidualStructure
    pls_components: int
    n_analytes: int
    findings: tuple[str, ...]

    @property
    def found(self) -> bool:
        """True when any check points to a missing absorber."""
        return bool(self.findings)

    def to_dict(self) -> dict[str, object]:
        """JSON-serialisable dictionary."""
        return {"share_above_limit": self.share_above_limit, "share_pvalue": self.share_pvalue,
                "limit_alpha": EVIDENCE_ALPHA, "pc1_share": self.structure.share,
                "pc1_reference": self.structure.reference,
                "pc1_pvalue": self.structure.pvalue, "pls_components": self.pls_components,
                "n_analytes": self.n_analytes, "findings": list(self.findings)}


def absorber_evidence(cls_residual_ss: np.ndarray, cls_terms: int, cls_residuals: np.ndarray,
                      cls_design: np.ndarray, pls_q_cv: np.ndarray, pls_components: int,
                      n_analytes: int, random_state: int = 0) -> AbsorberEvidence:
    """Gather the two checks for an absorber missing from CLS.

    The CLS model's own residual limit is set from its calibration residuals, so an absorber
    present in every calibration sample raises the limit with it and hides. The reference noise
    level here is what PLS leaves instead: the moment-fitted χ² limit of its cross-validated Q
    values (Nomikos & MacGregor 1995), per residual degree of freedom (``p − A`` for PLS,
    ``p − m − q`` for CLS).

    PLS's component count is reported but is not evidence: on clean simulated data with
    noise in the spectra, the selection rule chose two components more than there are
    absorbers in 2 of 50 sets, and there the extra components really did predict better
    (paired randomization p = 0.002), although nothing was missing from CLS (measured for
    this package).

    Parameters
    ----------
    cls_residual_ss : ndarray, shape (n,)
        Cross-validated CLS residual sum of squares per sample (AU²).
    cls_terms : int
        Spectra solved for by the CLS model at prediction (m + q).
    cls_residuals : ndarray, shape (n, p)
        Fitted CLS calibration residuals ``A − C K̂`` (AU), for :func:`residual_structure`.
    cls_design : ndarray, shape (n, m′)
        The CLS calibration design (with the ones column of an intercept).
    pls_q_cv : ndarray, shape (n,)
        Cross-validated PLS Q at the chosen count.
    pls_components, n_analytes : int
    random_state : int
    """
    n, p = len(cls_residual_ss), cls_residuals.shape[1]
    q_limit = q_limit_from_values(pls_q_cv, alpha=EVIDENCE_ALPHA).value / (p - pls_components)
    above = int(np.count_nonzero(cls_residual_ss / (p - cls_terms) > q_limit))
    share_p = float(stats.binomtest(above, n, EVIDENCE_ALPHA, alternative="greater").pvalue)
    structure = residual_structure(cls_residuals, cls_design, random_state=random_state)
    findings = []
    if share_p < EVIDENCE_ALPHA:
        findings.append(f"{100 * above / n:.0f} % of the CLS calibration residuals exceed the "
                        "noise level PLS leaves")
    if structure.pvalue < EVIDENCE_ALPHA:
        findings.append(f"the CLS residual spectra share one shape (first principal component "
                        f"{100 * structure.share:.0f} % of their variance, "
                        f"{100 * structure.reference:.0f} % expected)")
    return AbsorberEvidence(above / n, share_p, structure, int(pls_components), int(n_analytes),
                            tuple(findings))


@dataclass(frozen=True)
class Curvature:
    """Test of a curved CLS response: cross-validated errors against predicted concentration.

    Attributes
    ----------
    analytes : tuple of str
    coefficient : ndarray, shape (m,)
        Quadratic coefficient b₂ of ``e = b₀ + b₁ĉ + b₂ĉ²`` (1 / concentration unit).
    pvalues, pvalues_holm : ndarray, shape (m,)
        Two-sided t-test of ``b₂ = 0`` on ``n − 3`` df, and Holm-adjusted across analytes.
    findings : tuple of str
        Plain-language statements for the analytes with ``p_Holm < EVIDENCE_ALPHA``.
    """

    analytes: tuple[str, ...]
    coefficient: np.ndarray
    pvalues: np.ndarray
    pvalues_holm: np.ndarray
    findings: tuple[str, ...]

    def to_dict(self) -> dict[str, object]:
        """JSON-serialisable dictionary."""
        return {"analytes": list(self.analytes),
                "quadratic_coefficient": [float(v) for v in self.coefficient],
                "pvalues": [float(v) for v in self.pvalues],
                "pvalues_holm": [float(v) for v in self.pvalues_holm],
                "alpha": EVIDENCE_ALPHA, "findings": list(self.findings)}


def curvature_evidence(errors: np.ndarray, predicted: np.ndarray,
                       analytes: tuple[str, ...]) -> Curvature:
    """Lack-of-fit test for a non-linear response in the CLS cross-validated errors.

    Under Beer's law CLS errors do not depend on the concentration; a response that bends
    (``A = εc − βc²``: saturation, stray light, association) makes them a curved function of
    it. Per analyte, ordinary least squares of the errors on ``[1, ĉ, ĉ²]`` and the t-test of
    the quadratic coefficient (equivalently the extra-sum-of-squares F test of the added
    term), Holm-corrected across analytes.

    Parameters
    ----------
    errors, predicted : ndarray, shape (n, m)
        Cross-validated errors ``ĉ − c`` and predictions ĉ (concentration units).
    analytes : tuple of str

    References
    ----------
    Draper, N. R. & Smith, H. (1998). Applied Regression Analysis, 3rd ed., Wiley (extra sum
    of squares and lack of fit).
    Holm, S. (1979). Scand. J. Stat. 6, 65-70.
    """
    e, c = np.asarray(errors, dtype=float), np.asarray(predicted, dtype=float)
    n, m = e.shape
    coef, pvals = np.full(m, np.nan), np.ones(m)
    for k in range(m):
        X = np.column_stack([np.ones(n), c[:, k], c[:, k] ** 2])
        if n <= 3 or np.linalg.matrix_rank(X) < 3:
            continue  # too few samples or levels to see a curve
        beta, rss, *_ = np.linalg.lstsq(X, e[:, k], rcond=None)
        s2 = float(rss[0]) / (n - 3) if rss.size else 0.0
        se = np.sqrt(s2 * np.linalg.inv(X.T @ X)[2, 2])
        coef[k] = beta[2]
        if se > 0:
            pvals[k] = float(2 * stats.t.sf(abs(beta[2]) / se, n - 3))
    adjusted = holm(pvals)
    findings = tuple(f"the CLS errors of {a} curve with its concentration (p = {p:.2g}): the "
                     "response is not linear over the calibrated range"
                     for a, p in zip(analytes, adjusted, strict=True) if p < EVIDENCE_ALPHA)
    return Curvature(tuple(analytes), coef, pvals, adjusted, findings)

"""The band-shaped part of a spectral residual: a second residual test for CLS.

An absorber the model does not know adds a band to the residual. UV-Vis bands in solution are
broad, so that band lies almost wholly in a low-dimensional subspace of smooth functions of the
wavelength, while white noise — and the noise that the estimated pure spectra K̂ carry into a
mixture's residual — spreads evenly over all ``p − m − q`` residual directions. The omnibus
residual test (``rᵀr`` over every direction) dilutes the band's energy over all of them; the
matched-subspace test (Scharf & Friedlander 1994) looks only where a band can be:

``B = ‖Uᵀr‖²/d / [s²_cal(1 + h_c)]``

with U an orthonormal basis (p × d) of the Legendre polynomials of degree < :data:`BAND_TERMS`
on the model's axis, made orthogonal to the rows of the augmented K̂ (pure spectra and
baseline terms). Because ``UᵀK̂ᵀ = 0``, ``Uᵀr = Uᵀ(x − bg)``: the statistic is one more narrow
product of the spectrum, read in the same pass (:mod:`bandsolve._scan`). Directions of the
polynomial space that lie nearly inside the span of K̂ (singular value of the orthogonalised
basis below half the median) are dropped: there the residual is dominated by K̂'s own error.

The limit is Box's scaled χ² fitted by moments to the calibration values
``‖Uᵀeᵢ‖²/d / [s²_cal(1 − hᵢ)]`` of the fitted residuals eᵢ (χ² degrees of freedom capped at d),
so smooth systematic structure that real calibration residuals carry (baseline wander,
stray light, a slightly non-linear band) raises the limit instead of flagging every sample.
Each of the two tests is run at α/2 (Bonferroni), so an in-model spectrum exceeds either
with probability at most α.

Measured (``tests/benchmarks/coverage_study.py``, 200 calibrations, white noise, a band whose
part outside the span of K has the noise RMS): with 6 analytes from 5 pure standards each, the
omnibus test alone catches it in 92.5 % of mixtures, the pair in 100 %, while clean mixtures
are flagged as often as before (1–3 % with every flag counted). On the real datasets the
band limit adapts to the calibration's own smooth residual structure: no more blanks or
left-out standards flagged than with the omnibus test alone.

References
----------
Scharf, L. L. & Friedlander, B. (1994). Matched subspace detectors. IEEE Trans. Signal
Process. 42, 2146-2157.
Box, G. E. P. (1954). Some theorems on quadratic forms applied in the study of analysis of
variance problems, I. Ann. Math. Stat. 25, 290-302.
"""

from __future__ import annotations

import numpy as np
from numpy.polynomial import legendre

from bandsolve.diagnostics import q_limit_from_values

__all__ = ["BAND_TERMS", "band_basis", "band_limit"]

#: Legendre polynomials spanning band shapes: degree < 14 resolves features down to about a
#: seventh of the wavelength range (a 40 nm band over 300 nm). More terms add directions the
#: noise fills (measured with 6 analytes from pure standards: 14 terms gave the fewest
#: calibrations with a low detection rate) and columns to the prediction product.
BAND_TERMS = 14

#: Fewest usable band directions for the test to be worth running.
MIN_DIRECTIONS = 3


def band_basis(axis: np.ndarray, spectra: np.ndarray, terms: int = BAND_TERMS) -> np.ndarray:
    """Orthonormal band-shaped directions orthogonal to the model spectra.

    Parameters
    ----------
    axis : ndarray, shape (p,)
        The model's points (nm, or any monotone coordinate).
    spectra : ndarray, shape (k, p)
        Rows the residual is already orthogonal to (pure spectra and baseline terms).
    terms : int
        Legendre polynomials before orthogonalisation.

    Returns
    -------
    ndarray, shape (p, d)
        ``d ≤ terms`` columns; ``(p, 0)`` when fewer than :data:`MIN_DIRECTIONS` remain or the
        axis is too short (fewer than ``k + 2·terms`` points).
    """
    x = np.asarray(axis, dtype=float)
    K = np.asarray(spectra, dtype=float)
    p = x.size
    if p < K.shape[0] + 2 * terms:
        return np.empty((p, 0))
    span = (x.max() - x.min()) / 2 or 1.0
    B = legendre.legvander((x - (x.max() + x.min()) / 2) / span, terms - 1)
    Q = np.linalg.qr(K.T)[0] if K.size else np.empty((p, 0))
    U, sv, _ = np.linalg.svd(B - Q @ (Q.T @ B), full_matrices=False)
    U = np.ascontiguousarray(U[:, sv > 0.5 * np.median(sv)])  # one layout, saved or not
    return U if U.shape[1] >= MIN_DIRECTIONS else np.empty((p, 0))


def band_limit(values: np.ndarray, alpha: float, directions: int) -> float:
    """Box scaled-χ² limit of calibration band ratios (module docstring); NaN with fewer than
    3 finite values or no spread."""
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    if v.size < 3 or not np.ptp(v) > 0:
        return float("nan")
    return float(q_limit_from_values(v, alpha, max_dof=float(directions)).value)

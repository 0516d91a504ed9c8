"""Reference-value outliers: samples whose stated concentration disagrees with their spectrum.

A mislabelled or mis-pipetted standard leaves its spectrum perfectly ordinary (no spectral
residual), but its cross-validated concentration error stands out from the others. The
errors are studentized (each divided by its own standard error), then divided by a robust
scale of all of them, ``max(1, 1.4826·median|z|)`` per analyte (the normal-consistent median
absolute value, so that one bad value neither inflates the scale nor hides itself, and errors
correlated across channels do not make every sample an outlier). A sample is listed when
``|t|`` exceeds the Bonferroni normal quantile ``z_{1 − α/(2nm)}`` over the n·m values, and at
least 3.

References
----------
Cook, R. D. & Weisberg, S. (1982). Residuals and Influence in Regression. Chapman & Hall
(studentized cross-validated residuals).
Rousseeuw, P. J. & Croux, C. (1993). Alternatives to the median absolute deviation. J. Am.
Stat. Assoc. 88, 1273-1283 (1.4826 consistency factor).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from bandsolve._distributions import normal_isf

__all__ = ["ReferenceOutlier", "reference_outliers"]

#: Family-wise level of the outlier list.
OUTLIER_ALPHA = 0.05
#: Smallest |t| ever listed.
OUTLIER_FLOOR = 3.0


@dataclass(frozen=True)
class ReferenceOutlier:
    """One sample whose reference value disagrees with its spectrum for one analyte."""

    sample: str
    analyte: str
    error: float
    t: float

    def text(self) -> str:
        """One line for a person."""
        return (f"{self.sample}: {self.analyte} reference disagrees with the spectrum "
                f"(error {self.error:+.4g}, t = {self.t:+.1f}); check its preparation or label")

    def to_dict(self) -> dict[str, object]:
        """JSON-friendly dictionary."""
        return {"sample": self.sample, "analyte": self.analyte, "error": self.error,
                "t": self.t}


def reference_outliers(errors: np.ndarray, standard_errors: np.ndarray,
                       sample_ids: Sequence[str], analytes: Sequence[str],
                       alpha: float = OUTLIER_ALPHA) -> list[ReferenceOutlier]:
    """Samples whose cross-validated (or validation) error stands out (module docstring).

    Parameters
    ----------
    errors : ndarray, shape (n, m)
        Cross-validated or validation errors ``ĉ − c`` (concentration units); NaN rows are
        skipped (samples that could not be left out).
    standard_errors : ndarray, shape (n, m) or (m,)
        The standard error of each error (same units).
    sample_ids, analytes : sequence of str
    alpha : float
        Family-wise level (Bonferroni over the finite values).

    Returns
    -------
    list of ReferenceOutlier
        Largest |t| first.
    """
    e = np.asarray(errors, dtype=float)
    z = e / np.broadcast_to(np.asarray(standard_errors, dtype=float), e.shape)
    ok = np.isfinite(z)
    if ok.sum() < 3:
        return []
    scale = np.ones(z.shape[1])
    for k in range(z.shape[1]):
        if ok[:, k].any():
            scale[k] = max(1.0, 1.4826 * float(np.median(np.abs(z[ok[:, k], k]))))
    t = z / scale
    limit = max(OUTLIER_FLOOR, float(normal_isf(alpha / (2 * ok.sum()))))
    found = [ReferenceOutlier(str(sample_ids[i]), str(analytes[k]), float(e[i, k]),
                              float(t[i, k]))
             for i, k in zip(*np.nonzero(ok & (np.abs(np.where(ok, t, 0.0)) > limit)),
                             strict=True)]
    return sorted(found, key=lambda o: -abs(o.t))

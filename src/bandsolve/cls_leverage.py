"""Leverage of compositions on a CLS calibration's design: ``h = c̃ᵀ(CᵀC)⁻¹c̃``, its warning
limit over the calibrated ranges, and the blank's.

:class:`CLSLeverage` is mixed into :class:`bandsolve.cls.CLSRegressor`; it reads the design's
``(CᵀC)⁻¹`` (``gram_inv_``) that ``fit`` sets there. A model built from absorptivities has no
design (:attr:`CLSLeverage.from_standards` is False): its leverages are NaN, the blank's 0.
"""

from __future__ import annotations

import numpy as np

from bandsolve._estimator import check_fitted

__all__ = ["CLSLeverage"]

#: Up to this many analytes the corners of the calibrated ranges are enumerated (2^m).
_BOX_CORNERS_MAX = 16


class CLSLeverage:
    """Leverage methods of :class:`bandsolve.cls.CLSRegressor` (a mixin)."""

    @property
    def from_standards(self) -> bool:
        """True when K was estimated from standards (False: from absorptivities)."""
        check_fitted(self, "pure_spectra_")
        return self.gram_inv_ is not None

    def leverage_limit(self, factor: float, calibrated_range: np.ndarray) -> float:
        """Leverage warning limit: ``factor`` × the largest leverage ``c̃ᵀ(CᵀC)⁻¹c̃`` of any
        composition with every analyte inside ``calibrated_range`` (m × 2, low and high);
        NaN without standards.

        Under Beer's-law additivity every composition inside the calibrated ranges is
        interpolation, so the limit starts there rather than at ``3m′/n`` of the standards'
        own design, which flags ordinary mixtures of pure standards (Hoaglin & Welsch 1978,
        Am. Stat. 32, 17, for the 3m′/n rule). The leverage is a convex quadratic, so
        its maximum over the box lies at a corner; with more than
        :data:`_BOX_CORNERS_MAX` analytes the bound ``λ_max·max‖c̃‖²`` is used instead.
        """
        if not self.from_standards:
            return float("nan")
        low, high = np.asarray(calibrated_range, dtype=float).T
        m = low.size
        if m <= _BOX_CORNERS_MAX:
            bits = (np.arange(2**m)[:, None] >> np.arange(m)) & 1
            box = np.max(self.composition_leverage(np.where(bits == 1, high, low)))
        else:
            far = np.maximum(np.abs(low), np.abs(high))
            box = np.linalg.eigvalsh(self.gram_inv_)[-1] * (far @ far + int(self.fit_intercept))
        return float(factor * box)

    def composition_leverage(self, compositions: np.ndarray) -> np.ndarray:
        """``h = c̃ᵀ(CᵀC)⁻¹c̃`` of compositions (n, m), with the intercept's 1 appended when
        fitted (Haaland & Thomas 1988); NaN for a model without standards."""
        c = np.atleast_2d(np.asarray(compositions, dtype=float))
        if not self.from_standards:
            return np.full(len(c), np.nan)
        if self.fit_intercept:
            c = np.column_stack([c, np.ones(len(c))])
        return np.einsum("ij,jk,ik->i", c, self.gram_inv_, c)

    def blank_leverage(self) -> float:
        """h0 of the blank composition ``c0 = 0`` (1 for the intercept column), ``c0ᵀ(CᵀC)⁻¹c0``.

        0 for a model from absorptivities or without an intercept.
        """
        if not (self.from_standards and self.fit_intercept):
            return 0.0
        return float(self.gram_inv_[-1, -1])

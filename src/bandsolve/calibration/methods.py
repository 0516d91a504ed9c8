"""What differs between a CLS and a PLS calibration: the one place that dispatches on method.

``Calibration.method`` names a :class:`CalibrationMethod` in :data:`METHODS`; every module that
needs method-specific behaviour asks it (``cal.kind``) instead of testing the method name.
Each method only calls public methods of its estimators.
"""

from __future__ import annotations

import dataclasses
from abc import ABC, abstractmethod
from collections.abc import Sequence
from typing import Any

import numpy as np

from bandsolve.calibration.detail import Detail, cls_detail, pls_detail
from bandsolve.calibration.records import EstimatorLimits, Selection
from bandsolve.errors import DataError, ModelError
from bandsolve.merit import (
    NoiseEstimate,
    SignalFigures,
    cls_figures,
    inverse_figures,
    noise_from_residuals,
)

__all__ = ["METHODS", "CalibrationMethod", "method_named"]


class CalibrationMethod(ABC):
    """Behaviour of one calibration method (see :data:`METHODS`)."""

    #: Short name stored in the model (``Calibration.method``).
    name = ""
    #: Plain-words name for reports.
    title = ""
    #: The per-sample column plotted against the residual ratio, and both axis labels.
    x_ratio = ""
    x_label = ""
    residual_label = ""
    #: What the component figure shows, and how the net analyte signal is obtained.
    component_title = ""
    nas_caption = ""
    component_caption = ""

    @abstractmethod
    def detail(self, estimators: Sequence[Any], limits: Sequence[EstimatorLimits],
               scans: list[tuple[np.ndarray, np.ndarray]]) -> Detail:
        """Per-sample detail from each estimator's scan products ``(H, ss)``."""
        ...

    @abstractmethod
    def component_spectra(self, estimators: Sequence[Any]) -> np.ndarray:
        """The spectra that define the model (pure spectra or regression vectors), (m, p')."""
        ...

    @abstractmethod
    def component_unit(self, unit: str) -> str:
        """Unit label of :meth:`component_spectra` for a concentration unit."""
        ...

    @abstractmethod
    def noise_from_residuals(self, estimators: Sequence[Any], Z: np.ndarray,
                             C: np.ndarray) -> NoiseEstimate:
        """σx from calibration residuals of preprocessed spectra Z (n, p) and references C."""
        ...

    @abstractmethod
    def signal(self, estimators: Sequence[Any], noise: NoiseEstimate, *, Z: np.ndarray | None,
               C: np.ndarray | None, blank: np.ndarray | None,
               reference_variance: np.ndarray) -> SignalFigures:
        """SEN, SEL, γ, LOD and LOQ per analyte (``blank``: the blank composition's spectrum
        after preprocessing, or None for the zero spectrum)."""
        ...

    def needs_training(self, estimators: Sequence[Any]) -> bool:
        """True when figures of merit need the calibration spectra and concentrations."""
        return True

    def stored_rmsecv(self, selection: Selection | None, m: int) -> np.ndarray | None:
        """RMSECV per analyte recorded at build time, or None when it must be computed."""
        return None

    @abstractmethod
    def describe_components(self, estimators: Sequence[Any],
                            selection: Selection | None, m: int) -> str:
        """How many components the model has and why, in words."""
        ...

    def pure_spectra(self, estimators: Sequence[Any]) -> np.ndarray | None:
        """Pure spectra of the analytes when the model holds them (CLS), else None."""
        return None

    def selectivity(self, estimators: Sequence[Any], m: int) -> np.ndarray:
        """SEL per analyte from the model alone (needs no noise); NaN where it needs the
        figures of merit (PLS: the pure spectra are unknown)."""
        return np.full(m, np.nan)

    def mid_range_leverage(self, estimators: Sequence[Any],
                           calibrated_range: np.ndarray) -> float | None:
        """Leverage h of a composition at the centre of every calibrated range, where the
        model's own estimation error is a share ``h/(1 + h)`` of a result's noise variance,
        common to every result of the calibration; None where the method does not state it."""
        return None


# The two subclasses below set the same class attributes in the same order on purpose: they
# are the table of what differs between the methods, read side by side.
class _CLS(CalibrationMethod):
    name = "cls"
    title = "classical least squares (CLS, K-matrix)"
    x_ratio = "leverage_ratio"
    x_label = "leverage / limit [ratio]"
    residual_label = "residual F / limit [ratio]"
    component_title = "Pure-component spectra"
    nas_caption = ("the part of each pure spectrum orthogonal to all other columns of K "
                   "(Lorber 1986)")
    component_caption = ("Rows of K: the absorbance of each analyte at unit concentration in "
                         "the calibration cell, after preprocessing.")

    def detail(self, estimators, limits, scans):
        return cls_detail(estimators[0], limits[0], *scans[0])

    def component_spectra(self, estimators):
        return estimators[0].component_spectra()

    def component_unit(self, unit):
        return f"absorbance per {unit} [AU/({unit})]"

    def noise_from_residuals(self, estimators, Z, C):
        est = estimators[0]
        resid = est.calibration_residuals(Z, C)
        return noise_from_residuals(resid, Z.shape[1] * (len(Z) - est.n_parameters))

    def signal(self, estimators, noise, *, Z, C, blank, reference_variance):
        est = estimators[0]
        m = est.component_spectra().shape[0]
        return cls_figures(est.model_spectra(), m, noise, h0=est.blank_leverage())

    def needs_training(self, estimators):
        return estimators[0].from_standards

    def describe_components(self, estimators, selection, m):
        est = estimators[0]
        extra = []
        if est.fit_intercept:
            extra.append("a background spectrum")
        q = est.model_spectra().shape[0] - m
        if q:
            extra.append(f"{q} baseline term(s) ({est.baseline})")
        return (f"{m} pure-component spectra"
                + (f" plus {' and '.join(extra)}" if extra else "")
                + "; the number of components is the number of analytes")

    def pure_spectra(self, estimators):
        return estimators[0].component_spectra()

    def selectivity(self, estimators, m):
        # SEL = ‖NAS‖/‖s_k‖ (Lorber 1986); the noise level does not enter it.
        return cls_figures(estimators[0].model_spectra(), m, 1.0).selectivity

    def mid_range_leverage(self, estimators, calibrated_range):
        # Cov(ĉ) ∝ (1 + h)(K̂K̂ᵀ)⁻¹ with h = c̃ᵀ(CᵀC)⁻¹c̃ (Haaland & Thomas 1988): the 1 is the
        # sample's own noise, h the error of K̂, which every result of the model carries.
        est = estimators[0]
        if not est.from_standards:
            return None
        return float(est.composition_leverage(np.mean(calibrated_range, axis=1))[0])


class _PLS(CalibrationMethod):
    name = "pls"
    title = "partial least squares (PLS)"
    x_ratio = "t2_ratio"
    x_label = "Hotelling T² / limit [ratio]"
    residual_label = "Q residual / limit [ratio]"
    component_title = "Regression vectors"
    nas_caption = ("b/‖b‖² (Faber 1998); selectivity comes from the figures of merit (n/a "
                   "without them)")
    component_caption = ("Regression vector b of each analyte: the predicted concentration is "
                         "the intercept plus bᵀx.")

    def detail(self, estimators, limits, scans):
        return pls_detail(estimators, limits, scans)

    def component_spectra(self, estimators):
        return np.vstack([est.regression_vectors() for est in estimators])

    def component_unit(self, unit):
        return f"regression coefficient [{unit} per AU]"

    def noise_from_residuals(self, estimators, Z, C):
        # PLS1: the model with the most components leaves the least structure in its residuals.
        est = max(estimators, key=lambda e: e.n_parameters)
        if est.scale:
            raise ModelError("σx from residuals is not defined for autoscaled PLS (the "
                             "residuals are unit-free); give replicate blank spectra")
        n, p = Z.shape
        a = est.n_parameters - 1
        # One column holding each sample's residual norm has the same ‖E‖²_F as the residuals.
        norms = np.sqrt(est.x_residual_ss(Z))[:, None]
        return noise_from_residuals(norms, (n - 1 - a) * (p - a))

    def signal(self, estimators, noise, *, Z, C, blank, reference_variance):
        if Z is None or C is None:
            raise DataError("give the calibration spectra and concentrations the model was "
                            "built from")
        blank = np.zeros(Z.shape[1]) if blank is None else blank
        # Pure spectra for SEL, estimated from all analytes at once by least squares on the
        # centred mixtures (K̂ = (C_cᵀC_c)⁻¹C_cᵀZ_c): one analyte's XᵀY/YᵀY alone carries the
        # spectra of analytes correlated with it in the design (a median −43 % SEL error).
        pure = np.linalg.lstsq(C - C.mean(axis=0), Z - Z.mean(axis=0), rcond=None)[0]
        coef, h0 = [], []
        for est in estimators:
            b = est.regression_vectors()
            coef.append(b.T)
            h0.extend([est.leverage(blank[None, :])[0]] * b.shape[0])
        b_all = np.hstack(coef)
        parts = [inverse_figures(b_all[:, k], noise, h0=h0[k],
                                 sigma_y=float(np.sqrt(reference_variance[k])),
                                 pure_spectra=pure[k])
                 for k in range(C.shape[1])]
        return dataclasses.replace(parts[0], **{
            f: np.concatenate([getattr(s, f) for s in parts])
            for f in ("sensitivity", "selectivity", "analytical_sensitivity", "lod", "loq",
                      "h0")})

    def stored_rmsecv(self, selection, m):
        if selection is None:
            return None
        values = np.concatenate([c.chosen_rmsecv() for c in selection.models])
        return values if values.size == m else None

    def describe_components(self, estimators, selection, m):
        parts = [f"{c.n_components} component(s) by the {c.rule} rule"
                 + (f" (α = {c.alpha:g})" if c.alpha is not None else "")
                 + f", cross-validation {c.cv}" for c in (selection.models if selection else ())]
        return "; ".join(parts) or "not recorded"


#: The calibration methods by their stored name.
METHODS: dict[str, CalibrationMethod] = {m.name: m for m in (_CLS(), _PLS())}


def method_named(name: str) -> CalibrationMethod:
    """The :class:`CalibrationMethod` stored as ``name``; ModelError for an unknown one."""
    try:
        return METHODS[name]
    except KeyError:
        raise ModelError(f"unknown method {name!r} in the model; this bandsolve knows "
                         f"{', '.join(sorted(METHODS))}") from None

"""Figures of merit of a built :class:`~bandsolve.calibration.model.Calibration`, stored in the
model file.

:func:`calibration_merit` turns a fitted CLS or PLS calibration and its training data into a
:class:`~bandsolve.merit.FiguresOfMerit` table (SEN, SEL, γ, LOD, LOQ, RMSEC, RMSECV and the
single-wavelength baseline per analyte); :func:`attach_merit` stores it in ``cal.merit`` so the
model file carries it.

Conventions (stated in the table's documentation and checked by the tests):

* All spectral quantities (SEN, σx) live in the space the estimator sees, i.e. after the model's
  preprocessing (window, filter, derivative, offset). Their unit is AU, or AU per axis unit
  to the power of the derivative order.
* σx comes from replicate blank spectra when given (per-channel SD, ddof = 1, RMS over
  channels), otherwise from calibration residuals, and is labelled accordingly.
  CLS residual degrees of freedom: ``p (n − m′)``; PLS: ``(n − 1 − A)(p − A)`` (a rank-A fit
  of centred data, common practice).
* Blank leverage h0: CLS ``c0ᵀ(CᵀC)⁻¹c0`` with ``c0`` zeros (and 1 for the intercept), 0 for a
  model built from absorptivities; PLS ``1/n + t0ᵀ(TᵀT)⁻¹t0`` with ``t0`` the scores of the
  mean blank replicate when blanks are given, else of the all-zero spectrum after preprocessing
  (the blank of a blank-subtracted calibration).
* RMSEC: ``√(Σe²/(n − m′))`` for CLS, ``√(Σe²/(n − A − 1))`` for PLS. RMSECV: ``√(PRESS/n)``;
  CLS is leave-one-out (closed form from the fit, no refits) unless a splitter ``cv`` is
  given; PLS takes the curve stored at build time at the chosen component count.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Sequence
from typing import Any

import numpy as np

from bandsolve._estimator import clone
from bandsolve.calibration.model import Calibration
from bandsolve.concentrations import ConcentrationTable, split_unit
from bandsolve.crossval import cross_validate_estimator
from bandsolve.errors import DataError, ModelError
from bandsolve.merit import (
    FiguresOfMerit,
    SignalFigures,
    figures_of_merit,
    noise_from_blanks,
    regression_statistics,
    univariate_calibration,
)
from bandsolve.spectra import SpectralSet

__all__ = ["attach_merit", "blank_arrays", "calibration_merit", "merit_from_arrays",
           "signal_unit"]


def signal_unit(cal: Calibration) -> str:
    """Unit of the preprocessed spectra: ``AU``, or ``AU/nm``, ``AU/nm^2`` for derivatives."""
    pre = cal.preprocessor
    order = int(pre.derivative) if pre.savgol_window is not None else 0
    if order == 0:
        return "AU"
    return f"AU/{cal.axis_unit}" + ("" if order == 1 else f"^{order}")


def blank_arrays(cal: Calibration, blanks: SpectralSet | None) -> np.ndarray | None:
    """Replicate blank absorbance on the model grid (r × p); DataError for fewer than 2."""
    if blanks is None:
        return None
    if blanks.n_samples < 2:
        raise DataError(f"{blanks.source or 'blank spectra'}: {blanks.n_samples} blank spectrum; "
                        "measure at least 2 replicate blanks for the noise estimate")
    return cal.prepare(blanks)[0]


def _signal(cal: Calibration, Z: np.ndarray | None, C: np.ndarray | None,
            blank_z: np.ndarray | None,
            reference_variance: float | Sequence[float] | None) -> SignalFigures:
    if blank_z is not None:
        noise = noise_from_blanks(blank_z)
    elif Z is not None:
        noise = cal.kind.noise_from_residuals(cal.estimators, Z, C)
    else:
        raise DataError("a CLS model built from absorptivities has no calibration residuals; "
                        "give replicate blank spectra to estimate the noise")
    # The blank composition's spectrum: the measured blank mean, unless the model subtracts a
    # blank from every spectrum — then a routine blank becomes the zero spectrum.
    subtracted = bool(cal.settings.get("blank_subtracted"))
    blank = None if blank_z is None or subtracted else blank_z.mean(axis=0)
    var_y = np.broadcast_to(np.asarray(0.0 if reference_variance is None
                                       else reference_variance, dtype=float), (cal.n_analytes,))
    if np.any(var_y < 0):
        raise DataError("reference_variance must be a non-negative variance per analyte "
                        "(concentration units squared)")
    return cal.kind.signal(cal.estimators, noise, Z=Z, C=C, blank=blank,
                           reference_variance=var_y)


def _rmsecv(cal: Calibration, Z: np.ndarray, C: np.ndarray, cv: Any) -> np.ndarray | None:
    if cal.selection is not None:  # recorded at build time with the component choice
        return cal.kind.stored_rmsecv(cal.selection, C.shape[1])
    fit_loo = cal.estimators[0].leave_one_out() if cv is None else None
    if fit_loo is not None and fit_loo.concentrations.shape == C.shape:
        # Leave-one-out in closed form, computed once at fit (bandsolve.cls_loo): no refits.
        # A sample that alone carries an analyte cannot be left out: no RMSECV then.
        loo = fit_loo.concentrations
        return np.sqrt(np.mean((loo - C) ** 2, axis=0)) if np.isfinite(loo).all() else None
    try:
        res = cross_validate_estimator(clone(cal.estimators[0]), Z, C,
                                       cv="loo" if cv is None else cv)
    except ModelError:  # e.g. a fold removes every standard of one analyte
        return None
    return res.rmsecv[0]


def _rmsec(cal: Calibration, Z: np.ndarray, C: np.ndarray) -> list[Any] | None:
    preds = [np.asarray(e.predict(Z)).reshape(len(Z), -1) for e in cal.estimators]
    fitted = np.hstack(preds)
    # One entry per analyte: the parameter count of the estimator that predicts it.
    n_par = [e.n_parameters for e, p in zip(cal.estimators, preds, strict=True)
             for _ in range(p.shape[1])]
    try:
        return [regression_statistics(C[:, k], fitted[:, k], n_parameters=n_par[k])
                for k in range(C.shape[1])]
    except DataError:  # too few samples or a constant column: no calibration statistics
        return None


def calibration_merit(cal: Calibration, spectra: SpectralSet | None,
                      table: ConcentrationTable | None, blanks: SpectralSet | None = None,
                      cv: Any = None,
                      reference_variance: float | Sequence[float] | None = None
                      ) -> FiguresOfMerit:
    """Figures of merit of a built calibration, one row per analyte.

    Parameters
    ----------
    cal : Calibration
        A CLS or PLS calibration from :mod:`bandsolve.calibration.build` /
        :mod:`bandsolve.calibration.build_pls`.
    spectra : SpectralSet or None
        The calibration spectra exactly as the model was fitted to them (blank-subtracted if
        the model was built with a blank), n spectra; None only for a CLS model built from
        absorptivities.
    table : ConcentrationTable or None
        Their known concentrations (must contain every analyte column of the model).
    blanks : SpectralSet, optional
        r ≥ 2 replicate blank spectra (absorbance) for σx and, for PLS, the blank's scores.
    cv : str or splitter, optional
        Cross-validation for the CLS RMSECV (default leave-one-out, in closed form from the
        fit when the estimator was just fitted). PLS
        uses the curve stored at build time.
    reference_variance : float or sequence of float, optional
        Variance of the reference concentrations σy² per analyte (concentration units²), used
        in the PLS detection limit; the CLS limit has no σy term
        (Olivieri et al. 2006, Pure Appl. Chem. 78, 633).

    Returns
    -------
    FiguresOfMerit
        Method ``"CLS"`` (with the condition number of ``K_aug``) or ``"inverse"``.

    References
    ----------
    Olivieri, A. C. et al. (2006). Uncertainty estimation and figures of merit for multivariate
    calibration. Pure Appl. Chem. 78, 633-661.
    Lorber, A., Faber, K. & Kowalski, B. R. (1997). Net analyte signal calculation in
    multivariate calibration. Anal. Chem. 69, 1620-1626.
    Faber, N. M. (1998). Efficient computation of net analyte signal vector in inverse
    multivariate calibration models. Anal. Chem. 70, 5108-5110.
    Haaland, D. M. & Thomas, E. V. (1988). Anal. Chem. 60, 1193-1202.
    """
    blank_x = blank_arrays(cal, blanks)
    if spectra is None or table is None:
        return merit_from_arrays(cal, None, None, blank_x, reference_variance=reference_variance)
    data = cal.align(spectra, table)
    return merit_from_arrays(cal, data.X, data.reference, blank_x, cv=cv,
                             reference_variance=reference_variance)


def merit_from_arrays(cal: Calibration, X: np.ndarray | None, C: np.ndarray | None,
                      blank_x: np.ndarray | None = None, *, Z: np.ndarray | None = None,
                      cv: Any = None,
                      reference_variance: float | Sequence[float] | None = None
                      ) -> FiguresOfMerit:
    """:func:`calibration_merit` from arrays already on the model: what the builders call.

    Parameters
    ----------
    X : ndarray, shape (n, p), or None
        Calibration absorbance on the model grid (None only for a model from absorptivities).
    C : ndarray, shape (n, m), or None
        Their concentrations in the model's analyte order.
    blank_x : ndarray, shape (r, p), optional
        Replicate blank absorbance on the model grid.
    Z : ndarray, shape (n, p'), optional
        ``X`` after the model's preprocessing, when the caller has it already.
    """
    blank_z = None if blank_x is None else cal.preprocessor.transform(blank_x)
    names = [split_unit(a)[0] for a in cal.analytes]
    units = [split_unit(a)[1] or "unit" for a in cal.analytes]
    if X is None or C is None:
        if cal.kind.needs_training(cal.estimators):
            raise DataError("give the calibration spectra and concentrations the model was "
                            "built from")
        signal = _signal(cal, None, None, blank_z, reference_variance)
        return figures_of_merit(signal, names, units, signal_unit=signal_unit(cal))
    Z = cal.preprocessor.transform(X) if Z is None else Z
    signal = _signal(cal, Z, C, blank_z, reference_variance)
    mask = cal.used_mask
    uni_sigma = None if blank_x is None else noise_from_blanks(blank_x[:, mask]).sigma
    pure = cal.kind.pure_spectra(cal.estimators)
    if pure is not None and pure.shape[1] != int(mask.sum()):
        pure = None
    try:
        univariate = univariate_calibration(cal.axis[mask], X[:, mask], C,
                                            sigma_x=uni_sigma, pure_spectra=pure)
    except DataError:  # fewer than 3 samples or a constant concentration column
        univariate = None
    fom = figures_of_merit(signal, names, units, calibration=_rmsec(cal, Z, C),
                           univariate=univariate, signal_unit=signal_unit(cal))
    rmsecv = _rmsecv(cal, Z, C, cv)
    if rmsecv is None:
        return fom
    rows = tuple(dataclasses.replace(row, rmsecv=float(v))
                 for row, v in zip(fom.analytes, rmsecv, strict=True))
    return dataclasses.replace(fom, analytes=rows)


def attach_merit(cal: Calibration, spectra: SpectralSet | None,
                 table: ConcentrationTable | None,
                 blanks: SpectralSet | None = None) -> Calibration:
    """Return a copy of ``cal`` whose ``merit`` holds :func:`calibration_merit`.

    Parameters
    ----------
    cal, spectra, table, blanks
        As for :func:`calibration_merit`.

    Returns
    -------
    Calibration
    """
    return dataclasses.replace(cal, merit=calibration_merit(cal, spectra, table, blanks=blanks))

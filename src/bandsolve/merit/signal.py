"""Figures of merit of multicomponent calibrations, on plain arrays.

Sensitivity (SEN), selectivity (SEL), analytical sensitivity (γ), detection and quantitation
limits for CLS models (net analyte signal from the pure-component spectra) and inverse models
such as PLS (from the regression vector), noise estimates, prediction statistics, a
single-wavelength baseline and the :class:`FiguresOfMerit` table that gathers them.

Units: spectra in absorbance units (AU), concentrations in the user's unit ``u``; SEN is in
AU per ``u``, γ in ``1/u``, γ⁻¹, LOD and LOQ in ``u``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from bandsolve.errors import DataError, ModelError
from bandsolve.merit.statistics import (
    NoiseEstimate,
    as_float_array,
)

__all__ = [
    "LOD_FACTOR",
    "LOQ_FACTOR",
    "SignalFigures",
    "blank_leverage",
    "cls_figures",
    "cls_net_analyte_signal",
    "inverse_figures",
]

#: 3.3 = 2 × 1.645: false-positive and false-negative rates of 5 % each (IUPAC).
LOD_FACTOR = 3.3
LOQ_FACTOR = 10.0


def _sigma(sigma_x: float | NoiseEstimate) -> tuple[float, str]:
    if isinstance(sigma_x, NoiseEstimate):
        return sigma_x.sigma, sigma_x.origin
    value = float(sigma_x)
    if not value > 0 or not math.isfinite(value):
        raise DataError(f"sigma_x = {sigma_x!r}; give a positive noise SD in absorbance units.")
    return value, "given"


def cls_net_analyte_signal(S: object, k: int) -> np.ndarray:
    """Net analyte signal vector ``s*_k = (I - S_-k S_-k^+) s_k`` of component k.

    Parameters
    ----------
    S : array_like, shape (p, m + q)
        Pure-component spectra (and baseline shapes) as columns, ``S = K_aug^T``.
    k : int
        Column index (0-based).

    Returns
    -------
    ndarray, shape (p,)
        Part of ``s_k`` orthogonal to every other column (AU per concentration unit).

    References
    ----------
    Lorber, A. (1986). Error propagation and figures of merit for quantification by solving
    matrix equations. Anal. Chem. 58, 1167-1172.
    Lorber, A., Faber, K. & Kowalski, B. R. (1997). Net analyte signal calculation in
    multivariate calibration. Anal. Chem. 69, 1620-1626.
    """
    s = as_float_array(S, "S", 2)
    if not 0 <= k < s.shape[1]:
        raise DataError(f"k = {k} is outside the {s.shape[1]} columns of S.")
    s_k = s[:, k]
    others = np.delete(s, k, axis=1)
    if others.shape[1] == 0:
        return s_k.copy()
    coef = np.linalg.lstsq(others, s_k, rcond=None)[0]
    return s_k - others @ coef


def blank_leverage(calibration_design: object, blank_composition: object) -> float:
    """Leverage ``h0 = c0^T (C^T C)^-1 c0`` of the blank on a CLS calibration design.

    Parameters
    ----------
    calibration_design : array_like, shape (n, m')
        Calibration concentrations, with the ones column if the model has an intercept.
    blank_composition : array_like, shape (m',)
        The blank in the same columns (zeros, and 1 for the intercept).

    References
    ----------
    Olivieri, A. C. et al. (2006). Pure Appl. Chem. 78, 633-661.
    """
    c = as_float_array(calibration_design, "calibration_design", 2)
    c0 = as_float_array(blank_composition, "blank_composition", 1)
    if c0.size != c.shape[1]:
        raise DataError(f"blank_composition has {c0.size} entries; the design has {c.shape[1]}.")
    if np.linalg.matrix_rank(c) < c.shape[1]:
        raise ModelError("calibration design is rank deficient; its columns are collinear.")
    return float(c0 @ np.linalg.solve(c.T @ c, c0))


@dataclass(frozen=True)
class SignalFigures:
    """Per-analyte figures of merit from the model's spectra (arrays of shape (m,)).

    Attributes
    ----------
    method : str
        ``"CLS"`` or ``"inverse"``.
    sensitivity : ndarray
        SEN (AU per concentration unit).
    selectivity : ndarray
        SEL in [0, 1]; NaN when no pure spectrum was available.
    analytical_sensitivity : ndarray
        γ = SEN/σx (per concentration unit); its inverse is the smallest distinguishable
        concentration difference.
    lod, loq : ndarray
        Detection and quantitation limits (concentration units).
    h0 : ndarray
        Blank leverage used in the limits.
    sigma_x : float
        Spectral noise SD (AU).
    sigma_x_origin : str
        Where σx came from.
    condition_number : float or None
        Condition number of ``K_aug`` (CLS only).
    """

    method: str
    sensitivity: np.ndarray
    selectivity: np.ndarray
    analytical_sensitivity: np.ndarray
    lod: np.ndarray
    loq: np.ndarray
    h0: np.ndarray
    sigma_x: float
    sigma_x_origin: str
    condition_number: float | None = None


def cls_figures(
    K_aug: object, n_analytes: int, sigma_x: float | NoiseEstimate, h0: float = 0.0
) -> SignalFigures:
    """CLS figures of merit from the (augmented) pure-component matrix.

    ``SEN_k = ‖s*_k‖ = 1/sqrt([(S^T S)^-1]_kk)`` with ``S = K_aug^T``, ``SEL_k = SEN_k/‖s_k‖``,
    ``γ = SEN/σx``, ``LOD = 3.3 σx sqrt(1 + h0)/SEN``, ``LOQ = 10 σx sqrt(1 + h0)/SEN``.

    Parameters
    ----------
    K_aug : array_like, shape (m + q, p)
        Pure spectra of the m analytes (first rows) and q baseline shapes (AU per unit).
    n_analytes : int
        m; figures are returned for the first m rows.
    sigma_x : float or NoiseEstimate
        Spectral noise SD (AU), ideally from blank replicates.
    h0 : float
        Blank leverage (:func:`blank_leverage`); 0 when K is known without error.

    Returns
    -------
    SignalFigures

    References
    ----------
    Lorber, A. (1986). Anal. Chem. 58, 1167-1172.
    Lorber, A., Faber, K. & Kowalski, B. R. (1997). Anal. Chem. 69, 1620-1626.
    Olivieri, A. C. et al. (2006). Pure Appl. Chem. 78, 633-661.
    """
    k_aug = as_float_array(K_aug, "K_aug", 2)
    m, p = int(n_analytes), k_aug.shape[1]
    if not 1 <= m <= k_aug.shape[0] or k_aug.shape[0] >= p:
        raise DataError(
            f"K_aug has shape {k_aug.shape} for {n_analytes} analytes; need m <= rows < p."
        )
    sigma, origin = _sigma(sigma_x)
    # diag((S^T S)^-1) from the QR factor without squaring the condition number.
    r = np.linalg.qr(k_aug.T, mode="r")
    if np.min(np.abs(np.diag(r))) <= np.finfo(float).eps * p * np.max(np.abs(r)):
        raise ModelError("pure spectra in K are collinear; remove a component or a baseline term.")
    # Imported here: scipy.linalg adds ~0.05 s to the start-up of every building command.
    from scipy.linalg import solve_triangular

    r_inv = solve_triangular(r, np.eye(r.shape[0]))
    sen = 1.0 / np.sqrt(np.sum(r_inv**2, axis=1))[:m]
    sel = sen / np.linalg.norm(k_aug[:m], axis=1)
    return _signal_figures("CLS", sen, sel, sigma, origin, np.full(m, float(h0)), 0.0,
                           float(np.linalg.cond(k_aug)))


def inverse_figures(
    coefficients: object,
    sigma_x: float | NoiseEstimate,
    h0: float | Sequence[float] = 0.0,
    sigma_y: float = 0.0,
    pure_spectra: object | None = None,
    X_calibration: object | None = None,
    y_calibration: object | None = None,
) -> SignalFigures:
    """Figures of merit of inverse models (PLS) from the regression vector(s).

    ``SEN = 1/‖b‖``, ``SEL = SEN/‖s_k‖``, ``γ = SEN/σx``,
    ``LOD = 3.3 sqrt(σx² ‖b‖² (1 + h0) + h0 σy²)``, LOQ with 10 in place of 3.3.

    Parameters
    ----------
    coefficients : array_like, shape (p,) or (p, m)
        Regression vector b per analyte (concentration units per AU).
    sigma_x : float or NoiseEstimate
        Spectral noise SD (AU).
    h0 : float or sequence of float
        Leverage of the blank per analyte model.
    sigma_y : float
        SD of the reference concentrations (concentration units).
    pure_spectra : array_like, shape (m, p), optional
        Pure spectra ``s_k`` for SEL.
    X_calibration, y_calibration : array_like, shapes (n, p) and (n,) or (n, m), optional
        When no pure spectra exist, ``s_k ≈ X_c^T y_c / (y_c^T y_c)`` from the centred data.
        SEL is NaN when neither is given.

    Returns
    -------
    SignalFigures

    References
    ----------
    Faber, N. M. (1998). Efficient computation of net analyte signal vector in inverse
    multivariate calibration models. Anal. Chem. 70, 5108-5110.
    Olivieri, A. C. et al. (2006). Pure Appl. Chem. 78, 633-661.
    """
    b = as_float_array(coefficients, "coefficients", (1, 2))
    b = b[:, None] if b.ndim == 1 else b
    p, m = b.shape
    sigma, origin = _sigma(sigma_x)
    h0_arr = np.broadcast_to(as_float_array(h0, "h0", (0, 1)), (m,)).astype(float)
    sen = 1.0 / np.linalg.norm(b, axis=0)
    if pure_spectra is not None:
        s = as_float_array(pure_spectra, "pure_spectra", (1, 2)).reshape(-1, p)
    elif X_calibration is not None and y_calibration is not None:
        x = as_float_array(X_calibration, "X_calibration", 2)
        y = as_float_array(y_calibration, "y_calibration", (1, 2)).reshape(x.shape[0], -1)
        x_c, y_c = x - x.mean(axis=0), y - y.mean(axis=0)
        s = (x_c.T @ y_c / np.sum(y_c**2, axis=0)).T
    else:
        s = None
    if s is not None and s.shape != (m, p):
        raise DataError(f"pure spectra have shape {s.shape}; expected {(m, p)}.")
    sel = np.full(m, np.nan) if s is None else sen / np.linalg.norm(s, axis=1)
    return _signal_figures("inverse", sen, sel, sigma, origin, h0_arr, float(sigma_y), None)


def _signal_figures(
    method: str,
    sen: np.ndarray,
    sel: np.ndarray,
    sigma: float,
    origin: str,
    h0: np.ndarray,
    sigma_y: float,
    condition_number: float | None,
) -> SignalFigures:
    # σ(ĉ) at the blank: spectral noise through the model plus reference error via h0.
    sd_blank = np.sqrt((sigma / sen) ** 2 * (1.0 + h0) + h0 * sigma_y**2)
    return SignalFigures(
        method=method,
        sensitivity=sen,
        selectivity=sel,
        analytical_sensitivity=sen / sigma,
        lod=LOD_FACTOR * sd_blank,
        loq=LOQ_FACTOR * sd_blank,
        h0=h0,
        sigma_x=sigma,
        sigma_x_origin=origin,
        condition_number=condition_number,
    )

"""A calibration moved to another instrument, with its own record and figures.

:func:`transfer_calibration` fits an instrument transfer (:mod:`bandsolve.transfer`) from
transfer samples measured on both instruments and returns a new :class:`Calibration` that
maps the new instrument's spectra (or corrects its predictions) before the unchanged model
sees them, so every result keeps its SE, interval, diagnostics and flags.

The transfer's own figures are measured by leave-one-out over the transfer samples: each
sample is predicted with a transfer fitted without it, so the figures are not flattered by
the fit. The error is measured against the transfer samples' reference values when given,
otherwise against the original instrument's predictions of the same samples (agreement
between instruments, not accuracy).
"""

from __future__ import annotations

import dataclasses
from typing import Any

import numpy as np

from bandsolve.calibration.model import Calibration
from bandsolve.concentrations import ConcentrationTable
from bandsolve.errors import DataError
from bandsolve.spectra import SpectralSet
from bandsolve.transfer import (
    DEFAULT_HALF_WINDOW,
    DEFAULT_RCOND,
    Transfer,
    axis_shift,
    direct_standardization,
    piecewise_direct_standardization,
    slope_bias_correction,
)

__all__ = ["transfer_calibration", "untransferred", "SHIFT_WARNING_STEPS"]

#: An axis offset larger than this fraction of a grid step is reported as a warning.
SHIFT_WARNING_STEPS = 0.1


def _paired(original: SpectralSet, new: SpectralSet) -> tuple[SpectralSet, list[int]]:
    """Rows of ``new`` in the order of ``original``'s sample ids (same samples on both)."""
    pos = {s: i for i, s in enumerate(new.sample_ids)}
    missing = [s for s in original.sample_ids if s not in pos]
    extra = sorted(set(new.sample_ids) - set(original.sample_ids))
    if missing or extra:
        what = (f"missing on the new instrument: {', '.join(missing[:5])}" if missing
                else f"measured only on the new instrument: {', '.join(extra[:5])}")
        raise DataError(f"{new.source or 'transfer spectra'}: transfer samples must be the same "
                        f"on both instruments ({what}); give matching sample ids")
    return new, [pos[s] for s in original.sample_ids]


#: How each method is fitted from (model, original spectra, new spectra, reference, half
#: window, singular-value cut).
_FITTERS = {
    "pds": lambda model, X1, X2, Y, hw, rc: piecewise_direct_standardization(
        X1, X2, half_window=hw, rcond=rc),
    "ds": lambda model, X1, X2, Y, hw, rc: direct_standardization(X1, X2, rcond=rc),
    "slope-bias": lambda model, X1, X2, Y, hw, rc: slope_bias_correction(
        model.detail(X2).concentrations, Y),
}


def _fit(method: str, model: Calibration, X1: np.ndarray, X2: np.ndarray, Y: np.ndarray,
         half_window: int, rcond: float) -> Transfer:
    return _FITTERS[method](model, X1, X2, Y, half_window, rcond)


def _apply(model: Calibration, transfer: Transfer, X2: np.ndarray) -> tuple[np.ndarray,
                                                                           np.ndarray]:
    """Estimates and residual ratios of ``X2`` through ``transfer`` and ``model``."""
    d = model.detail(transfer.map_spectra(X2))
    return transfer.correct(d.concentrations, d.standard_errors)[0], d.residual_ratio


def _rms(a: np.ndarray) -> list[float]:
    return [float(v) for v in np.sqrt(np.mean(a ** 2, axis=0))]


def transfer_calibration(model: Calibration, original: SpectralSet, new: SpectralSet, *,
                         method: str = "pds", half_window: int = DEFAULT_HALF_WINDOW,
                         rcond: float = DEFAULT_RCOND,
                         reference: ConcentrationTable | None = None,
                         files: list[dict[str, Any]] | None = None) -> Calibration:
    """The model moved to a new instrument, from transfer samples measured on both.

    Parameters
    ----------
    model : Calibration
        The model built on the original instrument (not itself a transferred model).
    original, new : SpectralSet
        The same transfer samples (matched by sample id; 5–20 is usual) measured on the
        original and on the new instrument; resampled onto the model grid when needed.
    method : {"pds", "ds", "slope-bias"}
        Piecewise or full direct standardization of spectra, or slope/bias correction of
        predictions.
    half_window, rcond : int, float
        PDS half-window in channels and the singular-value cut (:mod:`bandsolve.transfer`).
    reference : ConcentrationTable, optional
        Known concentrations of the transfer samples. Without it the original instrument's
        predictions are the reference.
    files : list of dict, optional
        Fingerprints of the transfer files (role, name, sha256) to record.

    Returns
    -------
    Calibration
        A copy of ``model`` with :attr:`Calibration.transfer` set; its ``record`` holds the
        method, window, transfer-sample ids and fingerprints, the axis-shift estimate and the
        leave-one-out figures (``rmse_before``/``rmse_after`` per analyte, residual flags).

    References
    ----------
    Wang, Veltkamp & Kowalski (1991), *Anal. Chem.* 63, 2750–2756.
    """
    if method not in _FITTERS:
        raise DataError(f"unknown transfer method {method!r}; use one of "
                        f"{', '.join(_FITTERS)}")
    if model.transfer is not None:
        raise DataError("this model was already transferred; transfer the original model")
    new, order = _paired(original, new)
    X1, _ = model.prepare(original, whole_axis=True)
    X2 = model.prepare(new, whole_axis=True)[0][order]
    if reference is not None:
        Y = model.align(original, reference).reference
        basis = "reference values of the transfer samples"
    else:
        Y = model.detail(X1).concentrations
        basis = "the original instrument's predictions of the transfer samples"
    transfer = _fit(method, model, X1, X2, Y, half_window, rcond)
    n = len(X1)
    loo = np.empty_like(Y)
    loo_ratio = np.empty(n)
    for i in range(n):
        keep = np.arange(n) != i
        fold = _fit(method, model, X1[keep], X2[keep], Y[keep], half_window, rcond)
        est, ratio = _apply(model, fold, X2[i:i + 1])
        loo[i], loo_ratio[i] = est[0], ratio[0]
    before = model.detail(X2)
    record: dict[str, Any] = {
        "samples": list(original.sample_ids), "files": list(files or []),
        "error_basis": basis,
        "rmse_before": _rms(before.concentrations - Y), "rmse_after": _rms(loo - Y),
        "residual_flags_before": int((before.residual_ratio > 1).sum()),
        "residual_flags_after": int((loo_ratio > 1).sum()),
        "spectral_rms_before_AU": float(np.sqrt(np.mean((X2 - X1) ** 2))),
    }
    if transfer.matrix is not None:
        record["spectral_rms_after_AU"] = float(np.sqrt(np.mean(
            (transfer.map_spectra(X2) - X1) ** 2)))
    steps = np.diff(model.axis)
    if model.axis.size >= 25 and np.allclose(steps, steps[0], rtol=1e-6):
        shift = axis_shift(model.axis, X1, X2)
        record["axis_shift"] = {"value": shift.shift, "unit": model.axis_unit,
                                "grid_step": shift.step, "correlation": shift.correlation,
                                "warning": shift.exceeds(SHIFT_WARNING_STEPS * shift.step)}
    provenance = dict(model.provenance)
    provenance["transferred_from"] = model.provenance.get("model_checksum")
    return dataclasses.replace(model, transfer=transfer.with_record(**record),
                               provenance=provenance)


def untransferred(moved: Calibration) -> Calibration:
    """The model as it was before the transfer (to show the accuracy without it)."""
    if moved.transfer is None:
        raise DataError("this model was not transferred to another instrument")
    provenance = {k: v for k, v in moved.provenance.items() if k != "transferred_from"}
    return dataclasses.replace(moved, transfer=None, provenance=provenance)

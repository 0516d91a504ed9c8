"""Row-wise spectral preprocessing that a model repeats exactly at prediction.

Every step acts on one spectrum at a time and learns nothing from the calibration set, so it
can be applied before cross-validation without leaking information between folds. Mean
centring, the one step that does learn from data, lives inside the regression estimators.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import ClassVar

import numpy as np

from bandsolve._estimator import Estimator, Transformer, check_fitted, validated
from bandsolve._state import RecordedState
from bandsolve.errors import ModelError
from bandsolve.spectra import describe_window, window_mask

__all__ = ["SpectralPreprocessor", "parse_window"]


def parse_window(text: str) -> list[tuple[float, float]]:
    """Parse ``"400-700"`` or ``"240-300,320-400"`` into a list of ``(low, high)`` ranges."""
    ranges = []
    for part in str(text).split(","):
        pieces = part.strip().split("-")
        try:
            if len(pieces) != 2:
                raise ValueError
            low, high = float(pieces[0]), float(pieces[1])
        except ValueError:
            raise ModelError(
                f"cannot read the window {part.strip()!r}; write ranges like 400-700 or "
                "240-300,320-400 (axis units)"
            ) from None
        ranges.append((min(low, high), max(low, high)))
    return ranges


class SpectralPreprocessor(RecordedState, Transformer, Estimator):
    """Savitzky–Golay smoothing or derivative, wavelength window, per-spectrum offset.

    Steps run in that order: the filter sees the full measured range (so the window edges
    are not filter edges), then the window keeps the chosen points, then the offset step
    subtracts each spectrum's mean over the kept points.

    Parameters
    ----------
    axis : array_like of shape (p,), optional
        Axis of the input columns (needed for ``window`` and for derivative units).
    window : sequence of (low, high), optional
        Closed axis ranges to keep; None keeps everything.
    savgol_window : int, optional
        Savitzky–Golay window length in points (odd); None disables the filter.
    savgol_polyorder : int, default 2
        Polynomial order of the filter.
    derivative : {0, 1, 2}, default 0
        Derivative order; derivatives are per axis unit when ``axis`` is given.
    offset : bool, default False
        Subtract each spectrum's mean over the kept points (a constant baseline offset).

    Attributes
    ----------
    mask_ : ndarray of bool, shape (p,)
        Input points kept by the window.
    axis_out_ : ndarray, shape (p_out,)
        Axis of the output columns (None when no axis was given).

    References
    ----------
    Savitzky, A.; Golay, M. J. E. Anal. Chem. 1964, 36, 1627–1639.
    """

    STATE_FIELDS: ClassVar[dict[str, str]] = {
        "used_points": "mask_", "used_axis": "axis_out_",
        "n_features_in": "n_features_in_"}

    def __init__(self, axis=None, window: Sequence[tuple[float, float]] | None = None,
                 savgol_window: int | None = None, savgol_polyorder: int = 2,
                 derivative: int = 0, offset: bool = False):
        self.axis = axis
        self.window = window
        self.savgol_window = savgol_window
        self.savgol_polyorder = savgol_polyorder
        self.derivative = derivative
        self.offset = offset

    def fit(self, X, y=None):
        """Check the settings against the input width; learns nothing from the values."""
        X = validated(self, X)
        p = X.shape[1]
        axis = None if self.axis is None else np.asarray(self.axis, dtype=float)
        if axis is not None and axis.shape != (p,):
            raise ModelError(f"axis has {axis.size} points but the spectra have {p}")
        if self.window is not None:
            if axis is None:
                raise ModelError("a wavelength window needs the axis")
            self.mask_ = window_mask(axis, self.window)
            if not self.mask_.any():
                raise ModelError(
                    f"the window {describe_window(self.window, '')} keeps no points of the "
                    f"axis {axis.min():g}-{axis.max():g}; choose ranges inside the measured axis"
                )
        else:
            self.mask_ = np.ones(p, dtype=bool)
        self.axis_out_ = None if axis is None else axis[self.mask_]
        if self.derivative and self.savgol_window is None:
            raise ModelError("a derivative needs a Savitzky–Golay window (savgol_window)")
        if self.savgol_window is not None:
            w = int(self.savgol_window)
            if w % 2 == 0 or w <= self.savgol_polyorder or w > p:
                raise ModelError(
                    f"Savitzky–Golay window {w} must be odd, larger than the polynomial order "
                    f"{self.savgol_polyorder} and at most {p} points"
                )
            if self.derivative not in (0, 1, 2) or self.derivative > self.savgol_polyorder:
                raise ModelError("derivative must be 0, 1 or 2 and not above the polynomial order")
            if axis is not None and self.derivative:
                steps = np.diff(axis)
                if not np.allclose(steps, steps[0], rtol=1e-6):
                    raise ModelError("derivatives need an evenly spaced axis; resample first")
        return self

    @property
    def used_mask(self) -> np.ndarray:
        """Input points kept by the window, bool of shape (p,)."""
        check_fitted(self, "mask_")
        return self.mask_

    @property
    def used_axis(self) -> np.ndarray | None:
        """Axis of the output columns (None when no axis was given)."""
        check_fitted(self, "mask_")
        return self.axis_out_

    def transform(self, X):
        """Apply filter, window and offset; returns shape (n, p_out)."""
        check_fitted(self, "mask_")
        return self.apply(validated(self, X, reset=False))

    def apply(self, X: np.ndarray) -> np.ndarray:
        """:meth:`transform` for a finite float array already checked by the caller.

        The hot path of batch prediction, which validates its input once per batch rather
        than once per block.
        """
        if self.savgol_window is not None:
            # Imported here: scipy.signal costs a noticeable share of the command's start-up.
            from scipy.signal import savgol_filter

            delta = 1.0
            if self.axis is not None and self.derivative:
                delta = float(np.diff(np.asarray(self.axis, dtype=float))[0])
            X = savgol_filter(X, int(self.savgol_window), int(self.savgol_polyorder),
                              deriv=int(self.derivative), delta=delta, axis=1)
        if not self.mask_.all():
            X = X[:, self.mask_]
        if self.offset:
            X = X - X.mean(axis=1, keepdims=True)
        return X

    def describe(self) -> str:
        """One line describing the steps, for reports."""
        steps = []
        if self.savgol_window is not None:
            kind = {0: "smoothing", 1: "first derivative", 2: "second derivative"}[self.derivative]
            steps.append(f"Savitzky–Golay {kind} ({self.savgol_window} points, order "
                         f"{self.savgol_polyorder})")
        if self.window is not None:
            steps.append("window " + ", ".join(f"{lo:g}-{hi:g}" for lo, hi in self.window))
        if self.offset:
            steps.append("offset removal")
        return "; ".join(steps) if steps else "none"

"""Moving a calibration to another instrument: DS, PDS, slope/bias correction, axis shift.

A calibration built on one spectrophotometer (the *original*) predicts badly on a second one
whose bandwidth, wavelength axis, photometric gain or baseline differ. Instead of
recalibrating, a few *transfer samples* (5–20) are measured on both instruments and a map is
fitted that takes a spectrum from the new instrument back to what the original would have
recorded. The model itself is unchanged; its diagnostics keep working on mapped spectra.

* Direct standardization (DS): ``x_orig ≈ x_new F + b`` with one full ``F`` (p × p).
* Piecewise direct standardization (PDS): each original channel j is regressed on a small
  window of new channels around j, so ``F`` is banded; far fewer coefficients per channel
  than DS, which is why it works with a handful of transfer samples.
* Slope/bias correction: predictions from the new instrument are corrected per analyte,
  ``ĉ ← a + b·ĉ_new``, fitted to the reference values of the transfer samples.
* Axis-shift check: cross-correlation of a reference spectrum measured on both instruments,
  with sub-channel resolution by a parabola through the correlation peak.

Each window regression is a principal-component regression truncated where the singular
values fall below ``rcond`` times the largest (Wang, Veltkamp & Kowalski 1991 use PCR or
PLS in each window): with fewer transfer samples than window channels the plain least-squares
problem has no unique answer.

References
----------
Wang, Y., Veltkamp, D. J., Kowalski, B. R. (1991). Multivariate instrument standardization.
*Anal. Chem.* 63, 2750–2756.
Kennard, R. W., Stone, L. A. (1969). Computer aided design of experiments. *Technometrics*
11, 137–148 (choosing transfer samples that span the calibration).
Bouveresse, E., Hartmann, C., Massart, D. L., Last, I. R., Prebble, K. A. (1996).
Standardization of near-infrared spectrometric instruments. *Anal. Chem.* 68, 982–990
(slope/bias correction; from memory).
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from bandsolve.errors import DataError, ModelFileError

__all__ = ["AxisShift", "Transfer", "axis_shift", "direct_standardization", "kennard_stone",
           "piecewise_direct_standardization", "slope_bias_correction", "TRANSFER_METHODS"]

#: Method names a user can ask for.
TRANSFER_METHODS = ("pds", "ds", "slope-bias")

#: Default PDS half-window in channels (a window of 3 channels) and relative singular-value
#: cut of each window regression. Chosen on simulated second instruments (bandwidth, axis
#: offset 0.2–1 nm, gain, baseline) with 10 Kennard–Stone transfer samples on a 2 nm grid:
#: wider windows or a smaller cut fit the transfer samples' noise (larger prediction error,
#: residual flags on 10–60 % of mapped spectra); see tests/test_transfer.py.
DEFAULT_HALF_WINDOW = 1
DEFAULT_RCOND = 0.01

#: Rows mapped at a time by a banded (PDS) map: small enough to stay in cache.
_MAP_ROWS = 1024


@dataclass(frozen=True)
class Transfer:
    """A fitted instrument transfer: a spectral map, a prediction correction, or neither.

    Attributes
    ----------
    method : str
        One of :data:`TRANSFER_METHODS`.
    n_samples : int
        Number of transfer samples it was fitted on.
    matrix : ndarray, shape (p, p) or None
        ``F`` of ``x_orig ≈ x_new @ F + offset`` (banded for PDS).
    offset : ndarray, shape (p,) or None
        Additive background of the map, in AU.
    slope, bias : ndarray, shape (m,) or None
        Per-analyte prediction correction ``ĉ = bias + slope·ĉ_new``.
    half_window : int or None
        PDS half-window in channels (the window is ``2·half_window + 1`` channels).
    record : dict
        Provenance and figures: transfer files' fingerprints, the axis-shift estimate,
        prediction errors before and after (JSON-serialisable).
    """

    method: str
    n_samples: int
    matrix: np.ndarray | None = None
    offset: np.ndarray | None = None
    slope: np.ndarray | None = None
    bias: np.ndarray | None = None
    half_window: int | None = None
    record: dict[str, Any] = field(default_factory=dict)

    def map_spectra(self, X: np.ndarray) -> np.ndarray:
        """Spectra of the new instrument as the original would have measured them (n × p).

        A PDS map is banded: it is applied as ``2w + 1`` shifted element-wise products on
        blocks of rows that stay in cache (O(n·p·(2w+1)) instead of the O(n·p²) of a full
        product; ``tests/benchmarks/bench_transfer.py``, 10⁵ × 171 spectra on a busy 2-core
        machine: 0.22 s against 0.48 s for ``X @ F``, 0.74 s unblocked). Each row's
        numbers never depend on the other rows.
        """
        if self.matrix is None:
            return X
        if self.half_window is None:
            return X @ self.matrix + self.offset
        X = np.asarray(X, dtype=float)
        p = X.shape[1]
        bands = [(k, np.diagonal(self.matrix, offset=-k))  # F[j + k, j]: new j + k → orig j
                 for k in range(-self.half_window, self.half_window + 1) if abs(k) < p]
        out = np.empty_like(X)
        for start in range(0, len(X), _MAP_ROWS):
            x = X[start:start + _MAP_ROWS]
            block = np.broadcast_to(self.offset, x.shape).copy()
            for k, band in bands:
                if k >= 0:
                    block[:, :p - k] += x[:, k:] * band
                else:
                    block[:, -k:] += x[:, :p + k] * band
            out[start:start + _MAP_ROWS] = block
        return out

    def correct(self, concentrations: np.ndarray, standard_errors: np.ndarray
                ) -> tuple[np.ndarray, np.ndarray]:
        """Apply the slope/bias correction to estimates (n × m) and scale their SEs."""
        if self.slope is None:
            return concentrations, standard_errors
        return self.bias + self.slope * concentrations, np.abs(self.slope) * standard_errors

    def with_record(self, **items: Any) -> Transfer:
        """A copy with ``items`` added to :attr:`record`."""
        return Transfer(self.method, self.n_samples, self.matrix, self.offset, self.slope,
                        self.bias, self.half_window, {**self.record, **items})

    def to_dict(self) -> dict[str, Any]:
        """Every field by name (arrays stay arrays; the model file stores them as ``.npy``)."""
        return dataclasses.asdict(self)

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> Transfer:
        """Rebuild from :meth:`to_dict` output; ModelFileError when the entry is damaged."""
        try:
            return cls(**data)
        except TypeError as exc:
            raise ModelFileError(f"the model's transfer entry is damaged ({exc}); transfer "
                                 "the original model again") from None

    def describe(self) -> dict[str, Any]:
        """JSON-friendly summary (no arrays)."""
        out: dict[str, Any] = {"method": self.method, "transfer_samples": self.n_samples}
        if self.half_window is not None:
            out["window_channels"] = 2 * self.half_window + 1
        if self.slope is not None:
            out["slope"] = [float(v) for v in self.slope]
            out["bias"] = [float(v) for v in self.bias]
        return out | self.record


def _pair(original: np.ndarray, new: np.ndarray, minimum: int) -> tuple[np.ndarray, np.ndarray]:
    S1 = np.asarray(original, dtype=float)
    S2 = np.asarray(new, dtype=float)
    if S1.ndim != 2 or S1.shape != S2.shape:
        raise DataError(f"transfer spectra must be the same samples on the same grid on both "
                        f"instruments; got shapes {S1.shape} and {S2.shape}")
    if len(S1) < minimum:
        raise DataError(f"{len(S1)} transfer samples are too few; measure at least {minimum} "
                        "on both instruments (5-20 is usual)")
    if not (np.isfinite(S1).all() and np.isfinite(S2).all()):
        raise DataError("transfer spectra contain NaN or infinite values; fix or remove them")
    return S1, S2


def _truncated_lstsq(Z: np.ndarray, y: np.ndarray, rcond: float) -> np.ndarray:
    """Principal-component regression of ``y`` (n × k) on ``Z`` (n × w), centred data."""
    U, s, Vt = np.linalg.svd(Z, full_matrices=False)
    keep = s > rcond * s[0] if s.size and s[0] > 0 else np.zeros(s.size, dtype=bool)
    return Vt[keep].T @ ((U[:, keep].T @ y) / s[keep, None])


def direct_standardization(original: np.ndarray, new: np.ndarray, *,
                           rcond: float = DEFAULT_RCOND) -> Transfer:
    """Fit DS: one full map ``F`` with ``x_orig ≈ x_new F + b``.

    Parameters
    ----------
    original, new : ndarray, shape (n, p)
        The same transfer samples measured on the original and the new instrument, absorbance
        on the model grid.
    rcond : float
        Singular values below ``rcond`` times the largest are dropped.

    References
    ----------
    Wang, Veltkamp & Kowalski (1991), *Anal. Chem.* 63, 2750–2756.
    """
    S1, S2 = _pair(original, new, 2)
    m1, m2 = S1.mean(axis=0), S2.mean(axis=0)
    F = _truncated_lstsq(S2 - m2, S1 - m1, rcond)
    return Transfer("ds", len(S1), matrix=F, offset=m1 - m2 @ F)


def piecewise_direct_standardization(original: np.ndarray, new: np.ndarray, *,
                                     half_window: int = DEFAULT_HALF_WINDOW,
                                     rcond: float = DEFAULT_RCOND) -> Transfer:
    """Fit PDS: channel j of the original from channels j−w … j+w of the new instrument.

    Parameters
    ----------
    original, new : ndarray, shape (n, p)
        The same transfer samples on both instruments, absorbance on the model grid.
    half_window : int
        ``w``; windows are cut at the ends of the axis.
    rcond : float
        Relative singular-value cut of each window's principal-component regression.

    Returns
    -------
    Transfer
        ``matrix`` is banded (zero beyond ``w`` channels from the diagonal).

    References
    ----------
    Wang, Veltkamp & Kowalski (1991), *Anal. Chem.* 63, 2750–2756.
    """
    S1, S2 = _pair(original, new, 2)
    if not isinstance(half_window, int | np.integer) or half_window < 0:
        raise DataError(f"PDS half-window must be a whole number of channels >= 0, "
                        f"got {half_window!r}")
    p = S1.shape[1]
    m1, m2 = S1.mean(axis=0), S2.mean(axis=0)
    C1, C2 = S1 - m1, S2 - m2
    F = np.zeros((p, p))
    for j in range(p):
        lo, hi = max(0, j - half_window), min(p, j + half_window + 1)
        F[lo:hi, j] = _truncated_lstsq(C2[:, lo:hi], C1[:, j:j + 1], rcond)[:, 0]
    return Transfer("pds", len(S1), matrix=F, offset=m1 - m2 @ F,
                    half_window=int(half_window))


def slope_bias_correction(predicted_new: np.ndarray, reference: np.ndarray) -> Transfer:
    """Fit ``reference ≈ bias + slope·predicted_new`` per analyte by least squares.

    Parameters
    ----------
    predicted_new : ndarray, shape (n, m)
        The original model's predictions of the transfer samples measured on the new
        instrument.
    reference : ndarray, shape (n, m)
        Their reference values (known concentrations, or the original instrument's
        predictions).

    References
    ----------
    Bouveresse et al. (1996), *Anal. Chem.* 68, 982–990 (from memory).
    """
    P, Y = _pair(reference, predicted_new, 3)
    slope = np.empty(P.shape[1])
    bias = np.empty(P.shape[1])
    for k in range(P.shape[1]):
        x, y = Y[:, k], P[:, k]
        sxx = float(((x - x.mean()) ** 2).sum())
        if sxx <= 0:
            raise DataError(f"transfer samples span no range of analyte {k + 1}; slope/bias "
                            "correction needs samples at different concentrations")
        slope[k] = float(((x - x.mean()) * (y - y.mean())).sum()) / sxx
        bias[k] = y.mean() - slope[k] * x.mean()
    return Transfer("slope-bias", len(P), slope=slope, bias=bias)


@dataclass(frozen=True)
class AxisShift:
    """Estimated offset of the new instrument's axis against the original.

    Attributes
    ----------
    shift : float
        In axis units; positive when the new instrument shows features at larger axis values.
    step : float
        Grid step in axis units (the resolution before sub-channel interpolation).
    correlation : float
        Peak normalised cross-correlation of the two derivative spectra (1 = identical shape).
    """

    shift: float
    step: float
    correlation: float

    def exceeds(self, tolerance: float) -> bool:
        """True when ``|shift| > tolerance`` (same axis units)."""
        return abs(self.shift) > tolerance


def axis_shift(axis: np.ndarray, original: np.ndarray, new: np.ndarray, *,
               max_channels: int = 10) -> AxisShift:
    """Axis offset between two spectra of the same reference sample, by cross-correlation.

    Both spectra are differentiated first (a constant baseline or gain change then does not
    move the peak); the best integer lag up to ``max_channels`` (refined by the parabola
    through the peak) starts a least-squares fit of the shift with gain and a linear baseline
    as nuisance terms, which resolves a small fraction of a channel on broad bands.

    Parameters
    ----------
    axis : ndarray, shape (p,)
        Common, evenly spaced grid.
    original, new : ndarray, shape (p,) or (n, p)
        Spectra (several rows are averaged) of the same sample on both instruments.
    max_channels : int
        Largest shift searched, in channels.
    """
    axis = np.asarray(axis, dtype=float)
    a = np.atleast_2d(np.asarray(original, dtype=float)).mean(axis=0)
    b = np.atleast_2d(np.asarray(new, dtype=float)).mean(axis=0)
    if a.shape != axis.shape or b.shape != axis.shape:
        raise DataError("axis-shift check: both spectra must lie on the model grid")
    steps = np.diff(axis)
    if axis.size < 2 * max_channels + 5 or not np.allclose(steps, steps[0], rtol=1e-6):
        raise DataError("axis-shift check needs an evenly spaced grid of at least "
                        f"{2 * max_channels + 5} points")
    da, db = np.diff(a), np.diff(b)
    lags = np.arange(-max_channels, max_channels + 1)
    n = da.size
    corr = np.empty(lags.size)
    for i, lag in enumerate(lags):  # new(x) ≈ original(x − δ): compare b[k + lag] with a[k]
        x = da[max(0, -lag):n - max(0, lag)]
        y = db[max(0, lag):n - max(0, -lag)]
        x, y = x - x.mean(), y - y.mean()  # a sloping baseline adds a constant derivative
        denom = np.sqrt((x @ x) * (y @ y))
        corr[i] = (x @ y) / denom if denom > 0 else 0.0
    i = int(np.argmax(corr))
    frac = 0.0
    if 0 < i < lags.size - 1:
        c0, c1, c2 = corr[i - 1], corr[i], corr[i + 1]
        curvature = c0 - 2 * c1 + c2
        frac = 0.5 * (c0 - c2) / curvature if curvature < 0 else 0.0
    shift = _refine(axis, a, b, (lags[i] + frac) * steps[0], max_channels * steps[0])
    return AxisShift(shift=float(shift), step=float(steps[0]), correlation=float(corr[i]))


def _refine(axis: np.ndarray, a: np.ndarray, b: np.ndarray, shift: float, limit: float,
            iterations: int = 8) -> float:
    """Gauss–Newton refinement of ``b(x) ≈ g·a(x − δ) + c₀ + c₁x`` from a starting ``δ``.

    Broad UV-Vis bands give a wide correlation peak whose top moves with noise; fitting the
    shift (with gain and a linear baseline as nuisance terms) by linearising ``a`` around the
    current shift uses every channel's slope and is far less noisy.
    """
    inner = (axis >= axis[0] + limit) & (axis <= axis[-1] - limit)
    x = (axis - axis.mean()) / np.ptp(axis)
    for _ in range(iterations):
        moved = np.interp(axis - shift, axis, a)
        slope = np.gradient(moved, axis)
        design = np.column_stack([moved, slope, np.ones_like(x), x])[inner]
        coef = np.linalg.lstsq(design, b[inner], rcond=None)[0]
        if coef[0] <= 0:
            break
        step = -coef[1] / coef[0]
        shift = float(np.clip(shift + step, -limit, limit))
        if abs(step) < 1e-6 * (axis[1] - axis[0]):
            break
    return shift


def kennard_stone(spectra: np.ndarray, k: int) -> np.ndarray:
    """Indices of ``k`` samples that span ``spectra`` (n × p) evenly: good transfer samples.

    Starts from the two most distant spectra and repeatedly adds the spectrum farthest from
    those already chosen (Kennard & Stone 1969).
    """
    X = np.asarray(spectra, dtype=float)
    if not 2 <= k <= len(X):
        raise DataError(f"cannot choose {k} transfer samples from {len(X)} spectra")
    sq = (X * X).sum(axis=1)
    dist = np.maximum(sq[:, None] + sq[None, :] - 2 * X @ X.T, 0.0)
    first, second = np.unravel_index(int(np.argmax(dist)), dist.shape)
    chosen = [int(first), int(second)]
    nearest = np.minimum(dist[first], dist[second])
    while len(chosen) < k:
        nearest[chosen] = -1.0
        nxt = int(np.argmax(nearest))
        chosen.append(nxt)
        nearest = np.minimum(nearest, dist[nxt])
    return np.array(chosen)

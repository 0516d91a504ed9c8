"""Spectral data: one set of spectra on one axis, with its unit and photometric quantity.

:class:`SpectralSet` is the one type every reader returns and every model consumes. It is
immutable in spirit: every operation returns a new set. The axis is stored in ascending order
(a descending file axis is flipped together with the values).
"""

from __future__ import annotations

import warnings
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
import pandas as pd

from bandsolve._interp import interp_rows
from bandsolve._spectra_checks import (
    check_axis,
    check_finite,
    check_ids,
    check_transmittance_scale,
    digits_to_tell_apart,
    warn_if_ambiguous_unit,
)
from bandsolve.errors import BandsolveWarning, DataError, where
from bandsolve.units import convert_axis_values, normalise_unit

__all__ = [
    "QUANTITIES", "DEFAULT_CEILING_AU", "TRANSMITTANCE_LIMIT", "END_SLACK_STEPS", "SpectralSet",
    "concat", "window_mask", "describe_window", "warn_if_ambiguous_unit",
]

#: Photometric quantities a set may hold. ``absorptivity`` is a pure-component spectrum
#: per unit concentration and unit path length (for example ε in L mol⁻¹ cm⁻¹).
QUANTITIES = ("absorbance", "transmittance", "percent_transmittance", "absorptivity")

#: Default photometric ceiling in absorbance units. Above about 2 AU stray light and detector
#: noise make readings non-linear on typical bench instruments (common practice).
DEFAULT_CEILING_AU = 2.0

#: Highest fractional transmittance accepted (×100 for percent transmittance). True T lies in
#: 0-1; 5 % above 1 leaves room for noise and a slightly low reference (common practice).
TRANSMITTANCE_LIMIT = 1.05

#: Slack at each end of :meth:`SpectralSet.resample`, as a fraction of the end grid step: an
#: axis written with few decimals (for example 1e7/λ rounded to 0.001 cm⁻¹) may miss the
#: target end by a rounding error far below one step.
END_SLACK_STEPS = 0.01


@dataclass(frozen=True, eq=False)
class SpectralSet:
    """A set of spectra sharing one axis.

    Parameters
    ----------
    axis : array_like, shape (p,)
        Strictly monotonic axis values in ``axis_unit``. Stored ascending.
    values : array_like, shape (n, p)
        One spectrum per row, in ``quantity`` units (AU for absorbance, a fraction for
        transmittance, percent for percent transmittance).
    sample_ids : sequence of str, length n
        Unique, non-empty sample identifiers.
    axis_unit : str, default "nm"
        ``nm``, ``um`` or ``cm-1`` (energy units are accepted for conversions).
    quantity : str, default "absorbance"
        One of :data:`QUANTITIES`.
    path_length_cm : float, optional
        Optical path length of the cell in cm, when known.
    source : str, optional
        Where the data came from (file name); used in error messages.
    metadata : dict, optional
        Free-form metadata kept with the set (JSON-friendly values recommended).
    """

    axis: np.ndarray
    values: np.ndarray
    sample_ids: tuple[str, ...]
    axis_unit: str = "nm"
    quantity: str = "absorbance"
    path_length_cm: float | None = None
    source: str | None = None
    metadata: dict[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        src = self.source
        # Freezing below must never make the caller's own arrays read-only, and the set must not
        # change when the caller changes them: both are copied.  A float64 array that is already
        # read-only (as a reader hands over what it parsed) cannot change, so its values (up to
        # gigabytes) are taken as a view instead of a second copy.
        try:
            axis = np.array(self.axis, dtype=float)
            given = self.values
            values = (given.view() if isinstance(given, np.ndarray) and given.dtype == np.float64
                      and not given.flags.writeable else np.array(given, dtype=float))
        except (TypeError, ValueError) as exc:
            raise DataError(f"{where(src)}axis and values must be numbers ({exc})") from None
        ids = tuple(str(s) for s in self.sample_ids)
        if axis.ndim != 1 or axis.size < 1:
            raise DataError(f"{where(src)}the axis must be a non-empty 1-D list of values")
        if values.ndim == 1:
            values = values[np.newaxis, :]
        if values.ndim != 2 or values.shape[1] != axis.size:
            raise DataError(
                f"{where(src)}{values.shape[-1]} values per spectrum but {axis.size} axis "
                "points; every spectrum must have one value per axis point"
            )
        if len(ids) != values.shape[0]:
            raise DataError(
                f"{where(src)}{len(ids)} sample ids for {values.shape[0]} spectra; give one id "
                "per spectrum"
            )
        check_axis(axis, src)
        if axis.size > 1 and axis[1] < axis[0]:
            axis, values = axis[::-1].copy(), values[:, ::-1].copy()
        check_ids(ids, src)
        check_finite(values, axis, ids, src)
        quantity = str(self.quantity)
        if quantity not in QUANTITIES:
            raise DataError(f"{where(src)}unknown quantity {quantity!r}; use one of {QUANTITIES}")
        if self.path_length_cm is not None and not (
            np.isfinite(self.path_length_cm) and self.path_length_cm > 0
        ):
            raise DataError(
                f"{where(src)}path length must be a positive number of cm, got "
                f"{self.path_length_cm!r}"
            )
        axis.setflags(write=False)
        values.setflags(write=False)
        object.__setattr__(self, "axis", axis)
        object.__setattr__(self, "values", values)
        object.__setattr__(self, "sample_ids", ids)
        object.__setattr__(self, "axis_unit", normalise_unit(self.axis_unit))
        object.__setattr__(self, "metadata", dict(self.metadata))

    # ------------------------------------------------------------------ basic views
    @property
    def n_samples(self) -> int:
        """Number of spectra (rows)."""
        return self.values.shape[0]

    @property
    def n_points(self) -> int:
        """Number of axis points (columns)."""
        return self.axis.size

    def __len__(self) -> int:
        return self.n_samples

    def __repr__(self) -> str:
        return (
            f"SpectralSet({self.n_samples} spectra × {self.n_points} points, "
            f"{self.axis[0]:g}-{self.axis[-1]:g} {self.axis_unit}, {self.quantity}"
            + (f", from {self.source}" if self.source else "")
            + ")"
        )

    def to_frame(self) -> pd.DataFrame:
        """Wide table: one row per sample (index = sample id), one column per axis value."""
        return pd.DataFrame(
            np.array(self.values), index=pd.Index(self.sample_ids, name="sample"),
            columns=pd.Index(self.axis, name=self.axis_unit),
        )

    def _new(self, **changes: Any) -> SpectralSet:
        return replace(self, **changes)

    # ------------------------------------------------------------------ photometry
    def to_absorbance(self) -> SpectralSet:
        """Convert transmittance (fraction) or percent transmittance to absorbance.

        A = -log10(T) (IUPAC Gold Book, "absorbance"). Values of T at or below zero have no
        absorbance; they are reported with the sample and axis point instead of becoming
        infinities. Transmittance above :data:`TRANSMITTANCE_LIMIT` (1.05, or 105 for percent
        transmittance) is refused: it means the quantity was declared wrongly (percent read as
        a fraction) or the reference measurement is off.
        """
        if self.quantity in ("absorbance", "absorptivity"):
            return self
        percent = self.quantity == "percent_transmittance"
        check_transmittance_scale(self, TRANSMITTANCE_LIMIT * (100.0 if percent else 1.0))
        t = np.array(self.values) / (100.0 if percent else 1.0)
        bad = t <= 0
        if bad.any():
            i, j = np.argwhere(bad)[0]
            raise DataError(
                f"{where(self.source, sample=self.sample_ids[i])}transmittance "
                f"{self.values[i, j]:g} "
                f"at {self.axis[j]:g} {self.axis_unit} is not above zero, so it has no "
                f"absorbance ({int(bad.sum())} such values in all); check the dark/reference "
                "correction or trim the axis to where light reaches the detector"
            )
        return self._new(values=-np.log10(t), quantity="absorbance")

    def above_ceiling(self, ceiling: float = DEFAULT_CEILING_AU) -> np.ndarray:
        """Boolean mask (n,) of spectra whose absorbance exceeds ``ceiling`` anywhere.

        The default 2.0 AU is a common-practice photometric ceiling; above it readings on
        typical instruments lose linearity through stray light.
        """
        a = self.to_absorbance().values
        return np.max(a, axis=1) > ceiling

    def check_quantity(self) -> None:
        """Warn when declared absorbance looks like percent transmittance (values 5-100)."""
        v = self.values
        if self.quantity != "absorbance" or v.size == 0:
            return
        if np.median(v) > 5 and np.max(v) <= 100.5 and np.min(v) >= -0.5:
            warnings.warn(
                f"{where(self.source)}values between {v.min():.3g} and {v.max():.3g} look like "
                "percent transmittance although absorbance was declared; if so, state the "
                "quantity (--quantity percent_transmittance)",
                BandsolveWarning,
                stacklevel=2,
            )

    # ------------------------------------------------------------------ axis operations
    def convert_axis(self, unit: str) -> SpectralSet:
        """The same spectra on an axis expressed in another unit (nm, um, cm-1, eV, J)."""
        return self._new(
            axis=convert_axis_values(self.axis, self.axis_unit, unit), axis_unit=unit
        )

    def window(self, ranges: Sequence[tuple[float, float]] | tuple[float, float]) -> SpectralSet:
        """Keep only axis points inside one or several closed ranges ``(low, high)``."""
        mask = window_mask(self.axis, ranges)
        if not mask.any():
            shown = describe_window(ranges, self.axis_unit)
            raise DataError(
                f"{where(self.source)}no axis points inside the window {shown};"
                f" the data span {self.axis[0]:g}-{self.axis[-1]:g} {self.axis_unit}"
            )
        return self._new(axis=self.axis[mask], values=self.values[:, mask])

    def resample(self, axis: np.ndarray, *, tolerance: float = 1e-9) -> SpectralSet:
        """Linear interpolation onto ``axis``, strictly inside the measured range.

        Parameters
        ----------
        axis : array_like, shape (q,)
            Target axis in this set's unit.
        tolerance : float
            Relative slack on the range ends, added to :data:`END_SLACK_STEPS` of the grid
            step at each end (for rounding in files); target points inside the slack take
            the value at the measured end. The result lies on ``axis`` exactly.

        Raises
        ------
        DataError
            When ``axis`` reaches outside the measured range; the message names the
            uncovered range. Extrapolation is never done.
        """
        target = np.asarray(axis, dtype=float)
        if target.ndim != 1 or target.size == 0:
            raise DataError(f"{where(self.source)}the target axis must be a non-empty 1-D list")
        check_axis(target, self.source)
        lo, hi = self.axis[0], self.axis[-1]
        relative = tolerance * max(abs(lo), abs(hi), 1.0)
        steps = np.diff(self.axis) if self.n_points > 1 else np.zeros(1)
        missing = []
        if target.min() < lo - (relative + END_SLACK_STEPS * steps[0]):
            missing.append((target.min(), lo))
        if target.max() > hi + (relative + END_SLACK_STEPS * steps[-1]):
            missing.append((hi, target.max()))
        if missing:
            d = digits_to_tell_apart(missing)
            unit = self.axis_unit
            gaps = " and ".join(f"{a:.{d}g}-{b:.{d}g}" for a, b in missing)
            raise DataError(
                f"{where(self.source)}spectra cover {lo:.{d}g}-{hi:.{d}g} {unit} but {gaps} "
                f"{unit} is needed; measure the full range (bandsolve never extrapolates)"
            )
        # Points inside the end slack take the end value (np.interp holds the end values), so
        # the result lies exactly on the requested grid.
        return self._new(axis=target, values=interp_rows(target, self.axis, self.values))

    def on_grid(self, axis: np.ndarray, axis_unit: str) -> SpectralSet:
        """As absorbance on ``axis`` (in ``axis_unit``): converted and resampled as needed."""
        out = self.to_absorbance()
        if out.axis_unit != axis_unit:
            out = out.convert_axis(axis_unit)
        return out if out.same_grid(axis) else out.resample(axis)

    def same_grid(self, other_axis: np.ndarray, rtol: float = 1e-9) -> bool:
        """True when ``other_axis`` equals this set's axis point for point."""
        other = np.asarray(other_axis, dtype=float)
        return other.shape == self.axis.shape and bool(
            np.allclose(other, self.axis, rtol=rtol, atol=0)
        )

    # ------------------------------------------------------------------ samples
    def subset(self, ids_or_mask: Iterable[str] | np.ndarray) -> SpectralSet:
        """Select samples by a boolean mask or by ids (in the order given)."""
        sel = np.asarray(list(ids_or_mask) if not isinstance(ids_or_mask, np.ndarray)
                         else ids_or_mask)
        if sel.dtype == bool:
            if sel.shape != (self.n_samples,):
                raise DataError(
                    f"{where(self.source)}a selection mask needs one entry per spectrum "
                    f"({self.n_samples}), got shape {sel.shape}"
                )
            idx = np.flatnonzero(sel)
        else:
            pos = {s: i for i, s in enumerate(self.sample_ids)}
            missing = [str(s) for s in sel if s not in pos]
            if missing:
                raise DataError(f"{where(self.source)}no spectrum for sample(s) {missing[:5]}")
            idx = np.array([pos[s] for s in sel], dtype=int)
        return self._new(values=self.values[idx], sample_ids=[self.sample_ids[i] for i in idx])

    def average_by(self, labels: Sequence[str]) -> SpectralSet:
        """Average replicate spectra that share a label; the label becomes the sample id.

        The number of replicates per new sample is kept in ``metadata["replicates"]``.
        """
        labels = [str(s) for s in labels]
        if len(labels) != self.n_samples:
            raise DataError("average_by needs one label per spectrum")
        order = list(dict.fromkeys(labels))
        position = {s: k for k, s in enumerate(order)}
        codes = np.array([position[s] for s in labels], dtype=int)
        counts = np.bincount(codes, minlength=len(order))
        sums = np.zeros((len(order), self.n_points))
        np.add.at(sums, codes, self.values)
        meta = dict(self.metadata, replicates=dict(zip(order, counts.tolist(), strict=True)))
        return self._new(values=sums / counts[:, None], sample_ids=order, metadata=meta)

    def subtract_blank(self, blank: SpectralSet) -> SpectralSet:
        """Subtract a blank spectrum (the mean of ``blank``'s spectra) measured on the same grid."""
        if blank.quantity != "absorbance" or self.quantity != "absorbance":
            raise DataError("blank subtraction works on absorbance; convert both sets first")
        if blank.axis_unit != self.axis_unit or not self.same_grid(blank.axis):
            raise DataError(
                f"{where(blank.source)}blank is on another axis grid than {self.source or 'the'} "
                "spectra; resample it first or measure it with the same settings"
            )
        return self._new(values=self.values - blank.values.mean(axis=0))


def window_mask(axis: np.ndarray, ranges: Sequence[tuple[float, float]] | tuple[float, float]
                ) -> np.ndarray:
    """Boolean mask of axis points inside any of the closed ranges ``(low, high)``."""
    mask = np.zeros(np.shape(axis), dtype=bool)
    for lo, hi in _ranges(ranges):
        mask |= (axis >= lo) & (axis <= hi)
    return mask


def describe_window(ranges: Sequence[tuple[float, float]] | tuple[float, float],
                    unit: str) -> str:
    """Ranges as people write them, e.g. ``"800-900 nm, 950-990 nm"`` (for messages)."""
    suffix = f" {unit}" if unit else ""
    return ", ".join(f"{lo:g}-{hi:g}{suffix}" for lo, hi in _ranges(ranges))


def _ranges(ranges: Sequence[tuple[float, float]] | tuple[float, float]
            ) -> list[tuple[float, float]]:
    """One range or several as a list of ``(low, high)`` float pairs, each sorted."""
    if len(ranges) == 2 and np.isscalar(ranges[0]):
        ranges = [ranges]  # type: ignore[list-item]
    return [tuple(sorted((float(a), float(b)))) for a, b in ranges]  # type: ignore[misc]


def concat(sets: Sequence[SpectralSet]) -> SpectralSet:
    """Stack several sets that share one grid, unit and quantity into one set."""
    if not sets:
        raise DataError("no spectra to combine")
    first = sets[0]
    for s in sets[1:]:
        if s.axis_unit != first.axis_unit or s.quantity != first.quantity:
            raise DataError(
                f"{where(s.source)}{s.quantity} on a {s.axis_unit} axis cannot be combined with "
                f"{first.quantity} on a {first.axis_unit} axis from {first.source}"
            )
        if not first.same_grid(s.axis):
            raise DataError(
                f"{where(s.source)}axis grid ({s.n_points} points, {s.axis[0]:g}-{s.axis[-1]:g}) "
                f"differs from {first.source or 'the first set'} ({first.n_points} points, "
                f"{first.axis[0]:g}-{first.axis[-1]:g}); resample to one grid first"
            )
        if s.path_length_cm != first.path_length_cm:
            raise DataError(
                f"{where(s.source)}path length {s.path_length_cm} cm differs from "
                f"{first.path_length_cm} cm in {first.source or 'the first set'}; spectra from "
                "different cells must be scaled to one path length before they are combined"
            )
    return SpectralSet(
        axis=first.axis,
        values=np.vstack([s.values for s in sets]),
        sample_ids=[i for s in sets for i in s.sample_ids],
        axis_unit=first.axis_unit,
        quantity=first.quantity,
        path_length_cm=first.path_length_cm,
        source=", ".join(dict.fromkeys(str(s.source) for s in sets if s.source)) or None,
    )

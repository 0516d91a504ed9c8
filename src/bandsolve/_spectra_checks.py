"""Checks behind :class:`bandsolve.spectra.SpectralSet`: axis, ids, finite values, photometric
scale, and the number formatting of range messages."""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from typing import Protocol

import numpy as np

from bandsolve.errors import BandsolveWarning, DataError, where
from bandsolve.units import guess_axis_unit

__all__ = ["check_axis", "check_ids", "check_finite", "check_transmittance_scale",
           "digits_to_tell_apart", "first_nonfinite", "warn_if_ambiguous_unit"]


def check_axis(axis: np.ndarray, src: str | None) -> None:
    """Refuse a non-finite, repeated or non-monotonic axis, naming the point."""
    bad = np.flatnonzero(~np.isfinite(axis))
    if bad.size:
        raise DataError(f"{where(src)}axis value number {bad[0] + 1} is not a finite number")
    if axis.size > 1:
        d = np.diff(axis)
        if np.any(d == 0):
            j = int(np.flatnonzero(d == 0)[0])
            raise DataError(
                f"{where(src)}axis value {axis[j]:g} appears twice (points {j + 1} and {j + 2}); "
                "each axis point must be unique"
            )
        if not (np.all(d > 0) or np.all(d < 0)):
            j = int(np.flatnonzero(np.sign(d) != np.sign(d[0]))[0])
            raise DataError(
                f"{where(src)}axis is not monotonic: it turns at point {j + 2} ({axis[j + 1]:g}); "
                "sort the columns or remove the out-of-order points"
            )


def check_ids(ids: tuple[str, ...], src: str | None) -> None:
    """Refuse empty or repeated sample ids, naming the spectra."""
    if all(map(str.strip, ids)) and len(set(ids)) == len(ids):
        return  # the usual case, checked at C speed; the loop below finds what is wrong
    seen: dict[str, int] = {}
    for i, s in enumerate(ids):
        if not s.strip():
            raise DataError(f"{where(src)}spectrum {i + 1} has an empty sample id; give every "
                            "spectrum an id")
        if s in seen:
            raise DataError(
                f"{where(src)}sample id {s!r} appears twice (spectra {seen[s] + 1} and {i + 1}); "
                "give each spectrum a unique id, or average the replicates (--replicates average; "
                "replicates='average' in Python)"
            )
        seen[s] = i


def check_finite(values: np.ndarray, axis: np.ndarray, ids: tuple[str, ...],
                 src: str | None) -> None:
    """Refuse NaN or infinite values, naming the sample and the axis point."""
    # concentrations.py raises the same way with its own message (row, analyte, "fill it in").
    first = first_nonfinite(values)
    if first is not None:
        i, j, count = first
        raise DataError(
            f"{where(src, sample=ids[i])}value {values[i, j]} at {axis[j]:g} is not a finite "
            f"number ({count} such values in all); fix or remove that spectrum"
        )


def first_nonfinite(values: np.ndarray) -> tuple[int, int, int] | None:
    """Row and column of the first NaN or infinity of a 2-D array, and how many there are."""
    # A row sum is finite only if every value is (NaN and ±inf propagate); one product reads
    # the data once at memory speed.  An overflowing sum of finite values falls through to
    # the exact check, which then finds nothing.
    with np.errstate(over="ignore", invalid="ignore"):
        sums = values @ np.ones(values.shape[1])
    if np.isfinite(sums).all():
        return None
    bad = ~np.isfinite(values)
    if not bad.any():
        return None
    i, j = np.argwhere(bad)[0]
    return int(i), int(j), int(bad.sum())


class _Spectra(Protocol):
    """What the checks read of a SpectralSet (this module sits below :mod:`bandsolve.spectra`)."""

    values: np.ndarray
    axis: np.ndarray
    axis_unit: str
    quantity: str
    sample_ids: tuple[str, ...]
    source: str | None


def check_transmittance_scale(spectra: _Spectra, limit: float) -> None:
    """Refuse transmittance above ``limit``: the quantity was declared wrongly."""
    over = spectra.values > limit
    if not over.any():
        return
    i, j = np.argwhere(over)[0]
    percent = spectra.quantity == "percent_transmittance"
    if percent:
        meaning = ("percent transmittance lies between 0 and 100; check the reference (100 %) "
                   "measurement, or if the values are absorbance state so (--quantity "
                   "absorbance; quantity='absorbance' in Python)")
    else:
        meaning = ("fractional transmittance lies between 0 and 1; if the values are percent, "
                   "state so (--quantity percent_transmittance; "
                   "quantity='percent_transmittance' in Python)")
    raise DataError(
        f"{where(spectra.source, sample=spectra.sample_ids[i])}{spectra.quantity.replace('_', ' ')}"
        f" {spectra.values[i, j]:g} at {spectra.axis[j]:g} {spectra.axis_unit} is above "
        f"{limit:g} ({int(over.sum())} such values in all); {meaning}"
    )


def warn_if_ambiguous_unit(axis: np.ndarray, unit_given: bool, source: str | None) -> None:
    """Warn when the axis unit was not stated and cannot be told from the axis range."""
    if not unit_given and guess_axis_unit(axis) is None:
        warnings.warn(
            f"{where(source)}axis {np.min(axis):g}-{np.max(axis):g} could be nm or cm-1; nm is "
            "assumed; state the unit (--axis-unit nm|um|cm-1) to settle it",
            BandsolveWarning,
            stacklevel=2,
        )


def digits_to_tell_apart(pairs: Sequence[tuple[float, float]]) -> int:
    """Fewest significant digits (at least 6) that print each pair as two different numbers."""
    for d in range(6, 17):
        if all(f"{a:.{d}g}" != f"{b:.{d}g}" for a, b in pairs):
            return d
    return 17  # 17 significant digits tell any two different doubles apart (IEEE 754)

"""Pipettes a laboratory owns, and the volumes they can actually deliver.

A volume on a preparation sheet is only useful if a pipette in the laboratory can be set to
it. An adjustable pipette covers a range in fixed steps (``"100-1000 µL by 5 µL"``); a
volumetric (bulb) pipette delivers one volume (``"5 mL"``). Volumes larger than every pipette
are delivered in several equal fills of the largest one.
"""

from __future__ import annotations

import math
import re
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from bandsolve.design.amounts import parse_volume
from bandsolve.errors import DataError

__all__ = ["Pipette", "deliverable_volume", "deliverable_volumes", "parse_pipette"]

_PIPETTE_RE = re.compile(
    r"^\s*(?P<low>[\d.eE+-]+)\s*(?:-|–|\bto\b)\s*(?P<high>[\d.eE+-]+)\s*(?P<unit>[µu]?L|mL)"
    r"\s+by\s+(?P<step>.+?)\s*$")


@dataclass(frozen=True)
class Pipette:
    """One pipette: the volumes it can be set to, in mL.

    Attributes
    ----------
    low_ml, high_ml : float
        Smallest and largest volume (equal for a volumetric pipette).
    step_ml : float
        Setting increment (0 for a volumetric pipette).
    text : str
        As the user wrote it, for messages.
    """

    low_ml: float
    high_ml: float
    step_ml: float
    text: str

    def nearest(self, volume_ml: float) -> float:
        """The volume this pipette can be set to that is nearest to ``volume_ml`` (mL)."""
        if self.step_ml == 0:
            return self.low_ml
        clipped = min(max(volume_ml, self.low_ml), self.high_ml)
        steps = round((clipped - self.low_ml) / self.step_ml)
        value = self.low_ml + steps * self.step_ml
        return float(f"{value:.12g}")  # a whole number of steps, without binary noise


def parse_pipette(text: str) -> Pipette:
    """Read ``"100-1000 µL by 5 µL"`` (adjustable) or ``"5 mL"`` (volumetric).

    Raises
    ------
    DataError
        If the text has neither form, or the range or step is not positive.
    """
    match = _PIPETTE_RE.match(text)
    if match is None:
        volume = _volume_or_none(text)
        if volume is None:
            raise DataError(f"pipette {text!r} cannot be read; write an adjustable pipette as "
                            "'100-1000 µL by 5 µL' or a volumetric one as '5 mL'")
        return Pipette(volume, volume, 0.0, text.strip())
    unit = match["unit"]
    low = parse_volume(f"{match['low']} {unit}")
    high = parse_volume(f"{match['high']} {unit}")
    step = parse_volume(match["step"])
    if not low < high or step > high - low:
        raise DataError(f"pipette {text!r}: the range must rise and the step fit inside it, "
                        "e.g. '100-1000 µL by 5 µL'")
    return Pipette(low, high, step, text.strip())


def _volume_or_none(text: str) -> float | None:
    try:
        return parse_volume(text)
    except DataError:
        return None


def deliverable_volume(volume_ml: float, pipettes: Sequence[Pipette]) -> float:
    """The volume nearest to ``volume_ml`` that one of ``pipettes`` delivers (mL).

    Volumes above every pipette are split into the fewest equal fills of the largest one;
    zero stays zero. A volume below half the smallest pipette's minimum gives NaN (it cannot
    be pipetted: dilute the stock).
    """
    if volume_ml == 0:
        return 0.0
    best, best_error = math.nan, math.inf
    smallest = min(p.low_ml for p in pipettes)
    if volume_ml < smallest / 2:
        return math.nan
    largest = max(p.high_ml for p in pipettes)
    for pipette in pipettes:
        ratio = volume_ml / pipette.high_ml
        for fills in {max(1, math.floor(ratio + 1e-9)), max(1, math.ceil(ratio - 1e-9))}:
            if fills > 1 and pipette.high_ml < largest:
                continue  # repeated fills only with the largest pipette
            value = float(f"{pipette.nearest(volume_ml / fills) * fills:.12g}")
            error = abs(value - volume_ml)
            if error < best_error - 1e-12:
                best, best_error = value, error
    return best


def deliverable_volumes(volumes_ml: np.ndarray, pipettes: Sequence[Pipette]) -> np.ndarray:
    """:func:`deliverable_volume` of every entry of an array (same shape)."""
    flat = [deliverable_volume(float(v), pipettes) for v in np.ravel(volumes_ml)]
    return np.array(flat, dtype=float).reshape(np.shape(volumes_ml))

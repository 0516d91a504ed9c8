"""Result flags: short machine-readable codes in the ``flag_codes`` column of every prediction.

The column was called ``flags`` in earlier versions; it was renamed because a pandas
``DataFrame`` already has a ``flags`` attribute, so ``results.flags`` did not return it.

The column is empty when nothing is wrong; otherwise it holds codes separated by ``;``. Codes
about one analyte carry its name after a colon, e.g. ``above_range:dye B``.
"""

from __future__ import annotations

from collections.abc import Iterable

import numpy as np

__all__ = ["FLAG_BITS", "FLAG_CODES", "FLAG_COLUMN", "SEPARATOR", "flag_bits", "join_flags",
           "split_flags"]

SEPARATOR = ";"

#: Name of the flag column in every results table (CSV header and DataFrame column).
FLAG_COLUMN = "flag_codes"

#: Every flag code and what it means for the result, in the chemist's terms, in the order the
#: checks run (the order of codes in the column).
FLAG_CODES: dict[str, str] = {
    "residual": (
        "The spectrum is not explained by the model (spectral residual or Q above its limit): "
        "something absorbs that the calibration does not know, or the baseline or scatter "
        "changed. Withhold the result and investigate."
    ),
    "t2": (
        "Hotelling T² above its limit: the sample lies outside the calibrated composition "
        "space (extrapolation). The result is reported but is less reliable."
    ),
    "leverage": (
        "Leverage above its limit: the sample is far from the calibration centre and has a "
        "strong influence on its own prediction (extrapolation)."
    ),
    "ceiling": (
        "Absorbance above the photometric ceiling somewhere in the used range: the "
        "instrument response may be non-linear there. Dilute and measure again."
    ),
    "above_range": (
        "The concentration is above the highest calibrated value for that analyte by more "
        "than the one-sided t quantile at the model's α times the standard error "
        "(extrapolation)."
    ),
    "below_range": (
        "The concentration is below the lowest calibrated value (when that is above zero) by "
        "more than the one-sided t quantile at the model's α times the standard error."
    ),
    "negative": (
        "The concentration is significantly below zero (by more than the one-sided t "
        "quantile at the model's α times the standard error), which no real sample can "
        "have: check the blank, baseline or model."
    ),
    "no_se": (
        "No standard error could be estimated (no residual degrees of freedom, or a "
        "non-negative CLS concentration held at zero, which has no symmetric interval); the "
        "notes column says why."
    ),
    "unchecked": (
        "Nothing to check the spectrum against: the model has no residual limit (built from "
        "absorptivities without replicate blanks, or from too few standards), so an "
        "unmodelled absorber would go unnoticed. Rebuild with replicate blanks (--blanks) or "
        "more standards than analytes."
    ),
}


#: Bit of each code in flag maps (``batch.images``, Dask output): 1 << its place in
#: :data:`FLAG_CODES`; a pixel's value is the sum of its codes' bits. Codes are only ever added
#: at the end, so the bits of files already written keep their meaning.
FLAG_BITS: dict[str, int] = {code: 1 << i for i, code in enumerate(FLAG_CODES)}


def flag_bits(texts: Iterable[str]) -> np.ndarray:
    """Bit masks (uint16) of flag column texts, per :data:`FLAG_BITS`."""
    texts = list(texts)
    out = np.zeros(len(texts), dtype=np.uint16)
    for i, text in enumerate(texts):
        for code in split_flags(text):
            out[i] |= FLAG_BITS.get(code.split(":", 1)[0], 0)
    return out


def join_flags(codes: Iterable[str]) -> str:
    """Join flag codes into the column text, keeping first-seen order without repeats."""
    return SEPARATOR.join(dict.fromkeys(c for c in codes if c))


def split_flags(text: str) -> list[str]:
    """Split the column text back into codes (empty text gives an empty list)."""
    return [c for c in str(text).split(SEPARATOR) if c] if text else []

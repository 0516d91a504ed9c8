"""Shared last step of every spectra reader: options, replicates, and the checks on the result."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from bandsolve.errors import BandsolveError, DataError, FormatError, where
from bandsolve.spectra import QUANTITIES, SpectralSet, warn_if_ambiguous_unit
from bandsolve.units import guess_axis_unit, normalise_unit

_QUANTITY_ALIASES = {
    "a": "absorbance", "abs": "absorbance", "au": "absorbance",
    "t": "transmittance", "%t": "percent_transmittance", "percent_t": "percent_transmittance",
    "transmittance_percent": "percent_transmittance", "%_transmittance": "percent_transmittance",
}
REPLICATE_MODES = ("error", "average")


@dataclass(frozen=True)
class Options:
    """Reader options as given by the caller (None = take from the file, else a default)."""

    axis_unit: str | None = None
    quantity: str | None = None
    path_length_cm: float | None = None
    replicates: str = "error"

    def __post_init__(self) -> None:
        if self.replicates not in REPLICATE_MODES:
            raise DataError(
                f"replicates {self.replicates!r} is not an option; use 'error' or 'average'"
            )
        if self.axis_unit is not None:
            normalise_unit(self.axis_unit)
        if self.quantity is not None:
            object.__setattr__(self, "quantity", normalise_quantity(self.quantity))


def normalise_quantity(text: str) -> str:
    """Canonical quantity name for spellings like ``%T`` or ``percent transmittance``."""
    key = str(text).strip().lower().replace(" ", "_").replace("-", "_")
    key = _QUANTITY_ALIASES.get(key, key)
    if key not in QUANTITIES:
        raise DataError(f"unknown quantity {text!r}; use one of {', '.join(QUANTITIES)}")
    return key


def options_from_file(options: Options, meta: Mapping[str, str], source: str) -> Options:
    """Fill options the caller left open from ``# quantity:`` / ``# axis_unit:`` /
    ``# path_length_cm:`` comment lines."""
    try:
        unit = options.axis_unit or meta.get("axis_unit")
        if unit is not None:
            normalise_unit(unit)
        quantity = options.quantity or meta.get("quantity")
        path = options.path_length_cm
        if path is None and meta.get("path_length_cm"):
            path = float(meta["path_length_cm"].replace(",", "."))
            if not (math.isfinite(path) and path > 0):
                raise ValueError(f"path length {path}")
        return Options(unit, quantity, path, options.replicates)
    except (BandsolveError, ValueError) as exc:
        raise FormatError(
            f"{where(source)}a header comment line is not valid ({exc}); write it as "
            "'# axis_unit: nm', '# quantity: absorbance' or '# path_length_cm: 1.0'"
        ) from None


def build(axis: np.ndarray, values: np.ndarray, ids: Sequence[str], places: Sequence[str],
          options: Options, source: str, *, unit_from: str = "argument") -> SpectralSet:
    """Make the :class:`SpectralSet`; handle repeated ids; record where the axis unit came from.

    ``places`` says where each spectrum is in the file (for example ``"row 5"``) so a
    repeated id can be reported by position. ``unit_from`` records where a given axis unit
    came from (``"argument"``, ``"file"``, or ``"guess"``/``"default"`` when passed on).
    ``values`` must be the reader's own array: it is made read-only.
    """
    # The reader's own parsed array, handed over read-only: the set takes it as a view
    # instead of a second copy (SpectralSet copies only arrays that could still change).
    values = np.ascontiguousarray(values, dtype=np.float64)
    values.setflags(write=False)
    ids = [str(s).strip() for s in ids]
    for k, s in enumerate(ids):
        if not s:
            raise FormatError(f"{where(source)}{places[k]} has an empty sample id; give it an id")
    first_seen: dict[str, int] = {}
    repeated = None
    for k, s in enumerate(ids):
        if s in first_seen and repeated is None:
            repeated = (first_seen[s], k)
        first_seen.setdefault(s, k)
    if options.axis_unit is not None:
        unit = options.axis_unit
    else:
        guess = guess_axis_unit(np.asarray(axis, dtype=float))
        unit, unit_from = guess or "nm", "guess" if guess else "default"
    common = dict(axis=axis, values=values, axis_unit=unit,
                  quantity=options.quantity or "absorbance",
                  path_length_cm=options.path_length_cm, source=source,
                  metadata={"axis_unit_from": unit_from})
    if repeated is None:
        return SpectralSet(sample_ids=ids, **common)
    if options.replicates == "error":
        a, b = repeated
        raise DataError(
            f"{where(source)}sample id {ids[b]!r} appears twice ({places[a]} and {places[b]}); "
            "give each spectrum a unique id, or average the replicates (--replicates average; "
            "replicates='average' in Python)"
        )
    positions = [str(k) for k in range(len(ids))]
    return SpectralSet(sample_ids=positions, **common).average_by(ids)


def final_checks(spectra: SpectralSet) -> SpectralSet:
    """Warn about %T declared as absorbance and about an axis unit that was only assumed."""
    spectra.check_quantity()
    stated = spectra.metadata.get("axis_unit_from") in ("argument", "file")
    warn_if_ambiguous_unit(spectra.axis, stated, spectra.source)
    return spectra

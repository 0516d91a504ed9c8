"""Text parsing and unit handling for calibration designs and preparation sheets.

Analyte ranges (``"dye A=0-10 mg/L"``), stock amounts (``"dye A=1000 mg/L"``) and volumes
(``"50 mL"``) are read here, and concentrations are converted between units of the same kind
(mass per volume, or amount of substance per volume).
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from bandsolve.concentrations import split_unit
from bandsolve.errors import DataError, where
from bandsolve.spectra import SpectralSet

__all__ = [
    "AnalyteRange",
    "Amount",
    "absorptivities_for",
    "concentration_factor",
    "parse_amount",
    "parse_analyte_range",
    "parse_volume",
]

_NUMBER = r"(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?"
_UNIT = r"(?P<unit>[^\d\s.,+\-–].*?)"  # a unit never starts with a digit or sign
_RANGE_RE = re.compile(
    rf"^\s*(?P<name>[^=]*?)\s*=\s*(?P<low>{_NUMBER})\s*(?:-|–|\bto\b)\s*(?P<high>{_NUMBER})"
    rf"\s*{_UNIT}\s*$"
)
_AMOUNT_RE = re.compile(rf"^\s*(?P<name>[^=]*?)\s*=\s*(?P<value>{_NUMBER})\s*{_UNIT}\s*$")
_VOLUME_RE = re.compile(rf"^\s*(?P<value>{_NUMBER})\s*(?P<unit>\S+)\s*$")

# Factor to the base unit of each kind: g/L for mass concentration, mol/L for molar concentration.
_MASS = {"g/L": 1.0, "mg/mL": 1.0, "mg/L": 1e-3, "µg/mL": 1e-3, "µg/L": 1e-6, "ng/mL": 1e-6,
         "ng/L": 1e-9}
_MOLAR = {"mol/L": 1.0, "M": 1.0, "mmol/L": 1e-3, "mM": 1e-3, "µmol/L": 1e-6, "µM": 1e-6,
          "nmol/L": 1e-9, "nM": 1e-9}
_VOLUME_ML = {"L": 1000.0, "mL": 1.0, "µL": 1e-3}


@dataclass(frozen=True)
class AnalyteRange:
    """Concentration range of one analyte in the calibration set.

    Attributes
    ----------
    name : str
        Analyte name as the chemist writes it (``"dye A"``).
    low, high : float
        Lowest and highest concentration, in ``unit``; ``0 <= low < high``.
    unit : str
        Concentration unit text (``"mg/L"``, ``"mmol/L"``...).
    """

    name: str
    low: float
    high: float
    unit: str

    @property
    def column(self) -> str:
        """Column header of this analyte in concentration tables: ``"<name> [<unit>]"``."""
        return f"{self.name} [{self.unit}]"


@dataclass(frozen=True)
class Amount:
    """A named concentration, such as a stock solution (``"dye A=1000 mg/L"``)."""

    name: str
    value: float
    unit: str


def _normalise_micro(unit: str) -> str:
    # Accept the ASCII 'u' and the Greek letter mu for the micro prefix.
    if unit[:1] in ("u", "μ"):
        return "µ" + unit[1:]
    return unit


def parse_analyte_range(text: str) -> AnalyteRange:
    """Read an analyte range such as ``"dye A=0-10 mg/L"``.

    Parameters
    ----------
    text : str
        ``"<name>=<low>-<high> <unit>"``; ``"to"`` or an en dash may replace the hyphen.

    Returns
    -------
    AnalyteRange

    Raises
    ------
    DataError
        If the text does not have that form, or ``low >= high``.
    """
    match = _RANGE_RE.match(text)
    if match is None or not match["name"]:
        raise DataError(
            f"analyte range {text!r} cannot be read; write it as 'name=low-high unit', "
            "for example 'dye A=0-10 mg/L'"
        )
    low, high = float(match["low"]), float(match["high"])
    if not low < high:
        raise DataError(
            f"analyte range {text!r}: the low end {low:g} must be below the high end {high:g}; "
            "write it as 'name=low-high unit', for example 'dye A=0-10 mg/L'"
        )
    return AnalyteRange(match["name"], low, high, match["unit"])


def parse_amount(text: str) -> Amount:
    """Read a named concentration such as a stock solution, ``"dye A=1000 mg/L"``.

    Parameters
    ----------
    text : str
        ``"<name>=<value> <unit>"``; the value must be positive.

    Returns
    -------
    Amount

    Raises
    ------
    DataError
        If the text does not have that form or the value is zero.
    """
    match = _AMOUNT_RE.match(text)
    if match is None or not match["name"] or float(match["value"]) <= 0:
        raise DataError(
            f"concentration {text!r} cannot be read; write it as 'name=value unit' with a "
            "positive value, for example 'dye A=1000 mg/L'"
        )
    return Amount(match["name"], float(match["value"]), match["unit"])


def parse_volume(text: str) -> float:
    """Read a volume such as ``"50 mL"``, ``"0.05 L"`` or ``"100 µL"`` and return it in mL.

    Parameters
    ----------
    text : str
        A positive number followed by ``L``, ``mL``, ``µL`` (or ``uL``).

    Returns
    -------
    float
        The volume in millilitres.

    Raises
    ------
    DataError
        If the text does not have that form.
    """
    match = _VOLUME_RE.match(text)
    unit = _normalise_micro(match["unit"]) if match else ""
    if match is None or unit not in _VOLUME_ML or float(match["value"]) <= 0:
        raise DataError(
            f"volume {text!r} cannot be read; write a positive number and one of "
            "L, mL, µL (or uL), for example '50 mL'"
        )
    return float(match["value"]) * _VOLUME_ML[unit]


def concentration_factor(from_unit: str, to_unit: str, context: str = "") -> float:
    """Factor that converts a concentration in ``from_unit`` into ``to_unit``.

    Identical unit texts always convert with factor 1. Otherwise both units must be of the same
    kind: mass per volume (g/L, mg/L, µg/L, ng/L, mg/mL, µg/mL, ng/mL) or amount of substance per
    volume (mol/L, mmol/L, µmol/L, nmol/L and M, mM, µM, nM).

    Raises
    ------
    DataError
        If the units cannot be converted (for example mg/L and mmol/L: that needs the molar mass).
    """
    if from_unit == to_unit:
        return 1.0
    a, b = _normalise_micro(from_unit), _normalise_micro(to_unit)
    for table in (_MASS, _MOLAR):
        if a in table and b in table:
            return table[a] / table[b]
    raise DataError(
        f"{context}cannot convert {from_unit!r} to {to_unit!r}; give both in the same kind of "
        f"unit: mass per volume ({', '.join(_MASS)}) or amount per volume ({', '.join(_MOLAR)}). "
        "Converting between the two needs the molar mass: convert the values yourself"
    )


def absorptivities_for(analytes: Sequence[AnalyteRange],
                       table: SpectralSet) -> NDArray[np.float64]:
    """Rows of an absorptivity table in analyte order, per unit of each analyte's concentration.

    Components are matched to analytes by name without the unit bracket, so the table of
    :func:`bandsolve.io.read_absorptivities` (labels such as ``"dye A [mg/L]"``) serves the
    ranges ``"dye A=0-10 mg/L"``. A label without a unit is taken to be in the analyte's unit.
    When the units differ but are of the same kind (``[g/L]`` with ``mg/L``) the row is
    converted: ``ε_analyte = ε_label · f``, with ``f`` the factor that turns a concentration in
    the analyte's unit into the label's unit (Beer-Lambert, ``A = ε c b``).

    Parameters
    ----------
    analytes : sequence of AnalyteRange
        The m analytes of the plan.
    table : SpectralSet of shape (k, p)
        Absorptivities (AU per unit concentration per cm), one row per component; k >= m.

    Returns
    -------
    ndarray of shape (m, p)
        Absorptivity of each analyte in AU per (analyte unit × cm).

    Raises
    ------
    DataError
        If an analyte has no row or two rows, or its label's unit cannot be converted into the
        analyte's unit (mg/L against mmol/L needs the molar mass).
    """
    parsed = [split_unit(label) for label in table.sample_ids]
    names = [name for name, _ in parsed]
    rows = []
    for analyte in analytes:
        hits = [i for i, name in enumerate(names) if name == analyte.name]
        if len(hits) != 1:
            problem = "no absorptivity row" if not hits else f"{len(hits)} absorptivity rows"
            raise DataError(
                f"{where(table.source)}{problem} for {analyte.name!r} (components: "
                f"{list(table.sample_ids)}); the first column must name every analyte once, "
                f"e.g. '{analyte.column}'"
            )
        label, unit = table.sample_ids[hits[0]], parsed[hits[0]][1]
        factor = 1.0 if unit is None else concentration_factor(
            analyte.unit, unit,
            f"{where(table.source)}absorptivity row {label!r} for the analyte "
            f"'{analyte.name}' in {analyte.unit}: ")
        rows.append(table.values[hits[0]] * factor)
    return np.array(rows, dtype=float).reshape(len(rows), table.values.shape[1])

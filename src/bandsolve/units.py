"""Spectral axis units and their conversions.

Wavelength, wavenumber and photon energy are related through E = h c / λ and ν̃ = 1/λ,
evaluated with the exact SI values of h, c and e (SI Brochure, 9th edition, 2019), the
values :mod:`scipy.constants` holds (tested); importing that module would cost 0.1 s of start-up.
"""

from __future__ import annotations

import numpy as np

from bandsolve.errors import DataError

__all__ = ["AXIS_UNITS", "normalise_unit", "convert_axis_values", "guess_axis_unit", "axis_label"]

#: Canonical axis unit names and the spellings accepted for each.
AXIS_UNITS: dict[str, tuple[str, ...]] = {
    "nm": ("nm", "nanometer", "nanometers", "nanometre", "nanometres"),
    "um": ("um", "µm", "μm", "micrometer", "micrometers", "micrometre", "micron", "microns"),
    "cm-1": ("cm-1", "cm^-1", "cm⁻¹", "1/cm", "wavenumber", "wavenumbers"),
    "eV": ("ev", "electronvolt", "electronvolts"),
    "J": ("j", "joule", "joules"),
}
_LOOKUP = {alias.lower(): unit for unit, aliases in AXIS_UNITS.items() for alias in aliases}

# Every unit is first converted to wavelength in metres.
_PLANCK = 6.62607015e-34  # J s, exact since 2019
_LIGHT = 299792458.0  # m/s, exact
_ELECTRON_VOLT = 1.602176634e-19  # J, exact (elementary charge × 1 V)
_HC = _PLANCK * _LIGHT  # J m


def normalise_unit(unit: str) -> str:
    """Return the canonical name (``nm``, ``um``, ``cm-1``, ``eV`` or ``J``) of an axis unit.

    Raises
    ------
    DataError
        If the unit is not recognised; the message lists the accepted spellings.
    """
    key = str(unit).strip().lower()
    if key in _LOOKUP:
        return _LOOKUP[key]
    raise DataError(
        f"unknown axis unit {unit!r}; use one of nm, um (µm), cm-1 (1/cm), eV or J"
    )


def _to_metres(values: np.ndarray, unit: str) -> np.ndarray:
    if unit == "nm":
        return values * 1e-9
    if unit == "um":
        return values * 1e-6
    if unit == "cm-1":
        return 1.0 / (values * 100.0)
    if unit == "eV":
        return _HC / (values * _ELECTRON_VOLT)
    return _HC / values  # J


def _from_metres(metres: np.ndarray, unit: str) -> np.ndarray:
    if unit == "nm":
        return metres * 1e9
    if unit == "um":
        return metres * 1e6
    if unit == "cm-1":
        return 1.0 / (metres * 100.0)
    if unit == "eV":
        return _HC / metres / _ELECTRON_VOLT
    return _HC / metres  # J


def convert_axis_values(values: np.ndarray, from_unit: str, to_unit: str) -> np.ndarray:
    """Convert spectral axis values between wavelength, wavenumber and photon energy.

    Parameters
    ----------
    values : array_like, shape (p,)
        Axis values in ``from_unit``; must be finite and strictly positive.
    from_unit, to_unit : str
        ``nm``, ``um``, ``cm-1``, ``eV`` or ``J`` (aliases accepted, see :data:`AXIS_UNITS`).

    Returns
    -------
    ndarray, shape (p,)
        The same points expressed in ``to_unit``. Reciprocal units reverse the order.

    Examples
    --------
    >>> round(float(convert_axis_values([3.4], "um", "cm-1")[0]), 1)
    2941.2
    """
    src, dst = normalise_unit(from_unit), normalise_unit(to_unit)
    arr = np.asarray(values, dtype=float)
    if src == dst:
        return arr.copy()
    if np.any(~np.isfinite(arr)) or np.any(arr <= 0):
        raise DataError(
            f"cannot convert axis from {src} to {dst}: values must be finite and above zero"
        )
    return _from_metres(_to_metres(arr, src), dst)


def guess_axis_unit(axis: np.ndarray) -> str | None:
    """Guess the unit of a spectral axis from its range, or return None when ambiguous.

    Ranges (common practice for UV-Vis-NIR work): an axis inside 0.1-3.3 is read as µm; inside
    100-1100 as nm (UV-Vis); starting at or above 3300 as cm⁻¹ (no UV-Vis-NIR wavelength is that
    long); starting below 400 and ending at or below 3300 as nm (UV-Vis-NIR, since wavenumbers
    below 400 cm⁻¹ are far infrared). Anything else (for example 1100-3300 or 400-4000) could
    be either, and None tells the caller to ask the user to state the unit.
    """
    arr = np.asarray(axis, dtype=float)
    if arr.size == 0 or not np.all(np.isfinite(arr)):
        return None
    lo, hi = float(np.min(arr)), float(np.max(arr))
    if 0.1 <= lo and hi <= 3.3:
        return "um"
    if 100 <= lo and hi <= 1100:
        return "nm"
    if lo >= 3300:
        return "cm-1"
    if 100 <= lo < 400 and hi <= 3300:
        return "nm"
    return None


def axis_label(unit: str) -> str:
    """A human axis label with the unit, e.g. ``"wavelength [nm]"``."""
    unit = normalise_unit(unit)
    return {
        "nm": "wavelength [nm]",
        "um": "wavelength [µm]",
        "cm-1": "wavenumber [cm⁻¹]",
        "eV": "photon energy [eV]",
        "J": "photon energy [J]",
    }[unit]

"""Axis units and photometric conversions, checked against physical constants and definitions."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import constants

from bandsolve import units
from bandsolve.errors import DataError
from bandsolve.spectra import SpectralSet
from bandsolve.units import convert_axis_values, guess_axis_unit, normalise_unit


def test_the_exact_si_constants_are_scipys():
    # h, c and e are exact by the SI definition of 2019; scipy.constants is the reference.
    assert units._PLANCK == constants.h
    assert units._LIGHT == constants.c
    assert units._ELECTRON_VOLT == constants.electron_volt


def test_photon_energy_at_500_nm():
    energy = convert_axis_values([500.0], "nm", "J")[0]
    # E = h c / λ with the CODATA constants of scipy.constants (CODATA 2018)
    assert energy == pytest.approx(constants.h * constants.c / 500e-9, rel=1e-12)
    # ≈ 3.97e-19 J: from memory (textbook value for green light)
    assert energy == pytest.approx(3.97e-19, rel=2e-3)


def test_photon_energy_in_ev():
    # 1239.84 eV nm = h c / e (CODATA 2018 via scipy.constants)
    hc_ev_nm = constants.h * constants.c / constants.electron_volt * 1e9
    assert convert_axis_values([1000.0], "nm", "eV")[0] == pytest.approx(hc_ev_nm / 1000.0)


def test_micrometre_to_wavenumber():
    # ν̃ = 1/λ: 3.4 µm = 3.4e-4 cm → 2941.18 cm⁻¹ (definition of wavenumber)
    assert convert_axis_values([3.4], "um", "cm-1")[0] == pytest.approx(1e4 / 3.4, rel=1e-12)
    assert convert_axis_values([3.4], "µm", "1/cm")[0] == pytest.approx(2941.18, abs=0.01)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(100.0, 3000.0), min_size=1, max_size=20))
def test_round_trip_nm_wavenumber_ev(wavelengths):
    nm = np.array(wavelengths)
    back = convert_axis_values(
        convert_axis_values(convert_axis_values(nm, "nm", "cm-1"), "cm-1", "eV"), "eV", "nm"
    )
    # exact in theory (reciprocal relations); float rounding only
    np.testing.assert_allclose(back, nm, rtol=1e-12)


def test_conversion_refuses_non_positive_values():
    with pytest.raises(DataError, match="above zero"):
        convert_axis_values([0.0, 500.0], "nm", "cm-1")


def test_unknown_unit_names_the_accepted_spellings():
    assert normalise_unit("Nanometers") == "nm"
    with pytest.raises(DataError, match=r"unknown axis unit 'furlong'.*nm"):
        normalise_unit("furlong")


@pytest.mark.parametrize(
    ("axis", "unit"),
    [
        # common practice: UV-Vis in nm, NIR/IR in µm or cm⁻¹
        (np.arange(200.0, 801.0), "nm"),
        (np.arange(190.0, 2501.0), "nm"),
        (np.linspace(0.2, 2.5, 50), "um"),
        (np.arange(4000.0, 12001.0, 10), "cm-1"),
        (np.arange(400.0, 4001.0, 10), None),
        (np.arange(1200.0, 3001.0, 10), None),
    ],
)
def test_guess_axis_unit(axis, unit):
    assert guess_axis_unit(axis) == unit


def test_percent_transmittance_to_absorbance():
    t = SpectralSet([400.0, 500.0, 600.0], [[100.0, 10.0, 1.0]], ["s"],
                    quantity="percent_transmittance")
    # A = -log10(T): 100 %T → 0, 10 %T → 1, 1 %T → 2 (IUPAC Gold Book, "absorbance")
    np.testing.assert_allclose(t.to_absorbance().values, [[0.0, 1.0, 2.0]], atol=1e-15)
    frac = SpectralSet([400.0, 500.0], [[1.0, 0.5]], ["s"], quantity="transmittance")
    # A = -log10(0.5) = 0.30103 (IUPAC Gold Book definition; log10(2) from numpy)
    np.testing.assert_allclose(frac.to_absorbance().values, [[0.0, np.log10(2.0)]])


@pytest.mark.parametrize("bad", [0.0, -3.0])
def test_non_positive_transmittance_names_sample_and_wavelength(bad):
    t = SpectralSet([400.0, 450.0, 500.0], [[50.0, 40.0, 30.0], [50.0, bad, 30.0]],
                    ["ok", "dark-7"], quantity="percent_transmittance", source="run.csv")
    with pytest.raises(DataError, match=r"run\.csv \(sample 'dark-7'\).*at 450 nm"):
        t.to_absorbance()

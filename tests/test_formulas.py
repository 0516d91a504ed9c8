"""CSV exports never carry a text cell that a spreadsheet would run as a formula (OWASP CSV
injection guidance), and numbers stay numbers."""

from __future__ import annotations

import numpy as np
import pandas as pd
from hypothesis import given
from hypothesis import strategies as st

from bandsolve.calibration.modelfile import save_model
from bandsolve.cli import main
from bandsolve.io import write_spectra_csv
from bandsolve.io.formulas import RISKY_STARTS, neutralise_formulas, neutralise_text
from bandsolve.spectra import SpectralSet

from .conftest import gaussian_bands, two_analyte_model

AXIS = np.linspace(400.0, 700.0, 41)
PURE = gaussian_bands(AXIS, (480, 560), (40, 45))


def _is_number(text: str) -> bool:
    # Reference: pandas' own number parser, and only finite values.
    value = pd.to_numeric(pd.Series([text]), errors="coerce").iloc[0]
    return bool(np.isfinite(value))


@given(st.text(max_size=30))
def test_no_cell_can_start_a_formula_and_the_text_is_kept(text):
    # OWASP CSV injection: cells must not start with = + - @ tab or carriage return.
    safe = neutralise_text(text)
    assert not safe.startswith(RISKY_STARTS) or _is_number(safe)
    assert safe in (text, "'" + text)


def test_numbers_stay_numbers_and_text_numbers_are_kept():
    frame = pd.DataFrame({"sample": ["=1+1", "-5", "+cmd|' /C calc'!A0", "@SUM(A1)", "\tx",
                                     "ok"],
                          "A [mg/L]": [-1.5, 2.0, -0.0, 3.0, 4.0, -7.25]})
    safe = neutralise_formulas(frame)
    assert list(safe["sample"]) == ["'=1+1", "-5", "'+cmd|' /C calc'!A0", "'@SUM(A1)", "'\tx",
                                    "ok"]
    assert safe["A [mg/L]"].dtype == float
    np.testing.assert_array_equal(safe["A [mg/L]"], frame["A [mg/L]"])


def test_results_csv_and_ledger_export_are_formula_safe(tmp_path, capsys):
    rng = np.random.default_rng(8)
    save_model(two_analyte_model(AXIS, PURE, rng), tmp_path / "m.bsm")
    ids = ["=1+1", "@SUM(A1)", "+cmd", "-2+3", "-5", "plain"]
    routine = SpectralSet(axis=AXIS, values=rng.uniform(0.1, 1.0, (6, 2)) @ PURE,
                          sample_ids=ids)
    write_spectra_csv(routine, tmp_path / "r.csv")
    out, ledger = tmp_path / "out.csv", tmp_path / "l.sqlite"
    assert main(["predict", str(tmp_path / "m.bsm"), str(tmp_path / "r.csv"), "--out",
                 str(out), "--ledger", str(ledger)]) == 0
    expected = ["'=1+1", "'@SUM(A1)", "'+cmd", "'-2+3", "-5", "plain"]
    table = pd.read_csv(out, keep_default_na=False, dtype={"sample": str})
    assert list(table["sample"]) == expected
    assert table["A [mg/L]"].dtype == float  # concentrations (negative ones too) stay numbers
    assert main(["ledger", str(ledger), "--export", str(tmp_path / "x.csv")]) == 0
    exported = pd.read_csv(tmp_path / "x.csv", keep_default_na=False, dtype={"sample": str})
    assert list(exported["sample"]) == expected
    assert main(["predict", str(tmp_path / "m.bsm"), str(tmp_path / "r.csv"), "--out",
                 str(tmp_path / "raw.csv"), "--keep-formulas"]) == 0
    raw = pd.read_csv(tmp_path / "raw.csv", keep_default_na=False, dtype={"sample": str})
    assert list(raw["sample"]) == ids
    capsys.readouterr()


def test_mixed_object_columns_keep_what_is_not_text():
    frame = pd.DataFrame({"note": ["=A1", None, 3, "-0.5", "ok", float("nan")],
                          "count": pd.Series([1, 2, 3, 4, 5, 6], dtype=object)})
    safe = neutralise_formulas(frame)
    # Only text starting like a formula changes (OWASP CSV injection); None, numbers, NaN stay.
    assert safe["note"].tolist()[:5] == ["'=A1", None, 3, "-0.5", "ok"]
    assert np.isnan(safe["note"].iloc[5])
    assert safe["count"].tolist() == [1, 2, 3, 4, 5, 6]

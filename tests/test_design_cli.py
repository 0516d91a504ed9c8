"""The design command line: plans, preparation sheets, absorptivity tables, rounding."""

from __future__ import annotations

import argparse
import json
import math
import re

import numpy as np
import pandas as pd
import pytest

from bandsolve.cli import main
from bandsolve.cli.design_cmd import register
from bandsolve.design import (
    AnalyteRange,
    absorptivities_for,
    range_decimals,
)
from bandsolve.errors import DataError
from bandsolve.io import read_absorptivities

RANGES = [AnalyteRange("dye A", 0.0, 10.0, "mg/L"), AnalyteRange("dye B", 0.0, 5.0, "mg/L"),
          AnalyteRange("dye C", 2.0, 8.0, "mg/L")]


def _cli(argv):
    parser = argparse.ArgumentParser()
    register(parser.add_subparsers())
    args = parser.parse_args(["design", *argv])
    return args.func(args)


def test_cli_writes_plan_and_sheet(tmp_path, capsys):
    wl = [450.0, 520.0]
    pd.DataFrame([[0.0, 0.2], [0.1, 0.0]], index=["dye B", "dye A"], columns=wl).to_csv(
        tmp_path / "eps.csv")
    out = tmp_path / "plan.csv"
    code = _cli(["--analytes", "dye A=0-10 mg/L", "dye B=0-5 mg/L", "--validation", "3",
                 "--absorptivity", str(tmp_path / "eps.csv"), "--stock", "dye A=1 g/L",
                 "dye B=500 mg/L", "--volume", "50 mL", "--out", str(out)])
    assert code == 0
    assert {p.name for p in tmp_path.iterdir()} >= {
        "plan-calibration.csv", "plan-validation.csv", "plan-prep.csv", "plan-prep.html",
        "plan-design.json"}
    text = capsys.readouterr().out
    assert "Largest |r|" in text
    # Beer-Lambert with the rows matched by name: top mixture 10 mg/L A -> 1.0 AU at 450 nm.
    assert "Largest predicted absorbance (1 cm cell): 1.000 AU" in text
    assert len(pd.read_csv(tmp_path / "plan-calibration.csv")) == 25
    assert len(pd.read_csv(tmp_path / "plan-validation.csv")) == 3
    with pytest.raises(DataError, match="--volume"):
        _cli(["--analytes", "dye A=0-10 mg/L", "--stock", "dye A=1 g/L"])


def test_design_command_stores_plan_quality(tmp_path):
    # Columns of the 5-level cyclic design are uncorrelated (Brereton 1997): stored |r| ≈ 0.
    out = tmp_path / "plan.csv"
    assert main(["design", "--analytes", "dye A=0-10 mg/L", "dye B=0-8 mg/L",
                 "dye C=0-6 mg/L", "--out", str(out)]) == 0
    stored = json.loads((tmp_path / "plan-design.json").read_text())
    assert stored["quality"]["max_abs_r"] < 1e-12
    assert len(stored["concentrations"]) == 25


# --- acceptance findings: unit labels, rounding, early errors, output folder ----------------

EPS_WITH_UNITS = "component,450,520\ndye A [g/L],100,0\ndye B [mg/L],0,0.1\n"


def test_absorptivities_matched_by_name_and_converted(tmp_path):
    path = tmp_path / "eps.csv"
    path.write_text(EPS_WITH_UNITS)
    table = read_absorptivities(path)
    # SI prefixes (BIPM SI Brochure 2019): 100 AU per (g/L cm) is 0.1 AU per (mg/L cm).
    np.testing.assert_allclose(absorptivities_for(RANGES[:2], table),
                               [[0.1, 0.0], [0.0, 0.1]], rtol=1e-15)
    molar = [AnalyteRange("dye A", 0.0, 1.0, "mmol/L")]
    with pytest.raises(DataError, match=r"eps\.csv.*'dye A \[g/L\]'.*molar mass"):
        absorptivities_for(molar, table)
    with pytest.raises(DataError, match=r"eps\.csv.*no absorptivity row for 'dye C'"):
        absorptivities_for(RANGES, table)
    path.write_text(EPS_WITH_UNITS + "dye A,1,1\n")
    with pytest.raises(DataError, match="2 absorptivity rows for 'dye A'"):
        absorptivities_for(RANGES[:1], read_absorptivities(path))


def test_cli_reads_the_build_absorptivity_format(tmp_path, capsys):
    path = tmp_path / "eps.csv"
    path.write_text(EPS_WITH_UNITS)
    assert main(["design", "--analytes", "dye A=0-10 mg/L", "dye B=0-5 mg/L",
                 "--absorptivity", str(path)]) == 0
    # Beer-Lambert (IUPAC Gold Book, "absorbance"): 10 mg/L × 0.1 AU/(mg/L cm) × 1 cm = 1.0
    # AU for dye A; dye B reaches only 5 × 0.1 = 0.5 AU.
    assert "Largest predicted absorbance (1 cm cell): 1.000 AU" in capsys.readouterr().out


def test_range_decimals_give_three_significant_figures_of_the_width():
    # Significant figures of the width (common practice): 10 -> 10.0, 5 -> 5.00, 6 -> 6.00,
    # 2000 -> 2000 (tens: 2.00e3), 0.02 -> 0.0200.
    ranges = [AnalyteRange("a", 0, 10, "mg/L"), AnalyteRange("b", 0, 5, "mg/L"),
              AnalyteRange("c", 2, 8, "mg/L"), AnalyteRange("d", 0, 2000, "µg/L"),
              AnalyteRange("e", 0.01, 0.03, "mol/L")]
    assert range_decimals(ranges) == [1, 2, 2, -1, 4]


def test_cli_rounds_validation_and_volumes(tmp_path):
    out = tmp_path / "plan.csv"
    assert main(["design", "--analytes", "dye A=0-10 mg/L", "dye B=0-5 mg/L", "--validation",
                 "8", "--stock", "dye A=1000 mg/L", "dye B=0.7 g/L", "--volume", "50 mL",
                 "--out", str(out)]) == 0
    val = pd.read_csv(tmp_path / "plan-validation.csv", index_col="sample", dtype=str)
    # 3 significant figures of the widths 10 and 5 mg/L: 0.1 and 0.01 mg/L steps.
    for column, places in (("dye A [mg/L]", 1), ("dye B [mg/L]", 2)):
        assert all(len(v.partition(".")[2]) <= places for v in val[column])
        assert len({v.partition(".")[2] for v in val[column]}) > 1  # not all whole numbers
    prep = pd.read_csv(tmp_path / "plan-prep.csv", index_col="sample")
    targets = val.astype(float).to_numpy()
    # C1V1 = C2V2 (common practice), exact volumes rounded to 4 significant figures.
    exact = targets * 50.0 / np.array([1000.0, 700.0])
    for written, value in zip(prep.loc[val.index, ["dye A stock [mL]", "dye B stock [mL]"]]
                              .to_numpy().ravel(), exact.ravel(), strict=True):
        expected = round(value, 3 - math.floor(math.log10(value))) if value else 0.0
        assert written == pytest.approx(expected, rel=1e-12, abs=1e-15)


@pytest.mark.parametrize("extra, message", [
    (["--stock", "dye A=1000 mg/L", "--volume", "50 mL"], "missing \\['dye B'\\]"),
    (["--stock", "dye A=10 mg/L", "dye B=5 mg/L", "--volume", "50 mL"], "more concentrated"),
    (["--stock", "dye A=1000 mg/L", "dye B=500 mg/L"], "--volume"),
])
def test_cli_stock_errors_come_before_any_output(tmp_path, capsys, extra, message):
    # Dilution law (common practice): 10 mg/L stock cannot give a 10 mg/L + 5 mg/L mixture.
    code = main(["design", "--analytes", "dye A=0-10 mg/L", "dye B=0-5 mg/L", "--validation",
                 "2", "--out", str(tmp_path / "plan.csv"), *extra])
    out, err = capsys.readouterr()
    assert code == 2 and out == ""
    assert len(err.strip().splitlines()) == 1 and re.search(message, err)
    assert list(tmp_path.iterdir()) == []


def test_cli_stores_design_quality_with_stocks(tmp_path):
    out = tmp_path / "plan.csv"
    assert main(["design", "--analytes", "dye A=0-10 mg/L", "dye B=0-5 mg/L", "--stock",
                 "dye A=1 g/L", "dye B=1 g/L", "--volume", "50 mL", "--out", str(out)]) == 0
    stored = json.loads((tmp_path / "plan-design.json").read_text())
    # Brereton (1997): the cyclic 5-level design has uncorrelated columns, 25 mixtures.
    assert stored["quality"]["max_abs_r"] < 1e-12 and len(stored["concentrations"]) == 25


def test_cli_refuses_a_missing_output_folder(tmp_path, capsys):
    target = tmp_path / "no such folder" / "plan.csv"
    assert main(["design", "--analytes", "dye A=0-10 mg/L", "--out", str(target)]) == 2
    out, err = capsys.readouterr()
    assert out == "" and "does not exist" in err and str(target.parent) in err
    assert not target.parent.exists()

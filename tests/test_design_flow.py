"""From design to build: the plan files are used as written, designs show curvature, and
volumes are what the laboratory's pipettes deliver."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from bandsolve.cli import main
from bandsolve.design import AnalyteRange, calibration_plan, preparation_sheet
from bandsolve.design.pipettes import deliverable_volume, parse_pipette
from bandsolve.errors import BandsolveWarning, DataError
from tests.conftest import gaussian_bands

ANALYTES = ["dye A=0-10 mg/L", "dye B=0-5 mg/L", "dye C=0-8 mg/L"]


def _spectra_for(table: pd.DataFrame, path, rng) -> None:
    """Invented spectra (Beer's law with three overlapping bands, white noise) for a plan."""
    axis = np.linspace(400.0, 700.0, 121)
    K = gaussian_bands(axis, (480, 530, 590), (40, 45, 40)) * np.array([[0.08], [0.15], [0.1]])
    A = table.to_numpy() @ K + rng.normal(0.0, 1e-3, (len(table), axis.size))
    pd.DataFrame(A, index=pd.Index(table.index, name="sample"),
                 columns=[f"{w:g}" for w in axis]).to_csv(path)


def test_build_and_assess_take_the_files_design_wrote(tmp_path, capsys):
    plan = tmp_path / "plan.csv"
    assert main(["design", "--analytes", *ANALYTES, "--validation", "6", "--stock",
                 "dye A=1000 mg/L", "dye B=500 mg/L", "dye C=0.8 g/L", "--volume", "50 mL",
                 "--pipettes", "100-1000 uL by 5 uL", "1-10 mL by 0.1 mL", "--quiet",
                 "--out", str(plan)]) == 0
    cal_table = tmp_path / "plan-calibration.csv"
    val_table = tmp_path / "plan-validation.csv"
    rng = np.random.default_rng(12345)
    _spectra_for(pd.read_csv(cal_table, index_col="sample"), tmp_path / "cal.csv", rng)
    _spectra_for(pd.read_csv(val_table, index_col="sample"), tmp_path / "val.csv", rng)
    model = tmp_path / "m.bsm"
    # The design's files go to build and assess untouched.
    assert main(["build", "--method", "cls", "--spectra", str(tmp_path / "cal.csv"),
                 "--concentrations", str(cal_table), "--out", str(model)]) == 0
    assert main(["assess", str(model), "--spectra", str(tmp_path / "val.csv"),
                 "--concentrations", str(val_table)]) == 0
    assert "RMSEP" in capsys.readouterr().out


def test_d_optimal_calibration_plans_have_three_levels_of_every_analyte():
    ranges = [AnalyteRange("a", 0, 10, "mg/L"), AnalyteRange("b", 0, 5, "mg/L"),
              AnalyteRange("c", 0, 8, "mg/L")]
    plan = calibration_plan(ranges, n_runs=16)
    cal = plan.concentrations[plan.is_calibration]
    # A squared term needs three distinct levels to be estimated, so a design that can show
    # curvature has at least three levels of each factor (Box & Draper 2007, Response
    # Surfaces, Mixtures and Ridge Analyses, ch. 13).
    for column in cal.columns:
        assert cal[column].nunique() >= 3, column


def test_two_level_plans_are_warned_about_with_the_reason():
    ranges = [AnalyteRange("a", 0, 10, "mg/L"), AnalyteRange("b", 0, 5, "mg/L")]
    with pytest.warns(BandsolveWarning, match="non-linearity cannot be seen"):
        calibration_plan(ranges, levels=2, n_runs=6)


def test_too_few_runs_for_three_levels_are_refused():
    ranges = [AnalyteRange(n, 0, 10, "mg/L") for n in "abcd"]
    with pytest.raises(DataError, match="at least 9 mixtures"):
        calibration_plan(ranges, n_runs=8)  # 1 + 2 × 4 model terms


def test_pipettes_are_read_and_deliver_their_own_steps():
    adjustable = parse_pipette("100-1000 µL by 5 µL")
    assert (adjustable.low_ml, adjustable.high_ml, adjustable.step_ml) == (0.1, 1.0, 0.005)
    bulb = parse_pipette("5 mL")
    assert (bulb.low_ml, bulb.high_ml, bulb.step_ml) == (5.0, 5.0, 0.0)
    # 0.188 mL (the example of the issue) is set as 0.190 mL on a 5 µL-step pipette.
    assert deliverable_volume(0.188, [adjustable]) == pytest.approx(0.19, abs=1e-12)
    # 12.4 mL with a 1-10 mL pipette: two fills of 6.2 mL.
    assert deliverable_volume(12.4, [parse_pipette("1-10 mL by 0.1 mL")]) == pytest.approx(12.4)
    assert deliverable_volume(5.1, [bulb, adjustable]) == 5.0  # the bulb pipette is nearest
    assert np.isnan(deliverable_volume(0.01, [adjustable]))  # below it: dilute the stock
    with pytest.raises(DataError, match="cannot be read"):
        parse_pipette("a pipette")


@settings(max_examples=60, deadline=None)
@given(st.floats(0.1, 1.0))
def test_rounded_volume_is_a_setting_within_half_a_step(volume):
    pipette = parse_pipette("100-1000 µL by 5 µL")
    got = deliverable_volume(volume, [pipette])
    steps = (got - 0.1) / 0.005
    assert abs(steps - round(steps)) < 1e-6  # a whole number of 5 µL steps from 100 µL
    assert abs(got - volume) <= 0.0025 + 1e-12


def test_prepared_concentrations_follow_from_the_rounded_volumes():
    ranges = [AnalyteRange("a", 0, 10, "mg/L"), AnalyteRange("b", 0, 5, "mg/L")]
    plan = calibration_plan(ranges, n_validation=4)
    pipettes = [parse_pipette("100-1000 µL by 5 µL"), parse_pipette("1-10 mL by 0.1 mL")]
    sheet = preparation_sheet(plan, {"a": (1000, "mg/L"), "b": (0.5, "g/L")}, 50.0,
                              pipettes=pipettes)
    volumes = sheet.volumes_ml[["a stock [mL]", "b stock [mL]"]].to_numpy()
    # C2 = C1·V1/V2 (dilution law, common practice), stock b 0.5 g/L = 500 mg/L.
    expected = volumes * np.array([1000.0, 500.0]) / 50.0
    np.testing.assert_allclose(sheet.prepared.to_numpy(), expected, rtol=1e-12)
    np.testing.assert_allclose(sheet.volumes_ml.sum(axis=1), 50.0, rtol=1e-12)
    assert "differ from the targets by at most" in sheet.summary()

"""Tests of calibration designs, validation mixtures and preparation sheets (the API)."""

from __future__ import annotations

import itertools
import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from bandsolve.design import (
    AnalyteRange,
    calibration_plan,
    concentration_factor,
    cyclic_design,
    d_optimal_design,
    parse_amount,
    parse_analyte_range,
    parse_volume,
    preparation_html,
    preparation_sheet,
    validation_set,
    write_plan_files,
    write_preparation_csv,
)
from bandsolve.errors import BandsolveWarning, DataError

RANGES = [AnalyteRange("dye A", 0.0, 10.0, "mg/L"), AnalyteRange("dye B", 0.0, 5.0, "mg/L"),
          AnalyteRange("dye C", 2.0, 8.0, "mg/L")]


def logdet(coded: np.ndarray) -> float:
    model = np.column_stack([np.ones(len(coded)), coded])
    sign, value = np.linalg.slogdet(model.T @ model)
    return value if sign > 0 else -np.inf


# --- text parsing --------------------------------------------------------------------------


@pytest.mark.parametrize("text, expected", [
    ("dye A=0-10 mg/L", AnalyteRange("dye A", 0.0, 10.0, "mg/L")),
    ("Co(II) = 0.5 to 2.5 mmol/L", AnalyteRange("Co(II)", 0.5, 2.5, "mmol/L")),
    ("red=1e-3–2e-3 mol/L", AnalyteRange("red", 1e-3, 2e-3, "mol/L")),
])
def test_parse_analyte_range(text, expected):
    assert parse_analyte_range(text) == expected
    assert expected.column == f"{expected.name} [{expected.unit}]"


@pytest.mark.parametrize("text", ["dye A 0-10 mg/L", "dye A=10-0 mg/L", "=0-10 mg/L",
                                  "dye A=0-10"])
def test_parse_analyte_range_rejects_bad_text(text):
    with pytest.raises(DataError, match="name=low-high unit") as info:
        parse_analyte_range(text)
    assert repr(text) in str(info.value)


def test_parse_amount_and_volume():
    assert parse_amount("dye A=1000 mg/L") == parse_amount(" dye A = 1e3 mg/L ")
    # SI prefixes, BIPM SI Brochure, 9th ed. (2019): 1 L = 1000 mL, 1 µL = 0.001 mL.
    assert parse_volume("50 mL") == 50.0
    assert parse_volume("0.05 L") == pytest.approx(50.0, rel=1e-15)
    assert parse_volume("100 µL") == parse_volume("100 uL") == pytest.approx(0.1, rel=1e-15)
    for bad in ("50 gallons", "-5 mL", "mL"):
        with pytest.raises(DataError, match="50 mL"):
            parse_volume(bad)
    with pytest.raises(DataError, match="name=value unit"):
        parse_amount("dye A=0 mg/L")


def test_concentration_units():
    # SI prefixes, BIPM SI Brochure, 9th ed. (2019).
    assert concentration_factor("mg/L", "g/L") == pytest.approx(1e-3, rel=1e-15)
    assert concentration_factor("mmol/L", "uM") == pytest.approx(1e3, rel=1e-15)
    assert concentration_factor("µg/mL", "mg/L") == pytest.approx(1.0, rel=1e-15)
    with pytest.raises(DataError, match="molar mass"):
        concentration_factor("mg/L", "mmol/L")


# --- cyclic designs (Brereton 1997, Analyst 122, 1521-1529) ---------------------------------


def test_five_level_cyclic_design_is_balanced_and_orthogonal():
    design = cyclic_design(6, levels=5)
    assert design.shape == (25, 6)
    for col in design.T:  # Brereton (1997): each level 5 times per column
        assert sorted(col) == sorted([-2, -1, 0, 1, 2] * 5)
    for i, j in itertools.combinations(range(6), 2):
        # Brereton (1997): any two of columns 1-6 hold all 25 level pairs, uncorrelated.
        assert len({(a, b) for a, b in design[:, [i, j]]}) == 25
        assert abs(np.corrcoef(design[:, i], design[:, j])[0, 1]) < 1e-12


def test_five_level_generator_recurrence():
    # Brereton (1997) construction: s[t+2] = s[t+1] + 3 s[t] (mod 5) from (0, 1), relabelled
    # 3 -> -2 and 4 -> -1; the first ten terms worked by hand are 0 1 1 4 2 4 0 2 2 3.
    assert list(cyclic_design(1)[:10, 0]) == [0, 1, 1, -1, 2, -1, 0, 2, 2, -2]


def test_twelve_columns_uncorrelated_but_linked_and_warned():
    with pytest.warns(BandsolveWarning, match="6 shifts apart"):
        design = cyclic_design(12, levels=5)
    # Theory (m-sequence of period 24 over GF(5)): shifts 0-11 are pairwise uncorrelated...
    r = np.corrcoef(design.T)
    assert np.max(np.abs(r - np.eye(12))) < 1e-12
    # ...but a shift of 6 multiplies by 2 mod 5, so column 7 is a function of column 1.
    doubled = {0: 0, 1: 2, 2: -1, -2: 1, -1: -2}
    assert all(doubled[a] == b for a, b in design[:, [0, 6]])
    with pytest.raises(DataError, match="1 to 12 analytes"):
        cyclic_design(13, levels=5)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        cyclic_design(6, levels=5)  # 6 or fewer: no warning


def test_three_level_generator_is_primitive():
    from bandsolve.design.points import CYCLIC_GENERATORS

    alpha, beta = CYCLIC_GENERATORS[3]
    # Lidl & Niederreiter, Finite Fields (1997): an order-2 recurrence has the maximal period
    # l^2 - 1 = 8 iff its characteristic polynomial is primitive; so the state (s_t, s_t+1)
    # must visit all 8 nonzero states before it returns to (0, 1).
    state, seen = (0, 1), []
    while state not in seen:
        seen.append(state)
        state = (state[1], (alpha * state[1] + beta * state[0]) % 3)
    assert len(seen) == 8 and state == (0, 1)


def test_three_level_cyclic_design_is_balanced_and_orthogonal():
    design = cyclic_design(4, levels=3)
    assert design.shape == (9, 4)
    for col in design.T:  # Brereton (1997): each level 3 times per column
        assert sorted(col) == sorted([-1, 0, 1] * 3)
    for i, j in itertools.combinations(range(4), 2):
        assert len({(a, b) for a, b in design[:, [i, j]]}) == 9  # all 9 pairs, Brereton (1997)
        assert abs(np.corrcoef(design[:, i], design[:, j])[0, 1]) < 1e-12
    with pytest.raises(DataError, match="1 to 4 analytes"):
        cyclic_design(5, levels=3)
    with pytest.raises(DataError, match="3 or 5 levels"):
        cyclic_design(2, levels=4)


# --- D-optimal designs -------------------------------------------------------------------------


@pytest.mark.parametrize("n_runs", [4, 8])
def test_d_optimal_reaches_hadamard_bound(n_runs):
    # Hadamard (1893): for entries ±1, det(DᵀD) <= n^p, attained by orthogonal two-level
    # designs (the 2^3 factorial for n = 8, a 2^(3-1) fraction for n = 4).
    grid = np.array(list(itertools.product([-1.0, 1.0], repeat=3)))
    design = d_optimal_design(n_runs, 3, candidates=grid, random_state=1)
    assert logdet(design) == pytest.approx(4 * np.log(n_runs), rel=1e-12)


@pytest.mark.parametrize("n_runs, n_factors, levels", [(25, 3, 5), (12, 4, 3), (7, 2, 5)])
def test_d_optimal_beats_random_designs(n_runs, n_factors, levels):
    grid = np.array(list(itertools.product(np.arange(levels) - (levels - 1) / 2,
                                           repeat=n_factors)))
    rng = np.random.default_rng(7)
    random_dets = [logdet(grid[rng.choice(len(grid), n_runs)]) for _ in range(400)]
    for rs in range(4):
        design = d_optimal_design(n_runs, n_factors, levels, random_state=rs)
        # Definition of D-optimality (Fedorov 1972): never below a design from the candidates...
        assert logdet(design) >= max(random_dets) - 1e-9
        # ...and clearly better than the typical random design.
        assert logdet(design) > np.median(random_dets) + 0.5


def test_d_optimal_respects_constraints():
    def total_at_most_zero(grid):
        return grid.sum(axis=1) <= 0

    design = d_optimal_design(10, 3, 5, constraints=total_at_most_zero, random_state=0)
    assert np.all(design.sum(axis=1) <= 0)
    assert np.isfinite(logdet(design))
    with pytest.raises(DataError, match="at least 4 mixtures"):
        d_optimal_design(3, 3, 5)
    with pytest.raises(DataError, match="relax the constraints"):
        d_optimal_design(10, 3, 5, constraints=lambda g: g.sum(axis=1) < -5.5)


# --- validation mixtures -----------------------------------------------------------------------


def test_validation_set_inside_ranges_and_distinct():
    cal = calibration_plan(RANGES).concentrations.to_numpy()
    val = validation_set(RANGES, 40, cal, random_state=3)
    low, high = np.array([r.low for r in RANGES]), np.array([r.high for r in RANGES])
    assert val.shape == (40, 3) and np.all((val >= low) & (val <= high))
    assert not any(np.allclose(v, c) for v in val for c in cal)


def test_validation_set_avoids_calibration_points_on_a_coarse_grid():
    ranges = [AnalyteRange("a", 0, 2, "mg/L"), AnalyteRange("b", 0, 2, "mg/L")]
    grid = np.array(list(itertools.product([0.0, 1.0, 2.0], repeat=2)))  # 9 possible mixtures
    val = validation_set(ranges, 4, grid[:5], random_state=0, decimals=0)
    # Only the 4 grid points outside the calibration set are left (counting argument).
    assert {tuple(v) for v in val} == {tuple(g) for g in grid[5:]}
    with pytest.raises(DataError, match="fewer validation mixtures"):
        validation_set(ranges, 5, grid[:5], random_state=0, decimals=0)


# --- the plan ------------------------------------------------------------------------------------


def test_calibration_plan_table_and_quality():
    plan = calibration_plan(RANGES, n_validation=4, random_state=2)
    frame = plan.concentrations
    assert list(frame.columns) == ["dye A [mg/L]", "dye B [mg/L]", "dye C [mg/L]"]
    assert list(frame.index[:2]) == ["cal-01", "cal-02"] and frame.index[-1] == "val-04"
    # Brereton (1997): c = c_mid + L·Δ with five equally spaced levels over the range.
    assert sorted(set(frame.loc["cal-01":"cal-25", "dye C [mg/L]"])) == [2.0, 3.5, 5.0, 6.5, 8.0]
    assert plan.quality.max_abs_r < 1e-12
    assert (plan.quality.level_counts == 5).all().all()
    # Theory: orthogonal centred columns with sum of squares 12.5 on the -1..1 scale give
    # det(DᵀD) = 25·12.5^3, so D-efficiency = (25·12.5^3)^(1/4) / 25.
    assert plan.quality.d_efficiency == pytest.approx((25 * 12.5**3) ** 0.25 / 25, rel=1e-12)
    assert "cyclic 5-level" in plan.summary() and plan.to_dict()["quality"]["max_abs_r"] < 1e-12


def test_absorbance_check_against_beer_lambert():
    ranges = RANGES[:2]
    absorptivity = np.array([[0.10, 0.02], [0.00, 0.20]])  # AU per (mg/L) per cm
    plan = calibration_plan(ranges, absorptivity=absorptivity, wavelengths=[450, 520],
                            path_length_cm=2.0, ceiling_au=1.5)
    conc = plan.concentrations.to_numpy()
    # Beer-Lambert law for mixtures, A(λ) = b Σ ε_k c_k (IUPAC Gold Book, "absorbance").
    expected = 2.0 * np.maximum(0.10 * conc[:, 0], 0.02 * conc[:, 0] + 0.20 * conc[:, 1])
    np.testing.assert_allclose(plan.absorbance.max_absorbance, expected, rtol=1e-12)
    over = tuple(plan.concentrations.index[expected > 1.5])
    assert over and plan.absorbance.over_ceiling == over
    assert over[0] in plan.summary()
    constrained = calibration_plan(ranges, n_runs=8, absorptivity=absorptivity,
                                   wavelengths=[450, 520], path_length_cm=2.0, ceiling_au=1.5)
    assert constrained.absorbance.over_ceiling == ()


# --- preparation sheet -------------------------------------------------------------------------


def test_preparation_sheet_dilution_law_and_units():
    plan = calibration_plan(RANGES, n_validation=3)
    stocks = {"dye A": (1.0, "g/L"), "dye B": (500.0, "mg/L"), "dye C": (0.4, "mg/mL")}
    sheet = preparation_sheet(plan, stocks, 50.0)
    stock_mg_per_l = np.array([1000.0, 500.0, 400.0])  # SI prefixes (BIPM 2019)
    vol = sheet.volumes_ml.to_numpy()
    # C1V1 = C2V2 (dilution law, common practice) for every mixture and stock.
    assert np.allclose(vol[:, :3] * stock_mg_per_l, plan.concentrations.to_numpy() * 50.0,
                       rtol=1e-12, atol=0)
    assert np.allclose(vol.sum(axis=1), 50.0, rtol=1e-12, atol=0)
    with pytest.raises(DataError, match="molar mass"):
        preparation_sheet(plan, {**stocks, "dye C": (1.0, "mmol/L")}, 50.0)
    with pytest.raises(DataError, match="missing \\['dye C'\\]"):
        preparation_sheet(plan, {"dye A": (1.0, "g/L"), "dye B": (1.0, "g/L")}, 50.0)


def test_infeasible_mixture_names_sample_and_remedy():
    plan = calibration_plan(RANGES)
    with pytest.raises(DataError, match=r"sample 'cal-\d\d'.*more concentrated"):
        preparation_sheet(plan, {"dye A": (20, "mg/L"), "dye B": (10, "mg/L"),
                                 "dye C": (16, "mg/L")}, 10.0)


def test_small_volumes_are_flagged_with_a_dilution():
    ranges = [AnalyteRange("dye A", 0.0, 1.0, "mg/L")]
    plan = calibration_plan(ranges, levels=3)  # 0, 0.5, 1 mg/L
    sheet = preparation_sheet(plan, {"dye A": (1000.0, "mg/L")}, 10.0, min_pipette_ml=0.1)
    # C1V1 = C2V2: 0.5 mg/L -> 0.005 mL and 1 mg/L -> 0.01 mL. The smallest power-of-ten
    # dilution reaching 0.1 mL is 1:100 for 0.005 mL (1:10 gives only 0.05) and 1:10 for 0.01.
    expected = {0.005: 100, 0.01: 10}
    for flag in sheet.flags:
        volume = min(expected, key=lambda v: abs(v - flag.volume_ml))
        assert flag.volume_ml == pytest.approx(volume, rel=1e-12)
        assert flag.dilution == expected[volume]
        assert f"dilute stock 1:{expected[volume]} " in flag.message
    assert len(sheet.flags) == 6  # three mixtures at each nonzero level; zero volumes skipped


@settings(max_examples=60, deadline=None)
@given(
    highs=st.lists(st.floats(0.1, 100.0), min_size=1, max_size=3),
    stock_ratio=st.lists(st.floats(0.5, 500.0), min_size=3, max_size=3),
    volume=st.floats(1.0, 1000.0),
)
def test_preparation_sheet_property(highs, stock_ratio, volume):
    ranges = [AnalyteRange(f"x{k}", 0.0, h, "mg/L") for k, h in enumerate(highs)]
    plan = calibration_plan(ranges, levels=3 if len(ranges) < 3 else 5)
    stock = np.array([h * r for h, r in zip(highs, stock_ratio, strict=False)])
    stocks = {r.name: (c / 1000.0, "g/L") for r, c in zip(ranges, stock, strict=True)}
    conc = plan.concentrations.to_numpy()
    needed = (conc / stock).sum(axis=1).max()  # largest stock fraction, C1V1 = C2V2
    if needed > 1 + 1e-9:
        with pytest.raises(DataError, match="more concentrated"):
            preparation_sheet(plan, stocks, volume)
        return
    if needed > 1 - 1e-9:
        return  # on the boundary rounding decides; nothing to assert
    sheet = preparation_sheet(plan, stocks, volume)
    vol = sheet.volumes_ml.to_numpy()
    assert np.allclose(vol[:, :-1] * stock, conc * volume, rtol=1e-12, atol=0)
    assert np.allclose(vol.sum(axis=1), volume, rtol=1e-12, atol=0)
    assert np.all(vol >= 0)


# --- writers and command line ------------------------------------------------------------------


def test_writers_round_trip_and_html(tmp_path):
    ranges = [AnalyteRange("<b>dye</b>", 0.0, 10.0, "mg/L"), RANGES[1]]
    plan = calibration_plan(ranges, n_validation=2)
    written = write_plan_files(plan, tmp_path / "plan.csv")
    assert [p.name for p in written] == ["plan-calibration.csv", "plan-validation.csv"]
    back = pd.concat([pd.read_csv(p, index_col="sample") for p in written])
    pd.testing.assert_frame_equal(back, plan.concentrations, rtol=1e-9)
    sheet = preparation_sheet(plan, {"<b>dye</b>": (100, "mg/L"), "dye B": (50, "mg/L")}, 25.0)
    write_preparation_csv(sheet, tmp_path / "prep.csv")
    prep = pd.read_csv(tmp_path / "prep.csv", index_col="sample")
    # Volumes are written to 4 significant figures: within half a unit in the 4th figure of
    # the exact C1V1 = C2V2 value (rounding to significant figures, common practice).
    exact = sheet.volumes_ml.to_numpy()
    half_unit = 0.5 * 10.0 ** (np.floor(np.log10(np.where(exact > 0, exact, 1.0))) - 3)
    assert np.all(np.abs(prep[sheet.volumes_ml.columns].to_numpy() - exact) <= half_unit * 1.0001)
    assert sorted(p.name for p in tmp_path.iterdir()) == [  # no temporary files left
        "plan-calibration.csv", "plan-validation.csv", "prep.csv"]
    page = preparation_html(sheet)
    assert "<b>dye</b>" not in page and "&lt;b&gt;dye&lt;/b&gt;" in page
    assert "@media print" in page and "validated" in page and "safety" in page
    assert "25 mL volumetric flask" in page and "pipetting volume: 0.1 mL" in page
    assert all(sample in page for sample in plan.concentrations.index)

"""Test-set assessment: statistics against scikit-learn and scipy, flags, the command line."""

from __future__ import annotations

import argparse
import hashlib
import itertools
import json
import warnings

import numpy as np
import pytest
from scipy import stats
from sklearn.metrics import mean_squared_error, r2_score

from bandsolve.calibration.build import build_cls
from bandsolve.calibration.build_pls import build_pls
from bandsolve.calibration.merit import attach_merit
from bandsolve.calibration.modelfile import save_model
from bandsolve.cli import assess_cmd, main
from bandsolve.concentrations import ConcentrationTable
from bandsolve.errors import BandsolveWarning, DataError
from bandsolve.evaluate.assess import assess
from bandsolve.io import write_concentrations_csv, write_spectra_csv
from bandsolve.spectra import SpectralSet

AXIS = np.linspace(400.0, 700.0, 121)
K = np.vstack([np.exp(-0.5 * ((AXIS - c) / w) ** 2)  # broad overlapping bands, AU per mg/L
               for c, w in ((480, 40), (530, 45), (590, 40))])
LABELS = ("A [mg/L]", "B [mg/L]", "C [mg/L]")
SIGMA = 0.003
INTERFERENT = np.exp(-0.5 * ((AXIS - 650) / 25) ** 2)


def _set(rng, conc, prefix, interferent=None):
    ids = [f"{prefix}{i}" for i in range(len(conc))]
    x = conc @ K + SIGMA * rng.standard_normal((len(conc), AXIS.size))
    if interferent is not None:
        x += np.outer(interferent, INTERFERENT)
    return SpectralSet(AXIS, x, ids), ConcentrationTable(ids, LABELS, conc)


@pytest.fixture(scope="module")
def model_and_test():
    rng = np.random.default_rng(11)
    design = np.array(list(itertools.product([0.1, 0.4, 0.7, 1.0], repeat=3)))
    spectra, table = _set(rng, design, "cal")
    cal = attach_merit(build_pls(spectra, table), spectra, table)
    extra = np.zeros(25)
    extra[:5] = 0.3  # five test samples carry an absorber the model never saw
    test_spectra, test_table = _set(rng, rng.uniform(0.1, 1.0, (25, 3)), "t", extra)
    return cal, test_spectra, test_table


def test_statistics_agree_with_scikit_learn_and_scipy(model_and_test):
    cal, spectra, table = model_and_test
    result = assess(cal, spectra, table)
    predicted = cal.predict(spectra)
    for k, label in enumerate(LABELS):
        y, y_hat = np.asarray(table.values)[:, k], predicted[label].to_numpy()
        s = result.analytes[k].statistics
        e = y_hat - y
        # General-purpose references: scikit-learn metrics and scipy's one-sample t-test.
        assert s.rmse == pytest.approx(np.sqrt(mean_squared_error(y, y_hat)), rel=1e-12)
        assert s.r2 == pytest.approx(r2_score(y, y_hat), rel=1e-12)
        assert s.bias == pytest.approx(e.mean(), rel=1e-12)
        t_ref = stats.ttest_1samp(e, 0.0)
        assert s.bias_t == pytest.approx(abs(t_ref.statistic), rel=1e-9)
        assert s.bias_p == pytest.approx(t_ref.pvalue, rel=1e-9)
        assert s.sep == pytest.approx(np.std(e, ddof=1), rel=1e-12)  # SEP, n − 1 (METHODS §5)
        line = stats.linregress(y, y_hat)
        assert s.slope == pytest.approx(line.slope, rel=1e-12)
        assert s.intercept == pytest.approx(line.intercept, abs=1e-12)
        # RPD = SD(reference)/SEP (Williams 1987, from memory).
        assert s.rpd == pytest.approx(np.std(y, ddof=1) / np.std(e, ddof=1), rel=1e-12)
        # Consistency check: F = RMSEP²/RMSECV² on (n_p, n_cal) df (common practice).
        cv = cal.merit.analytes[k].rmsecv
        assert result.analytes[k].consistency_p == pytest.approx(
            stats.f.sf((s.rmse / cv) ** 2, 25, 64), rel=1e-9)


def test_unseen_absorber_is_flagged_and_inflates_rmsep(model_and_test):
    cal, spectra, table = model_and_test
    result = assess(cal, spectra, table)
    flags = result.samples["flag_codes"]
    # An absorber of 0.3 AU at its peak leaves a residual ~100× the noise (theory): all five
    # are flagged; of 20 clean spectra at most a few (limit at α = 0.01) are.
    assert all("residual" in f for f in flags[:5])
    assert result.n_flagged >= 5 and result.fraction_flagged <= 8 / 25
    assert result.flag_counts["residual"] >= 5
    # The test errors are then far larger than the cross-validation promised.
    assert all(a.consistency_p < 1e-6 for a in result.analytes)
    frame = result.to_frame()
    assert list(frame.index) == ["A", "B", "C"] and set(frame["unit"]) == {"mg/L"}
    json.dumps(result.to_dict())  # JSON-serialisable


def test_clean_test_set_is_consistent_with_the_stored_rmsecv():
    rng = np.random.default_rng(12)
    design = np.array(list(itertools.product([0.1, 0.4, 0.7, 1.0], repeat=3)))
    spectra, table = _set(rng, design, "cal")
    cal = attach_merit(build_cls(spectra, table), spectra, table)
    test_spectra, test_table = _set(rng, rng.uniform(0.1, 1.0, (40, 3)), "t")
    result = assess(cal, test_spectra, test_table)
    for a in result.analytes:
        # Same noise and composition range: RMSEP ≈ RMSECV (theory); a 40-sample RMSEP has a
        # relative SD of about 1/√80 ≈ 11 %, so 0.7..1.4 is a wide, safe band.
        assert 0.7 < a.rmsep_ratio < 1.4
        # Slope 1 and intercept 0 hold for an unbiased model (theory); fixed random state.
        assert a.statistics.line_p > 0.01
    assert "RMSEP" in result.summary()


def test_reference_in_another_unit_is_refused(model_and_test):
    cal, spectra, table = model_and_test
    other = ConcentrationTable(table.sample_ids, ("A [g/L]", "B [mg/L]", "C [mg/L]"),
                               table.values, source="ref.csv")
    with pytest.raises(DataError, match=r"ref\.csv.*'A \[g/L\]'.*unit"):
        assess(cal, spectra, other)


def test_command_line(tmp_path, model_and_test, capsys):
    cal, spectra, table = model_and_test
    save_model(cal, tmp_path / "m.bsm")
    write_spectra_csv(spectra, tmp_path / "s.csv")
    write_concentrations_csv(table, tmp_path / "c.csv")
    parser = argparse.ArgumentParser()
    assess_cmd.register(parser.add_subparsers())
    args = parser.parse_args(["assess", str(tmp_path / "m.bsm"), "--spectra",
                              str(tmp_path / "s.csv"), "--concentrations",
                              str(tmp_path / "c.csv"), "--json",
                              "--samples", str(tmp_path / "per-sample.csv")])
    assert args.func(args) == 0
    printed = json.loads(capsys.readouterr().out)
    expected = assess(cal, spectra, table).to_dict()
    assert printed["analytes"][0]["statistics"]["rmse"] == pytest.approx(
        expected["analytes"][0]["statistics"]["rmse"], rel=1e-12)
    assert printed["n_flagged"] == expected["n_flagged"]
    assert (tmp_path / "per-sample.csv").read_text().startswith("sample,A [mg/L] reference")


def _subset(spectra, table, rows, source):
    ids = [spectra.sample_ids[i] for i in rows]
    return (SpectralSet(AXIS, spectra.values[rows], ids, source=source),
            ConcentrationTable(ids, LABELS, np.asarray(table.values)[rows]))


def test_folders_of_multi_spectrum_files_and_several_spectra_values(
        tmp_path, model_and_test, capsys):
    cal, spectra, table = model_and_test
    save_model(cal, tmp_path / "m.bsm")
    folder = tmp_path / "test"
    (folder / "day2").mkdir(parents=True)
    parts = {folder / "day1.csv": range(0, 8), folder / "day2" / "run.csv": range(8, 17),
             tmp_path / "extra.csv": range(17, 25)}
    for path, rows in parts.items():
        write_spectra_csv(_subset(spectra, table, list(rows), str(path))[0], path)
    write_concentrations_csv(table, tmp_path / "c.csv")
    parser = argparse.ArgumentParser()
    assess_cmd.register(parser.add_subparsers())
    args = parser.parse_args(["assess", str(tmp_path / "m.bsm"), "--spectra", str(folder),
                              str(tmp_path / "extra.csv"), "--concentrations",
                              str(tmp_path / "c.csv"), "--json"])
    assert args.func(args) == 0
    printed = json.loads(capsys.readouterr().out)
    expected = assess(cal, spectra, table).to_dict()  # the same 25 spectra in one set
    assert printed["n_samples"] == 25
    assert sorted(s["sample"] for s in printed["samples"]) == sorted(spectra.sample_ids)
    for got, want in zip(printed["analytes"], expected["analytes"], strict=True):
        # The CSV round trip is exact (17 significant digits), so only summation order differs.
        assert got["statistics"]["rmse"] == pytest.approx(want["statistics"]["rmse"], rel=1e-9)
    assert printed["independent"] is True and printed["note"] == ""


def test_assessing_the_calibration_files_is_marked_not_independent(tmp_path, capsys):
    rng = np.random.default_rng(13)
    design = np.array(list(itertools.product([0.1, 0.55, 1.0], repeat=3)))
    spectra, table = _set(rng, design, "cal")
    write_spectra_csv(spectra, tmp_path / "cal.csv")
    write_concentrations_csv(table, tmp_path / "cal_conc.csv")
    # Fingerprints as bandsolve build records them; hashlib is the reference SHA-256
    # (FIPS 180-4).
    prints = [{"role": role, "name": name,
               "sha256": hashlib.sha256((tmp_path / name).read_bytes()).hexdigest()}
              for role, name in (("spectra", "cal.csv"), ("concentrations", "cal_conc.csv"))]
    cal = build_cls(spectra, table, provenance={"training_files": prints})
    with pytest.warns(BandsolveWarning, match="calibration data: RMSEP on them is not an "
                                              "independent validation"):
        result = assess(cal, spectra, table, files=[str(tmp_path / "cal.csv")])
    assert not result.independent and result.calibration_files == (str(tmp_path / "cal.csv"),)
    assert "not an independent validation" in result.summary()
    assert "independent test set" not in result.summary()
    assert result.to_dict()["independent"] is False and "calibration" in result.to_dict()["note"]
    # Fresh test files with other bytes: independent, and no warning.
    test_spectra, test_table = _set(rng, rng.uniform(0.1, 1.0, (10, 3)), "t")
    write_spectra_csv(test_spectra, tmp_path / "t.csv")
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        fresh = assess(cal, test_spectra, test_table, files=[str(tmp_path / "t.csv")])
    assert fresh.independent and "independent test set" in fresh.summary()
    # The command line compares the concentration file as well, and warns on stderr.
    save_model(cal, tmp_path / "m.bsm")
    assert main(["assess", str(tmp_path / "m.bsm"), "--spectra", str(tmp_path / "cal.csv"),
                 "--concentrations", str(tmp_path / "cal_conc.csv"), "--json"]) == 0
    captured = capsys.readouterr()
    assert "these are the model's calibration data" in captured.err
    printed = json.loads(captured.out)
    assert printed["independent"] is False
    assert sorted(printed["calibration_files"]) == sorted(
        str(tmp_path / n) for n in ("cal.csv", "cal_conc.csv"))


def test_r_squared_shows_its_distance_from_one():
    from bandsolve.evaluate.assess import _r2

    # R² = 1 − Σe²/Σ(y − ȳ)² (definition): 0.999953 must not print as 1.0000.
    assert _r2(0.999953) == "0.999953"
    assert _r2(0.95) == "0.9500" and _r2(0.5) == "0.5000"

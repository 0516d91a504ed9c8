"""The command line end to end: textbook worked examples, bad input, exit codes, the demo."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from bandsolve.cli import main
from bandsolve.concentrations import ConcentrationTable
from bandsolve.io import write_concentrations_csv, write_spectra_csv
from bandsolve.spectra import SpectralSet


def _write(path, text):
    path.write_text(text, encoding="utf-8")
    return str(path)


@pytest.fixture
def harvey_files(tmp_path):
    # Harvey, "Analytical Chemistry 2.1", ch. 10 problem (citing Blanco et al.): Ti(IV) 63.1 ppm
    # and V(V) 96.4 ppm standards at 390, 430, 450, 470, 510 nm, and one mixture.
    spectra = _write(tmp_path / "std.csv", "sample,390,430,450,470,510\n"
                     "Ti-std,0.895,0.884,0.694,0.481,0.173\n"
                     "V-std,0.326,0.497,0.528,0.512,0.374\n")
    conc = _write(tmp_path / "conc.csv", "sample,Ti [ppm],V [ppm]\nTi-std,63.1,0\nV-std,0,96.4\n")
    mix = _write(tmp_path / "mix.csv", "sample,390,430,450,470,510\n"
                 "mixture,0.651,0.743,0.665,0.547,0.314\n")
    return tmp_path, spectra, conc, mix


def test_harvey_example_through_cli(harvey_files, capsys):
    folder, spectra, conc, mix = harvey_files
    model = str(folder / "ti-v.bsm")
    assert main(["build", "--method", "cls", "--spectra", spectra, "--concentrations", conc,
                 "--out", model]) == 0
    out = str(folder / "results.csv")
    assert main(["predict", model, mix, "--out", out]) == 0
    res = pd.read_csv(out)
    assert res.loc[0, "Ti [ppm]"] == pytest.approx(32.05, abs=0.01)  # Harvey's answer
    assert res.loc[0, "V [ppm]"] == pytest.approx(57.30, abs=0.01)
    assert np.isfinite(res.loc[0, "Ti [ppm] SE"])  # 5 wavelengths, 2 unknowns: 3 dof


def test_dichromate_permanganate_from_absorptivities(tmp_path):
    # Common textbook simultaneous determination (e.g. Skoog, Holler & Crouch): absorptivities
    # from 1.0e-3 M dichromate (0.374, 0.009) and 2.0e-4 M permanganate (0.019, 0.475) at
    # 440/545 nm in a 1 cm cell; mixture 0.405/0.712 → 1.008e-3 M and 2.96e-4 M.
    eps = _write(tmp_path / "eps.csv", "component,440,545\n"
                 f"dichromate [mol/L],{0.374 / 1e-3},{0.009 / 1e-3}\n"
                 f"permanganate [mol/L],{0.019 / 2e-4},{0.475 / 2e-4}\n")
    mix = _write(tmp_path / "mix.csv", "sample,440,545\nunknown,0.405,0.712\n")
    model = str(tmp_path / "m.bsm")
    assert main(["build", "--method", "cls", "--absorptivity", eps, "--path-length", "1",
                 "--out", model]) == 0
    out = str(tmp_path / "r.csv")
    assert main(["predict", model, mix, "--out", out, "--path-length", "1"]) == 0
    res = pd.read_csv(out, keep_default_na=False, na_values=[""])
    assert res.loc[0, "dichromate [mol/L]"] == pytest.approx(1.008e-3, rel=2e-3)
    assert res.loc[0, "permanganate [mol/L]"] == pytest.approx(2.96e-4, rel=2e-3)
    # Two wavelengths, two unknowns: no SE is invented; the row says why.
    assert np.isnan(res.loc[0, "dichromate [mol/L] SE"])
    assert "no_se" in res.loc[0, "flag_codes"] and "degrees of freedom" in res.loc[0, "notes"]


def test_bad_input_is_one_line_without_traceback(harvey_files, capsys):
    folder, spectra, _, _ = harvey_files
    bad = _write(folder / "bad.csv", "sample,Ti [ppm],V [ppm]\nTi-std,63.1,0\nother,0,96.4\n")
    code = main(["build", "--spectra", spectra, "--concentrations", bad,
                 "--out", str(folder / "x.bsm")])
    err = capsys.readouterr().err.strip()
    assert code == 2
    assert "Traceback" not in err and len(err.splitlines()) == 1
    assert "other" in err and "V-std" in err  # both unmatched ids are named
    assert not (folder / "x.bsm").exists()


def test_missing_model_file_is_a_clean_error(tmp_path, capsys):
    assert main(["predict", str(tmp_path / "none.bsm"), str(tmp_path)]) == 2
    assert "no such model file" in capsys.readouterr().err


@pytest.mark.slow
def test_demo_runs_end_to_end_and_flags_the_intruder(tmp_path, capsys):
    assert main(["demo", "--out", str(tmp_path / "demo")]) == 0
    results = tmp_path / "demo" / "results.csv"
    assert results.read_text(encoding="utf-8").startswith("# INVENTED")  # marked as invented
    res = pd.read_csv(results, keep_default_na=False, comment="#")
    truth = pd.read_csv(tmp_path / "demo" / "routine_true_concentrations.csv", comment="#",
                        index_col="sample")
    clean = res[res["flag_codes"] == ""].set_index("sample")
    flagged = set(res.loc[res["flag_codes"].str.contains("residual"), "sample"])
    # The invented scenario adds a fourth absorber to batch-2 samples 03 and 05 only.
    assert flagged == {"batch-2-03", "batch-2-05"}
    for label in truth.columns:
        err = (clean[label] - truth.loc[clean.index, label]).abs()
        assert (err <= 4 * clean[label + " SE"] + 0.05).all()
    # Second act (issue 12): the invented dye B drift from run 28 is found, the other series
    # stay in control, and the report carries the transfer and the control charts.
    capsys.readouterr()
    assert main(["drift", str(tmp_path / "demo" / "results.sqlite"), "--json"]) == 5
    states = [s["state"] for s in json.loads(capsys.readouterr().out)["series"]]
    assert any(s.startswith("upward drift in dye B [mg/L] since run 2") for s in states)
    assert "dye A [mg/L]: in control since run 1" in states
    html = (tmp_path / "demo" / "report.html").read_text(encoding="utf-8")
    assert '<section id="transfer">' in html and '<section id="drift">' in html


def test_version_and_help(capsys):
    with pytest.raises(SystemExit) as info:
        main(["--version"])
    assert info.value.code == 0 and "bandsolve" in capsys.readouterr().out
    for command in ("build", "predict", "demo", "inspect", "design"):
        with pytest.raises(SystemExit):
            main([command, "--help"])
        assert "example" in capsys.readouterr().out


def test_compare_with_groups_from_sample_ids(capsys):
    # Groups from the sample id (first capture group): cal-0x, cal-1x, cal-2x are 3 folds.
    import json
    from pathlib import Path

    demo = Path(__file__).resolve().parents[1] / "examples" / "rinse-water"
    code = main(["compare", "--spectra", str(demo / "calibration_spectra.csv"),
                 "--concentrations", str(demo / "calibration_concentrations.csv"),
                 "--cv", r"groups:~cal-(\d)", "--json"])
    out = json.loads(capsys.readouterr().out)
    assert code == 0 and out["cv"] == "groups" and out["n_calibration"] == 25
    assert {r["analyte"] for r in out["recommendations"]} == {
        "dye A [mg/L]", "dye B [mg/L]", "dye C [mg/L]"}


def test_alpha_sets_the_pls_limits_and_is_stored(tmp_path):
    # --alpha is the significance level of every flag limit, for PLS too: the T² limit for
    # new samples at α is the F quantile form of Tracy, Young & Mason (1992), computed here
    # with scipy.stats.
    from scipy import stats

    from bandsolve.calibration.modelfile import load_model

    from .conftest import gaussian_bands

    rng = np.random.default_rng(4)
    axis = np.linspace(400.0, 700.0, 61)
    C = rng.uniform(0, 1, (30, 2))
    A = C @ gaussian_bands(axis, (480, 590), (40, 40)) + rng.normal(0, 0.002, (30, 61))
    ids = [f"s{i}" for i in range(30)]
    write_spectra_csv(SpectralSet(axis, A, ids), tmp_path / "x.csv")
    write_concentrations_csv(ConcentrationTable(ids, ["a", "b"], C), tmp_path / "c.csv")
    assert main(["build", "--method", "pls", "--spectra", str(tmp_path / "x.csv"),
                 "--concentrations", str(tmp_path / "c.csv"), "--components", "2",
                 "--alpha", "0.05", "--quiet", "--out", str(tmp_path / "m.bsm")]) == 0
    lim = load_model(tmp_path / "m.bsm").limits.models[0]
    n, a = 30, 2
    expected = a * (n * n - 1) / (n * (n - a)) * stats.f.ppf(0.95, a, n - a)
    assert lim.alpha == 0.05
    assert lim.t2 == pytest.approx(expected, rel=1e-9)

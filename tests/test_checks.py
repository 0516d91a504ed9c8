"""Check standards in batches, their record in the ledger, and the drift watch over it."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from bandsolve.batch.checks import CheckSink, CheckStandards
from bandsolve.batch.ledger import list_checks
from bandsolve.batch.watch import watch_ledger
from bandsolve.calibration.build import build_cls
from bandsolve.calibration.modelfile import save_model
from bandsolve.cli import EXIT_DRIFT, EXIT_FLAGGED, main
from bandsolve.concentrations import ConcentrationTable
from bandsolve.errors import DataError

from .instruments import ANALYTES, Instrument, design, spectra, table

QC = np.array([6.0, 5.0, 4.0])  # the check standard's known composition, mg/L


def _known(ids=("QC-*",), values=(QC,), **labels) -> ConcentrationTable:
    return ConcentrationTable(sample_ids=ids, analytes=ANALYTES, values=np.array(values),
                              labels={k: tuple(v) for k, v in labels.items()})


def _frame(samples, found, se=0.05):
    cols = {"sample": samples}
    for k, a in enumerate(ANALYTES):
        cols[a] = [f[k] for f in found]
        cols[f"{a} SE"] = [se] * len(samples)
    return pd.DataFrame(cols)


# ---------------------------------------------------------------------- declaring and judging
def test_exact_ids_win_over_patterns_and_a_marker_column_selects_rows():
    checks = CheckStandards(_known(("QC-*", "QC-7", "S-1"), (QC, QC * 2, QC),
                                   role=("yes", "x", "no")), marker="role")
    assert checks.match("QC-7") == 1 and checks.match("QC-12") == 0
    assert checks.match("S-1") is None  # not marked as a check standard
    with pytest.raises(DataError, match="no text column 'kind'"):
        CheckStandards(_known(), marker="kind")


def test_recovery_and_limits_by_hand():
    sink = CheckSink(CheckStandards(_known()), ANALYTES)
    sink.begin_input(0, "x")
    sink.write(_frame(["QC-1", "routine-1"], [QC * [1.0, 1.02, 0.9], QC]))
    sink.commit_input()
    report = sink.report()
    assert list(report.table["sample"]) == ["QC-1"] * 3  # routine samples are not kept
    # recovery = 100·found/expected; limits expected ± 3·SE (SE = 0.05): 5.1 vs 5 ± 0.15
    np.testing.assert_allclose(report.table["recovery_pct"], [100.0, 102.0, 90.0])
    np.testing.assert_allclose(report.table["low"], QC - 0.15)
    assert list(report.table["passed"]) == [True, True, False]
    assert "dye" not in report.summary()[0] and "c [mg/L] recovery 90.0 %" in report.summary()[0]
    given = CheckSink(CheckStandards(_known(), recovery_limits=(95, 105)), ANALYTES)
    given.begin_input(0, "x")
    given.write(_frame(["QC-1"], [QC * [1.0, 1.02, 0.9]]))
    given.commit_input()
    np.testing.assert_allclose(given.report().table["high"], QC * 1.05)
    assert not given.report().passed


def test_a_failed_input_leaves_no_check_rows():
    sink = CheckSink(CheckStandards(_known()), ANALYTES)
    sink.begin_input(0, "x")
    sink.write(_frame(["QC-1"], [QC]))
    sink.discard_input()
    assert sink.report().table.empty and not sink.report().passed


# ---------------------------------------------------------------------- a season in the ledger
N_RUNS, DRIFT_FROM = 40, 28   # runs 1..40, recovery drifting upward from run 28


@pytest.fixture(scope="module")
def season(tmp_path_factory):
    """A CLS model and 40 invented runs, each with 4 routine samples and one check standard
    whose true content rises by 0.5 SE-of-recovery-scatter per run from run 28 on."""
    folder = tmp_path_factory.mktemp("season")
    rng = np.random.default_rng(21)
    C = design()
    model = build_cls(spectra(Instrument().measure(C, rng), "c"), table(C, "c"),
                      baseline="offset")
    save_model(model, folder / "m.bsm")
    pd.DataFrame([QC], columns=list(ANALYTES), index=pd.Index(["QC-*"], name="sample")
                 ).to_csv(folder / "checks.csv")
    ledger = folder / "ledger.sqlite"
    for run in range(1, N_RUNS + 1):
        factor = 1.0 + 0.01 * max(0, run - DRIFT_FROM + 1)  # +1 % per run once drifting
        conc = np.vstack([rng.uniform(1, 8, (4, 3)), QC * np.array([1.0, factor, 1.0])])
        A = Instrument().measure(conc, rng)
        ids = [f"r{run}-{i}" for i in range(4)] + [f"QC-{run:03d}"]
        frame = pd.DataFrame(A, columns=[f"{w:g}" for w in spectra(A, "x").axis])
        frame.insert(0, "sample", ids)
        frame.to_csv(folder / f"run{run}.csv", index=False)
        code = main(["predict", str(folder / "m.bsm"), str(folder / f"run{run}.csv"),
                     "--out", str(folder / f"res{run}.csv"), "--ledger", str(ledger),
                     "--checks", str(folder / "checks.csv"), "--quiet"])
        assert code == 0
    return folder, ledger


@pytest.mark.slow
def test_ledger_recoveries_match_numpy_from_the_results_files(season):
    folder, ledger = season
    recorded = list_checks(ledger)
    assert len(recorded) == N_RUNS * 3
    for run in (1, 17, N_RUNS):
        res = pd.read_csv(folder / f"res{run}.csv")
        qc = res[res["sample"].str.startswith("QC-")]
        found = qc[list(ANALYTES)].to_numpy()[0]
        expected = 100.0 * found / QC  # numpy: recovery = found / expected
        got = recorded[recorded["run_id"] == run].set_index("analyte").loc[list(ANALYTES)]
        np.testing.assert_allclose(got["recovery_pct"].to_numpy(), expected, rtol=1e-12)
        np.testing.assert_allclose(got["found"].to_numpy(), found, rtol=1e-12)


def test_drift_watch_names_the_drifting_analyte_and_its_start(season, capsys):
    _, ledger = season
    report = watch_ledger(ledger)
    by_name = {s.name: s for s in report.series}
    assert by_name["a [mg/L]"].chart.in_control and by_name["c [mg/L]"].chart.in_control
    b = by_name["b [mg/L]"]
    assert not b.chart.in_control and b.chart.direction == "upward"
    since = b.runs[b.chart.since]
    assert DRIFT_FROM - 6 <= since <= DRIFT_FROM + 4  # Page's change point near the start
    words = b.words()
    assert words.startswith(f"upward drift in b [mg/L] since run {since}: recovery ")
    assert main(["drift", str(ledger), "--json"]) == EXIT_DRIFT
    doc = json.loads(capsys.readouterr().out)
    assert doc["in_control"] is False
    assert any(s["state"] == words for s in doc["series"])
    assert any(s["series"].startswith("spectral residual") for s in doc["series"])


def test_predict_fails_a_batch_with_an_out_of_limit_check_standard(season, capsys):
    folder, _ = season
    code = main(["predict", str(folder / "m.bsm"), str(folder / f"run{N_RUNS}.csv"), "--out",
                 str(folder / "last.csv"), "--checks", str(folder / "checks.csv"),
                 "--check-limits", "95-105", "--fail-on-flags", "--quiet"])
    assert code == EXIT_FLAGGED  # b reads ~113 % at the last run
    assert "out of limits: b [mg/L] recovery" in capsys.readouterr().err


@pytest.mark.slow
def test_report_shows_the_drift_watch_of_the_model(season):
    folder, ledger = season
    out = folder / "qc.html"
    assert main(["report", str(folder / "m.bsm"), "--drift", str(ledger), "--out", str(out),
                 "--quiet"]) == 0
    html = out.read_text(encoding="utf-8")
    assert '<section id="drift">' in html and "upward drift in b [mg/L] since run" in html
    assert html.count('id="control-chart-') == 4  # three analytes and the routine residual

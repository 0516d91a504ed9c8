"""Results ledger: complete runs, appends, append-only guard, concurrent writers, and a
prediction process killed mid-run leaving neither a partial output nor a partial run."""

from __future__ import annotations

import argparse
import hashlib
import signal
import sqlite3
import subprocess
import sys
import threading
import time

import numpy as np
import pandas as pd
import pytest

from bandsolve.batch.ledger import LedgerRecorder, list_inputs, list_results, list_runs
from bandsolve.batch.predict import run_batch
from bandsolve.calibration.build import build_cls
from bandsolve.calibration.modelfile import save_model
from bandsolve.cli import ledger_cmd, main
from bandsolve.concentrations import ConcentrationTable
from bandsolve.errors import DataError
from bandsolve.io import write_spectra_csv
from bandsolve.spectra import SpectralSet

from .conftest import gaussian_bands

AXIS = np.linspace(400.0, 700.0, 121)
PURE = gaussian_bands(AXIS, (480, 530, 590), (40, 45, 40))
LABELS = ("A [mg/L]", "B [mg/L]", "C [mg/L]")
CLI = [sys.executable, "-c", "import sys; from bandsolve.cli import main; sys.exit(main())"]


def _mixtures(n: int, rs: int, prefix: str) -> SpectralSet:
    rng = np.random.default_rng(rs)
    X = rng.uniform(0.1, 1.0, (n, 3)) @ PURE + 0.001 * rng.standard_normal((n, AXIS.size))
    return SpectralSet(axis=AXIS, values=X, sample_ids=[f"{prefix}{i}" for i in range(n)])


@pytest.fixture(scope="module")
def setup(tmp_path_factory):
    d = tmp_path_factory.mktemp("ledger")
    rng = np.random.default_rng(1)
    C = rng.uniform(0.1, 1.0, (30, 3))
    cal = SpectralSet(axis=AXIS, values=C @ PURE + 0.001 * rng.standard_normal((30, 121)),
                      sample_ids=[f"cal{i}" for i in range(30)])
    model = build_cls(cal, ConcentrationTable(cal.sample_ids, LABELS, C), provenance={
        "training_files": [{"role": "spectra", "name": "cal.csv", "sha256": "ab" * 32}]})
    save_model(model, d / "m.bsm")
    write_spectra_csv(_mixtures(4, 2, "a"), d / "a.csv")
    write_spectra_csv(_mixtures(3, 3, "b"), d / "b.csv")
    (d / "bad.csv").write_text("not,a\nspectra,file\n")
    return d, model


def _sha(path) -> str:
    # hashlib is the reference implementation (FIPS 180-4 SHA-256).
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_run_records_model_inputs_and_every_row_and_second_run_appends(setup, tmp_path,
                                                                      capsys):
    d, _ = setup
    ledger, out = tmp_path / "l.sqlite", tmp_path / "r.csv"
    args = ["predict", str(d / "m.bsm"), str(d / "a.csv"), str(d / "bad.csv"), str(d / "b.csv"),
            "--out", str(out), "--ledger", str(ledger), "--batch", "B-7", "--operator", "kim"]
    assert main(args) == 3
    runs = list_runs(ledger)
    assert len(runs) == 1
    run = runs.iloc[0]
    assert (run.batch, run.operator, run.n_inputs, run.n_failed, run.n_results) == (
        "B-7", "kim", 3, 1, 7)
    assert run.model_checksum == _sha_of_checksum(d / "m.bsm")
    assert "ab" * 32 in run.training_files
    inputs = list_inputs(ledger, int(run.run_id))
    assert list(inputs["status"]) == ["predicted", "failed", "predicted"]
    assert list(inputs["sha256"]) == [_sha(d / n) for n in ("a.csv", "bad.csv", "b.csv")]
    assert inputs["reason"].iloc[1]
    table = pd.read_csv(out, keep_default_na=False)
    rows = list_results(ledger, run=int(run.run_id))
    assert list(rows["sample"]) == list(table["sample"])
    for label in LABELS:  # the stored JSON keeps every double exactly (Python json: repr)
        np.testing.assert_array_equal(rows[label].to_numpy(float), table[label].to_numpy(float))
    assert main(args) == 3
    assert list(list_runs(ledger)["run_id"]) == [1, 2]
    assert len(list_results(ledger)) == 14
    assert len(list_results(ledger, sample="a*")) == 8
    with pytest.raises(DataError, match="in the future"):
        list_runs(ledger, since="2999-01-01")
    past = list_runs(ledger, since="2000-01-01")
    # Flagged counts match the recorded result rows that carry a code (counted with pandas).
    rows = list_results(ledger)
    expected = rows.assign(f=rows["flag_codes"] != "").groupby("run_id")["f"].sum()
    assert list(past["n_flagged"]) == list(expected.loc[past["run_id"]])
    capsys.readouterr()
    assert main(["ledger", str(ledger)]) == 0
    listing = capsys.readouterr().out
    assert "model_path" in listing and "n_flagged" in listing


def _sha_of_checksum(model_path) -> str:
    import json
    import zipfile

    with zipfile.ZipFile(model_path) as zf:
        return json.loads(zf.read("manifest.json"))["checksum"]


def test_ledger_refuses_edits_and_deletes(setup, tmp_path):
    d, model = setup
    ledger = tmp_path / "l.sqlite"
    rec = LedgerRecorder(ledger, model)
    summary = run_batch(model, [str(d / "a.csv")], [rec])
    rec.finish(summary.inputs, summary.failures)
    rec.close()
    con = sqlite3.connect(ledger)
    for statement in ("UPDATE results SET flags = 'x'", "DELETE FROM results",
                      "DELETE FROM runs", "UPDATE inputs SET sha256 = 'x'"):
        with pytest.raises(sqlite3.DatabaseError, match="append-only"):
            con.execute(statement)
    con.close()
    assert len(list_results(ledger)) == 4


def test_abandoned_run_leaves_the_ledger_unchanged(setup, tmp_path):
    d, model = setup
    ledger = tmp_path / "l.sqlite"
    rec = LedgerRecorder(ledger, model)
    run_batch(model, [str(d / "a.csv")], [rec])
    rec.close()  # the process stops before finish(): nothing may be recorded
    assert not ledger.exists()


def test_run_waits_for_a_locked_ledger_and_lands(setup, tmp_path):
    d, model = setup
    ledger = tmp_path / "l.sqlite"
    rec = LedgerRecorder(ledger, model)
    summary = run_batch(model, [str(d / "b.csv")], [rec])
    holder = sqlite3.connect(ledger, isolation_level=None, check_same_thread=False)
    holder.execute("BEGIN EXCLUSIVE")  # another writer holds the database
    threading.Timer(0.5, lambda: holder.execute("COMMIT")).start()
    assert rec.finish(summary.inputs, summary.failures) == 1
    rec.close()
    holder.close()
    assert len(list_results(ledger)) == 3


@pytest.mark.slow
def test_two_processes_writing_at_once_both_land(setup, tmp_path):
    d, _ = setup
    ledger = tmp_path / "l.sqlite"
    procs = [subprocess.Popen([*CLI, "predict", str(d / "m.bsm"), str(d / f"{n}.csv"),
                               "--ledger", str(ledger), "--batch", n],
                              stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
             for n in ("a", "b")]
    for p in procs:
        _, err = p.communicate(timeout=60)
        assert p.returncode == 0, err.decode()
    runs = list_runs(ledger)
    assert sorted(runs["batch"]) == ["a", "b"]
    assert sorted(runs["n_results"]) == [3, 4]


def test_ledger_command_lists_and_exports(setup, tmp_path, capsys):
    d, _ = setup
    ledger = tmp_path / "l.sqlite"
    assert main(["predict", str(d / "m.bsm"), str(d / "a.csv"), "--ledger", str(ledger),
                 "--out", str(tmp_path / "r.csv")]) == 0
    parser = argparse.ArgumentParser()
    ledger_cmd.register(parser.add_subparsers())
    capsys.readouterr()
    for argv in ([], ["--run", "1"], ["--export", str(tmp_path / "x.csv")]):
        args = parser.parse_args(["ledger", str(ledger), *argv])
        assert args.func(args) == 0
    shown = capsys.readouterr().out
    assert "a0" in shown and "run_id" in shown
    exported = pd.read_csv(tmp_path / "x.csv", keep_default_na=False)
    assert list(exported["sample"]) == [f"a{i}" for i in range(4)]


@pytest.mark.slow
def test_killed_prediction_leaves_no_partial_output_and_no_partial_run(setup, tmp_path):
    d, _ = setup
    ledger, out = tmp_path / "l.sqlite", tmp_path / "out" / "r.csv"
    out.parent.mkdir()
    assert main(["predict", str(d / "m.bsm"), str(d / "a.csv"), "--ledger", str(ledger)]) == 0
    before = ledger.read_bytes()
    big = tmp_path / "big.csv"
    rng = np.random.default_rng(5)
    values = rng.uniform(0.1, 1.0, (8000, 3)) @ PURE
    with open(big, "w") as handle:
        handle.write("sample," + ",".join(f"{a:g}" for a in AXIS) + "\n")
        for i, row in enumerate(values):
            handle.write(f"x{i}," + ",".join(f"{v:.5f}" for v in row) + "\n")
    proc = subprocess.Popen([*CLI, "predict", str(d / "m.bsm"), str(big), "--out", str(out),
                             "--ledger", str(ledger), "--chunk-size", "500"],
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 30
    while not any(out.parent.glob(".r.csv.*.part")) and time.monotonic() < deadline:
        time.sleep(0.02)
    time.sleep(0.3)  # well inside the run, which takes seconds
    assert proc.poll() is None, "the run ended before it could be killed; use a larger input"
    proc.send_signal(signal.SIGKILL)
    proc.wait(timeout=10)
    assert not out.exists()
    assert ledger.read_bytes() == before
    assert len(list_runs(ledger)) == 1


NOT_A_LEDGER = "is not a bandsolve results ledger (SQLite)"


def test_a_file_that_is_not_a_ledger_is_refused_before_anything_is_predicted(
        setup, tmp_path, capsys):
    d, _ = setup
    text = tmp_path / "notes.csv"
    text.write_text("sample,A\nx,1\n")
    foreign = tmp_path / "other.sqlite"  # a valid SQLite database of some other program
    con = sqlite3.connect(foreign)
    con.execute("CREATE TABLE items (name TEXT)")
    con.commit()
    con.close()
    for bad in (text, foreign, tmp_path):
        before = bad.read_bytes() if bad.is_file() else None
        out = tmp_path / "q.csv"
        # Exit code 2 for bad input (documented in bandsolve.cli), not 1 (internal error).
        assert main(["predict", str(d / "m.bsm"), str(d / "a.csv"), "--ledger", str(bad),
                     "--out", str(out)]) == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and "internal error" not in err
        assert "give a new file name or an existing ledger" in err
        assert not out.exists()  # refused before predicting: no output without its record
        if before is not None:
            assert bad.read_bytes() == before
            assert NOT_A_LEDGER in err
            assert main(["ledger", str(bad)]) == 2
            assert NOT_A_LEDGER in capsys.readouterr().err
    empty = tmp_path / "new.sqlite"
    empty.touch()  # an empty file is an empty SQLite database: a new ledger (SQLite docs)
    assert main(["predict", str(d / "m.bsm"), str(d / "a.csv"), "--ledger", str(empty)]) == 0
    assert len(list_runs(empty)) == 1
    capsys.readouterr()


def test_a_run_that_does_not_exist_is_named(setup, tmp_path, capsys):
    d, _ = setup
    ledger = tmp_path / "l.sqlite"
    assert main(["predict", str(d / "m.bsm"), str(d / "a.csv"), "--ledger", str(ledger)]) == 0
    capsys.readouterr()
    assert main(["ledger", str(ledger), "--run", "99"]) == 2
    err = capsys.readouterr().err
    assert "no run 99" in err and "run 1" in err
    with pytest.raises(DataError, match="no run 99"):
        list_results(ledger, run=99)
    with pytest.raises(DataError, match="no run 99"):
        list_inputs(ledger, 99)


def test_run_listing_shows_the_recorded_concentrations_and_standard_errors(
        setup, tmp_path, capsys):
    d, _ = setup
    ledger, out = tmp_path / "l.sqlite", tmp_path / "r.csv"
    assert main(["predict", str(d / "m.bsm"), str(d / "a.csv"), "--ledger", str(ledger),
                 "--out", str(out)]) == 0
    capsys.readouterr()
    assert main(["ledger", str(ledger), "--run", "1"]) == 0
    lines = capsys.readouterr().out.splitlines()
    header = next(line for line in lines if "sample" in line and "source" in line)
    for label in LABELS:
        assert label in header and f"{label} SE" in header
    table = pd.read_csv(out, keep_default_na=False)
    wanted = [c for label in LABELS for c in (label, f"{label} SE")]
    for _, row in table.iterrows():
        shown = next(line.split() for line in lines if f" {row['sample']} " in line)
        # columns: run_id, sample, source, then concentration and SE per analyte, flags;
        # pandas prints 6 decimals (pandas display.precision default), hence 1e-6.
        np.testing.assert_allclose([float(v) for v in shown[3:9]],
                                   row[wanted].to_numpy(float), atol=1e-6)

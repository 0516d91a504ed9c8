"""Tamper evidence of the results ledger: every edit made with an SQLite tool (triggers dropped
and re-created) is named by run id; with a lab key a complete rewrite is detected too; a
damaged ledger is refused before anything is predicted."""

from __future__ import annotations

import json
import shutil
import sqlite3

import numpy as np
import pytest

from bandsolve.batch.ledger import list_runs, verify_ledger
from bandsolve.batch.ledger_chain import GENESIS, RUN_FIELDS, row_hash, run_hash
from bandsolve.calibration.build import build_cls
from bandsolve.calibration.modelfile import save_model
from bandsolve.cli import main
from bandsolve.concentrations import ConcentrationTable
from bandsolve.io import write_spectra_csv
from bandsolve.labkey import LabKey
from bandsolve.spectra import SpectralSet

from .conftest import gaussian_bands

AXIS = np.linspace(400.0, 700.0, 61)
PURE = gaussian_bands(AXIS, (480, 560), (40, 45))
KEY_TEXT = "0123456789abcdef0123456789abcdef"


def _set(n: int, rs: int, prefix: str) -> SpectralSet:
    rng = np.random.default_rng(rs)
    return SpectralSet(axis=AXIS, values=rng.uniform(0.1, 1.0, (n, 2)) @ PURE,
                       sample_ids=[f"{prefix}{i}" for i in range(n)])


@pytest.fixture(scope="module")
def ledgers(tmp_path_factory):
    """Two ledgers of three runs each (4, 3 and 5 results): one plain, one sealed."""
    d = tmp_path_factory.mktemp("chain")
    cal = _set(12, 1, "c")
    conc = np.random.default_rng(1).uniform(0.1, 1.0, (12, 2))
    noise = 1e-3 * np.random.default_rng(11).standard_normal((12, AXIS.size))
    cal = SpectralSet(axis=AXIS, values=conc @ PURE + noise, sample_ids=cal.sample_ids)
    # Signed: with a lab key configured, predict accepts only models signed by it.
    save_model(build_cls(cal, ConcentrationTable(cal.sample_ids, ("A [mg/L]", "B [mg/L]"),
                                                 conc)), d / "m.bsm",
               key=LabKey(KEY_TEXT.encode()))
    (d / "lab.key").write_text(KEY_TEXT + "\n")
    for i, n in enumerate((4, 3, 5)):
        write_spectra_csv(_set(n, 10 + i, f"s{i}-"), d / f"in{i}.csv")
        for name, extra in (("plain", []), ("sealed", ["--key-file", str(d / "lab.key")])):
            assert main(["predict", str(d / "m.bsm"), str(d / f"in{i}.csv"), "--out",
                         str(d / f"{name}{i}.csv"), "--ledger", str(d / f"{name}.sqlite"),
                         *extra]) == 0
    return d


@pytest.fixture
def plain(ledgers, tmp_path):
    shutil.copy(ledgers / "plain.sqlite", tmp_path / "l.sqlite")
    return tmp_path / "l.sqlite"


@pytest.fixture
def sealed(ledgers, tmp_path):
    shutil.copy(ledgers / "sealed.sqlite", tmp_path / "l.sqlite")
    return tmp_path / "l.sqlite"


def _tamper(path, *statements) -> None:
    """What anyone with an SQLite client can do: drop the guards, edit, put the guards back."""
    con = sqlite3.connect(path)
    triggers = con.execute("SELECT name, sql FROM sqlite_master WHERE type='trigger'").fetchall()
    for name, _ in triggers:
        con.execute(f"DROP TRIGGER {name}")
    for statement in statements:
        con.execute(statement)
    for _, sql in triggers:
        con.execute(sql)
    con.commit()
    con.close()


def _rewrite_chain(path) -> None:
    """A forger who knows the published recipe recomputes every hash (but has no key)."""
    con = sqlite3.connect(path)
    con.row_factory = sqlite3.Row
    updates, prev = [], GENESIS
    for run in con.execute("SELECT * FROM runs ORDER BY run_id").fetchall():
        last = prev
        for r in con.execute("SELECT rowid AS k, row, input_position, sample, source, flags, "
                             "concentrations, record FROM results WHERE run_id = ? ORDER BY row",
                             (run["run_id"],)).fetchall():
            last = row_hash(last, tuple(r)[1:])
            updates.append(f"UPDATE results SET row_hash = '{last}' WHERE rowid = {r['k']}")
        inputs = [tuple(i) for i in con.execute(
            "SELECT position, path, sha256, status, reason FROM inputs WHERE run_id = ? "
            "ORDER BY position", (run["run_id"],))]
        values = {**dict(run), "prev_hash": prev}
        values["n_results"] = con.execute("SELECT COUNT(*) FROM results WHERE run_id = ?",
                                          (run["run_id"],)).fetchone()[0]
        prev = run_hash(tuple(values[f] for f in RUN_FIELDS), inputs, last)
        updates.append(f"UPDATE runs SET prev_hash = '{values['prev_hash']}', run_hash = "
                       f"'{prev}', n_results = {values['n_results']} WHERE run_id = "
                       f"{run['run_id']}")
    con.close()
    _tamper(path, *updates)


def _named(check, run_id: int) -> None:
    assert not check.ok
    assert check.run_id == run_id and f"run {run_id}" in check.problem, check.problem


EDITS = {  # statement(s), run that must be named
    "result value edited": ([
        "UPDATE results SET record = replace(record, '\"A [mg/L]\": ', '\"A [mg/L]\": 9') "
        "WHERE run_id = 2 AND row = (SELECT MIN(row) FROM results WHERE run_id = 2)"], 2),
    "flags cleared": (["UPDATE results SET flags = 'x' WHERE run_id = 3"], 3),
    "one result deleted": (["DELETE FROM results WHERE run_id = 2 AND row = "
                            "(SELECT MAX(row) FROM results WHERE run_id = 2)"], 2),
    "result count changed": (["UPDATE runs SET n_results = 20 WHERE run_id = 1"], 1),
    "all results of a run deleted": (["DELETE FROM results WHERE run_id = 1"], 1),
    "operator changed": (["UPDATE runs SET operator = 'someone else' WHERE run_id = 2"], 2),
    "input fingerprint changed": (["UPDATE inputs SET sha256 = 'ab' WHERE run_id = 3"], 3),
    "middle run deleted": (["DELETE FROM results WHERE run_id = 2",
                            "DELETE FROM inputs WHERE run_id = 2",
                            "DELETE FROM runs WHERE run_id = 2"], 3),
    "middle run deleted, later runs renumbered": (
        ["DELETE FROM results WHERE run_id = 2", "DELETE FROM inputs WHERE run_id = 2",
         "DELETE FROM runs WHERE run_id = 2", "UPDATE results SET run_id = 2 WHERE run_id = 3",
         "UPDATE inputs SET run_id = 2 WHERE run_id = 3",
         "UPDATE runs SET run_id = 2 WHERE run_id = 3"], 2),
    "newest run deleted": (["DELETE FROM results WHERE run_id = 3",
                            "DELETE FROM inputs WHERE run_id = 3",
                            "DELETE FROM runs WHERE run_id = 3"], 3),
}


@pytest.mark.parametrize("case", list(EDITS))
def test_each_edit_is_named_by_run_id(plain, case, capsys):
    statements, run_id = EDITS[case]
    assert verify_ledger(plain).ok
    _tamper(plain, *statements)
    _named(verify_ledger(plain), run_id)
    # The command says it too, and exits 2 (bad input, documented in bandsolve.cli).
    assert main(["ledger", str(plain), "--verify"]) == 2
    assert f"run {run_id}" in capsys.readouterr().out


def test_triggers_dropped_and_not_restored_are_reported(plain):
    con = sqlite3.connect(plain)
    con.execute("DROP TRIGGER results_no_update")
    con.commit()
    con.close()
    check = verify_ledger(plain)
    assert not check.ok and "triggers" in check.problem


def test_without_a_key_a_full_rewrite_passes_as_documented(plain):
    # Documented limit (bandsolve.batch.ledger_chain): a forger who recomputes every hash is
    # not detected without a key. This test keeps that statement honest.
    _tamper(plain, "UPDATE results SET flags = 'forged' WHERE run_id = 2")
    _rewrite_chain(plain)
    assert verify_ledger(plain).ok


def test_with_the_key_a_full_rewrite_is_detected(sealed):
    key = LabKey(KEY_TEXT.encode())
    assert verify_ledger(sealed, key).ok
    _tamper(sealed, "UPDATE results SET flags = 'forged' WHERE run_id = 2")
    _rewrite_chain(sealed)
    assert verify_ledger(sealed).ok  # the forged chain holds ...
    _named(verify_ledger(sealed, key), 2)  # ... but not its seals
    _tamper(sealed, "UPDATE runs SET seal = NULL WHERE run_id = 2")  # stripping seals fails too
    _named(verify_ledger(sealed, key), 2)
    other = LabKey(b"another lab key of 32 characters")
    _named(verify_ledger(sealed, other), 1)


def test_damaged_or_tampered_ledger_is_refused_before_predicting(ledgers, plain, tmp_path,
                                                                capsys):
    _tamper(plain, "UPDATE results SET flags = 'x' WHERE run_id = 3")
    before = plain.read_bytes()
    out = tmp_path / "r.csv"
    argv = ["predict", str(ledgers / "m.bsm"), str(ledgers / "in0.csv"), "--out", str(out),
            "--ledger", str(plain)]
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert "damaged ledger" in err and "run 3" in err and err.count("\n") == 1
    assert plain.read_bytes() == before and not out.exists()
    damaged = tmp_path / "damaged.sqlite"
    data = bytearray((ledgers / "plain.sqlite").read_bytes())
    rng = np.random.default_rng(3)
    data[4096:] = rng.bytes(len(data) - 4096)  # every page after the first damaged
    damaged.write_bytes(bytes(data))
    argv[-1] = str(damaged)
    assert main(argv) == 2
    assert "internal error" not in capsys.readouterr().err
    assert damaged.read_bytes() == bytes(data) and not out.exists()


def test_sealed_ledger_needs_its_key_to_append(ledgers, sealed, tmp_path, capsys):
    argv = ["predict", str(ledgers / "m.bsm"), str(ledgers / "in0.csv"), "--out",
            str(tmp_path / "r.csv"), "--ledger", str(sealed)]
    assert main(argv) == 0  # without a key the seals are not checked, and the run is unsealed
    capsys.readouterr()
    key = LabKey(KEY_TEXT.encode())
    _named(verify_ledger(sealed, key), 4)  # ... which the key holder sees at once


def test_run_records_its_results_file_and_fingerprints(ledgers):
    runs = list_runs(ledgers / "plain.sqlite")
    # hashlib: the FIPS 180-4 reference for SHA-256.
    import hashlib

    for i, run in runs.iterrows():
        data = (ledgers / f"plain{i}.csv").read_bytes()
        assert run.results_path == str(ledgers / f"plain{i}.csv")
        assert run.results_sha256 == hashlib.sha256(data).hexdigest()
    assert list(runs["prev_hash"].iloc[1:]) == list(runs["run_hash"].iloc[:-1])
    assert runs["prev_hash"].iloc[0] == "0" * 64
    assert runs["seal"].isna().all()
    sealed = list_runs(ledgers / "sealed.sqlite")
    assert sealed["seal"].notna().all() and KEY_TEXT not in json.dumps(
        sealed.astype(str).to_dict())


def test_check_before_appending_rehashes_only_the_newest_run(plain):
    # Documented in verify_ledger: the quick check (made before each append) finds removed or
    # added rows and runs in every run, edited row content only in the newest run.
    _tamper(plain, "UPDATE results SET flags = 'x' WHERE run_id = 1")
    assert verify_ledger(plain, every_row=False).ok
    _named(verify_ledger(plain), 1)
    _tamper(plain, "DELETE FROM results WHERE run_id = 2 AND row = "
                   "(SELECT MIN(row) FROM results WHERE run_id = 2)")
    _named(verify_ledger(plain, every_row=False), 2)
    _tamper(plain, "UPDATE results SET flags = 'y' WHERE run_id = 3")
    check = verify_ledger(plain, every_row=False)
    assert not check.ok and check.run_id in (2, 3)


def test_edited_check_standard_result_is_named(ledgers, tmp_path):
    known = tmp_path / "known.csv"
    known.write_text("sample,A [mg/L],B [mg/L]\ns0-*,0.5,0.5\n")
    ledger = tmp_path / "checks.sqlite"
    assert main(["predict", str(ledgers / "m.bsm"), str(ledgers / "in0.csv"), "--out",
                 str(tmp_path / "r.csv"), "--ledger", str(ledger), "--checks",
                 str(known)]) in (0, 4)
    assert verify_ledger(ledger).ok
    _tamper(ledger, "UPDATE check_results SET passed = 1 - passed")
    _named(verify_ledger(ledger), 1)

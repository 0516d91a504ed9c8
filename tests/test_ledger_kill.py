"""SIGKILL at random moments and at the critical steps of a recorded run: afterwards (once the
next run has started) every run has its ledger record and its results file, consistent, or
neither, and no temporary file is left anywhere."""

from __future__ import annotations

import contextlib
import hashlib
import multiprocessing
import os
import signal
import tempfile
import time

import numpy as np
import pytest

from bandsolve.batch import ledger as ledger_module
from bandsolve.batch.ledger import list_runs, prepare_ledger, verify_ledger
from bandsolve.batch.ledger_recovery import recover_results
from bandsolve.calibration.build import build_cls
from bandsolve.calibration.modelfile import save_model
from bandsolve.cli import main
from bandsolve.concentrations import ConcentrationTable
from bandsolve.io import atomic as atomic_module
from bandsolve.io import write_spectra_csv
from bandsolve.io.atomic import remove_stray_spools
from bandsolve.spectra import SpectralSet

from .conftest import gaussian_bands

AXIS = np.linspace(400.0, 700.0, 81)
PURE = gaussian_bands(AXIS, (480, 560), (40, 45))



def _die() -> None:
    os.kill(os.getpid(), signal.SIGKILL)


def _wrap(owner, name: str, before: bool) -> None:
    """Make ``owner.name`` kill the process right before or right after it runs."""
    original = getattr(owner, name)

    def wrapped(*args, **kwargs):
        if before:
            _die()
        result = original(*args, **kwargs)
        _die()
        return result

    setattr(owner, name, wrapped)


def _child(argv: list[str], step: str, spool: str) -> None:
    """A forked bandsolve run that kills itself at ``step`` (the step runs unchanged)."""
    tempfile.tempdir = spool
    devnull = os.open(os.devnull, os.O_WRONLY)
    os.dup2(devnull, 1)
    os.dup2(devnull, 2)
    targets = {"after-commit": (ledger_module.LedgerRecorder, "finish", False),
               "before-commit": (ledger_module.LedgerRecorder, "finish", True),
               "inside-transaction": (ledger_module.LedgerRecorder, "_insert", False),
               "after-rename": (atomic_module.os, "replace", False)}
    if step in targets:
        _wrap(*targets[step])
    os._exit(main(argv))


STEPS = {"after-commit": 16, "before-commit": 8, "inside-transaction": 8, "after-rename": 8,
         "random": 12}


@contextlib.contextmanager
def _tempdir(folder):
    old, tempfile.tempdir = tempfile.tempdir, str(folder)
    try:
        yield
    finally:
        tempfile.tempdir = old


def _sha(path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()  # hashlib: FIPS 180-4 reference


@pytest.mark.slow
def test_sigkill_anywhere_leaves_record_and_results_together_or_neither(tmp_path):
    rng = np.random.default_rng(2024)
    C = rng.uniform(0.1, 1.0, (15, 2))
    cal = SpectralSet(axis=AXIS, values=C @ PURE + 1e-3 * rng.standard_normal((15, AXIS.size)),
                      sample_ids=[f"c{i}" for i in range(15)])
    save_model(build_cls(cal, ConcentrationTable(cal.sample_ids, ("A [mg/L]", "B [mg/L]"),
                                                 C)), tmp_path / "m.bsm")
    batch = SpectralSet(axis=AXIS, values=rng.uniform(0.1, 1.0, (1500, 2)) @ PURE,
                        sample_ids=[f"r{i}" for i in range(1500)])
    write_spectra_csv(batch, tmp_path / "batch.csv")
    spool = tmp_path / "tmp"
    spool.mkdir()
    ledger = tmp_path / "l.sqlite"
    fork = multiprocessing.get_context("fork")  # children start with bandsolve imported

    def predict(out, step: str = "none"):
        argv = ["predict", str(tmp_path / "m.bsm"), str(tmp_path / "batch.csv"), "--out",
                str(out), "--ledger", str(ledger), "--quiet"]
        child = fork.Process(target=_child, args=(argv, step, str(spool)))
        child.start()
        return child

    def wait(child) -> int:
        child.join(timeout=300)
        return child.exitcode

    start = time.monotonic()
    assert wait(predict(tmp_path / "first.csv")) == 0
    duration = time.monotonic() - start
    plan = [s for s, n in STEPS.items() for _ in range(n)]
    rng.shuffle(plan)
    outcomes: dict[str, int] = {}
    for k, step in enumerate(plan):
        out = tmp_path / f"killed{k}.csv"
        proc = predict(out, step)
        if step == "random":
            time.sleep(rng.uniform(0.0, duration))
            with contextlib.suppress(ProcessLookupError):
                os.kill(proc.pid, signal.SIGKILL)
        code = wait(proc)
        outcomes[f"{step}: {'killed' if code == -signal.SIGKILL else 'finished'}"] = (
            outcomes.get(f"{step}: {'killed' if code == -signal.SIGKILL else 'finished'}", 0)
            + 1)
        assert code in (0, -signal.SIGKILL), (step, code)
        assert verify_ledger(ledger).ok  # the chain always holds, whatever the moment
        if k % 6 == 5:  # the next run cleans up and completes ...
            assert wait(predict(tmp_path / f"next{k}.csv")) == 0
        else:  # ... with the steps it takes before its batch, done here to keep the test short
            recover_results(ledger, tmp_path / f"next{k}.csv")
            prepare_ledger(ledger)
            with _tempdir(spool):
                remove_stray_spools("ledger")
        runs = list_runs(ledger)
        recorded = runs[runs["results_path"] == str(out)]
        assert len(recorded) <= 1
        if len(recorded):  # recorded: the results file is there, with the recorded content
            assert out.is_file() and _sha(out) == recorded["results_sha256"].iloc[0], step
        else:  # not recorded: no results file either
            assert not out.exists(), step
        left = [p.name for p in tmp_path.iterdir()
                if p.name.endswith((".part", ".intent", "-journal"))]
        assert left == [] and list(spool.iterdir()) == [], (step, left)
    check = verify_ledger(ledger)
    assert check.ok and check.n_runs == len(list_runs(ledger))
    assert sum(n for s, n in outcomes.items() if s.endswith("killed")) >= 40, outcomes
    print("kill outcomes:", outcomes, "runs recorded:", check.n_runs)

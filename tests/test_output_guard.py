"""No command destroys data: outputs onto inputs, models, ledgers, links and special files are
refused before any work, with one line, and the original bytes stay as they were."""

from __future__ import annotations

import os
import stat

import numpy as np
import pytest

from bandsolve.calibration.build import build_cls
from bandsolve.calibration.modelfile import save_model
from bandsolve.cli import main
from bandsolve.concentrations import ConcentrationTable
from bandsolve.errors import DataError
from bandsolve.io import write_concentrations_csv, write_spectra_csv
from bandsolve.io.atomic import atomic_write, check_output
from bandsolve.spectra import SpectralSet

from .conftest import gaussian_bands

AXIS = np.linspace(400.0, 700.0, 61)
PURE = gaussian_bands(AXIS, (480, 560), (40, 45))
LABELS = ("A [mg/L]", "B [mg/L]")


@pytest.fixture
def lab(tmp_path):
    rng = np.random.default_rng(7)
    C = rng.uniform(0.1, 1.0, (12, 2))
    cal = SpectralSet(axis=AXIS, values=C @ PURE + 1e-3 * rng.standard_normal((12, 61)),
                      sample_ids=[f"c{i}" for i in range(12)])
    table = ConcentrationTable(cal.sample_ids, LABELS, C)
    write_spectra_csv(cal, tmp_path / "cal.csv")
    write_concentrations_csv(table, tmp_path / "conc.csv")
    save_model(build_cls(cal, table), tmp_path / "m.bsm")
    routine = SpectralSet(axis=AXIS, values=rng.uniform(0.1, 1, (3, 2)) @ PURE,
                          sample_ids=["r0", "r1", "r2"])
    (tmp_path / "batch").mkdir()
    write_spectra_csv(routine, tmp_path / "batch" / "x.csv")
    assert main(["predict", str(tmp_path / "m.bsm"), str(tmp_path / "batch" / "x.csv"),
                 "--out", str(tmp_path / "first.csv"), "--ledger",
                 str(tmp_path / "l.sqlite")]) == 0
    return tmp_path


def _snapshot(folder) -> dict[str, bytes]:
    return {str(p): p.read_bytes() for p in sorted(folder.rglob("*"))
            if p.is_file() and not p.is_symlink()}


def _refused(argv, capsys, *needles: str) -> None:
    # Exit code 2 for bad input and one line (documented in bandsolve.cli).
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "internal error" not in err, err
    for needle in needles:
        assert needle in err, err


CASES = {
    "predict onto its input": lambda d: ["predict", f"{d}/m.bsm", f"{d}/batch/x.csv", "--out",
                                         f"{d}/batch/x.csv"],
    "predict onto a file of its input folder": lambda d: ["predict", f"{d}/m.bsm", f"{d}/batch",
                                                          "--out", f"{d}/batch/x.csv"],
    "predict onto its model": lambda d: ["predict", f"{d}/m.bsm", f"{d}/batch/x.csv", "--out",
                                         f"{d}/m.bsm", "--format", "csv"],
    "predict onto its ledger": lambda d: ["predict", f"{d}/m.bsm", f"{d}/batch/x.csv", "--out",
                                          f"{d}/l.sqlite", "--format", "csv", "--ledger",
                                          f"{d}/l.sqlite"],
    "predict onto another ledger": lambda d: ["predict", f"{d}/m.bsm", f"{d}/batch/x.csv",
                                              "--out", f"{d}/l.sqlite", "--format", "csv"],
    "ledger export onto the ledger": lambda d: ["ledger", f"{d}/l.sqlite", "--export",
                                                f"{d}/l.sqlite"],
    "build onto its spectra": lambda d: ["build", "--spectra", f"{d}/cal.csv",
                                         "--concentrations", f"{d}/conc.csv", "--out",
                                         f"{d}/cal.csv"],
    "build onto its concentrations": lambda d: ["build", "--spectra", f"{d}/cal.csv",
                                                "--concentrations", f"{d}/conc.csv", "--out",
                                                f"{d}/conc.csv"],
    "report onto its model": lambda d: ["report", f"{d}/m.bsm", "--out", f"{d}/m.bsm"],
    "assess table onto its concentrations": lambda d: [
        "assess", f"{d}/m.bsm", "--spectra", f"{d}/cal.csv", "--concentrations",
        f"{d}/conc.csv", "--samples", f"{d}/conc.csv"],
}


@pytest.mark.parametrize("case", list(CASES))
def test_output_onto_an_input_model_or_ledger_is_refused_and_nothing_changes(lab, capsys,
                                                                             case):
    before = _snapshot(lab)
    _refused(CASES[case](lab), capsys)
    assert _snapshot(lab) == before


def test_hard_link_to_an_input_is_the_same_file(lab, capsys):
    os.link(lab / "batch" / "x.csv", lab / "alias.csv")
    before = _snapshot(lab)
    _refused(["predict", f"{lab}/m.bsm", f"{lab}/batch/x.csv", "--out", f"{lab}/alias.csv"],
             capsys, "the same file")
    assert _snapshot(lab) == before


def test_symbolic_link_is_not_replaced(lab, capsys):
    target = lab / "target.csv"
    target.write_text("kept\n")
    (lab / "link.csv").symlink_to(target)
    _refused(["predict", f"{lab}/m.bsm", f"{lab}/batch/x.csv", "--out", f"{lab}/link.csv"],
             capsys, "symbolic link")
    assert (lab / "link.csv").is_symlink() and target.read_text() == "kept\n"


def test_fifo_and_devices_are_refused_without_opening_them(lab, capsys):
    fifo = lab / "pipe.csv"
    os.mkfifo(fifo)  # opening it for writing would block: the refusal must come first
    _refused(["predict", f"{lab}/m.bsm", f"{lab}/batch/x.csv", "--out", str(fifo)],
             capsys, "FIFO")
    assert stat.S_ISFIFO(os.lstat(fifo).st_mode)
    _refused(["predict", f"{lab}/m.bsm", f"{lab}/batch/x.csv", "--out", os.devnull,
              "--format", "csv"], capsys, "character device")
    assert stat.S_ISCHR(os.stat(os.devnull).st_mode)
    if os.path.islink("/dev/stdout"):
        _refused(["predict", f"{lab}/m.bsm", f"{lab}/batch/x.csv", "--out", "/dev/stdout",
                  "--format", "csv"], capsys, "symbolic link")


def test_fifo_as_ledger_is_refused_without_opening_it(lab, capsys):
    fifo = lab / "ledger.fifo"
    os.mkfifo(fifo)
    _refused(["predict", f"{lab}/m.bsm", f"{lab}/batch/x.csv", "--out", f"{lab}/o.csv",
              "--ledger", str(fifo)], capsys, "not a regular file")
    assert not (lab / "o.csv").exists()


def test_missing_folders_are_not_created(lab, capsys):
    before = _snapshot(lab)
    _refused(["predict", f"{lab}/m.bsm", f"{lab}/batch/x.csv", "--out", f"{lab}/a/b/c.csv"],
             capsys, "does not exist")
    assert not (lab / "a").exists() and _snapshot(lab) == before


def test_atomic_write_itself_refuses_links_and_missing_folders(tmp_path):
    (tmp_path / "t").write_text("kept")
    (tmp_path / "l").symlink_to(tmp_path / "t")
    for bad in (tmp_path / "l", tmp_path / "no" / "f.csv"):
        with pytest.raises(DataError), atomic_write(bad) as handle:
            handle.write("x")
    assert (tmp_path / "t").read_text() == "kept" and not (tmp_path / "no").exists()
    check_output(tmp_path / "new.csv", [tmp_path / "t"])  # a new name is fine


def test_model_may_replace_an_older_model_but_nothing_else_may(lab, capsys):
    assert main(["build", "--spectra", f"{lab}/cal.csv", "--concentrations",
                 f"{lab}/conc.csv", "--out", f"{lab}/m.bsm"]) == 0
    capsys.readouterr()
    _refused(["build", "--spectra", f"{lab}/cal.csv", "--concentrations", f"{lab}/conc.csv",
              "--out", f"{lab}/l.sqlite"], capsys, "SQLite database")

"""A ledger on a full or read-only disk is refused before the batch is computed, in plain
words (a small tmpfs stands in for the disk; skipped where it cannot be mounted)."""

from __future__ import annotations

import shutil
import subprocess

import numpy as np
import pytest

from bandsolve.batch.ledger import MIN_FREE_BYTES
from bandsolve.calibration.modelfile import save_model
from bandsolve.cli import main
from bandsolve.io import write_spectra_csv
from bandsolve.spectra import SpectralSet

from .conftest import gaussian_bands, two_analyte_model

AXIS = np.linspace(400.0, 700.0, 41)
PURE = gaussian_bands(AXIS, (480, 560), (40, 45))


def _mount(point, options: str) -> bool:
    done = subprocess.run(["mount", "-t", "tmpfs", "-o", options, "tmpfs", str(point)],
                          capture_output=True)
    return done.returncode == 0


@pytest.fixture
def disk(tmp_path):
    point = tmp_path / "disk"
    point.mkdir()
    if shutil.which("mount") is None or not _mount(point, "size=64m"):
        pytest.skip("cannot mount a tmpfs here (needs root in a permissive container)")
    try:
        yield point
    finally:
        subprocess.run(["umount", "-l", str(point)], capture_output=True)


@pytest.fixture
def lab(tmp_path):
    rng = np.random.default_rng(3)
    save_model(two_analyte_model(AXIS, PURE, rng), tmp_path / "m.bsm")
    write_spectra_csv(SpectralSet(axis=AXIS, values=rng.uniform(0.1, 1, (3, 2)) @ PURE,
                                  sample_ids=["a", "b", "c"]), tmp_path / "x.csv")
    return tmp_path


def _predict(lab, ledger):
    return main(["predict", str(lab / "m.bsm"), str(lab / "x.csv"), "--out",
                 str(lab / "r.csv"), "--ledger", str(ledger)])


def test_full_disk_is_found_before_the_batch(lab, disk, capsys):
    ledger = disk / "l.sqlite"
    assert _predict(lab, ledger) == 0
    capsys.readouterr()
    free = shutil.disk_usage(disk).free
    (disk / "filler").write_bytes(b"\0" * (free - MIN_FREE_BYTES // 2))
    before = ledger.read_bytes()
    (lab / "r.csv").unlink()
    assert _predict(lab, ledger) == 2  # exit 2: bad input (documented in bandsolve.cli)
    err = capsys.readouterr().err
    assert "free" in err and "nothing was computed" in err and "rollback" not in err
    assert ledger.read_bytes() == before and not (lab / "r.csv").exists()


def test_read_only_ledger_is_found_before_the_batch(lab, disk, capsys):
    ledger = disk / "l.sqlite"
    assert _predict(lab, ledger) == 0
    subprocess.run(["mount", "-o", "remount,ro", str(disk)], check=True)
    capsys.readouterr()
    (lab / "r.csv").unlink()
    assert _predict(lab, ledger) == 2
    err = capsys.readouterr().err
    assert "cannot be written" in err and "nothing was computed" in err
    assert not (lab / "r.csv").exists()

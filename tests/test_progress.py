"""Progress reporting: callbacks count up to the total; the bar is silent off a terminal."""

from __future__ import annotations

import io
import shutil
from pathlib import Path

from bandsolve.batch.predict import predict_inputs, run_batch
from bandsolve.calibration.modelfile import load_model
from bandsolve.progress import progress_bar

ROOT = Path(__file__).resolve().parents[1]


def test_batch_progress_counts_every_input(tmp_path):
    model = load_model(ROOT / "models" / "rinse-cls.bsm")
    source = ROOT / "examples" / "rinse-water" / "routine" / "batch-1.csv"
    files = [str(shutil.copy(source, tmp_path / f"b{i}.csv")) for i in range(3)]
    calls = []
    run_batch(model, files, [], progress=lambda done, total, label: calls.append((done, total)))
    assert calls == [(1, 3), (2, 3), (3, 3)]
    assert len(predict_inputs(model, files).table) == 3 * 6  # six spectra per file


def test_bar_is_silent_when_not_a_terminal():
    assert progress_bar(stream=io.StringIO()) is None
    assert progress_bar(quiet=True) is None


def test_compare_reports_each_stage():
    from bandsolve.evaluate.compare import compare_methods
    from bandsolve.io import read_concentrations, read_spectra

    demo = ROOT / "examples" / "rinse-water"
    calls = []
    compare_methods(read_spectra(demo / "calibration_spectra.csv"),
                    read_concentrations(demo / "calibration_concentrations.csv"),
                    cv="interleaved:5", max_components=6, n_permutations=99,
                    progress=lambda done, total, label: calls.append((done, total)))
    # Two CLS variants, PLS, the tests and the evidence: five stages, counted in order.
    assert calls == [(i, 5) for i in range(1, 6)]

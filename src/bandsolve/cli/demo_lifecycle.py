"""The demo's second act, INVENTED like the first: a second instrument and a season of runs.

* A second, invented spectrophotometer with a slightly wider band pass (3 nm of extra
  Gaussian width), its wavelength axis 0.5 nm off and a 4 % photometric gain. Ten of the
  calibration mixtures (chosen to span the design, Kennard–Stone) are re-measured on both
  instruments; the CLS model is moved to the new instrument by piecewise direct
  standardization, and the validation mixtures measured there show the accuracy before and
  after.
* A season of 40 invented routine runs, each with three rinse samples and one check standard
  of known composition, recorded in a results ledger. From run 28 the dye B check standard
  reads a little higher each run (an invented ageing stock solution); the drift watch finds
  it.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from bandsolve.cli import demo_data as D
from bandsolve.io.atomic import output_folder

__all__ = ["Lifecycle", "run_lifecycle", "NEW_INSTRUMENT", "N_RUNS", "DRIFT_FROM"]

#: The invented second instrument: extra band width (σ, nm), axis offset (nm), gain.
NEW_INSTRUMENT = (3.0, 0.5, 1.04)
N_RUNS, DRIFT_FROM = 40, 28
#: Invented check standard (mg/L of dye A, B, C) and dye B's extra reading per drifting run.
CHECK_STANDARD = np.array([6.0, 5.0, 4.0])
DRIFT_PER_RUN = 0.006


@dataclass
class Lifecycle:
    """What the second act produced."""

    moved_model: Path
    ledger: Path
    drift: object  # bandsolve.batch.watch.DriftReport
    before: object  # Assessment of the original model on the new instrument
    after: object  # Assessment of the transferred model on the new instrument
    moved: object  # the transferred Calibration


def _new_instrument(conc: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    width, shift, gain = NEW_INSTRUMENT
    pure = np.vstack([D.bands(d[4], extra_width=width, shift=shift) for d in D.DYES])
    A = gain * conc @ pure
    A += rng.normal(0.0, 0.001, (len(conc), 1))
    return A + rng.normal(0.0, D.NOISE_AU, A.shape)


def _season(folder: Path, model, rng: np.random.Generator) -> Path:
    from bandsolve.batch.checks import CheckSink, CheckStandards
    from bandsolve.batch.ledger import LedgerRecorder
    from bandsolve.batch.predict import run_batch
    from bandsolve.concentrations import ConcentrationTable

    known = ConcentrationTable(("QC-*",), tuple(D.analyte_labels()), CHECK_STANDARD[None, :])
    D.write_concentrations(folder / "check_standards.csv",
                           pd.DataFrame(known.values, index=["QC-*"],
                                        columns=list(known.analytes)))
    ledger = folder / "results.sqlite"
    ledger.unlink(missing_ok=True)  # the demo's own ledger: one season per demo run
    output_folder(folder / "season")
    lows = np.array([d[2] for d in D.DYES])
    highs = np.array([d[3] for d in D.DYES])
    for run in range(1, N_RUNS + 1):
        qc = CHECK_STANDARD * [1.0, 1.0 + DRIFT_PER_RUN * max(0, run - DRIFT_FROM + 1), 1.0]
        conc = np.vstack([lows + rng.uniform(0.1, 0.9, (3, 3)) * (highs - lows), qc])
        path = folder / "season" / f"run-{run:02d}.csv"
        D.write_spectra(path, [f"rinse-{run:02d}-{i}" for i in (1, 2, 3)] + [f"QC-{run:02d}"],
                        D.measure(conc, rng), f"season run {run}: three rinse samples and "
                        "one check standard")
        checks = CheckSink(CheckStandards(known), model.analytes)
        recorder = LedgerRecorder(ledger, model, model_path="models/rinse-cls.bsm",
                                  batch=f"run {run:02d}", operator="demo")
        try:
            summary = run_batch(model, [str(path)], [checks, recorder])
            recorder.record_checks(checks.report().table)
            recorder.finish(summary.inputs, summary.failures)
        finally:
            recorder.close()
    return ledger


def run_lifecycle(folder: Path, model, files: D.DemoFiles) -> Lifecycle:
    """Generate the second-instrument and season data, transfer the model, watch the drift."""
    from bandsolve.batch.watch import watch_ledger
    from bandsolve.calibration.modelfile import save_model, sha256_file
    from bandsolve.calibration.transferred import transfer_calibration
    from bandsolve.evaluate.assess import assess
    from bandsolve.io import read_concentrations, read_spectra
    from bandsolve.transfer import kennard_stone

    rng = np.random.default_rng(D.RANDOM_STATE + 2)
    cal = read_concentrations(files.calibration_concentrations)
    val = read_concentrations(files.validation_concentrations)
    cal_spectra = read_spectra(files.calibration_spectra)
    pick = kennard_stone(model.prepare(cal_spectra)[0], 10)
    ids = [cal.sample_ids[i] for i in pick]
    conc = cal.values[pick]
    unit2 = output_folder(folder / "instrument-2")
    paths = {"original": unit2 / "transfer_on_instrument_1.csv",
             "new": unit2 / "transfer_on_instrument_2.csv"}
    D.write_spectra(paths["original"], ids, D.measure(conc, rng),
                    "transfer samples re-measured on the original instrument")
    D.write_spectra(paths["new"], ids, _new_instrument(conc, rng),
                    "the same transfer samples on the invented second instrument")
    val_path = unit2 / "validation_on_instrument_2.csv"
    D.write_spectra(val_path, list(val.sample_ids), _new_instrument(val.values, rng),
                    "validation mixtures measured on the invented second instrument")
    moved = transfer_calibration(
        model, read_spectra(paths["original"]), read_spectra(paths["new"]),
        files=[{"role": f"{k} instrument", "name": p.name, "sha256": sha256_file(p)}
               for k, p in paths.items()])
    moved_path = folder / "models" / "rinse-cls-instrument-2.bsm"
    save_model(moved, moved_path)
    val2 = read_spectra(val_path)
    ledger = _season(folder, model, rng)
    return Lifecycle(moved_path, ledger, watch_ledger(ledger), assess(model, val2, val),
                     assess(moved, val2, val), moved)

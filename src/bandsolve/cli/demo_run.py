"""The whole demo run: data, models, routine batches, the second act, the report.

Everything is INVENTED (see :mod:`bandsolve.cli.demo_data` and
:mod:`bandsolve.cli.demo_lifecycle`).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from bandsolve.cli.demo_data import DEMO_LABEL, RESULT_FILES, DemoFiles, write_demo_data
from bandsolve.cli.demo_lifecycle import Lifecycle, run_lifecycle
from bandsolve.io.atomic import atomic_write, output_folder

__all__ = ["DemoRun", "run_demo"]


@dataclass
class DemoRun:
    """What :func:`run_demo` produced."""

    files: DemoFiles
    model_path: Path
    results_path: Path
    results: pd.DataFrame
    outputs: dict[str, Path] = field(default_factory=dict)
    lifecycle: Lifecycle | None = None  # the second act: transfer and drift watch


def run_demo(folder: str | Path) -> DemoRun:
    """Generate the invented data, build CLS and PLS models, predict both routine batches,
    move the CLS model to a second instrument and watch a season of check standards.

    Files go under ``folder``: the data, ``models/rinse-cls.bsm``, ``models/rinse-pls.bsm``,
    ``models/rinse-cls-instrument-2.bsm``, ``results.csv`` (CLS), ``results-pls.csv``,
    ``results.sqlite`` (the season's ledger) and ``report.html``.
    """
    from bandsolve.batch.predict import predict_inputs
    from bandsolve.calibration.build import build_cls, file_fingerprints
    from bandsolve.calibration.build_pls import build_pls
    from bandsolve.calibration.modelfile import save_model
    from bandsolve.io import read_concentrations, read_spectra

    files = write_demo_data(folder)
    folder = output_folder(Path(folder) / "models").parent
    spectra = read_spectra(files.calibration_spectra)
    table = read_concentrations(files.calibration_concentrations)
    prov = {"data_label": DEMO_LABEL, "training_files": file_fingerprints(
        {"spectra": files.calibration_spectra,
         "concentrations": files.calibration_concentrations, "blanks": files.blanks})}
    blanks = read_spectra(files.blanks)
    # The invented cell-positioning offset is modelled by an offset baseline term (it is what
    # `bandsolve compare` recommends on these data).
    models = {"cls": build_cls(spectra, table, baseline="offset", blanks=blanks,
                               provenance=prov),
              "pls": build_pls(spectra, table, cv="interleaved:5", max_components=8, blanks=blanks,
                               provenance=prov)}
    outputs: dict[str, Path] = {}
    tables = {}
    for name, model in models.items():
        path = folder / "models" / f"rinse-{name}.bsm"
        save_model(model, path)
        outputs[f"{name.upper()} model"] = path
        tables[name] = predict_inputs(model, [str(p) for p in files.routine]).table
        out = folder / RESULT_FILES[name]
        with atomic_write(out, "w", newline="") as handle:
            handle.write(f"# {DEMO_LABEL}\n")  # the results of invented data say so too
            tables[name].to_csv(handle, index=False)
        outputs[f"{name.upper()} results"] = out
    from bandsolve.report.extra import drift_section, transfer_section

    life = run_lifecycle(folder, models["cls"], files)
    outputs["CLS model for instrument 2"] = life.moved_model
    outputs["results ledger (40 runs)"] = life.ledger
    sections = [transfer_section(life.moved, life.before, life.after,
                                 "the validation mixtures"), drift_section(life.drift)]
    outputs["report"] = _write_report(folder, models["cls"], spectra, table, files, tables["cls"],
                                      sections)
    return DemoRun(files, outputs["CLS model"], outputs["CLS results"], tables["cls"], outputs,
                   life)


def _write_report(folder: Path, model, spectra, table, files: DemoFiles, batch,
                  sections) -> Path:
    """The HTML report of the CLS model: validation, CLS-vs-PLS comparison, routine batch."""
    from bandsolve.evaluate.assess import assess
    from bandsolve.evaluate.compare import compare_methods
    from bandsolve.io import read_concentrations, read_spectra
    from bandsolve.report import write_report

    val_spectra = read_spectra(files.validation_spectra)
    val_table = read_concentrations(files.validation_concentrations)
    return write_report(
        model, folder / "report.html", calibration_spectra=spectra, calibration_table=table,
        validation_spectra=val_spectra, validation_table=val_table,
        blanks=read_spectra(files.blanks), batch=batch,
        assessment=assess(model, val_spectra, val_table),
        comparison=compare_methods(spectra, table, val_spectra, val_table, cv="interleaved:5",
                                   max_components=8), sections=sections)

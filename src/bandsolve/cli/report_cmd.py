"""``bandsolve report``: one self-contained, printable HTML report of a model file."""

from __future__ import annotations

import argparse
import importlib
import importlib.util
from collections.abc import Callable
from typing import Any

from bandsolve.batch.predict import predict_inputs
from bandsolve.cli._codes import EXIT_OK, EXIT_PARTIAL
from bandsolve.cli._common import (
    add_input_options,
    eprint,
    guard_outputs,
    open_model,
    read_options,
)
from bandsolve.io import read_concentrations, read_spectra
from bandsolve.progress import progress_bar
from bandsolve.report import write_report

EXAMPLES = """\
examples:
  # the model alone: definition, limits, component spectra, flags legend, cautions
  bandsolve report models/rinse-cls.bsm --out rinse-report.html

  # with the calibration data, an independent validation set, blanks and a routine batch
  bandsolve report models/rinse-cls.bsm --calibration cal_spectra.csv cal_conc.csv \\
      --assess val_spectra.csv val_conc.csv --blanks blanks.csv \\
      --batch routine/ --out rinse-report.html

  # the drift watch of the model's check standards recorded in a ledger
  bandsolve report models/rinse-cls.bsm --drift results.sqlite --out qc-report.html

A model moved to another instrument (bandsolve transfer) given --assess with samples measured
on the new instrument also shows their accuracy without and with the transfer.
"""


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("report", help="write a self-contained HTML report of a model",
                       description="Write one HTML file (figures inline, no network requests, "
                                   "printable) describing a model, its figures of merit, its "
                                   "validation and optionally a prediction batch. Batch "
                                   "inputs that cannot be read are skipped, listed in the "
                                   "report and on stderr, and the exit code is 3.",
                       epilog=EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("model", metavar="MODEL", help="model file written by bandsolve build")
    p.add_argument("--out", metavar="REPORT.html", required=True, help="report file to write")
    p.add_argument("--calibration", nargs=2, metavar=("SPECTRA", "CONC"),
                   help="calibration spectra and concentrations (overlay, fit, selectivity)")
    p.add_argument("--assess", nargs=2, metavar=("SPECTRA", "CONC"),
                   help="independent validation spectra and known concentrations")
    p.add_argument("--compare", nargs=2, metavar=("SPECTRA", "CONC"),
                   help="data on which to compare calibration methods")
    p.add_argument("--blanks", metavar="FILE",
                   help="replicate blank spectra: noise for the figures of merit")
    p.add_argument("--batch", nargs="+", metavar="SPECTRA",
                   help="routine spectra files or folders to predict and include")
    p.add_argument("--drift", metavar="LEDGER",
                   help="results ledger: add the control charts of this model's check "
                        "standards (bandsolve drift)")
    p.add_argument("--title", help="report title (default: from the model)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    add_input_options(p)
    p.set_defaults(func=run)


def optional_api(module: str, name: str) -> Callable[..., Any] | None:
    """``bandsolve.<module>.<name>`` when that module is installed, else None."""
    if importlib.util.find_spec(f"bandsolve.{module}") is None:
        return None
    return getattr(importlib.import_module(f"bandsolve.{module}"), name, None)


def _pair(pair: list[str] | None, args: argparse.Namespace):
    if not pair:
        return None, None
    return read_spectra(pair[0], **read_options(args)), read_concentrations(pair[1])


def _sections(cal, args: argparse.Namespace, assessment, val_spectra, val_table) -> list:
    """Drift watch (--drift) and, for a transferred model with --assess, the transfer."""
    from bandsolve.report.extra import drift_section, transfer_section

    sections = []
    if cal.transfer is not None and assessment is not None:
        from bandsolve.calibration.transferred import untransferred
        from bandsolve.evaluate.assess import assess

        before = assess(untransferred(cal), val_spectra, val_table)
        sections.append(transfer_section(cal, before, assessment,
                                         f"the {len(val_spectra.sample_ids)} samples of "
                                         f"{args.assess[0]}"))
    if args.drift:
        from bandsolve.batch.watch import watch_ledger

        checksum = cal.provenance.get("model_checksum")
        sections.append(drift_section(watch_ledger(args.drift, model_checksum=checksum)))
    return sections


def run(args: argparse.Namespace) -> int:
    guard_outputs(args, {"--out": "out"},
                  ["model", "calibration", "assess", "compare", "blanks", "batch", "drift"])
    cal = open_model(args)
    cal_spectra, cal_table = _pair(args.calibration, args)
    val_spectra, val_table = _pair(args.assess, args)
    assessment = comparison = None
    if val_spectra is not None:
        assess = optional_api("evaluate.assess", "assess")
        if assess is None:
            eprint("bandsolve: note: validation statistics are not available in this "
                   "installation; the report shows the validation figures only")
        else:
            assessment = assess(cal, val_spectra, val_table)
    if args.compare:
        compare_methods = optional_api("evaluate.compare", "compare_methods")
        if compare_methods is None:
            eprint("bandsolve: note: method comparison is not available in this "
                   "installation; the report leaves it out")
        else:
            comparison = compare_methods(*_pair(args.compare, args))
    blanks = read_spectra(args.blanks, **read_options(args)) if args.blanks else None
    batch = None
    if args.batch:
        batch = predict_inputs(cal, args.batch, read_options=read_options(args))
        for failure in batch.failures:
            eprint(f"bandsolve: skipped {failure.input}: {failure.reason}")
    bar = progress_bar(args.quiet)
    path = write_report(cal, args.out, calibration_spectra=cal_spectra,
                        calibration_table=cal_table, assessment=assessment,
                        comparison=comparison, batch=batch, validation_spectra=val_spectra,
                        validation_table=val_table, blanks=blanks, title=args.title,
                        sections=_sections(cal, args, assessment, val_spectra, val_table),
                        progress=bar)
    eprint(f"Report written to {path}")
    # As for predict: exit 3 when some batch inputs could not be read (listed in the report).
    return EXIT_PARTIAL if batch is not None and batch.failures else EXIT_OK

"""``bandsolve predict``: apply a saved model to routine spectra."""

from __future__ import annotations

import argparse
import contextlib
import io
import sys
from pathlib import Path

from bandsolve.batch.checks import CheckSink, CheckStandards
from bandsolve.batch.ledger import LedgerRecorder, check_free_space, check_ledger
from bandsolve.batch.ledger_recovery import RunIntent, recover_results
from bandsolve.batch.overview import RoundingSink
from bandsolve.batch.predict import expand_inputs, result_table_columns, run_batch
from bandsolve.batch.tasks import DEFAULT_CHUNK
from bandsolve.batch.writers import FORMATS, format_for, open_writer
from bandsolve.cli._codes import EXIT_FLAGGED, EXIT_PARTIAL
from bandsolve.cli._common import (
    add_input_options,
    add_key_option,
    add_model_checks,
    caution_text,
    eprint,
    guard_outputs,
    open_model,
    read_options,
)
from bandsolve.errors import FormatError
from bandsolve.io.atomic import atomic_write
from bandsolve.labkey import load_lab_key
from bandsolve.progress import progress_bar

EXAMPLES = """\
examples:
  bandsolve predict models/rinse-cls.bsm routine/ --out results.csv
  bandsolve predict models/rinse-cls.bsm batch1.csv batch2.csv > results.csv
  cat batch.csv | bandsolve predict models/rinse-cls.bsm - --fail-on-flags
  bandsolve predict models/rinse-cls.bsm night/ --jobs 4 --out night.parquet \\
      --ledger results.sqlite --batch 2025-03-01 --operator am
  bandsolve predict models/rinse-cls.bsm image.npy --out maps/
  bandsolve predict models/rinse-cls.bsm day-41.csv --out day-41.csv \
      --ledger results.sqlite --checks check-standards.csv --check-limits 95-105

Wide CSV files are read in blocks of a few MB (memory does not grow with the file) and
parsed inside the parallel tasks of at most --chunk-size spectra; the numbers never depend
on --chunk-size, --jobs or --scheduler. An input that fails contributes no rows.
A .npy input is a spectral image (rows x columns x wavelengths, absorbance): --out names a
folder that receives one concentration map per analyte and a flag map (see bandsolve.batch.images).

Check standards (--checks) are predicted like any sample; each one's recovery
(found/expected) is judged against its acceptance limits and recorded with the run in the
ledger, where bandsolve drift charts them.

exit codes: 0 all inputs predicted; 2 bad model or options; 3 some inputs could not be read
(the rest were predicted; when none was, no results file is written); 4 with
--fail-on-flags, some result carries a flag or a check standard is out of its limits. When
both 3 and 4 apply, 4 is returned (the skipped inputs are still listed on standard error):
a flagged result must not be reported, which is the more urgent news.
"""


def _positive(text: str) -> int:
    value = int(text)
    if value < 1:
        raise argparse.ArgumentTypeError(f"must be a positive whole number, not {text}")
    return value


def _recovery_range(text: str) -> tuple[float, float]:
    try:
        low, high = (float(v) for v in text.replace("%", "").split("-"))
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not LOW-HIGH in %, e.g. 95-105") from None
    return low, high


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("predict", help="predict concentrations of routine samples",
                       description="Predict concentrations, standard errors, 95 % prediction "
                                   "intervals, diagnostics and flags for every spectrum.",
                       epilog=EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("model", metavar="MODEL", help="model file written by bandsolve build")
    p.add_argument("inputs", metavar="INPUT", nargs="+",
                   help="spectra files, folders (searched recursively) or - for stdin CSV")
    p.add_argument("--out", metavar="FILE", help="results file (default: standard output)")
    p.add_argument("--format", choices=FORMATS, default=None,
                   help="results format (default: from the --out ending, else csv); parquet "
                        "needs the parquet extra")
    p.add_argument("--glob", metavar="PATTERN", help="file pattern inside folders")
    p.add_argument("--keep-formulas", action="store_true",
                   help="write CSV text cells starting with = + - @ as they are (by default "
                        "they get a leading apostrophe so spreadsheets do not run them)")
    p.add_argument("--quiet", action="store_true",
                   help="no progress bar (it is shown only on a terminal anyway)")
    p.add_argument("--fail-on-flags", action="store_true",
                   help="exit with code 4 when any result is flagged (4 wins over 3: flagged "
                        "results are reported even when some inputs could not be read)")
    p.add_argument("--round", action="store_true",
                   help="round each estimate, SE and interval to two significant digits of "
                        "its SE (for people; the default keeps full precision for pipelines, "
                        "and the ledger always does)")
    run = p.add_argument_group("running")
    run.add_argument("--jobs", type=int, default=1, metavar="N",
                     help="processes that predict, this one included (N-1 worker "
                          "processes; -1: one per core; default 1; each worker holds its "
                          "own copy of the numerical libraries (about 175 MB) and pays off "
                          "only on cores that are otherwise idle; with --scheduler: cluster "
                          "workers)")
    run.add_argument("--chunk-size", type=_positive, default=DEFAULT_CHUNK, metavar="N",
                     help=f"most spectra per parallel task (default {DEFAULT_CHUNK}; a task "
                          "holds at most about 16 MB of text)")
    run.add_argument("--scheduler", metavar="ADDRESS",
                     help="run on an existing dask.distributed cluster (needs the dask extra)")
    led = p.add_argument_group("results ledger")
    led.add_argument("--ledger", metavar="FILE.sqlite",
                     help="append this run and every result to a ledger (SQLite)")
    led.add_argument("--batch", metavar="LABEL", help="batch label recorded in the ledger")
    led.add_argument("--operator", metavar="NAME", help="operator recorded in the ledger")
    qc = p.add_argument_group("check standards")
    qc.add_argument("--checks", metavar="FILE",
                    help="known values of check standards: first column a sample id or glob "
                         "pattern (QC-*), one column per analyte as in the model")
    qc.add_argument("--check-column", metavar="NAME",
                    help="text column of --checks marking check-standard rows (yes/1/x); "
                         "default: every row is one")
    qc.add_argument("--check-limits", metavar="LOW-HIGH", type=_recovery_range,
                    help="accepted recovery in %%, e.g. 95-105 (default: expected +/- 3 SE "
                         "of each result)")
    add_key_option(p)
    add_model_checks(p)
    add_input_options(p)
    p.set_defaults(func=run_command)


class _NothingPredicted(Exception):
    """Abandons the results file (atomic_write removes it) when no spectrum was predicted."""


def _summary_line(summary, out: str | None) -> str:
    n_ok = len(summary.inputs) - len(summary.failures)
    if summary.n_predicted:
        where = f"; results in {out}" if out not in (None, "-") else ""
    else:
        where = f"; nothing predicted, so {out} was not written" if out not in (None, "-") else ""
    return (f"{summary.n_predicted} spectra predicted from {n_ok} of {len(summary.inputs)} "
            f"inputs; {summary.n_flagged} flagged; {len(summary.failures)} could not be read"
            + where)


def _run_cubes(model, args: argparse.Namespace) -> int:
    from bandsolve.batch.images import predict_cube

    if not all(i.lower().endswith(".npy") for i in args.inputs) or args.out in (None, "-"):
        raise FormatError("spectral images (.npy) are predicted on their own, with --out "
                          "FOLDER for the maps; give only .npy inputs and an --out folder")
    for item in args.inputs:
        res = predict_cube(model, item, args.out, chunk_size=args.chunk_size, n_jobs=args.jobs)
        eprint(f"{item}: {res.shape[0]} x {res.shape[1]} maps "
               + ", ".join(str(p) for p in [*res.maps.values(), res.flag_map])
               + (f" ({res.notes})" if res.notes else ""))
    return 0


def run_command(args: argparse.Namespace) -> int:
    args.lab_key = load_lab_key(args.key_file)
    model = open_model(args)
    if (args.batch or args.operator) and not args.ledger:
        raise FormatError("--batch and --operator label a ledger run; add --ledger FILE.sqlite")
    if any(i.lower().endswith(".npy") for i in args.inputs):
        return _run_cubes(model, args)
    fmt = format_for(args.out, args.format)
    guard_outputs(args, {"--out": "out"}, ["model", "ledger", "checks"],
                  extra=expand_inputs(args.inputs, args.glob))
    to_stdout = args.out in (None, "-")
    if fmt == "parquet" and to_stdout:
        raise FormatError("Parquet results need a file: add --out FILE.parquet")
    if (args.check_column or args.check_limits) and not args.checks:
        raise FormatError("--check-column and --check-limits describe check standards; add "
                          "--checks FILE with their known values")
    checks = _check_sink(model, args) if args.checks else None
    if args.ledger:
        check_ledger(args.ledger, new_ok=True)  # before any work: a bad ledger loses nothing
        for note in recover_results(args.ledger, None if to_stdout else args.out):
            eprint(f"bandsolve: {note}")
    if not to_stdout:
        check_free_space(Path(args.out).resolve().parent, "results file")
    stdin_bytes = _stdin_bytes() if "-" in args.inputs else None
    try:
        summary = _predict(model, args, fmt, stdin_bytes, checks)
    except _NothingPredicted as stop:
        summary = stop.args[0]
    for failure in summary.failures:
        eprint(f"bandsolve: skipped {failure.input}: {failure.reason}")
    eprint(_summary_line(summary, args.out))
    failed_checks = False
    if checks is not None:
        report = checks.report()
        for line in report.summary():
            eprint(line)
        failed_checks = not report.passed
    eprint(caution_text())
    if args.fail_on_flags and (summary.n_flagged or failed_checks):
        return EXIT_FLAGGED  # documented precedence: a flagged result outranks a skipped input
    if summary.failures or not summary.n_predicted:
        return EXIT_PARTIAL
    return 0


def _check_sink(model, args: argparse.Namespace) -> CheckSink:
    from bandsolve.io import read_concentrations

    labels = (args.check_column,) if args.check_column else ()
    known = read_concentrations(args.checks, label_columns=labels)
    return CheckSink(CheckStandards(known, args.check_column, args.check_limits),
                     model.analytes)


def _stdin_bytes() -> bytes:
    """Standard input as raw bytes (fingerprinted for the ledger, then decoded)."""
    raw = getattr(sys.stdin, "buffer", None)
    if raw is None:  # already text (for example when replaced in tests)
        return sys.stdin.read().encode()
    return raw.read()


def _read_stdin(data: bytes | None = None) -> str:
    """Standard input (or its ``data`` already read) decoded by the rules every file is read
    with (UTF-8, Latin-1, UTF-16)."""
    from bandsolve.io._source import read_text

    return read_text(io.BytesIO(_stdin_bytes() if data is None else data), "<stdin>")


def _predict(model, args: argparse.Namespace, fmt: str, stdin_bytes: bytes | None,
             checks: CheckSink | None):
    """Run the batch into the results file (or standard output) and the ledger.

    With a ledger and a results file, the run is recorded (with the SHA-256 of the complete
    temporary results file) before that file is renamed into place; a kill in between is
    completed by the next run (:func:`bandsolve.batch.ledger_recovery.recover_results`).
    """
    stdin_text = None if stdin_bytes is None else _read_stdin(stdin_bytes)
    to_stdout = args.out in (None, "-")
    with contextlib.ExitStack() as stack:
        recorder = None
        if args.ledger:
            recorder = LedgerRecorder(args.ledger, model, model_path=args.model,
                                      batch=args.batch, operator=args.operator,
                                      stdin_bytes=stdin_bytes, key=args.lab_key)
            stack.callback(recorder.close)
            if not to_stdout:
                stack.callback(RunIntent(args.ledger, args.out).close)

        def record(results_file=None) -> None:
            if checks is not None:
                recorder.record_checks(checks.report().table)
            run_id = recorder.finish(summary.inputs, summary.failures,
                                     results_file=results_file,
                                     results_path=results_file and args.out)
            eprint(f"recorded as run {run_id} in {args.ledger}")

        commit = record if recorder is not None else None
        if to_stdout:
            handle = sys.stdout
        elif fmt == "parquet":
            handle = stack.enter_context(atomic_write(args.out, "wb", before_replace=commit))
        else:
            handle = stack.enter_context(atomic_write(args.out, "w", newline="",
                                                      before_replace=commit))
        writer = open_writer(handle, fmt, result_table_columns(model),
                             formula_safe=not args.keep_formulas)
        shown = RoundingSink(writer, model.analytes) if args.round else writer
        sinks = [shown, *([checks] if checks is not None else []),
                 *([recorder] if recorder is not None else [])]
        summary = run_batch(model, args.inputs, sinks, read_options=read_options(args),
                            pattern=args.glob, stdin_text=stdin_text,
                            chunk_size=args.chunk_size, n_jobs=args.jobs,
                            scheduler=args.scheduler, progress=progress_bar(args.quiet))
        writer.close()
        if recorder is not None and (to_stdout or not summary.n_predicted):
            record()  # no results file: standard output, or nothing predicted
        if not summary.n_predicted and not to_stdout:
            raise _NothingPredicted(summary)
    return summary

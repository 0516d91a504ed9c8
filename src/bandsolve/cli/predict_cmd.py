"""``bandsolve predict``: apply a saved model to routine spectra."""

from __future__ import annotations

import argparse
import sys

from ..bundle import load_model
from ..predict import predict_inputs
from . import EXIT_FLAGGED, EXIT_PARTIAL
from ._common import add_input_options, eprint, read_options, write_table

EXAMPLES = """\
examples:
  bandsolve predict models/rinse-cls.bsm routine/ --out results.csv
  bandsolve predict models/rinse-cls.bsm batch1.csv batch2.csv > results.csv
  cat batch.csv | bandsolve predict models/rinse-cls.bsm - --fail-on-flags

exit codes: 0 all inputs predicted; 2 bad model or options; 3 some inputs could not be read
(the rest were predicted); 4 with --fail-on-flags, some result carries a flag.
"""


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("predict", help="predict concentrations of routine samples",
                       description="Predict concentrations, standard errors, 95 % prediction "
                                   "intervals, diagnostics and flags for every spectrum.",
                       epilog=EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("model", metavar="MODEL", help="model file written by bandsolve build")
    p.add_argument("inputs", metavar="INPUT", nargs="+",
                   help="spectra files, folders (searched recursively) or - for stdin CSV")
    p.add_argument("--out", metavar="FILE", help="results CSV (default: standard output)")
    p.add_argument("--glob", metavar="PATTERN", help="file pattern inside folders")
    p.add_argument("--fail-on-flags", action="store_true",
                   help="exit with code 4 when any result is flagged")
    add_input_options(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    model = load_model(args.model)
    stdin_text = sys.stdin.read() if "-" in args.inputs else None
    result = predict_inputs(model, args.inputs, read_options=read_options(args),
                            pattern=args.glob, stdin_text=stdin_text)
    write_table(result.table, args.out)
    for failure in result.failures:
        eprint(f"bandsolve: skipped {failure.input}: {failure.reason}")
    eprint(f"{len(result.table)} spectra predicted from {len(result.inputs) - len(result.failures)}"
           f" of {len(result.inputs)} inputs; {result.n_flagged} flagged; "
           f"{len(result.failures)} could not be read"
           + (f"; results in {args.out}" if args.out not in (None, "-") else ""))
    if result.failures:
        return EXIT_PARTIAL
    if args.fail_on_flags and result.n_flagged:
        return EXIT_FLAGGED
    return 0

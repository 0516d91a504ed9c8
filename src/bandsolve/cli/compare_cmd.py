"""``bandsolve compare``: CLS or PLS for these data, with the evidence."""

from __future__ import annotations

import argparse
import json

from bandsolve.cautions import SHORT_CAUTION
from bandsolve.cli._common import CV_HELP, add_input_options, read_options, read_with_groups
from bandsolve.errors import BandsolveError
from bandsolve.evaluate.compare import compare_methods
from bandsolve.io import read_concentrations, read_spectra
from bandsolve.preprocess import parse_window
from bandsolve.progress import progress_bar

EXAMPLES = """\
examples:
  bandsolve compare --spectra cal_spectra.csv --concentrations cal_conc.csv
  bandsolve compare --spectra cal_spectra.csv --concentrations cal_conc.csv \\
      --test-spectra test_spectra.csv --test-concentrations test_conc.csv --cv random:5x4
"""


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("compare", help="compare CLS and PLS on the same data",
                       description="Cross-validate CLS (without and with baseline terms) and "
                                   "PLS on identical folds, test the differences per analyte, "
                                   "look for an absorber missing from CLS, and recommend a "
                                   "method in plain words.",
                       epilog=EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--spectra", metavar="FILE", required=True, help="calibration spectra")
    p.add_argument("--concentrations", metavar="FILE", required=True,
                   help="known concentrations of the calibration samples (CSV)")
    p.add_argument("--test-spectra", metavar="FILE", help="independent test spectra")
    p.add_argument("--test-concentrations", metavar="FILE",
                   help="reference concentrations of the test samples")
    p.add_argument("--cv", default="interleaved:10",
                   help=CV_HELP)
    p.add_argument("--window", metavar="RANGES", help="axis ranges to use, e.g. 400-700")
    p.add_argument("--intercept", action="store_true", help="CLS background term")
    p.add_argument("--baseline", choices=["none", "offset", "linear", "quadratic"],
                   default="linear", help="baseline terms of the second CLS (default linear)")
    p.add_argument("--max-components", type=int, default=15, metavar="N",
                   help="largest number of PLS components tried (default 15)")
    p.add_argument("--select", choices=["randomization", "one-se", "min"],
                   default="randomization", help="PLS component selection rule")
    p.add_argument("--alpha", type=float, default=0.05,
                   help="level of the CLS-versus-PLS tests after Holm correction")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    add_input_options(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    if bool(args.test_spectra) != bool(args.test_concentrations):
        raise BandsolveError("give --test-spectra and --test-concentrations together")
    options = read_options(args)
    spectra = read_spectra(args.spectra, **options)
    table, groups = read_with_groups(args.concentrations, args.cv)
    test_spectra = read_spectra(args.test_spectra, **options) if args.test_spectra else None
    test_table = read_concentrations(args.test_concentrations) if args.test_spectra else None
    result = compare_methods(
        spectra, table, test_spectra, test_table,
        cv=args.cv if groups is None else "groups", groups=groups,
        window=parse_window(args.window) if args.window else None, intercept=args.intercept,
        baseline=args.baseline, max_components=args.max_components, select=args.select,
        alpha=args.alpha, progress=progress_bar(args.quiet))
    if args.json:
        print(json.dumps(result.to_dict(), indent=2))
    else:
        print(result.summary())
        print(SHORT_CAUTION)
    return 0

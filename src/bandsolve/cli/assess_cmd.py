"""``bandsolve assess``: a model's accuracy on an independent test set."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from bandsolve.calibration.modelfile import save_model
from bandsolve.cautions import SHORT_CAUTION
from bandsolve.cli._common import (
    add_input_options,
    eprint,
    guard_outputs,
    open_model,
    read_options,
    read_with_groups,
    write_table,
)
from bandsolve.errors import BandsolveError
from bandsolve.evaluate.assess import assess, read_spectra_files, validated_model
from bandsolve.labkey import load_lab_key

EXAMPLES = """\
examples:
  bandsolve assess models/rinse-pls.bsm --spectra test_spectra.csv \\
      --concentrations test_conc.csv
  bandsolve assess models/rinse-cls.bsm --spectra test/ --concentrations test_conc.csv \\
      --samples per-sample.csv --json > assessment.json
  bandsolve assess models/rinse-pls.bsm --spectra day1.csv day2.csv --concentrations ref.csv
  bandsolve assess models/rinse-cls.bsm --spectra val/ --concentrations val_conc.csv \\
      --out-model models/rinse-cls-validated.bsm --runs day

--out-model writes a NEW model file (the assessed one is never changed) whose 95 % intervals
add the model error this independent test set revealed to every standard error; results of
that model say "validated on N independent samples". Use 30 or more validation mixtures
measured the way routine samples are (other days, other cells, other analysts), and name
the day of each with --runs: 30 samples from 5 days tell less about day-to-day error than 30
from 30 days, and the intervals then use the degrees of freedom the days really carry. A
model built over several days (build --runs, or PLS --cv groups:) already estimates the
day-to-day error: the validation's estimate is then pooled with it, weighted by their
degrees of freedom, instead of added on top.

--spectra takes files (each may hold many spectra) and folders, searched like predict's
inputs; all are stacked into one test set. When a given file is one the model was built
from, a warning says so: RMSEP on calibration data is not an independent validation.
"""


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("assess", help="assess a model on an independent test set",
                       description="Predict test samples of known composition and report "
                                   "RMSEP, bias and its t-test, SEP, R², RPD, the slope and "
                                   "intercept test and the share of flagged results.",
                       epilog=EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("model", metavar="MODEL", help="model file written by bandsolve build")
    p.add_argument("--spectra", metavar="FILE", required=True, nargs="+", action="extend",
                   help="test spectra: files and folders (searched recursively), not used to "
                        "build the model")
    p.add_argument("--glob", metavar="PATTERN", help="file pattern inside folders")
    p.add_argument("--concentrations", metavar="FILE", required=True,
                   help="reference concentrations of the test samples (CSV)")
    p.add_argument("--samples", metavar="FILE",
                   help="write the per-sample table (reference, predicted, error, SE, flags)")
    p.add_argument("--alpha", type=float, default=0.05,
                   help="level of the confidence intervals and tests (default 0.05)")
    p.add_argument("--out-model", metavar="NEW.bsm",
                   help="write a new model whose intervals include the model error this "
                        "independent test set revealed")
    p.add_argument("--runs", metavar="COLUMN",
                   help="with --out-model: the text column (or ~REGEX on the sample ids) "
                        "naming the run or day each test sample was measured in; errors "
                        "shared within a run then count as fewer degrees of freedom")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    add_input_options(p)
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    if args.out_model and Path(args.out_model).resolve() == Path(args.model).resolve():
        raise BandsolveError(f"--out-model {args.out_model} is the assessed model itself; "
                             "give a new file name (a model is never changed in place)")
    if args.runs and not args.out_model:
        raise BandsolveError("--runs sets the degrees of freedom of a validated model; give it "
                             "with --out-model NEW.bsm, or leave it out")
    inputs = ["model", "spectra", "concentrations"]
    guard_outputs(args, {"--samples": "samples"}, inputs)
    guard_outputs(args, {"--out-model": "out_model"}, inputs, kind="model")
    model = open_model(args)
    test = read_spectra_files(args.spectra, read_options(args), pattern=args.glob)
    table, runs = read_with_groups(args.concentrations,
                                   f"groups:{args.runs}" if args.runs else "")
    result = assess(model, test.spectra, table, alpha=args.alpha,
                    files=[*test.files, args.concentrations])
    if args.samples:
        write_table(result.samples, args.samples)
    if args.out_model:
        new = validated_model(model, result, [*test.files, args.concentrations], runs)
        checksum = save_model(new, args.out_model, key=load_lab_key())
        eprint(f"validated model written to {args.out_model} (checksum {checksum[:12]}): "
               f"intervals now rest on {new.interval_basis}")
    if args.json:
        print(json.dumps(result.to_dict(), indent=2, default=str))
    else:
        print(result.summary())
        print(SHORT_CAUTION)
    return 0

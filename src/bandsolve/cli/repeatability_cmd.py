"""``bandsolve repeatability``: do replicate results of one sample agree within their SEs?"""

from __future__ import annotations

import argparse
import json
from pathlib import Path

import pandas as pd

from bandsolve.cli._codes import EXIT_FLAGGED, EXIT_OK
from bandsolve.cli._common import caution_text, eprint, guard_outputs, write_table
from bandsolve.errors import FormatError
from bandsolve.evaluate.repeatability import repeatability

EXAMPLES = """\
examples:
  bandsolve predict models/rinse-cls.bsm routine/ --out results.csv
  bandsolve repeatability results.csv --sample '~(.*)_rep\\d+'
  bandsolve repeatability results.json --sample '~^(\\w+)-' --out agreement.csv --fail-on-flags

The replicates of a sample are the results whose sample ids give the same first capture
group of --sample. For each sample and analyte the replicate SD is compared with the SE the
results carry (χ² test of a variance): a sample whose replicates scatter more than their SE
allows has intervals that are too narrow; something changed between its measurements.

exit codes: 0 done; 4 with --fail-on-flags, some sample's replicates disagree.
"""


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("repeatability", help="replicate results against their standard errors",
                       description="Check that replicate results of each sample agree within "
                                   "the standard errors they report.",
                       epilog=EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("results", metavar="RESULTS",
                   help="results file written by predict (.csv, .json or .parquet)")
    p.add_argument("--sample", required=True, metavar="~REGEX",
                   help="pattern on the sample ids whose first capture group names the sample")
    p.add_argument("--alpha", type=float, default=0.01,
                   help="level of the test (default 0.01, the diagnostic limits' default)")
    p.add_argument("--out", metavar="FILE.csv", help="write the table (one row per sample and "
                   "analyte) as CSV")
    p.add_argument("--json", action="store_true", help="machine-readable output on stdout")
    p.add_argument("--fail-on-flags", action="store_true",
                   help="exit with 4 when some sample's replicates disagree")
    p.set_defaults(func=run)


def _read(path: str) -> pd.DataFrame:
    suffix = Path(path).suffix.lower()
    if suffix == ".csv":
        return pd.read_csv(path, dtype={"sample": str}, keep_default_na=True)
    if suffix == ".json":
        return pd.DataFrame(json.loads(Path(path).read_text(encoding="utf-8")))
    if suffix == ".parquet":
        return pd.read_parquet(path)
    raise FormatError(f"{path}: a results file ends in .csv, .json or .parquet")


def run(args: argparse.Namespace) -> int:
    guard_outputs(args, {"--out": "out"}, ["results"])
    result = repeatability(_read(args.results), args.sample, alpha=args.alpha)
    if args.out:
        write_table(result.table, args.out)
    if args.json:
        print(json.dumps(result.to_dict(), indent=1, default=str))
    else:
        for line in result.summary():
            print(line)
        print(caution_text())
    if args.out:
        eprint(f"table: {args.out}")
    return EXIT_FLAGGED if args.fail_on_flags and result.n_disagree else EXIT_OK

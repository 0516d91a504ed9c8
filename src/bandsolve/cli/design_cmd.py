"""``bandsolve design``: plan calibration mixtures and, given stocks, how to prepare them."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

import numpy as np
import pandas as pd

from bandsolve.cautions import SHORT_CAUTION
from bandsolve.design import (
    AnalyteRange,
    calibration_plan,
    parse_amount,
    parse_analyte_range,
    parse_volume,
    preparation_html,
    preparation_sheet,
    write_plan_csv,
    write_preparation_csv,
)
from bandsolve.errors import DataError, FormatError
from bandsolve.io.atomic import atomic_write
from bandsolve.progress import progress_bar

__all__ = ["register", "run"]

_DESCRIPTION = """\
Plan the calibration mixtures of a multicomponent UV-Vis calibration.

Without --runs (or with --runs equal to 25 for 5 levels, 9 for 3 levels) a cyclic
multilevel design is used: every analyte takes each level equally often and the
analyte concentrations are uncorrelated. Any other --runs gives a D-optimal design on
the level grid. With --absorptivity the largest predicted absorbance of every mixture
is checked against a 2.0 AU ceiling. With --stock and --volume a preparation sheet
(stock and solvent volumes per mixture) is written as CSV and printable HTML."""

_EPILOG = """\
worked example:
  bandsolve design --analytes "dye A=0-10 mg/L" "dye B=0-5 mg/L" "dye C=0-8 mg/L" \\
      --validation 6 --stock "dye A=1000 mg/L" "dye B=500 mg/L" "dye C=0.8 g/L" \\
      --volume "50 mL" --out plan.csv
  writes plan.csv (25 calibration mixtures cal-01..cal-25 and 6 validation mixtures
  val-01..val-06), plan-prep.csv and plan-prep.html (e.g. a mixture with 10 mg/L of
  dye A needs 0.5 mL of its 1000 mg/L stock in a 50 mL flask), and prints the design
  quality: largest |r| between analytes, level counts and D-efficiency."""


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``design`` subcommand to the command-line parser."""
    parser = subparsers.add_parser(
        "design",
        help="plan calibration mixtures and a preparation sheet",
        description=_DESCRIPTION,
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--analytes", nargs="+", required=True, metavar="RANGE",
                        help='analyte ranges, e.g. "dye A=0-10 mg/L"')
    parser.add_argument("--levels", type=int, choices=(3, 5), default=5,
                        help="concentration levels per analyte (default 5)")
    parser.add_argument("--runs", type=int, metavar="N",
                        help="number of calibration mixtures; other than 25 (5 levels) or "
                             "9 (3 levels) gives a D-optimal design")
    parser.add_argument("--validation", type=int, default=0, metavar="N",
                        help="number of random validation mixtures (default 0)")
    parser.add_argument("--absorptivity", type=Path, metavar="FILE",
                        help="CSV of pure spectra per unit concentration and cm: first column "
                             "analyte name, header row wavelengths")
    parser.add_argument("--path-length", type=float, default=1.0, metavar="CM",
                        help="cell path length in cm (default 1)")
    parser.add_argument("--stock", nargs="+", metavar="STOCK",
                        help='stock solutions, e.g. "dye A=1000 mg/L"')
    parser.add_argument("--volume", help='final volume of each mixture, e.g. "50 mL"')
    parser.add_argument("--min-pipette", default="0.1 mL",
                        help='smallest volume to pipette (default "0.1 mL")')
    parser.add_argument("--random-state", type=int, default=0, metavar="N",
                        help="random state of D-optimal starts and validation mixtures")
    parser.add_argument("--quiet", action="store_true", help="no progress bar")
    parser.add_argument("--out", type=Path, metavar="PLAN.csv",
                        help="write the plan here (and PLAN-prep.csv, PLAN-prep.html with "
                             "stocks)")
    parser.set_defaults(func=run)


def _read_absorptivity(path: Path) -> tuple[list[str], np.ndarray, np.ndarray]:
    """Read an absorptivity table: names (m,), wavelengths (p,), values (m, p)."""
    try:
        table = pd.read_csv(path, index_col=0)
        axis = table.columns.astype(float).to_numpy()
        values = table.to_numpy(dtype=float)
    except (OSError, ValueError) as exc:
        raise FormatError(
            f"{path}: cannot read the absorptivity table ({exc}); expected a CSV with the "
            "analyte name in the first column and wavelengths in the header row"
        ) from None
    return [str(name) for name in table.index], axis, values


def _absorptivity_in_order(path: Path, analytes: list[AnalyteRange]) -> tuple[np.ndarray,
                                                                               np.ndarray]:
    names, axis, values = _read_absorptivity(path)
    missing = [a.name for a in analytes if a.name not in names]
    if missing:
        raise DataError(f"{path}: no absorptivity row for {missing}; the first column must "
                        f"name every analyte (found {names})")
    return values[[names.index(a.name) for a in analytes]], axis


def run(args: argparse.Namespace) -> int:
    """Run ``bandsolve design``; returns the exit code."""
    analytes = [parse_analyte_range(text) for text in args.analytes]
    absorptivity = wavelengths = None
    if args.absorptivity is not None:
        absorptivity, wavelengths = _absorptivity_in_order(args.absorptivity, analytes)
    plan = calibration_plan(
        analytes, levels=args.levels, n_runs=args.runs, n_validation=args.validation,
        absorptivity=absorptivity, wavelengths=wavelengths, path_length_cm=args.path_length,
        random_state=args.random_state, progress=progress_bar(args.quiet),
    )
    print(plan.summary())
    print(SHORT_CAUTION)
    sheet = None
    if args.stock:
        if args.volume is None:
            raise DataError('stocks were given without --volume; add the final volume of each '
                            'mixture, e.g. --volume "50 mL"')
        stocks = {s.name: s for s in map(parse_amount, args.stock)}
        sheet = preparation_sheet(plan, stocks, parse_volume(args.volume),
                                  parse_volume(args.min_pipette))
        print()
        print(sheet.summary())
    if args.out is None:
        print()
        print(plan.to_frame().to_string())
        return 0
    write_plan_csv(plan, args.out)
    quality = args.out.with_name(f"{args.out.stem}-design.json")
    with atomic_write(quality) as handle:  # the design and its quality, kept with the plan
        json.dump(plan.to_dict(), handle, indent=1, default=float)
    written = [args.out, quality]
    if sheet is not None:
        prep_csv = args.out.with_name(f"{args.out.stem}-prep.csv")
        prep_html = args.out.with_name(f"{args.out.stem}-prep.html")
        write_preparation_csv(sheet, prep_csv)
        with atomic_write(prep_html) as handle:
            handle.write(preparation_html(sheet))
        written += [prep_csv, prep_html]
    print()
    print("Written: " + ", ".join(str(p) for p in written))
    return 0

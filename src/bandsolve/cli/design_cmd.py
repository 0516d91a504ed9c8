"""``bandsolve design``: plan calibration mixtures and, given stocks, how to prepare them."""

from __future__ import annotations

import argparse
import json
from pathlib import Path

from bandsolve.cli._common import caution_text, guard_outputs
from bandsolve.design import (
    VOLUME_FIGURES,
    Amount,
    absorptivities_for,
    calibration_plan,
    parse_amount,
    parse_analyte_range,
    parse_volume,
    preparation_html,
    preparation_sheet,
    range_decimals,
    write_plan_files,
    write_preparation_csv,
)
from bandsolve.design.pipettes import Pipette, parse_pipette
from bandsolve.errors import DataError
from bandsolve.io import read_absorptivities
from bandsolve.io.atomic import atomic_write
from bandsolve.progress import progress_bar

__all__ = ["register", "run"]

_DESCRIPTION = """\
Plan the calibration mixtures of a multicomponent UV-Vis calibration.

Without --runs (or with --runs equal to 25 for 5 levels, 9 for 3 levels) a cyclic
multilevel design is used: every analyte takes each level equally often and the
analyte concentrations are uncorrelated. Any other --runs gives a D-optimal design on
the level grid. With --absorptivity the largest predicted absorbance of every mixture
is checked against a 2.0 AU ceiling. Validation mixtures are random and rounded (see
--validation-figures). With --stock and --volume a preparation sheet (stock and solvent
volumes per mixture) is written as CSV and printable HTML. All inputs are checked before
anything is printed or written."""

_EPILOG = """\
worked example:
  bandsolve design --analytes "dye A=0-10 mg/L" "dye B=0-5 mg/L" "dye C=0-8 mg/L" \\
      --validation 6 --stock "dye A=1000 mg/L" "dye B=500 mg/L" "dye C=0.8 g/L" \\
      --volume "50 mL" --pipettes "100-1000 uL by 5 uL" "1-10 mL by 0.1 mL" --out plan.csv
  writes plan-calibration.csv (25 calibration mixtures cal-01..cal-25) and
  plan-validation.csv (6 validation mixtures val-01..val-06), each ready for
  'bandsolve build/assess --concentrations' as written and holding the concentrations the
  pipetted volumes actually give; plan-design.json (plan and quality),
  plan-prep.csv and plan-prep.html (e.g. a mixture with 10 mg/L of dye A needs 0.5 mL of
  its 1000 mg/L stock in a 50 mL flask), and prints the design quality: largest |r|
  between analytes, level counts and D-efficiency."""


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
    parser.add_argument("--validation-figures", type=int, default=3, metavar="N",
                        help="round validation concentrations so that each range width has N "
                             "significant figures (default 3: 0-10 mg/L in 0.1 mg/L steps, "
                             "0-5 mg/L in 0.01 mg/L steps)")
    parser.add_argument("--absorptivity", type=Path, metavar="FILE",
                        help="absorptivity table as for 'bandsolve build --absorptivity' (AU "
                             "per unit concentration and cm): first column the component, e.g. "
                             "'dye A [mg/L]', header row wavelengths; a unit other than the "
                             "analyte's (g/L for mg/L) is converted")
    parser.add_argument("--path-length", type=float, default=1.0, metavar="CM",
                        help="cell path length in cm (default 1)")
    parser.add_argument("--stock", nargs="+", metavar="STOCK",
                        help='stock solutions, e.g. "dye A=1000 mg/L"')
    parser.add_argument("--volume", help='final volume of each mixture, e.g. "50 mL"')
    parser.add_argument("--min-pipette", default="0.1 mL",
                        help='smallest volume to pipette (default "0.1 mL"; with --pipettes, '
                             "the smallest volume of the smallest pipette)")
    parser.add_argument("--pipettes", nargs="+", metavar="PIPETTE",
                        help='the pipettes you have, adjustable ("100-1000 uL by 5 uL") or '
                             'volumetric ("5 mL"): stock volumes are rounded to what they '
                             "deliver and the prepared concentrations recomputed, printed and "
                             "written to the plan files")
    parser.add_argument("--random-state", type=int, default=0, metavar="N",
                        help="random state of D-optimal starts and validation mixtures")
    parser.add_argument("--quiet", action="store_true", help="no progress bar")
    parser.add_argument("--out", type=Path, metavar="PLAN.csv",
                        help="name of the plan: writes PLAN-calibration.csv and "
                             "PLAN-validation.csv (for build and assess, as they are), "
                             "PLAN-design.json (plan and design quality) and, with stocks, "
                             "PLAN-prep.csv and PLAN-prep.html (volumes to 4 significant "
                             "figures, or as the --pipettes deliver them); the folder must exist")
    parser.set_defaults(func=run)


def _stocks(args: argparse.Namespace) -> tuple[dict[str, Amount], float, float] | None:
    """Stocks, final volume and pipetting minimum (mL), read before any work is done."""
    if not args.stock:
        return None
    if args.volume is None:
        raise DataError('stocks were given without --volume; add the final volume of each '
                        'mixture, e.g. --volume "50 mL"')
    stocks = {s.name: s for s in map(parse_amount, args.stock)}
    return stocks, parse_volume(args.volume), parse_volume(args.min_pipette)


def _pipettes(args: argparse.Namespace) -> list[Pipette]:
    if args.pipettes and not args.stock:
        raise DataError("--pipettes round the stock volumes of a preparation sheet; add "
                        '--stock and --volume, e.g. --stock "dye A=1000 mg/L" --volume "50 mL"')
    return [parse_pipette(text) for text in args.pipettes or ()]


def run(args: argparse.Namespace) -> int:
    """Run ``bandsolve design``; returns the exit code.

    Every input is checked (and the plan and preparation sheet computed) before anything is
    printed or written, so a bad command gives one error line and no files.
    """
    guard_outputs(args, {"--out": "out"}, ["absorptivity"])
    analytes = [parse_analyte_range(text) for text in args.analytes]
    stock_options = _stocks(args)
    pipettes = _pipettes(args)
    absorptivity = wavelengths = None
    if args.absorptivity is not None:
        table = read_absorptivities(args.absorptivity)
        absorptivity, wavelengths = absorptivities_for(analytes, table), table.axis
    plan = calibration_plan(
        analytes, levels=args.levels, n_runs=args.runs, n_validation=args.validation,
        absorptivity=absorptivity, wavelengths=wavelengths, path_length_cm=args.path_length,
        validation_decimals=range_decimals(analytes, args.validation_figures),
        random_state=args.random_state, progress=progress_bar(args.quiet),
    )
    sheet = (None if stock_options is None
             else preparation_sheet(plan, *stock_options, pipettes=pipettes))
    print(plan.summary())
    print(caution_text())
    if sheet is not None:
        print()
        print(sheet.summary())
        if pipettes:
            print("\nPrepared concentrations (from the rounded volumes):")
            print(sheet.prepared_concentrations().to_string(float_format="{:.6g}".format))
    if args.out is None:
        frame = plan.to_frame()
        if sheet is not None:
            volumes = sheet.to_frame(VOLUME_FIGURES)[list(sheet.volumes_ml.columns)]
            frame = frame.join(volumes)
        print()
        print(frame.to_string())
        return 0
    written = write_plan_files(plan, args.out, sheet)
    quality = args.out.with_name(f"{args.out.stem}-design.json")
    with atomic_write(quality) as handle:  # the design and its quality, kept with the plan
        json.dump(plan.to_dict(), handle, indent=1, default=float)
    written.append(quality)
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

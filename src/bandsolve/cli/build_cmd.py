"""``bandsolve build``: fit a CLS or PLS calibration and save it as a model file."""

from __future__ import annotations

import argparse
from typing import Any

from bandsolve.calibration.build import (
    build_cls,
    build_cls_from_absorptivities,
    file_fingerprints,
)
from bandsolve.calibration.model import Calibration
from bandsolve.calibration.modelfile import save_model
from bandsolve.cli._common import (
    CV_HELP,
    add_input_options,
    add_key_option,
    caution_text,
    eprint,
    guard_outputs,
    read_options,
    read_with_groups,
)
from bandsolve.errors import BandsolveError
from bandsolve.io import read_absorptivities, read_spectra
from bandsolve.labkey import load_lab_key
from bandsolve.preprocess import parse_window
from bandsolve.progress import progress_bar
from bandsolve.reference_outliers import ReferenceOutlier
from bandsolve.spectra import SpectralSet

EXAMPLES = """\
examples:
  # CLS from standards or calibration mixtures, with a background term
  bandsolve build --method cls --spectra cal_spectra.csv --concentrations cal_conc.csv \\
      --intercept --window 400-700 --out models/rinse-cls.bsm

  # CLS from an absorptivity table (no standards), 1 cm cell
  bandsolve build --method cls --absorptivity eps.csv --path-length 1.0 --out eps.bsm

  # PLS with the number of components chosen by cross-validation
  bandsolve build --method pls --spectra cal_spectra.csv --concentrations cal_conc.csv \\
      --cv interleaved:5 --select randomization --out models/rinse-pls.bsm
"""


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("build", help="build a CLS or PLS calibration model",
                       description="Build a calibration and save it as a model file.",
                       epilog=EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--method", choices=["cls", "pls"], default="cls",
                   help="cls (classical least squares, the default) or pls")
    p.add_argument("--spectra", metavar="FILE", help="calibration spectra (file or folder)")
    p.add_argument("--concentrations", metavar="FILE", help="known concentrations (CSV)")
    p.add_argument("--absorptivity", metavar="FILE",
                   help="CLS only: absorptivity table instead of standards (needs --path-length)")
    p.add_argument("--validated-range", nargs="+", metavar="RANGE",
                   help='with --absorptivity: the range each analyte was shown to follow '
                        'Beer\'s law, e.g. "dye A=0-12 mg/L" (unit as in the table\'s label); '
                        "results outside it are flagged")
    p.add_argument("--out", metavar="MODEL", required=True, help="model file to write")
    add_key_option(p)
    p.add_argument("--window", metavar="RANGES", help="axis ranges to use, e.g. 400-700")
    p.add_argument("--blank", metavar="FILE", help="blank spectra subtracted from calibration")
    p.add_argument("--blanks", metavar="FILE",
                   help="replicate blank spectra for the noise level of the figures of merit "
                        "(LOD, LOQ); without them it is estimated from calibration residuals")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.add_argument("--leverage-factor", type=float, metavar="F",
                   help="leverage flag limit: CLS F × the largest leverage inside the "
                        "calibrated ranges (default 1); PLS F × (A+1)/n (default 3)")
    p.add_argument("--alpha", type=float, default=0.01,
                   help="significance level of the flag limits: the residual (CLS F ratio, "
                        "PLS Q) and PLS Hotelling T² (default 0.01)")
    p.add_argument("--ceiling", type=float, default=2.0, metavar="AU",
                   help="photometric ceiling in absorbance units (default 2.0)")
    c = p.add_argument_group("CLS options")
    c.add_argument("--intercept", action="store_true", help="estimate a background spectrum")
    c.add_argument("--baseline", choices=["none", "offset", "linear", "quadratic"],
                   default="none", help="baseline terms solved at prediction (default none)")
    c.add_argument("--non-negative", action="store_true",
                   help="predict concentrations constrained to be zero or more (analytes "
                        "that are present or absent); one held at zero has no standard error")
    c.add_argument("--runs", metavar="COLUMN",
                   help="the text column (or ~REGEX on the sample ids) naming the run or day "
                        "each calibration sample was measured in (3 or more runs): the SE's "
                        "error model is then fitted to leave-one-run-out errors, so intervals "
                        "include the day-to-day error the calibration shows")
    s = p.add_argument_group("PLS options")
    s.add_argument("--components", default="auto", help="auto (by cross-validation) or N")
    s.add_argument("--max-components", type=int, default=15, metavar="N",
                   help="largest number of PLS components tried by cross-validation "
                        "(capped at samples − 2; default 15)")
    s.add_argument("--cv", default="interleaved:10",
                   help=CV_HELP)
    s.add_argument("--select", choices=["randomization", "one-se", "min"],
                   default="randomization", help="component selection rule")
    s.add_argument("--select-alpha", type=float, default=0.05, metavar="ALPHA",
                   help="significance level of the randomization rule: a smaller count is "
                        "kept unless its errors are worse at this level (default 0.05)")
    mode = s.add_mutually_exclusive_group()
    mode.add_argument("--pls1", dest="mode", action="store_const", const="pls1",
                      help="one model per analyte")
    mode.add_argument("--pls2", dest="mode", action="store_const", const="pls2",
                      help="one model for all analytes (default)")
    s.add_argument("--scale", action="store_true", help="autoscale wavelengths")
    s.add_argument("--q-limit", choices=["box", "jackson-mudholkar"], default="box",
                   help="Q residual limit: box (scaled chi-squared fitted to cross-validated "
                        "Q/(1 + leverage), default) or jackson-mudholkar (on Q itself; needs "
                        "more samples than wavelengths)")
    s.add_argument("--savgol-window", type=int, metavar="POINTS",
                   help="Savitzky–Golay window (odd number of points)")
    s.add_argument("--derivative", type=int, choices=[0, 1, 2], default=0,
                   help="Savitzky-Golay derivative order: 1 removes a constant baseline, 2 "
                        "also a sloping one (needs --savgol-window; default 0, smoothing only)")
    s.add_argument("--offset", action="store_true", help="remove each spectrum's mean offset")
    add_input_options(p)
    p.set_defaults(func=run, mode="pls2")
    p.set_defaults(option_defaults={a.dest: p.get_default(a.dest) for a in p._actions})


#: Options that belong to one method only; giving them to another is a mistake to report.
METHOD_OPTIONS = {
    "cls": ("intercept", "baseline", "absorptivity", "validated_range",
            "non_negative", "runs"),
    "pls": ("components", "max_components", "cv", "select", "select_alpha", "mode", "scale",
            "savgol_window", "derivative", "offset", "q_limit"),
}


def check_options(args: argparse.Namespace) -> None:
    """Refuse options that the chosen method would silently ignore."""
    defaults = args.option_defaults
    for method, names in METHOD_OPTIONS.items():
        given = [n for n in names if method != args.method and getattr(args, n) != defaults[n]]
        if given:
            flags = ", ".join("--" + name.replace("_", "-") for name in given)
            one = len(given) == 1
            raise BandsolveError(f"{flags} {'applies' if one else 'apply'} only to --method "
                                 f"{method}; remove {'it' if one else 'them'} or choose "
                                 f"--method {method}")


def _build_cls(args: argparse.Namespace, spectra: SpectralSet, **common: Any) -> Calibration:
    table, runs = read_with_groups(args.concentrations,
                                   f"groups:{args.runs}" if args.runs else "")
    return build_cls(spectra, table, intercept=args.intercept, baseline=args.baseline,
                     alpha=args.alpha, non_negative=args.non_negative, runs=runs, **common)


def _build_pls(args: argparse.Namespace, spectra: SpectralSet, **common: Any) -> Calibration:
    from bandsolve.calibration.build_pls import build_pls

    table, groups = read_with_groups(args.concentrations, args.cv)
    components = "auto" if args.components == "auto" else int(args.components)
    return build_pls(spectra, table, components=components, max_components=args.max_components,
                     cv=args.cv if groups is None else "groups", groups=groups,
                     select=args.select, alpha=args.select_alpha, mode=args.mode,
                     scale=args.scale, savgol_window=args.savgol_window,
                     derivative=args.derivative, offset=args.offset, q_limit=args.q_limit,
                     limit_alpha=args.alpha,
                     progress=progress_bar(args.quiet), **common)


BUILDERS = {"cls": _build_cls, "pls": _build_pls}


def build_from_args(args: argparse.Namespace) -> Calibration:
    """The calibration the options describe (no file written)."""
    check_options(args)
    window = parse_window(args.window) if args.window else None
    prov = {"training_files": file_fingerprints(
        {role: getattr(args, role) for role in
         ("spectra", "concentrations", "absorptivity", "blank", "blanks")})}
    blanks = read_spectra(args.blanks, **read_options(args)) if args.blanks else None
    if args.validated_range and not args.absorptivity:
        raise BandsolveError("--validated-range belongs to models from an absorptivity table "
                             "(--absorptivity); with standards the calibrated range is that of "
                             "their concentrations")
    if args.absorptivity and args.runs:
        raise BandsolveError("--runs names the runs of calibration standards; a model from an "
                             "absorptivity table has none (validate it with bandsolve assess "
                             "--out-model --runs instead)")
    if args.absorptivity:
        if args.path_length is None:
            raise BandsolveError("--absorptivity needs --path-length CM (the cell path length)")
        from bandsolve.design.amounts import parse_analyte_range

        eps = read_absorptivities(args.absorptivity, axis_unit=args.axis_unit)
        ranges = {r.column: (r.low, r.high)
                  for r in map(parse_analyte_range, args.validated_range or ())}
        return build_cls_from_absorptivities(eps, args.path_length, baseline=args.baseline,
                                             window=window, blanks=blanks,
                                             validated_range=ranges, ceiling=args.ceiling,
                                             provenance=prov, alpha=args.alpha)
    if not (args.spectra and args.concentrations):
        raise BandsolveError("give --spectra and --concentrations (or --absorptivity for CLS)")
    spectra = read_spectra(args.spectra, **read_options(args))
    blank = read_spectra(args.blank, **read_options(args)) if args.blank else None
    lev = {} if args.leverage_factor is None else {"leverage_factor": args.leverage_factor}
    return BUILDERS[args.method](args, spectra, window=window, blank=blank, blanks=blanks,
                                 ceiling=args.ceiling, provenance=prov, **lev)


def run(args: argparse.Namespace) -> int:
    guard_outputs(args, {"--out": "out"},
                  ["spectra", "concentrations", "absorptivity", "blank", "blanks"], kind="model")
    cal = build_from_args(args)
    key = load_lab_key(args.key_file)
    checksum = save_model(cal, args.out, key=key)
    if cal.selection is not None:
        eprint(cal.selection.curves(cal.analytes))
    for found in cal.provenance.get("reference_outliers") or ():
        eprint(f"bandsolve: warning: {ReferenceOutlier(**found).text()}")
    if cal.provenance.get("merit_note"):
        eprint(f"bandsolve: warning: {cal.provenance['merit_note']}")
    eprint(f"{cal.method.upper()} model for {len(cal.analytes)} analytes "
           f"({', '.join(cal.analytes)}) written to {args.out} (checksum {checksum}"
           + (f"; signed with lab key {key.key_id})" if key else "; not signed)"))
    eprint(caution_text())
    return 0

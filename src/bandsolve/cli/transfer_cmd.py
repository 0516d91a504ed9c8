"""``bandsolve transfer``: move a model to another instrument with a few transfer samples."""

from __future__ import annotations

import argparse

from bandsolve.calibration.modelfile import load_model, save_model, sha256_file
from bandsolve.calibration.transferred import transfer_calibration
from bandsolve.cli._common import add_input_options, eprint, read_options
from bandsolve.errors import FormatError
from bandsolve.transfer import DEFAULT_HALF_WINDOW, TRANSFER_METHODS

EXAMPLES = """\
examples:
  bandsolve transfer models/rinse-cls.bsm --original transfer-unit1.csv \\
      --new transfer-unit2.csv --out models/rinse-cls-unit2.bsm
  bandsolve transfer models/rinse-cls.bsm --original t1.csv --new t2.csv \\
      --reference transfer-conc.csv --method slope-bias --out models/unit2-sbc.bsm

The same transfer samples (5-20, spanning the calibration; matched by sample id) are
measured on the original and on the new instrument. The new model file maps the new
instrument's spectra onto the original's (piecewise direct standardization by default) and
keeps every diagnostic; it records the transfer files' fingerprints, the method, the window,
an axis-shift estimate and leave-one-out errors before and after the transfer.
"""


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("transfer", help="move a model to another instrument",
                       description="Write a new model file for a second instrument from "
                                   "transfer samples measured on both instruments.",
                       epilog=EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("model", metavar="MODEL", help="model file built on the original instrument")
    p.add_argument("--original", required=True, metavar="SPECTRA",
                   help="transfer samples measured on the original instrument")
    p.add_argument("--new", required=True, metavar="SPECTRA",
                   help="the same samples measured on the new instrument")
    p.add_argument("--out", required=True, metavar="MODEL", help="the new model file")
    p.add_argument("--method", choices=TRANSFER_METHODS, default="pds",
                   help="pds (piecewise direct standardization, default), ds (direct "
                        "standardization) or slope-bias (correct the predictions)")
    p.add_argument("--window", type=int, default=2 * DEFAULT_HALF_WINDOW + 1, metavar="N",
                   help="PDS window in channels, odd (default %(default)s)")
    p.add_argument("--reference", metavar="CONC",
                   help="known concentrations of the transfer samples (default: the original "
                        "instrument's predictions are the reference)")
    add_input_options(p)
    p.set_defaults(func=run)


def _words(rec: dict) -> list[str]:
    analytes = rec["analytes"]
    lines = [f"{rec['transfer_samples']} transfer samples, method {rec['method']}"
             + (f", window {rec['window_channels']} channels" if "window_channels" in rec
                else "")]
    shift = rec.get("axis_shift")
    if shift:
        warn = " (larger than a tenth of the grid step: check the wavelength calibration)" \
            if shift["warning"] else ""
        lines.append(f"axis offset of the new instrument: {shift['value']:+.2f} "
                     f"{shift['unit']}{warn}")
    lines.append(f"error against {rec['error_basis']} (leave-one-out):")
    for a, before, after in zip(analytes, rec["rmse_before"], rec["rmse_after"], strict=True):
        lines.append(f"  {a}: RMSE {before:.4g} without transfer, {after:.4g} with it")
    lines.append(f"residual flags on transfer samples: {rec['residual_flags_before']} without "
                 f"transfer, {rec['residual_flags_after']} with it")
    return lines


def run(args: argparse.Namespace) -> int:
    from bandsolve.io import read_concentrations, read_spectra

    if args.window < 1 or args.window % 2 == 0:
        raise FormatError(f"--window must be an odd number of channels, not {args.window}")
    model = load_model(args.model)
    options = read_options(args)
    original = read_spectra(args.original, **options)
    new = read_spectra(args.new, **options)
    reference = read_concentrations(args.reference) if args.reference else None
    files = [{"role": role, "name": path, "sha256": sha256_file(path)}
             for role, path in (("original instrument", args.original),
                                ("new instrument", args.new),
                                ("reference", args.reference)) if path]
    moved = transfer_calibration(model, original, new, method=args.method,
                                 half_window=args.window // 2, reference=reference,
                                 files=files)
    save_model(moved, args.out)
    record = moved.transfer.describe() | {"analytes": list(model.analytes)}
    for line in _words(record):
        eprint(line)
    eprint(f"transferred model written to {args.out}")
    return 0

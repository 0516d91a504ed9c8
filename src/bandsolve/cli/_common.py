"""Options and helpers shared by several subcommands."""

from __future__ import annotations

import argparse
import sys
import textwrap

import pandas as pd

from bandsolve.cautions import SHORT_CAUTION
from bandsolve.concentrations import ConcentrationTable, group_labels
from bandsolve.errors import DataError
from bandsolve.io import read_concentrations
from bandsolve.io.atomic import atomic_write, check_output
from bandsolve.io.formulas import neutralise_formulas

#: Widest line of the text the commands print (characters).
WIDTH = 100

#: Help of every --cv option (the README's table says more).
CV_HELP = ("cross-validation folds: contiguous:K (K runs of consecutive samples), "
           "interleaved:K (sample i in fold i mod K), random:K, random:KxR (R repeats), loo "
           "(leave one out), groups:COLUMN or groups:~REGEX (whole groups, from a text column "
           "or the sample id) (default: %(default)s)")


def add_input_options(parser: argparse.ArgumentParser) -> None:
    """Options that say how to read spectra files."""
    g = parser.add_argument_group("reading spectra")
    g.add_argument("--layout", choices=["auto", "wide", "transposed", "long"], default="auto",
                   help="CSV layout (default: detect)")
    g.add_argument("--axis-unit", choices=["nm", "um", "cm-1"], default=None,
                   help="unit of the spectral axis (default: from the file or its range)")
    g.add_argument("--quantity", default=None,
                   choices=["absorbance", "transmittance", "percent_transmittance"],
                   help="what the values are (default: the file's # quantity: line, "
                        "else absorbance)")
    g.add_argument("--path-length", type=float, default=None, metavar="CM",
                   help="cell path length in cm, checked against the model")
    g.add_argument("--replicates", choices=["error", "average"], default="error",
                   help="spectra sharing an id: refuse (default) or average them")


def add_key_option(parser: argparse.ArgumentParser) -> None:
    """``--key-file``: the lab key that signs models and seals ledger runs."""
    parser.add_argument("--key-file", metavar="FILE",
                        help="lab key file (default: $BANDSOLVE_LAB_KEY_FILE or "
                             "$BANDSOLVE_LAB_KEY); signs models, checks their signature "
                             "and seals ledger runs; never stored in any output")


def add_model_checks(parser: argparse.ArgumentParser) -> None:
    """``--expect-model`` and ``--approved-models``: refuse any other model."""
    g = parser.add_argument_group("model authenticity")
    g.add_argument("--expect-model", metavar="SHA256", action="append", default=[],
                   help="content checksum of the model to accept (as build prints it and "
                        "inspect shows it); repeatable")
    g.add_argument("--approved-models", metavar="FILE",
                   help="text file of approved model checksums, one per line (# comments)")


def open_model(args: argparse.Namespace):
    """Load ``args.model``, checking its signature when a lab key is configured and its
    checksum against ``--expect-model``/``--approved-models`` when given."""
    from bandsolve.calibration.modelfile import load_model
    from bandsolve.labkey import load_lab_key

    approved = {s.strip().lower() for s in getattr(args, "expect_model", None) or []}
    listing = getattr(args, "approved_models", None)
    if listing:
        try:
            with open(listing, encoding="utf-8") as handle:
                approved |= {line.split("#")[0].strip().lower() for line in handle} - {""}
        except (OSError, UnicodeDecodeError) as exc:
            raise DataError(f"--approved-models {listing}: cannot read the list ({exc})"
                            ) from None
    return load_model(args.model, key=load_lab_key(getattr(args, "key_file", None)),
                      expect=approved or None)


def read_options(args: argparse.Namespace) -> dict:
    """Keyword arguments for :func:`bandsolve.io.read_spectra` from parsed options."""
    return {"layout": args.layout, "axis_unit": args.axis_unit, "quantity": args.quantity,
            "path_length_cm": args.path_length, "replicates": args.replicates}


def write_table(frame: pd.DataFrame, out: str | None) -> None:
    """CSV to ``out`` atomically, or to standard output when ``out`` is None or ``-``; text
    cells that a spreadsheet would run as formulas get a leading apostrophe."""
    frame = neutralise_formulas(frame)
    if out in (None, "-"):
        frame.to_csv(sys.stdout, index=False)
    else:
        with atomic_write(out, "w", newline="") as handle:
            frame.to_csv(handle, index=False)


def guard_outputs(args: argparse.Namespace, outputs: dict[str, str], inputs: list[str], *,
                  extra: list[str] | None = None, kind: str = "file") -> None:
    """Refuse, before any work, an output that is an input, a link, a special file, a model or
    ledger, or lies in a missing folder (:func:`bandsolve.io.atomic.check_output`).

    ``outputs`` maps option names (``--out``) to attribute names; ``inputs`` names the
    attributes holding input paths (a path, a list of paths, or None); ``extra`` adds paths.
    """
    paths: list[str] = list(extra or [])
    for name in inputs:
        value = getattr(args, name, None)
        if value is not None:
            paths.extend(map(str, value) if isinstance(value, list | tuple) else [str(value)])
    for option, name in outputs.items():
        value = getattr(args, name, None)
        if value is not None and str(value) != "-":
            check_output(value, paths, option=option, kind=kind)


def eprint(*parts: object) -> None:
    """Print to standard error (progress and summaries that must not mix with CSV output)."""
    print(*parts, file=sys.stderr)


def read_with_groups(path: str, cv: str) -> tuple[ConcentrationTable, pd.Series | None]:
    """The concentration table and, for ``groups:COLUMN`` or ``groups:~REGEX``, its groups
    keyed by sample id (:func:`bandsolve.concentrations.group_labels`)."""
    if not cv.startswith("groups:"):
        return read_concentrations(path), None
    key = cv[len("groups:"):]
    table = read_concentrations(path, label_columns=() if key.startswith("~") else (key,))
    return table, group_labels(table, key)


def caution_text() -> str:
    """The validation and safety caution, wrapped at :data:`WIDTH` characters."""
    return textwrap.fill(SHORT_CAUTION, WIDTH)

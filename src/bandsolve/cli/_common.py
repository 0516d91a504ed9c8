"""Options and helpers shared by several subcommands."""

from __future__ import annotations

import argparse
import sys
import textwrap

import pandas as pd

from bandsolve.cautions import SHORT_CAUTION
from bandsolve.concentrations import ConcentrationTable, group_labels
from bandsolve.io import read_concentrations
from bandsolve.io.atomic import atomic_write

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


def read_options(args: argparse.Namespace) -> dict:
    """Keyword arguments for :func:`bandsolve.io.read_spectra` from parsed options."""
    return {"layout": args.layout, "axis_unit": args.axis_unit, "quantity": args.quantity,
            "path_length_cm": args.path_length, "replicates": args.replicates}


def write_table(frame: pd.DataFrame, out: str | None) -> None:
    """CSV to ``out`` atomically, or to standard output when ``out`` is None or ``-``."""
    if out in (None, "-"):
        frame.to_csv(sys.stdout, index=False)
    else:
        with atomic_write(out, "w", newline="") as handle:
            frame.to_csv(handle, index=False)


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

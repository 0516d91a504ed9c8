"""``bandsolve inspect``: what a model file holds."""

from __future__ import annotations

import argparse
import json

from bandsolve.cli._common import open_model


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("inspect", help="show what a model file holds",
                       description="Summarise a model file: method, analytes and ranges, axis, "
                                   "preprocessing, diagnostic limits, figures of merit (with "
                                   "what each abbreviation means) and provenance.",
                       epilog="example:\n  bandsolve inspect models/rinse-cls.bsm --json",
                       formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("model", metavar="MODEL", help="model file written by bandsolve build")
    p.add_argument("--json", action="store_true", help="machine-readable output")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    cal = open_model(args)
    if args.json:
        print(json.dumps(cal.describe(), indent=2, default=str))
    else:
        print(cal.summary())
    return 0

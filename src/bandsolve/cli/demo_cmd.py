"""``bandsolve demo``: the whole job on invented data, end to end."""

from __future__ import annotations

import argparse

from bandsolve.cautions import SHORT_CAUTION
from bandsolve.cli._common import eprint
from bandsolve.cli.demo_data import DEMO_LABEL
from bandsolve.cli.demo_run import run_demo
from bandsolve.flags import FLAG_COLUMN


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "demo", help="run the whole job on the bundled invented demo data",
        description="Generate the invented dye-house rinse-water data (fixed random state), "
                    "build a calibration, predict two routine batches and summarise.",
        epilog="example:\n  bandsolve demo --out bandsolve-demo",
        formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("--out", metavar="DIR", default="bandsolve-demo",
                   help="folder for the demo files (default: bandsolve-demo)")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    demo = run_demo(args.out)
    table = demo.results
    eprint(f"Data: {DEMO_LABEL}.")
    eprint(f"Calibration: {demo.files.calibration_spectra} with "
           f"{demo.files.calibration_concentrations}")
    analytes = [c for c in table.columns if c.endswith("]") and " SE" not in c][:3]
    shown = table[["sample", *analytes, "residual_ratio", FLAG_COLUMN]].copy()
    for col in [*analytes, "residual_ratio"]:
        shown[col] = shown[col].map(lambda v: f"{v:.3g}")
    print(shown.to_string(index=False))
    flagged = (table[FLAG_COLUMN] != "").sum()
    eprint(f"\n{len(table)} routine spectra predicted with the CLS model, {flagged} flagged "
           "(results carry standard errors and 95 % prediction intervals).")
    for name, path in demo.outputs.items():
        eprint(f"{name}: {path}")
    eprint("Flags are explained in the README.")
    eprint(SHORT_CAUTION)
    return 0

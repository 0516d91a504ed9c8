"""``bandsolve inspect``: what a model file holds."""

from __future__ import annotations

import argparse
import json
import math
import textwrap

from bandsolve.calibration.model import Calibration
from bandsolve.calibration.modelfile import load_model
from bandsolve.cli._common import WIDTH, caution_text


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


def _path(value: float | None) -> str:
    return f"{value:g} cm" if value else "not recorded"


def _number(value: float) -> str:
    return "none" if value is None or math.isnan(value) else f"{value:.4g}"


def _limits(cal: Calibration) -> list[str]:
    """One paragraph per estimator: residual, T² and leverage limits, how set, α."""
    lines = textwrap.wrap(f"diagnostic limits (a result above a limit is flagged; leverage "
                          f"limit = {cal.limits.leverage_factor:g} × parameters / calibration "
                          "samples):", WIDTH, subsequent_indent="  ")
    models = cal.limits.models
    for i, m in enumerate(models):
        name = f"model {i + 1}: " if len(models) > 1 else ""
        text = (f"{name}residual {_number(m.residual)} ({m.residual_method}); Hotelling T² "
                f"{_number(m.t2)}; leverage {_number(m.leverage)}; α = {m.alpha:g}")
        lines += textwrap.wrap(text, WIDTH, initial_indent="  ", subsequent_indent="    ")
    return lines


def summary_text(cal: Calibration) -> str:
    """A readable multi-line summary of a model."""
    d = cal.describe()
    prov = d["provenance"]
    lines = [
        f"method:          {d['method'].upper()}",
        f"axis:            {d['axis']['first']:g}-{d['axis']['last']:g} {d['axis']['unit']} "
        f"({d['axis']['points']} points)",
        f"preprocessing:   {d['preprocessing']}",
        f"path length:     {_path(d['path_length_cm'])}",
        f"ceiling:         {d['ceiling_AU']:g} AU",
        "analytes (calibrated range):",
    ]
    lines += [f"  {a['label']}: {a['calibrated_min']:g} to {a['calibrated_max']:g}"
              for a in d["analytes"]]
    choices = cal.selection.models if cal.selection is not None else ()
    for i, ev in enumerate(choices):
        label = f"model {i + 1}" if len(choices) > 1 else "components"
        lines.append(f"{label + ':':<17}{ev.n_components} components (rule: {ev.rule}, "
                     f"cross-validation {ev.cv})")
    lines += _limits(cal)
    lines.append(f"created:         {prov.get('created')}")
    lines.append(f"model checksum:  {prov.get('model_checksum', 'not saved yet')}")
    for f in prov.get("training_files", []):
        lines.append(f"trained on:      {f['role']} {f['name']}")
        lines.append(f"                 sha256 {f['sha256']}")
    if prov.get("data_label"):
        lines += textwrap.wrap(f"data:            {prov['data_label']}", WIDTH,
                               subsequent_indent=" " * 17)
    if cal.merit is not None:
        lines += ["", cal.merit.summary(width=WIDTH)]
    else:
        lines += textwrap.wrap(prov.get("merit_note", "figures of merit: not stored in this "
                                        "model"), WIDTH)
    return "\n".join(lines)


def run(args: argparse.Namespace) -> int:
    cal = load_model(args.model)
    if args.json:
        print(json.dumps(cal.describe(), indent=2, default=str))
    else:
        print(summary_text(cal))
        print(caution_text())
    return 0

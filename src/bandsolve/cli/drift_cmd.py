"""``bandsolve drift``: is the method still in control? Control charts over the ledger."""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from bandsolve.batch.watch import watch_ledger
from bandsolve.cli._codes import EXIT_DRIFT
from bandsolve.cli._common import eprint
from bandsolve.io.atomic import atomic_write
from bandsolve.monitor.charts import ChartDesign

EXAMPLES = """\
examples:
  bandsolve drift results.sqlite
  bandsolve drift results.sqlite --json > drift.json
  bandsolve drift results.sqlite --model 3fa9c1 --reference-runs 25 --charts charts/

Each check standard and analyte recorded by predict --checks becomes one series (recovery
in % per run); the median spectral residual ratio of routine samples is watched too. Limits
come from the first --reference-runs runs (mean; sigma from the mean moving range / 1.128).
Alarms: a value beyond 3 sigma, a two-sided CUSUM (k = 0.5 sigma, h = 5 sigma: a false alarm
about once in 465 in-control runs, a 0.5 sigma shift seen after 38 runs on average) and the
Western Electric run rules.

exit codes: 0 every series in control; 5 some series out of control at its last run.
"""


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("drift", help="control charts of recorded check standards",
                       description="Chart the check standards a results ledger recorded for "
                                   "one model and say, in plain words, whether the method is "
                                   "in control.",
                       epilog=EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("ledger", metavar="FILE.sqlite", help="ledger written by predict --ledger")
    p.add_argument("--model", metavar="CHECKSUM",
                   help="model to watch (checksum or its start; default: the model of the "
                        "latest run with check standards)")
    p.add_argument("--reference-runs", type=int, default=20, metavar="N",
                   help="first runs that set the control limits (default 20)")
    p.add_argument("--cusum-h", type=float, default=5.0, metavar="H",
                   help="CUSUM decision interval in sigma (default 5; 4 is faster and noisier)")
    p.add_argument("--ewma", type=float, metavar="LAMBDA",
                   help="also an EWMA chart with this smoothing (0.1 with L = 2.814)")
    p.add_argument("--no-rules", action="store_true", help="no Western Electric run rules")
    p.add_argument("--json", action="store_true", help="machine-readable output on stdout")
    p.add_argument("--charts", metavar="DIR", help="write one PNG chart per series here")
    p.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    design = ChartDesign(phase_one=args.reference_runs, h=args.cusum_h,
                         ewma_lambda=args.ewma, rules=not args.no_rules)
    report = watch_ledger(args.ledger, model_checksum=args.model, design=design)
    if args.json:
        json.dump(report.to_dict(), sys.stdout, indent=1)
        print()
    else:
        print(f"model {report.model_checksum[:12]} in {args.ledger}:")
        for line in report.summary():
            print(f"  {line}")
    if args.charts:
        from bandsolve.report.control_charts import series_figure

        folder = Path(args.charts)
        folder.mkdir(parents=True, exist_ok=True)
        for i, series in enumerate(report.series, start=1):
            fig = series_figure(series)
            if fig is None:
                continue
            path = folder / f"chart-{i:02d}.png"
            with atomic_write(path, "wb") as handle:
                fig.savefig(handle, format="png", dpi=110)
            eprint(f"{series.name}: {path}")
    return 0 if report.in_control else EXIT_DRIFT

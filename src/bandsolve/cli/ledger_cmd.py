"""``bandsolve ledger``: list and export what a results ledger recorded (never edit it)."""

from __future__ import annotations

import argparse

from bandsolve.batch.ledger import list_inputs, list_results, list_runs, verify_ledger
from bandsolve.cli._codes import EXIT_INPUT, EXIT_OK
from bandsolve.cli._common import add_key_option, caution_text, eprint, guard_outputs
from bandsolve.flags import FLAG_COLUMN
from bandsolve.io.atomic import atomic_write
from bandsolve.io.formulas import neutralise_formulas
from bandsolve.labkey import load_lab_key

EXAMPLES = """\
examples:
  bandsolve ledger results.sqlite                      list every run
  bandsolve ledger results.sqlite --since 2025-03-01   runs since a date
  bandsolve ledger results.sqlite --run 12             inputs and results of run 12
  bandsolve ledger results.sqlite --sample 'rinse-*' --export rinse.csv

  bandsolve ledger results.sqlite --verify             check every hash link
  bandsolve ledger results.sqlite --verify --key-file lab.key   and every keyed seal

The ledger is append-only: results cannot be edited or deleted; predict again for a new run.
Runs and results are chained by hash: --verify names the first run that was changed,
removed or inserted by other means. Without a lab key this detects edits but not a complete
rewrite by someone who recomputes every hash; runs sealed with the lab key (predict
--key-file) make such a rewrite detectable too. Note the chain head that --verify prints
somewhere else (a notebook, a LIMS): removing the newest runs is seen only against it.
Listing and exporting also check the chain and warn when it is broken (exit code 2).
"""


def register(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("ledger", help="list or export recorded prediction runs",
                       description="List the runs of a results ledger, or the results of one "
                                   "run, of a date range or of matching samples, and export "
                                   "them as CSV.",
                       epilog=EXAMPLES, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("ledger", metavar="FILE.sqlite", help="ledger written by predict --ledger")
    p.add_argument("--run", type=int, metavar="ID", help="only this run")
    p.add_argument("--since", metavar="DATE", help="only runs started on or after DATE (UTC)")
    p.add_argument("--sample", metavar="PATTERN", help="sample ids matching a glob pattern")
    p.add_argument("--export", metavar="CSV", help="write the selected results to a CSV file")
    p.add_argument("--keep-formulas", action="store_true",
                   help="export text cells starting with = + - @ as they are (by default they "
                        "get a leading apostrophe so spreadsheets do not run them)")
    p.add_argument("--verify", action="store_true",
                   help="re-walk the hash chain (and the seals, with a key); name the first "
                        "broken link")
    add_key_option(p)
    p.set_defaults(func=run)


def _shown_columns(results) -> list[str]:
    """run_id, sample, source, each analyte's concentration and SE, flags (as recorded)."""
    analytes = [c for c in results.columns if f"{c} SE" in results.columns]
    shown = ["run_id", "sample", "source", *(c for a in analytes for c in (a, f"{a} SE")),
             FLAG_COLUMN]
    return [c for c in shown if c in results.columns]


def run(args: argparse.Namespace) -> int:
    guard_outputs(args, {"--export": "export"}, ["ledger"])
    check = verify_ledger(args.ledger, load_lab_key(args.key_file))
    if args.verify:
        print(check.summary())
        return EXIT_OK if check.ok else EXIT_INPUT
    if not check.ok:
        eprint(f"bandsolve: warning: {args.ledger} fails its check: {check.problem}; what "
               f"follows may not be what was recorded (bandsolve ledger {args.ledger} "
               "--verify)")
    code = _show(args)
    eprint(caution_text())
    return code if check.ok else EXIT_INPUT


def _show(args: argparse.Namespace) -> int:
    if args.export or args.run is not None or args.sample:
        results = list_results(args.ledger, run=args.run, since=args.since, sample=args.sample)
        if args.export:
            safe = results if args.keep_formulas else neutralise_formulas(results)
            with atomic_write(args.export, "w", newline="") as handle:
                safe.to_csv(handle, index=False)
            eprint(f"{len(results)} result rows written to {args.export}")
            return 0
        if args.run is not None:
            print(list_inputs(args.ledger, args.run).fillna("-").to_string(index=False))
        print(results[_shown_columns(results)].fillna("-").to_string(index=False)
              if len(results) else "no matching results")
        return 0
    runs = list_runs(args.ledger, since=args.since)
    if not len(runs):
        print("no runs recorded")
        return 0
    runs = runs.assign(model_checksum=runs["model_checksum"].str[:12])
    cols = ["run_id", "started", "batch", "operator", "model_path", "model_checksum",
            "n_inputs", "n_failed", "n_results", "n_flagged"]
    print(runs[cols].fillna("-").to_string(index=False))
    return 0

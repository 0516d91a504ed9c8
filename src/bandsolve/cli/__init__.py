"""The ``bandsolve`` command: argument parsing only; every number comes from the API.

Exit codes: 0 success; 1 internal error (a bug: please report it); 2 bad input or usage;
3 some inputs of a batch could not be read (the others were predicted); 4 results were
flagged and ``--fail-on-flags`` was given (4 outranks 3 when both apply); 5 ``drift``: a
watched series is out of control; 130 interrupted.
"""

from __future__ import annotations

import argparse
import importlib
import os
import sys
import traceback
import warnings
from collections.abc import Sequence

from bandsolve import __version__
from bandsolve.cli._codes import (
    EXIT_DRIFT,
    EXIT_FLAGGED,
    EXIT_INPUT,
    EXIT_INTERNAL,
    EXIT_OK,
    EXIT_PARTIAL,
)
from bandsolve.errors import BandsolveError, BandsolveWarning

__all__ = ["main", "EXIT_OK", "EXIT_INTERNAL", "EXIT_INPUT", "EXIT_PARTIAL", "EXIT_FLAGGED",
           "EXIT_DRIFT"]


#: Subcommand name → its module in :mod:`bandsolve.cli`, in the order ``--help`` lists them.
#: A module (and the scientific libraries behind it) is imported only when its command runs or
#: when the full help is asked for, so ``bandsolve --version`` and each command start quickly.
COMMANDS = {"demo": "demo_cmd", "design": "design_cmd", "build": "build_cmd",
            "compare": "compare_cmd", "assess": "assess_cmd", "predict": "predict_cmd",
            "inspect": "inspect_cmd", "report": "report_cmd", "ledger": "ledger_cmd",
            "repeatability": "repeatability_cmd", "drift": "drift_cmd",
            "transfer": "transfer_cmd"}


def _commands_needed(argv: Sequence[str]) -> list[str]:
    """The subcommands the parser must know to parse ``argv``.

    The program's own options are only ``--help`` and ``--version``, so the first word not
    starting with ``-`` names the command.  Without one, ``--version`` needs no subcommand;
    anything else (help, a mistyped command) gets all of them.
    """
    first = next((arg for arg in argv if not arg.startswith("-")), None)
    if first in COMMANDS:
        return [first]
    if first is None and "--version" in argv and not {"-h", "--help"} & set(argv):
        return []
    return list(COMMANDS)


class _Parser(argparse.ArgumentParser):
    """Usage errors as one line with the exit code for bad input."""

    def error(self, message: str):  # type: ignore[override]
        self.exit(EXIT_INPUT, f"{self.prog}: error: {message} (see {self.prog} --help)\n")


def build_parser(commands: Sequence[str] | None = None) -> argparse.ArgumentParser:
    """The argument parser, with the given subcommands (default: all of :data:`COMMANDS`)."""
    parser = _Parser(
        prog="bandsolve",
        description="Resolve overlapping UV-Vis absorption bands into concentrations: plan "
                    "standards, build CLS or PLS calibrations, validate them, and predict "
                    "routine samples with uncertainties and flags.",
        epilog="Start with:  bandsolve demo --out demo-output",
    )
    parser.add_argument("--version", action="version", version=f"bandsolve {__version__}")
    sub = parser.add_subparsers(title="commands", metavar="COMMAND", parser_class=_Parser)
    for name in COMMANDS if commands is None else commands:
        importlib.import_module(f"bandsolve.cli.{COMMANDS[name]}").register(sub)
    return parser


def _one_line_warning(message, category, filename, lineno, file=None, line=None):
    prefix = "warning" if issubclass(category, BandsolveWarning) else category.__name__
    print(f"bandsolve: {prefix}: {message}", file=sys.stderr)


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit code (see module docstring)."""
    argv = sys.argv[1:] if argv is None else list(argv)
    parser = build_parser(_commands_needed(argv))
    args = parser.parse_args(argv)
    if not hasattr(args, "func"):
        parser.print_help()
        return EXIT_INPUT
    warnings.showwarning = _one_line_warning
    try:
        return int(args.func(args) or 0)
    except BandsolveError as exc:
        print(f"bandsolve: error: {exc}", file=sys.stderr)
        return EXIT_INPUT
    except BrokenPipeError:  # the reader of our output closed it (e.g. `| head`): not an error
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return EXIT_OK
    except OSError as exc:  # files and folders: missing, not writable, a file where a folder is
        where = f"{exc.filename}: " if exc.filename else ""
        print(f"bandsolve: error: {where}{exc.strerror or exc}", file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        print("bandsolve: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:  # a bug: one line by default, the traceback on request
        if os.environ.get("BANDSOLVE_DEBUG"):
            traceback.print_exc()
        print(f"bandsolve: internal error: {type(exc).__name__}: {exc} (set BANDSOLVE_DEBUG=1 "
              "for details and please report it)", file=sys.stderr)
        return EXIT_INTERNAL


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())

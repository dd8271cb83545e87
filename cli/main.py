"""The command line, ``trapbudget SUBCOMMAND``: a thin face over the Python API.

Each subcommand is two small functions: ``_add_<name>(subparsers)`` declares
its sub-parser and sets ``run=_run_<name>``; ``_run_<name>(args) -> int`` calls
the engine and the reports. To add a subcommand, write both and append the
``_add_<name>`` function to ``SUBCOMMANDS`` (the order there is the order in
``--help``). Shared pieces: :func:`add_common_options` (``--json``, ``--seed``,
``--out``, ``--quiet``), :func:`load` (a scenario file), :func:`emit_json`,
:func:`progress_reporter` (a rich progress bar on stderr), :func:`report_dir`
(the default output folder) and :func:`stdout_console`.

Errors: only :class:`~trapbudget.sensitivity.errors.TrapbudgetError` (and
argparse's usage errors, turned into
:class:`~trapbudget.sensitivity.errors.UsageError`) are caught; they are
printed as ``ErrorName: message`` on one line to stderr, with exit code 1 for
bad input and 2 for bad usage. Anything else is a bug and shows its traceback."""

from __future__ import annotations

import argparse
import sys
import warnings
from collections.abc import Callable, Sequence

from trapbudget.cli.decisions import add_compare, add_spec
from trapbudget.cli.lab import add_calibrate, add_diagnose
from trapbudget.cli.options import PROG, _Parser
from trapbudget.cli.scan import add_scan
from trapbudget.cli.study import (
    add_demo,
    add_inputs,
    add_predict,
    add_rank,
    add_report,
    add_species,
)
from trapbudget.sensitivity.errors import TrapbudgetError, TrapbudgetWarning, UsageError

__all__ = ["SUBCOMMANDS", "build_parser", "main"]


#: Functions that each add one sub-parser; append yours to add a subcommand.
SUBCOMMANDS: list[Callable[[argparse._SubParsersAction], None]] = [
    add_predict,
    add_rank,
    add_scan,
    add_spec,
    add_compare,
    add_report,
    add_species,
    add_inputs,
    add_demo,
    add_calibrate,
    add_diagnose,
]


def _version() -> str:
    try:
        from importlib.metadata import version

        return version("trapbudget")
    except Exception:  # not installed: running from a source tree
        return "unknown"


def build_parser() -> argparse.ArgumentParser:
    """The argument parser with every subcommand in :data:`SUBCOMMANDS`."""
    parser = _Parser(
        prog=PROG,
        description="Error budgets for laser-cooled atom sources (vapor-cell MOT).",
        epilog="Safety: trapbudget computes numbers; it does not make an apparatus safe. "
        "Follow your laser-safety officer, local codes and licensed practice.",
    )
    parser.add_argument("--version", action="version", version=f"%(prog)s {_version()}")
    subparsers = parser.add_subparsers(dest="command", metavar="SUBCOMMAND")
    for add in SUBCOMMANDS:
        add(subparsers)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; return the exit code (0 ok, 1 bad input, 2 bad usage)."""
    parser = build_parser()
    with warnings.catch_warnings():
        # the command line's warnings are part of its output: one line each on stderr,
        # whatever filters the calling environment set
        warnings.filterwarnings("default", category=TrapbudgetWarning)
        warnings.showwarning = _show_warning
        return _main(parser, argv)


def _show_warning(message, category, filename, lineno, file=None, line=None) -> None:
    """Show a warning as ``CategoryName: message`` on one line of stderr (no source line)."""
    text = " ".join(str(message).split())
    print(f"{category.__name__}: {text}", file=sys.stderr)


def _main(parser: argparse.ArgumentParser, argv: Sequence[str] | None) -> int:
    try:
        args = parser.parse_args(argv)
        if getattr(args, "run", None) is None:
            names = ", ".join(sorted(parser._subparsers._group_actions[0].choices))  # type: ignore[arg-type,union-attr]
            raise UsageError(f"{PROG}: choose a subcommand: {names}; see '{PROG} --help'")
        return int(args.run(args) or 0)
    except TrapbudgetError as error:
        message = " ".join(str(error).split())
        print(f"{type(error).__name__}: {message}", file=sys.stderr)
        return int(getattr(error, "exit_code", 1))
    except SystemExit as exit_:  # --help and --version
        return exit_.code if isinstance(exit_.code, int) else 0
    except KeyboardInterrupt:
        print("Interrupted", file=sys.stderr)
        return 130


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())

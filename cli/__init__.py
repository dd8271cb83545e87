"""The command line, ``trapbudget SUBCOMMAND``: a thin face over the Python API.

The entry point is :func:`main` (``trapbudget.cli:main``; also ``python -m
trapbudget.cli``). Each subcommand lives in one module of this package and calls the
engine (:mod:`trapbudget.sensitivity`) and the reports (:mod:`trapbudget.reports`);
it computes nothing of its own.
"""

from __future__ import annotations

from typing import Any

__all__ = ["main"]


def main(argv: Any = None) -> int:
    """Run the command line (see :func:`trapbudget.cli.main.main`)."""
    from trapbudget.cli.main import main as run

    return run(argv)

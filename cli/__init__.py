"""The command line, ``trapbudget SUBCOMMAND``: a thin face over the Python API.

The entry point is :func:`main`. Each subcommand lives in one module of this
package and calls the engine (:mod:`trapbudget.sensitivity`) and the reports
(:mod:`trapbudget.reports`); it computes nothing of its own.
"""

from trapbudget.cli.main import main

__all__ = ["main"]

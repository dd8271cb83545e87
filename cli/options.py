"""The options shared by the subcommands, and the parser that turns usage errors into one line."""

from __future__ import annotations

import argparse
import datetime as _dt
import math
import re
from pathlib import Path
from typing import Any

from trapbudget.sensitivity.errors import UsageError

__all__ = [
    "DEFAULT_DEMO_DIR",
    "DEFAULT_REPORT_ROOT",
    "DEMO_SCENARIO",
    "PROG",
    "add_common_options",
    "add_max_samples_option",
    "add_samples_option",
    "add_workers_options",
    "false_alarm_rate",
    "non_negative_amount",
    "positive_rate",
    "reference_period",
]

PROG = "trapbudget"
#: Parent folder of reports written without ``--out`` (not ``./reports/``, a source folder).
DEFAULT_REPORT_ROOT = Path("trapbudget-reports")
#: Folder the demo writes its files to without ``--out``.
DEFAULT_DEMO_DIR = Path("trapbudget-demo")
#: The demo scenario ``trapbudget demo`` runs.
DEMO_SCENARIO = "harrier-rb87.toml"
#: The demo's convergence loop may grow the base size N this many times (keeps it short).


# --------------------------------------------------------------------------- parsing


class _Parser(argparse.ArgumentParser):
    """An ArgumentParser whose usage errors raise :class:`UsageError` instead of exiting.

    A value that starts with a minus and a digit (``-12MHz``, ``-3.5``) is a value, not an
    option: no option of trapbudget looks like a negative number, and detunings are negative.
    """

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        # argparse's own pattern (Python 3.10-3.13) accepts only bare negative numbers
        self._negative_number_matcher = re.compile(r"^-\.?\d")

    def error(self, message: str) -> None:  # type: ignore[override]
        raise UsageError(f"{self.prog}: {message}; see '{self.prog} --help'")


def _positive_power_of_two(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not an integer; use e.g. 1024") from None
    if value < 2 or value & (value - 1):
        low = 1 << max(1, value.bit_length() - 1) if value > 1 else 2
        hint = low if value - low <= 2 * low - value else 2 * low
        raise argparse.ArgumentTypeError(
            f"{text!r} is not a power of 2 (Sobol' designs need n = 2^m); use {hint}"
        )
    return value


def _seed(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not an integer seed") from None
    if value < 0:
        raise argparse.ArgumentTypeError(f"{text!r} is negative; seeds are integers >= 0")
    return value


def add_common_options(
    parser: argparse.ArgumentParser, *, out: bool = True, seed: bool = True
) -> None:
    """Add the flags shared by every computing subcommand.

    ``--json`` (machine-readable result on stdout, nothing else there),
    ``--quiet`` (no progress bar, no tables), ``--seed S`` (overrides the
    scenario's seed) and, with ``out=True``, ``--out DIR``.
    """
    parser.add_argument(
        "--json", action="store_true", help="print the result as JSON on stdout (nothing else)"
    )
    parser.add_argument("--quiet", action="store_true", help="no progress bar and no tables")
    if seed:
        parser.add_argument(
            "--seed", type=_seed, default=None, help="random seed (default: the scenario's)"
        )
    if out:
        parser.add_argument(
            "--out",
            type=Path,
            default=None,
            metavar="DIR",
            help=f"folder to write to (default: a new folder under ./{DEFAULT_REPORT_ROOT}/)",
        )


def _workers(text: str) -> int | str:
    if text == "auto":
        return text
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"{text!r} is not a number of processes or 'auto'"
        ) from None
    if value < 1:
        raise argparse.ArgumentTypeError(f"{text!r}: give 1 or more processes, or 'auto'")
    return value


def add_workers_options(parser: argparse.ArgumentParser) -> None:
    """Add ``--workers N`` (local processes; default auto) and ``--scheduler ADDRESS`` (dask)."""
    parser.add_argument(
        "--workers",
        type=_workers,
        default="auto",
        metavar="N",
        help="local processes for the model runs: 1 runs in this process; default 'auto', "
        "every core for runs of 2^18 samples or more (the same numbers either way)",
    )
    parser.add_argument(
        "--scheduler",
        default=None,
        metavar="ADDRESS",
        help="run the model on a dask.distributed cluster (e.g. tcp://10.0.0.5:8786; "
        "needs pip install 'trapbudget[dask]')",
    )


def add_samples_option(parser: argparse.ArgumentParser) -> None:
    """Add ``--samples N`` (a power of 2; default: the scenario's ``settings.n_samples``)."""
    parser.add_argument(
        "--samples",
        type=_positive_power_of_two,
        default=None,
        metavar="N",
        help="sample size: Monte Carlo n and Saltelli base N (power of 2; default: scenario's)",
    )


def add_max_samples_option(parser: argparse.ArgumentParser) -> None:
    """Add ``--max-samples N``: the largest base size the convergence loop may reach."""
    parser.add_argument(
        "--max-samples",
        type=_positive_power_of_two,
        default=None,
        metavar="N",
        help="largest base size the convergence loop may reach (power of 2; default "
        "16 N, the engine's default)",
    )


def positive_rate(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number; use e.g. 0.5") from None
    if not value > 0:
        raise argparse.ArgumentTypeError(f"{text!r} must be a positive rate in Hz")
    return value


def _finite(text: str, example: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number; use e.g. {example}") from None
    if not math.isfinite(value):
        raise argparse.ArgumentTypeError(f"{text!r} is not a finite number; use e.g. {example}")
    return value


def non_negative_amount(text: str) -> float:
    """An amount of money: a finite number >= 0."""
    value = _finite(text, "3000")
    if value < 0:
        raise argparse.ArgumentTypeError(f"{text!r} is negative; give a cost >= 0, e.g. 3000")
    return value


def false_alarm_rate(text: str) -> float:
    """A probability of a false alarm: strictly between 0 and 0.5."""
    value = _finite(text, "0.01")
    if not 0 < value < 0.5:
        raise argparse.ArgumentTypeError(
            f"{text!r} must lie between 0 and 0.5 (a probability per day), e.g. 0.01"
        )
    return value


def reference_period(text: str) -> str:
    """'first-day', a date YYYY-MM-DD, or START:END of such dates."""
    if text == "first-day":
        return text
    for part in text.split(":") if text.count(":") == 1 else [text]:
        try:
            _dt.date.fromisoformat(part)
        except ValueError:
            raise argparse.ArgumentTypeError(
                f"{part!r} is not a date; give 'first-day', YYYY-MM-DD or START:END, "
                "e.g. 2026-11-23"
            ) from None
    return text

"""What the subcommands share: scenario loading, JSON output, progress bars, report folders."""

from __future__ import annotations

import argparse
import contextlib
import datetime as _dt
import json
import sys
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

from trapbudget.cli.options import DEFAULT_REPORT_ROOT
from trapbudget.sensitivity.errors import ScenarioError

__all__ = [
    "emit_json",
    "load",
    "progress_reporter",
    "report_dir",
    "stage_progress",
    "stdout_console",
]


# --------------------------------------------------------------------------- shared helpers


def load(path: Path) -> Any:
    """Load a scenario file, with a one-line error when it does not exist."""
    from trapbudget.sensitivity.scenario.reader import load_scenario

    path = Path(path)
    if not path.is_file():
        what = "is a folder" if path.is_dir() else "does not exist"
        raise ScenarioError(f"the scenario file {what}; check the path", path=path)
    return load_scenario(path)


def stdout_console(args: argparse.Namespace) -> Any:
    """A rich console on stdout, or None when the output must be JSON only or quiet."""
    if getattr(args, "json", False) or getattr(args, "quiet", False):
        return None
    from rich.console import Console

    return Console(file=sys.stdout, highlight=False)


def emit_json(obj: Any) -> None:
    """Print ``obj`` as JSON on stdout (numpy scalars and arrays are converted)."""
    from trapbudget.sensitivity.io import _json_default

    sys.stdout.write(json.dumps(obj, indent=2, default=_json_default) + "\n")
    sys.stdout.flush()


@contextlib.contextmanager
def progress_reporter(
    args: argparse.Namespace,
) -> Iterator[Callable[[str], Callable[[int, int], None] | None]]:
    """Yield ``task(description) -> progress(done, total)`` drawing a bar on stderr.

    The bar is off (``task`` returns None) with ``--json`` or ``--quiet`` or
    when stderr is not a terminal.
    """
    enabled = (
        not getattr(args, "json", False)
        and not getattr(args, "quiet", False)
        and sys.stderr.isatty()
    )
    if not enabled:
        yield lambda description: None
        return
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TimeElapsedColumn

    bar = Progress(
        "[progress.description]{task.description}",
        BarColumn(),
        MofNCompleteColumn(),
        TimeElapsedColumn(),
        console=Console(file=sys.stderr),
        transient=False,
    )

    def task(description: str) -> Callable[[int, int], None]:
        task_id = bar.add_task(description, total=None)

        def progress(done: int, total: int) -> None:
            bar.update(task_id, completed=done, total=total)

        return progress

    with bar:
        yield task


def stage_progress(
    task: Callable[[str], Callable[[int, int], None] | None],
) -> Callable[[str, int, int], None]:
    """Adapt a :func:`progress_reporter` task factory to ``progress(stage, done, total)``."""
    bars: dict[str, Callable[[int, int], None] | None] = {}

    def progress(stage: str, done: int, total: int) -> None:
        if stage not in bars:
            bars[stage] = task(stage)
        bar = bars[stage]
        if bar is not None:
            bar(done, total)

    return progress


def report_dir(args: argparse.Namespace, stem: str) -> Path:
    """``--out`` if given, else a new folder ``./trapbudget-reports/<stem>-<timestamp>``."""
    if getattr(args, "out", None) is not None:
        return Path(args.out)
    stamp = _dt.datetime.now().strftime("%Y%m%d-%H%M%S")
    base = DEFAULT_REPORT_ROOT / f"{stem}-{stamp}"
    candidate, k = base, 1
    while candidate.exists():
        k += 1
        candidate = base.with_name(f"{base.name}-{k}")
    return candidate

"""What the subcommands share: scenario loading, JSON output, progress bars, report folders."""

from __future__ import annotations

import argparse
import contextlib
import datetime as _dt
import json
import os
import sys
import tempfile
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

from trapbudget.cli.options import DEFAULT_REPORT_ROOT
from trapbudget.sensitivity.errors import ScenarioError, UsageError

__all__ = [
    "check_out",
    "check_samples_fit",
    "emit_json",
    "load",
    "progress_reporter",
    "report_dir",
    "stage_progress",
    "stdout_console",
    "where_to_run",
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
    from rich.progress import (
        BarColumn,
        MofNCompleteColumn,
        Progress,
        TimeElapsedColumn,
        TimeRemainingColumn,
    )

    bar = Progress(
        "[progress.description]{task.description}",
        BarColumn(),
        MofNCompleteColumn(),
        TimeElapsedColumn(),
        "left",
        TimeRemainingColumn(),
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


def where_to_run(args: argparse.Namespace) -> contextlib.AbstractContextManager[None]:
    """The model runs of the block on ``--workers`` local processes or the ``--scheduler``."""
    from trapbudget.sensitivity.executors import running_on

    return running_on(
        workers=getattr(args, "workers", None), scheduler=getattr(args, "scheduler", None)
    )


def check_out(out: Path) -> Path:
    """``out`` if a report can be written there, else a UsageError (exit 2) saying why.

    Checked before any computation: an existing ``out`` must be an empty folder or a
    previous report (it holds ``study.json``); otherwise the nearest existing folder
    above it must be one this process can create folders in.
    """
    out = Path(out)
    if out.exists() or out.is_symlink():
        if not out.is_dir():
            raise UsageError(f"--out {out}: is a file, not a folder; give a folder")
        if any(out.iterdir()) and not (out / "study.json").is_file():
            raise UsageError(
                f"--out {out}: exists and is not a trapbudget report folder; give a new folder"
            )
        probe_in = out.parent
    else:
        probe_in = out.parent
        while not probe_in.exists():
            probe_in = probe_in.parent
        if not probe_in.is_dir():
            raise UsageError(
                f"--out {out}: {probe_in} is a file, so no folder can be made under it; "
                "give another folder"
            )
    from trapbudget.sensitivity.io import FolderBusyError, try_lock

    if probe_in.is_dir() and not try_lock(out):
        raise FolderBusyError(
            f"--out {out}: another trapbudget run is writing this folder; wait for it to "
            "finish or choose another folder"
        )
    try:  # the one reliable test of writability (root, read-only mounts, ACLs)
        probe = tempfile.mkdtemp(prefix=".trapbudget-probe-", dir=probe_in)
        os.rmdir(probe)
    except OSError as error:
        raise UsageError(
            f"--out {out}: cannot create a folder in {probe_in} ({error.strerror}); "
            "give a folder you can write to"
        ) from None
    return out


def report_dir(args: argparse.Namespace, stem: str) -> Path:
    """``--out`` if given (checked by :func:`check_out`), else a new folder
    ``./trapbudget-reports/<stem>-<timestamp>``."""
    if getattr(args, "out", None) is not None:
        return check_out(Path(args.out))
    stamp = _dt.datetime.now().strftime("%Y%m%d-%H%M%S")
    base = DEFAULT_REPORT_ROOT / f"{stem}-{stamp}"
    candidate, k = base, 1
    while candidate.exists():
        k += 1
        candidate = base.with_name(f"{base.name}-{k}")
    return candidate


def check_samples_fit(
    args: argparse.Namespace,
    scenario: Any,
    *,
    kind: str,
    copies: int = 1,
    second_order: bool = False,
) -> None:
    """Refuse, before any work, a sample size whose run would not fit in memory.

    A size from ``--samples`` is bad usage (exit 2); one from the scenario's
    ``settings.n_samples`` is bad input naming the file (exit 1).
    """
    from trapbudget.sensitivity.guard import check_memory

    given = getattr(args, "samples", None)
    n = scenario.settings.n_samples if given is None else given
    try:
        check_memory(
            kind,
            int(n),
            len(scenario.inputs),
            len(scenario.outputs),
            second_order=second_order,
            copies=copies,
            spelled="--samples {}" if given is not None else "n_samples = {}",
        )
    except ScenarioError as error:
        message = str(error).split(": ", 1)[-1]
        if given is not None:
            raise UsageError(message) from None
        raise ScenarioError(message, path=scenario.source, key="settings.n_samples") from None

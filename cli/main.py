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
bad input and 2 for bad usage. Anything else is a bug and shows its traceback.
"""

from __future__ import annotations

import argparse
import contextlib
import datetime as _dt
import json
import sys
import warnings
from collections.abc import Callable, Iterator, Sequence
from importlib import resources
from pathlib import Path
from typing import Any

from trapbudget.sensitivity.errors import ScenarioError, TrapbudgetError, UsageError

__all__ = [
    "SUBCOMMANDS",
    "add_common_options",
    "add_max_samples_option",
    "add_samples_option",
    "build_parser",
    "emit_json",
    "load",
    "main",
    "progress_reporter",
    "report_dir",
    "stdout_console",
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
    """An ArgumentParser whose usage errors raise :class:`UsageError` instead of exiting."""

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


def _add_predict(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "predict",
        help="nominal outputs with first-order (linear, GUM) uncertainties",
        description="Nominal outputs of the scenario's model with first-order (GUM, JCGM 100) "
        "standard uncertainties and the largest contributions. Takes seconds.",
    )
    p.add_argument("scenario", type=Path, help="scenario TOML file")
    add_common_options(p, out=False, seed=False)
    p.set_defaults(run=_run_predict)


def _add_rank(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "rank",
        help="full study: Monte Carlo, linear check, ranked error budget and report",
        description="Propagate the tolerances by Monte Carlo, check the linear (GUM) result, "
        "rank the drifts by Sobol' indices (convergence loop on by default) and write a report.",
    )
    p.add_argument("scenario", type=Path, nargs="?", help="scenario TOML file")
    p.add_argument(
        "--from",
        dest="from_dir",
        type=Path,
        default=None,
        metavar="DIR",
        help="re-render the report saved in DIR instead of running (same as 'report DIR')",
    )
    add_samples_option(p)
    add_max_samples_option(p)
    p.add_argument(
        "--no-convergence",
        dest="convergence",
        action="store_false",
        help="one pass at N instead of doubling N until the indices settle",
    )
    p.add_argument(
        "--second-order", action="store_true", help="also estimate pairwise interactions"
    )
    add_common_options(p)
    p.set_defaults(run=_run_rank)


def _add_report(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "report",
        help="re-render a saved report from its NetCDF Datasets",
        description="Re-render report.html and report.md in DIR from the Datasets saved there, "
        "without running the model.",
    )
    p.add_argument("dir", type=Path, metavar="DIR", help="a folder written by 'trapbudget rank'")
    add_common_options(p, out=False, seed=False)
    p.set_defaults(run=_run_report)


def _add_species(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "species",
        help="the atomic data table with sources",
        description="Atomic data of every species the models know, with the source of each value.",
    )
    add_common_options(p, out=False, seed=False)
    p.set_defaults(run=_run_species)


def _add_demo(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "demo",
        help="write the invented demo lab's scenarios and run 'rank' on the Rb-87 one",
        description="Write the demo scenario files (an invented lab and apparatus) into a folder, "
        f"overwriting files of the same name, and run 'rank' on {DEMO_SCENARIO}.",
    )
    add_samples_option(p)
    add_max_samples_option(p)
    add_common_options(p)
    p.set_defaults(run=_run_demo)


def _add_calibrate(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "calibrate",
        help="fit model constants to measurements; write a calibrated scenario",
        description="Fit the scenario's free model constants ([calibration] free, or --free) "
        "to measurement files (CSV with units in the header: steady-state rows, loading "
        "curves, time of flight) and write a report and the calibrated scenario.",
    )
    p.add_argument("scenario", type=Path, help="scenario TOML file")
    p.add_argument("data", type=Path, nargs="+", metavar="DATA", help="measurement CSV files")
    p.add_argument("--free", default=None, metavar="A,B", help="constants to fit, comma-separated")
    p.add_argument("--robust", action="store_true", help="soft-L1 loss (outlier-tolerant)")
    p.add_argument("--two-body", action="store_true", help="fit loading curves with two-body loss")
    add_common_options(p)
    p.set_defaults(run=_run_calibrate)


def _add_diagnose(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "diagnose",
        help="attribute day-to-day atom-number changes in a log to the monitored channels",
        description="Predict the atom number for each log entry with the (calibrated) model, "
        "split each day's change against a reference period over the monitored channels, "
        "and flag days the channels do not explain.",
    )
    p.add_argument("scenario", type=Path, help="(calibrated) scenario TOML file")
    p.add_argument("log", type=Path, help="monitoring log CSV (timestamp + channels)")
    p.add_argument(
        "--mapping",
        type=Path,
        default=None,
        metavar="FILE",
        help="TOML file with the [diagnosis] column-to-input mapping",
    )
    p.add_argument(
        "--reference",
        default="first-day",
        metavar="DAY",
        help="reference period: 'first-day' (default), YYYY-MM-DD or START:END",
    )
    p.add_argument(
        "--false-alarm-rate",
        type=float,
        default=0.01,
        metavar="A",
        help="probability per day of flagging a day with nothing unmonitored (default 0.01)",
    )
    add_common_options(p, seed=False)
    p.set_defaults(run=_run_diagnose)


def _add_spec(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "spec",
        help="tolerance allocation: the cheapest tolerances that meet every requirement",
        description="Allocate tolerances to the inputs with a cost table so that every "
        "requirement is met at least cost (linear pass, then Monte Carlo verification with "
        "common random numbers) and write a spec sheet and report. Exit 1 if infeasible.",
    )
    p.add_argument("scenario", type=Path, help="scenario TOML file with requirements and costs")
    add_samples_option(p)
    p.add_argument(
        "--no-refine",
        dest="refine",
        action="store_false",
        help="verify the linear allocation by Monte Carlo without refining it",
    )
    add_common_options(p)
    p.set_defaults(run=_run_spec)


def _add_compare(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "compare",
        help="before/after comparison of two scenarios, or of a scenario's named upgrades",
        description="Compare BEFORE with AFTER, or (AFTER omitted) BEFORE with each of its "
        "[[upgrades]], on one shared Monte Carlo design (common random numbers): change in "
        "each output's distribution, variance removed, probability of meeting each "
        "requirement, cost, and the options ranked by improvement per unit cost.",
    )
    p.add_argument("before", type=Path, metavar="BEFORE", help="scenario TOML file")
    p.add_argument(
        "after", type=Path, nargs="?", metavar="AFTER", help="scenario TOML file after the change"
    )
    p.add_argument(
        "--upgrade",
        action="append",
        default=None,
        metavar="NAME",
        help="compare only this named upgrade (repeatable; default: all)",
    )
    p.add_argument(
        "--repetition-rate",
        type=_positive_rate,
        default=None,
        metavar="HZ",
        help="experimental runs per second, for expected failing runs per day",
    )
    p.add_argument("--cost", type=float, default=None, help="cost of the change (with AFTER)")
    add_samples_option(p)
    add_common_options(p)
    p.set_defaults(run=_run_compare)


def _positive_rate(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number; use e.g. 0.5") from None
    if not value > 0:
        raise argparse.ArgumentTypeError(f"{text!r} must be a positive rate in Hz")
    return value


#: Functions that each add one sub-parser; append yours to add a subcommand.
SUBCOMMANDS: list[Callable[[argparse._SubParsersAction], None]] = [
    _add_predict,
    _add_rank,
    _add_spec,
    _add_compare,
    _add_report,
    _add_species,
    _add_demo,
    _add_calibrate,
    _add_diagnose,
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
            names = ", ".join(sorted(parser._subparsers._group_actions[0].choices))  # type: ignore[union-attr]
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


# --------------------------------------------------------------------------- subcommands


def _run_predict(args: argparse.Namespace) -> int:
    from trapbudget.reports.results import prediction_json
    from trapbudget.reports.terminal import prediction_table
    from trapbudget.sensitivity.linear import linear_propagation

    scenario = load(args.scenario)
    linear = linear_propagation(
        scenario.model,
        scenario.inputs,
        nominal=scenario.nominal,
        correlation=scenario.correlation,
        outputs=list(scenario.outputs),
    )
    if args.json:
        emit_json(prediction_json(linear, title=scenario.title))
        return 0
    console = stdout_console(args)
    if console is not None:
        console.print(prediction_table(linear, title=scenario.title))
    return 0


def _run_rank(args: argparse.Namespace) -> int:
    if args.from_dir is not None:
        if args.scenario is not None:
            raise UsageError(f"{PROG} rank: give either SCENARIO or --from DIR, not both")
        return _rerender(args.from_dir, args)
    if args.scenario is None:
        raise UsageError(f"{PROG} rank: give a SCENARIO file (or --from DIR)")
    scenario = load(args.scenario)
    return _rank_and_report(scenario, args, stem=Path(args.scenario).stem)


def _rank_and_report(scenario: Any, args: argparse.Namespace, *, stem: str) -> int:
    from trapbudget.reports.render import write_report
    from trapbudget.reports.results import study_json
    from trapbudget.reports.terminal import budget_tables

    n = args.samples if args.samples is not None else scenario.settings.n_samples
    if args.max_samples is not None and args.max_samples < n:
        raise UsageError(
            f"{PROG}: --max-samples {args.max_samples} is below the sample size {n}; "
            f"give at least {n}"
        )
    out = report_dir(args, stem)
    with progress_reporter(args) as task:
        datasets, study = run_study(
            scenario,
            n_samples=args.samples,
            seed=args.seed,
            convergence=args.convergence,
            max_samples=args.max_samples,
            second_order=args.second_order,
            task=task,
        )
    result = study_json(datasets, study)
    written = write_report(
        out, datasets=datasets, study=study, result=result, scenario_file=scenario.source
    )
    if args.json:
        emit_json({**result, "report": str(written)})
        return 0
    console = stdout_console(args)
    if console is not None:
        for table in budget_tables(datasets["summary"], datasets["budget"]):
            console.print(table)
        console.print(f"Report: {written / 'report.html'}")
    else:
        print(f"Report: {written / 'report.html'}", file=sys.stderr)
    return 0


def run_study(
    scenario: Any,
    *,
    n_samples: int | None = None,
    seed: int | None = None,
    convergence: bool = True,
    max_samples: int | None = None,
    second_order: bool = False,
    task: Callable[[str], Callable[[int, int], None] | None] = lambda description: None,
) -> tuple[dict[str, Any], dict[str, Any]]:
    """Run the engine on a scenario: propagate, summarize, linear check, rank, requirements.

    Returns the result Datasets by name (``samples``, ``summary``, ``linear``,
    ``linear_check``, ``budget`` and, when the scenario has requirements,
    ``requirements``) and the study description the reports show.
    """
    import numpy as np

    from trapbudget.reports.study import describe_study
    from trapbudget.sensitivity.linear import compare_linear_monte_carlo, linear_propagation
    from trapbudget.sensitivity.propagation import propagate
    from trapbudget.sensitivity.ranking import rank
    from trapbudget.sensitivity.summary import summarize

    settings = scenario.settings
    seed = settings.seed if seed is None else seed
    if seed is None:  # draw one, and record it, so the study can be repeated
        seed = int(np.random.SeedSequence().entropy % 2**32)
    n = settings.n_samples if n_samples is None else n_samples
    outputs = list(scenario.outputs)
    # One seed, independent streams for the Monte Carlo and the Saltelli design.
    mc_seed, rank_seed = np.random.SeedSequence(seed).spawn(2)
    linear = linear_propagation(
        scenario.model,
        scenario.inputs,
        nominal=scenario.nominal,
        correlation=scenario.correlation,
        outputs=outputs,
    )
    samples = propagate(
        scenario.model,
        scenario.inputs,
        n_samples=n,
        method=settings.method,
        correlation=scenario.correlation,
        rng=np.random.default_rng(mc_seed),
        outputs=outputs,
        progress=task("Monte Carlo"),
        nominal=scenario.nominal,
        chunk_size=int(getattr(settings, "chunk_size", 65536)),
    )
    summary = summarize(samples, outputs=outputs, confidence_level=settings.confidence_level)
    check = compare_linear_monte_carlo(linear, summary)
    budget = rank(
        scenario.model,
        scenario.inputs,
        n_samples=n,
        outputs=outputs,
        second_order=second_order or bool(getattr(settings, "second_order", False)),
        correlation=scenario.correlation,
        nominal=scenario.nominal,
        rng=np.random.default_rng(rank_seed),
        confidence_level=settings.confidence_level,
        n_bootstrap=int(getattr(settings, "n_bootstrap", 200)),
        chunk_size=int(getattr(settings, "chunk_size", 65536)),
        groups=scenario.groups or None,
        convergence=convergence,
        max_samples=max_samples,
        progress=task("Sensitivity indices"),
    )
    datasets: dict[str, Any] = {
        "samples": samples,
        "summary": summary,
        "linear": linear,
        "linear_check": check,
        "budget": budget,
    }
    if scenario.requirements:
        from trapbudget.sensitivity.scenario.requirements import check_requirements

        datasets["requirements"] = check_requirements(samples, scenario.requirements)
    study = describe_study(scenario, seed=seed, n_samples=n, datasets=datasets)
    return datasets, study


def _rerender(folder: Path, args: argparse.Namespace) -> int:
    from trapbudget.reports.render import rerender_report
    from trapbudget.reports.results import study_json
    from trapbudget.reports.terminal import budget_tables

    datasets, study, written = rerender_report(folder)
    ranked = "summary" in datasets and "budget" in datasets
    if args.json:
        if ranked:
            result = study_json(datasets, study)
        else:  # a folder of another subcommand: its saved result
            saved = Path(folder) / "result.json"
            result = json.loads(saved.read_text(encoding="utf-8")) if saved.is_file() else {}
        emit_json({**result, "report": str(written)})
        return 0
    console = stdout_console(args)
    if console is not None:
        if ranked:
            for table in budget_tables(datasets["summary"], datasets["budget"]):
                console.print(table)
        console.print(f"Report: {written / 'report.html'}")
    return 0


def _run_report(args: argparse.Namespace) -> int:
    return _rerender(args.dir, args)


def _run_species(args: argparse.Namespace) -> int:
    from trapbudget.models.species import species_table

    rows = species_table()
    if args.json:
        emit_json(rows)
        return 0
    console = stdout_console(args)
    if console is not None:
        from trapbudget.reports.terminal import species_rich_table

        console.print(species_rich_table(rows))
    return 0


def _demo_files() -> list[Any]:
    package = resources.files("trapbudget.examples")
    return sorted(
        (
            f
            for f in package.iterdir()
            if f.is_file() and f.name.endswith((".toml", ".csv", ".md"))
        ),
        key=lambda f: f.name,
    )


def _run_demo(args: argparse.Namespace) -> int:
    from trapbudget.sensitivity.io import atomic_write_bytes

    folder = Path(args.out) if args.out is not None else DEFAULT_DEMO_DIR
    if folder.exists() and not folder.is_dir():
        raise UsageError(f"{PROG} demo: --out {folder} is a file; give a folder")
    for item in _demo_files():
        atomic_write_bytes(folder / item.name, item.read_bytes())
    if not args.quiet and not args.json:
        print(f"Demo files (invented lab) written to {folder}/", file=sys.stderr)
    scenario = load(folder / DEMO_SCENARIO)
    args.convergence = True
    args.second_order = False
    args.out = folder / f"report-{Path(DEMO_SCENARIO).stem}"
    return _rank_and_report(scenario, args, stem=Path(DEMO_SCENARIO).stem)


def _run_calibrate(args: argparse.Namespace) -> int:
    from trapbudget.reports.calibration import calibration_json, calibration_rich_table
    from trapbudget.reports.render import write_report
    from trapbudget.reports.study import describe_study
    from trapbudget.sensitivity.io import atomic_write_text
    from trapbudget.sensitivity.lab.calibrate import calibrate

    scenario = load(args.scenario)
    free = [n.strip() for n in args.free.split(",") if n.strip()] if args.free else None
    cal = calibrate(
        scenario, args.data, free=free, robust=args.robust, two_body=args.two_body, rng=args.seed
    )
    ds = cal.to_dataset()
    study = describe_study(scenario, seed=args.seed, n_samples=0, datasets={})
    result = calibration_json(ds)
    stem = Path(args.scenario).stem
    written = write_report(
        report_dir(args, f"{stem}-calibration"),
        datasets={"calibration": ds},
        study=study,
        result=result,
        scenario_file=scenario.source,
    )
    calibrated = atomic_write_text(written / f"{stem}-calibrated.toml", cal.scenario_toml())
    if args.json:
        emit_json({**result, "report": str(written), "calibrated_scenario": str(calibrated)})
        return 0
    console = stdout_console(args)
    if console is not None:
        console.print(calibration_rich_table(ds))
        console.print(f"Calibrated scenario: {calibrated}")
        console.print(f"Report: {written / 'report.html'}")
    return 0


def _run_diagnose(args: argparse.Namespace) -> int:
    from trapbudget.reports.diagnosis import diagnosis_json, diagnosis_rich_tables
    from trapbudget.reports.render import write_report
    from trapbudget.reports.study import describe_study
    from trapbudget.sensitivity.lab.diagnose import diagnose

    scenario = load(args.scenario)
    reference = args.reference.split(":") if ":" in args.reference else args.reference
    diag = diagnose(
        scenario,
        args.log,
        reference=reference,
        mapping=args.mapping,
        false_alarm_rate=args.false_alarm_rate,
    )
    ds = diag.to_dataset()
    study = describe_study(scenario, seed=None, n_samples=0, datasets={})
    result = diagnosis_json(ds)
    written = write_report(
        report_dir(args, f"{Path(args.log).stem}-diagnosis"),
        datasets={"diagnosis": ds},
        study=study,
        result=result,
        scenario_file=scenario.source,
    )
    if args.json:
        emit_json({**result, "report": str(written)})
        return 0
    console = stdout_console(args)
    if console is not None:
        for item in diagnosis_rich_tables(ds):
            console.print(item)
        console.print(f"Report: {written / 'report.html'}")
    return 0


# --------------------------------------------------------------------------- spec and compare


def _run_spec(args: argparse.Namespace) -> int:
    from trapbudget.reports.render import write_report
    from trapbudget.reports.spec import allocation_json, allocation_rich_table
    from trapbudget.reports.study import describe_study
    from trapbudget.sensitivity.decisions.allocate import allocate
    from trapbudget.sensitivity.decisions.allocation import InfeasibleError

    scenario = load(args.scenario)
    seed = scenario.settings.seed if args.seed is None else args.seed
    n = scenario.settings.n_samples if args.samples is None else args.samples
    with progress_reporter(args) as task:
        allocation = allocate(
            scenario, n_samples=n, rng=seed, refine=args.refine, progress=task("Allocation")
        )
    ds = allocation.to_dataset()
    datasets = {"allocation": ds}
    study = describe_study(scenario, seed=seed, n_samples=n, datasets=datasets)
    result = allocation_json(ds)
    out = report_dir(args, f"{Path(args.scenario).stem}-spec")
    written = write_report(
        out, datasets=datasets, study=study, result=result, scenario_file=scenario.source
    )
    if args.json:
        emit_json({**result, "report": str(written)})
    else:
        console = stdout_console(args)
        if console is not None:
            console.print(allocation_rich_table(ds))
            console.print(f"Report: {written / 'report.html'}")
    if not allocation.feasible:
        raise InfeasibleError(f"{allocation.reason} (report: {written})", path=scenario.source)
    return 0


def _select_upgrades(scenario: Any, names: Sequence[str] | None) -> Any:
    if not names:
        return None
    known = {u.name: u for u in scenario.upgrades}
    chosen = []
    for name in names:
        if name not in known:
            import difflib

            close = difflib.get_close_matches(name, list(known), n=1)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            listed = ", ".join(map(repr, known)) or "none"
            raise ScenarioError(
                f"no upgrade named {name!r}{hint} (known: {listed})",
                path=scenario.source,
                key="upgrades",
            )
        chosen.append(known[name])
    return chosen


def _run_compare(args: argparse.Namespace) -> int:
    from trapbudget.reports.compare import comparison_json, comparison_rich_tables
    from trapbudget.reports.render import write_report
    from trapbudget.reports.study import describe_study
    from trapbudget.sensitivity.decisions.compare import compare, compare_upgrades

    before = load(args.before)
    seed = before.settings.seed if args.seed is None else args.seed
    n = before.settings.n_samples if args.samples is None else args.samples
    with progress_reporter(args) as task:
        if args.after is not None:
            if args.upgrade:
                raise UsageError(f"{PROG} compare: give AFTER or --upgrade, not both")
            after = load(args.after)
            ds = compare(
                before,
                after,
                n_samples=n,
                rng=seed,
                repetition_rate=args.repetition_rate,
                cost=args.cost,
                progress=task("Comparison"),
            )
        else:
            ds = compare_upgrades(
                before,
                _select_upgrades(before, args.upgrade),
                n_samples=n,
                rng=seed,
                repetition_rate=args.repetition_rate,
                progress=task("Upgrades"),
            )
    datasets = {"comparison": ds}
    study = describe_study(before, seed=seed, n_samples=n, datasets=datasets)
    result = comparison_json(ds)
    out = report_dir(args, f"{Path(args.before).stem}-compare")
    written = write_report(
        out, datasets=datasets, study=study, result=result, scenario_file=before.source
    )
    if args.json:
        emit_json({**result, "report": str(written)})
        return 0
    console = stdout_console(args)
    if console is not None:
        for table in comparison_rich_tables(ds):
            console.print(table)
        console.print(f"Report: {written / 'report.html'}")
    return 0


if __name__ == "__main__":  # pragma: no cover
    raise SystemExit(main())

"""``trapbudget scan``: one or two settings swept, the other tolerances propagated."""

from __future__ import annotations

import argparse
import math
from pathlib import Path
from typing import Any

from trapbudget.cli.options import PROG, add_common_options, add_workers_options
from trapbudget.cli.output import (
    emit_json,
    load,
    progress_reporter,
    report_dir,
    stdout_console,
    where_to_run,
)
from trapbudget.sensitivity.errors import ScenarioError, UsageError

__all__ = ["add_scan"]

#: Largest number of model runs a scan may take from the command line (about a minute).
MAX_EVALUATIONS = 50_000_000


def _points(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not an integer; use e.g. 41") from None
    if not 2 <= value <= 1001:
        raise argparse.ArgumentTypeError(f"{text!r} must lie between 2 and 1001, e.g. 41")
    return value


def _samples(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not an integer; use e.g. 1024") from None
    if not 2 <= value <= 1 << 20:
        raise argparse.ArgumentTypeError(f"{text!r} must lie between 2 and 1048576, e.g. 1024")
    return value


def add_scan(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "scan",
        help="sweep one or two settings with the other tolerances propagated (curves, maps)",
        description="Sweep one setting (a curve) or two (a map) over a grid, default the "
        "nominal plus and minus three standard uncertainties, with the scenario's other "
        "uncertainties propagated on common random numbers at every point; inputs correlated "
        "with a swept one are drawn conditioned on its value. Prints the median and the "
        "coverage band per point and writes a report with the curves.",
    )
    p.add_argument("scenario", type=Path, help="scenario TOML file")
    p.add_argument("input", help="setting to sweep (see 'trapbudget inputs SCENARIO')")
    p.add_argument("input2", nargs="?", default=None, help="a second setting (a map)")
    p.add_argument(
        "--range",
        dest="range1",
        nargs=2,
        metavar=("LOW", "HIGH"),
        default=None,
        help="range of INPUT with units, e.g. --range -30MHz -3MHz (default: nominal +- 3 u)",
    )
    p.add_argument(
        "--range2",
        nargs=2,
        metavar=("LOW", "HIGH"),
        default=None,
        help="range of INPUT2 with units",
    )
    p.add_argument(
        "--points",
        type=_points,
        default=None,
        metavar="N",
        help="grid points per swept setting (default 41 for a curve, 21 x 21 for a map)",
    )
    p.add_argument(
        "--samples",
        type=_samples,
        default=None,
        metavar="N",
        help="draws of the other inputs per grid point (default 1024; powers of 2 use a "
        "scrambled Sobol' design)",
    )
    p.add_argument(
        "--output",
        dest="outputs",
        action="append",
        default=None,
        metavar="NAME",
        help="output to show (repeat for more; default: the scenario's outputs)",
    )
    add_common_options(p)
    add_workers_options(p)
    p.set_defaults(run=_run_scan)


def _range(scenario: Any, name: str, text: list[str] | None, option: str) -> Any:
    if text is None:
        return None
    from trapbudget.sensitivity.scenario.units import parse_quantity

    spec = scenario.model.inputs.get(name)
    if spec is None:
        return None  # the scan names the unknown input itself
    try:
        low, high = (parse_quantity(t, unit=spec.unit, key=f"{option} of {name}") for t in text)
    except ScenarioError as exc:
        raise UsageError(f"{PROG} scan: {option}: {exc.message}") from None
    if not low < high:
        raise UsageError(
            f"{PROG} scan: {option} {text[0]} {text[1]}: LOW must be below HIGH; "
            f"give e.g. {option} {text[1]} {text[0]}"
        )
    lo, hi = float(getattr(spec, "low", -math.inf)), float(getattr(spec, "high", math.inf))
    if low < lo or high > hi:
        raise UsageError(
            f"{PROG} scan: {option} {text[0]} {text[1]} leaves the valid range of {name}, "
            f"[{lo:.4g}, {hi:.4g}] {spec.unit}; narrow it"
        )
    return (low, high)


def _run_scan(args: argparse.Namespace) -> int:
    scenario = load(args.scenario)
    from trapbudget.reports.render import write_report
    from trapbudget.reports.scan import scan_json, scan_rich_tables
    from trapbudget.sensitivity.scanning import DEFAULT_POINTS, scan
    from trapbudget.sensitivity.study_record import describe_study

    names = [args.input] + ([args.input2] if args.input2 else [])
    if len(set(names)) < len(names):
        raise UsageError(f"{PROG} scan: {args.input} is given twice; give two different settings")
    if args.range2 is not None and args.input2 is None:
        raise UsageError(f"{PROG} scan: --range2 needs a second setting INPUT2")
    ranges = {}
    given = (args.range1, args.range2)[: len(names)]
    for name, text, option in zip(
        names, given, ("--range", "--range2")[: len(names)], strict=True
    ):
        bounds = _range(scenario, name, text, option)
        if bounds is not None:
            ranges[name] = bounds
    points = args.points if args.points is not None else DEFAULT_POINTS[len(names)]
    n = args.samples if args.samples is not None else 1024
    runs = points ** len(names) * (n + 1)
    if runs > MAX_EVALUATIONS:
        raise UsageError(
            f"{PROG} scan: {points}^{len(names)} points x {n} samples is {runs:.3g} model runs, "
            f"above {MAX_EVALUATIONS:.0e}; lower --points or --samples"
        )
    seed = scenario.settings.seed if args.seed is None else args.seed
    out = report_dir(args, f"{Path(args.scenario).stem}-scan-{'-'.join(names)}")
    with where_to_run(args), progress_reporter(args) as task:
        ds = scan(
            scenario,
            names,
            ranges=ranges,
            n_points=points,
            n_samples=n,
            outputs=args.outputs,
            confidence_level=scenario.settings.confidence_level,
            rng=seed,
            progress=task("Scan"),
        )
    datasets = {"scan": ds}
    study = describe_study(scenario, seed=seed, n_samples=n, datasets=datasets)
    result = scan_json(ds)
    written = write_report(
        out, datasets=datasets, study=study, result=result, scenario_file=scenario.source
    )
    if args.json:
        emit_json({**result, "report": str(written)})
        return 0
    console = stdout_console(args)
    if console is not None:
        console.print(result["summary"])
        for table in scan_rich_tables(ds):
            console.print(table)
        console.print(f"Report: {written / 'report.html'}")
    return 0

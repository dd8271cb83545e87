"""The subcommands that decide: ``spec`` (tolerance allocation) and ``compare`` (upgrades)."""

from __future__ import annotations

import argparse
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from trapbudget.cli.options import (
    PROG,
    add_common_options,
    add_samples_option,
    add_workers_options,
    non_negative_amount,
    positive_rate,
)
from trapbudget.cli.output import (
    check_samples_fit,
    emit_json,
    load,
    progress_reporter,
    report_dir,
    stdout_console,
    where_to_run,
)
from trapbudget.sensitivity.errors import ScenarioError, UsageError

__all__ = ["add_compare", "add_spec"]


def add_spec(subparsers: argparse._SubParsersAction) -> None:
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
    add_workers_options(p)
    p.set_defaults(run=_run_spec)


def add_compare(subparsers: argparse._SubParsersAction) -> None:
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
        type=positive_rate,
        default=None,
        metavar="HZ",
        help="experimental runs per second, for expected failing runs per day",
    )
    p.add_argument(
        "--cost",
        type=non_negative_amount,
        default=None,
        help="cost of the change (with AFTER)",
    )
    add_samples_option(p)
    add_common_options(p)
    add_workers_options(p)
    p.set_defaults(run=_run_compare)


# --------------------------------------------------------------------------- spec and compare


def _run_spec(args: argparse.Namespace) -> int:
    scenario = load(args.scenario)
    from trapbudget.reports.render import write_report
    from trapbudget.reports.spec import (
        SPEC_SHEET_FILE,
        allocation_json,
        allocation_rich_table,
        spec_sheet_csv,
    )
    from trapbudget.sensitivity.decisions.allocate import allocate
    from trapbudget.sensitivity.decisions.allocation import InfeasibleError
    from trapbudget.sensitivity.study_record import describe_study

    out = report_dir(args, f"{Path(args.scenario).stem}-spec")
    check_samples_fit(args, scenario, kind="propagate", copies=4)
    seed = scenario.settings.seed if args.seed is None else args.seed
    n = scenario.settings.n_samples if args.samples is None else args.samples
    with where_to_run(args), progress_reporter(args) as task:
        allocation = allocate(
            scenario, n_samples=n, rng=seed, refine=args.refine, progress=task("Allocation")
        )
    ds = allocation.to_dataset()
    datasets = {"allocation": ds}
    study = describe_study(scenario, seed=seed, n_samples=n, datasets=datasets)
    result = allocation_json(ds)
    written = write_report(
        out,
        datasets=datasets,
        study=study,
        result=result,
        scenario_file=scenario.source,
        extra_files={SPEC_SHEET_FILE: spec_sheet_csv(ds)},
    )
    if args.json:
        emit_json({**result, "report": str(written), "spec_sheet": str(written / SPEC_SHEET_FILE)})
    else:
        console = stdout_console(args)
        if console is not None:
            console.print(allocation_rich_table(ds))
            console.print(f"Report: {written / 'report.html'}")
            console.print(f"Spec sheet: {written / SPEC_SHEET_FILE}")
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
    if args.after is not None and args.upgrade:
        raise UsageError(f"{PROG} compare: give AFTER or --upgrade, not both")
    before = load(args.before)
    from trapbudget.reports.compare import comparison_json, comparison_rich_tables
    from trapbudget.reports.render import write_report
    from trapbudget.sensitivity.decisions.compare import compare, compare_upgrades
    from trapbudget.sensitivity.study_record import describe_study

    after = load(args.after) if args.after is not None else None
    upgrades = None if after is not None else _select_upgrades(before, args.upgrade)
    out = report_dir(args, f"{Path(args.before).stem}-compare")
    copies = 2 if after is not None else 1 + len(upgrades or before.upgrades)
    check_samples_fit(args, before, kind="propagate", copies=copies)
    seed = before.settings.seed if args.seed is None else args.seed
    n = before.settings.n_samples if args.samples is None else args.samples
    with where_to_run(args), progress_reporter(args) as task:
        if after is not None:
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
                upgrades,
                n_samples=n,
                rng=seed,
                repetition_rate=args.repetition_rate,
                progress=task("Upgrades"),
            )
    datasets = {"comparison": ds}
    study = describe_study(before, seed=seed, n_samples=n, datasets=datasets)
    result = comparison_json(ds)
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

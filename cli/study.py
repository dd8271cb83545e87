"""The subcommands of a study: ``predict``, ``rank``, ``report``, ``species`` and ``demo``."""

from __future__ import annotations

import argparse
import json
import sys
from importlib import resources
from pathlib import Path
from typing import Any

from trapbudget.cli.options import (
    DEFAULT_DEMO_DIR,
    DEMO_SCENARIO,
    PROG,
    add_common_options,
    add_max_samples_option,
    add_samples_option,
    add_workers_options,
)
from trapbudget.cli.output import (
    check_samples_fit,
    emit_json,
    load,
    progress_reporter,
    report_dir,
    stage_progress,
    stdout_console,
    where_to_run,
)
from trapbudget.sensitivity.errors import ScenarioError, UsageError

__all__ = ["add_demo", "add_inputs", "add_predict", "add_rank", "add_report", "add_species"]


def add_predict(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "predict",
        help="nominal outputs with first-order (linear, GUM) uncertainties",
        description="Nominal outputs of the scenario's model with first-order (GUM, JCGM 100) "
        "standard uncertainties and the largest contributions. Takes seconds.",
    )
    p.add_argument("scenario", type=Path, help="scenario TOML file")
    add_common_options(p, out=False, seed=False)
    p.set_defaults(run=_run_predict)


def add_rank(subparsers: argparse._SubParsersAction) -> None:
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
    add_workers_options(p)
    p.set_defaults(run=_run_rank)


def add_report(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "report",
        help="re-render a saved report from its NetCDF Datasets",
        description="Re-render report.html and report.md in DIR from the Datasets saved there, "
        "without running the model.",
    )
    p.add_argument("dir", type=Path, metavar="DIR", help="a folder written by 'trapbudget rank'")
    add_common_options(p, out=False, seed=False)
    p.set_defaults(run=_run_report)


def add_species(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "species",
        help="the atomic data table with sources",
        description="Atomic data of every species the models know, with the source of each value. "
        "Without NAME: one rounded row per species; with NAME: that species' values and sources.",
    )
    p.add_argument("name", nargs="?", help="one species (e.g. Rb87, Cs133) with its sources")
    add_common_options(p, out=False, seed=False)
    p.set_defaults(run=_run_species)


def add_inputs(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "inputs",
        help="list a model's inputs (unit, default, range, constant or setting) and outputs",
        description="List every input of a scenario's model (its value in the scenario, or "
        "the model default), with unit, valid range, whether it is a setting of the "
        "apparatus or a model constant calibration may fit, and its meaning; then the "
        "outputs. Give a scenario file or a model name (e.g. VaporCellMOT).",
    )
    p.add_argument("what", metavar="SCENARIO_OR_MODEL", help="scenario TOML file or model name")
    p.add_argument("--species", default="Rb87", help="species for a model name (default Rb87)")
    p.add_argument(
        "--option",
        action="append",
        default=[],
        metavar="KEY=VALUE",
        help="model option for a model name, e.g. cooling=doppler (repeatable)",
    )
    add_common_options(p, out=False, seed=False)
    p.set_defaults(run=_run_inputs)


def add_demo(subparsers: argparse._SubParsersAction) -> None:
    p = subparsers.add_parser(
        "demo",
        help="write the invented demo lab's scenarios and run 'rank' on the Rb-87 one",
        description="Write the demo scenario files (an invented lab and apparatus) into a folder "
        f"and run 'rank' on {DEMO_SCENARIO}. A file there that the demo did not write, or "
        "that was edited since, is kept unless --force is given.",
    )
    p.add_argument(
        "--force", action="store_true", help="overwrite demo files that were edited or not ours"
    )
    add_samples_option(p)
    add_max_samples_option(p)
    add_common_options(p)
    add_workers_options(p)
    p.set_defaults(run=_run_demo)


# --------------------------------------------------------------------------- subcommands


def _warn_if_nominal_invalid(scenario: Any) -> None:
    """One warning line per reason when the nominal point lies outside the model's validity."""
    import warnings

    from trapbudget.sensitivity.propagation import ModelValidityWarning
    from trapbudget.sensitivity.protocol import nominal_validity

    for flag in nominal_validity(scenario.model):
        warnings.warn(
            f"the nominal point is outside the model's validity: {flag.name}: {flag.__doc__}",
            ModelValidityWarning,
            stacklevel=2,
        )


def _run_predict(args: argparse.Namespace) -> int:
    scenario = load(args.scenario)
    from trapbudget.reports.results import prediction_json
    from trapbudget.reports.terminal import prediction_table
    from trapbudget.sensitivity.linear import linear_propagation

    _warn_if_nominal_invalid(scenario)
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
    from trapbudget.reports.terminal import budget_tables, print_bottom_line
    from trapbudget.sensitivity.study import run_study

    n = args.samples if args.samples is not None else scenario.settings.n_samples
    if args.max_samples is not None and args.max_samples < n:
        raise UsageError(
            f"{PROG}: --max-samples {args.max_samples} is below the sample size {n}; "
            f"give at least {n}"
        )
    if not scenario.inputs:
        raise ScenarioError(
            "no input has a tolerance, so there is nothing to rank; give at least one "
            "[inputs.<name>] a tolerance (or use 'trapbudget predict')",
            path=scenario.source,
            key="inputs",
        )
    out = report_dir(args, stem)
    second = bool(args.second_order or scenario.settings.second_order)
    check_samples_fit(args, scenario, kind="rank", second_order=second)
    with where_to_run(args), progress_reporter(args) as task:
        study = run_study(
            scenario,
            n_samples=args.samples,
            rng=args.seed,
            convergence=args.convergence,
            max_samples=args.max_samples,
            second_order=args.second_order or None,
            progress=stage_progress(task),
        )
    datasets, record = dict(study.datasets), dict(study.record)
    result = study_json(datasets, record)
    written = write_report(
        out, datasets=datasets, study=record, result=result, scenario_file=scenario.source
    )
    if args.json:
        emit_json({**result, "report": str(written)})
        return 0
    console = stdout_console(args)
    if console is not None:
        print_bottom_line(console, result["conclusion"])
        for table in budget_tables(datasets["summary"], datasets["budget"]):
            console.print(table)
        console.print(f"Report: {written / 'report.html'}")
    else:
        print(f"Report: {written / 'report.html'}", file=sys.stderr)
    return 0


def _rerender(folder: Path, args: argparse.Namespace) -> int:
    from trapbudget.reports.conclusion import conclusion_text
    from trapbudget.reports.render import rerender_report
    from trapbudget.reports.results import study_json
    from trapbudget.reports.terminal import budget_tables, print_bottom_line

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
            print_bottom_line(console, conclusion_text(datasets, study))
            for table in budget_tables(datasets["summary"], datasets["budget"]):
                console.print(table)
        console.print(f"Report: {written / 'report.html'}")
    return 0


def _run_report(args: argparse.Namespace) -> int:
    return _rerender(args.dir, args)


def _run_inputs(args: argparse.Namespace) -> int:
    from trapbudget.sensitivity.scenario.registry import MODELS, _make_model

    path = Path(args.what)
    if path.suffix == ".toml" or path.exists():
        scenario = load(path)
        model, values, label = scenario.model, dict(scenario.nominal), scenario.title
        uncertain = set(scenario.inputs)
    else:
        if args.what not in MODELS:
            import difflib

            close = difflib.get_close_matches(args.what, list(MODELS), n=1)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            raise UsageError(
                f"{PROG} inputs: {args.what!r} is neither a scenario file nor a model{hint} "
                f"(models: {', '.join(MODELS)})"
            )
        options = {}
        for item in args.option:
            key, sep, value = item.partition("=")
            if not sep or not key:
                raise UsageError(f"{PROG} inputs: --option {item!r} must be KEY=VALUE")
            options[key.strip()] = value.strip()
        model = _make_model(args.what, args.species, options, path=None)
        values, label, uncertain = {}, f"{args.what} ({args.species})", set()
    rows = []
    for name, spec in model.inputs.items():
        value = values.get(name, spec.default)
        rows.append(
            {
                "name": name,
                "unit": spec.unit,
                "value": float(value),
                "default": float(spec.default),
                "low": float(spec.low),
                "high": float(spec.high),
                "kind": "constant" if spec.constant else "setting",
                "set_by": "uncertain"
                if name in uncertain
                else "scenario"
                if name in values
                else "default",
                "meaning": spec.description,
            }
        )
    outputs = [
        {"name": name, "unit": spec.unit, "meaning": spec.description}
        for name, spec in model.outputs.items()
    ]
    if args.json:
        emit_json({"title": label, "inputs": rows, "outputs": outputs})
        return 0
    console = stdout_console(args)
    if console is not None:
        from trapbudget.reports.terminal import inputs_rich_tables

        for table in inputs_rich_tables(rows, outputs, title=label):
            console.print(table)
    return 0


def _run_species(args: argparse.Namespace) -> int:
    from trapbudget.models.catalog import species_table

    rows = species_table()
    if args.name is not None:
        from trapbudget.models.catalog import species as lookup

        try:
            wanted = lookup(args.name).name
        except (KeyError, ValueError) as error:
            raise UsageError(f"{PROG} species: {error}") from None
        rows = [row for row in rows if row["name"] == wanted]
    if args.json:
        emit_json(rows if args.name is None else rows[0])
        return 0
    console = stdout_console(args)
    if console is not None:
        from trapbudget.reports.terminal import species_detail, species_rich_table

        if args.name is None:
            console.print(species_rich_table(rows))
            console.print(f"Values with their sources: {PROG} species NAME (or --json).")
        else:
            species_detail(console, rows[0])
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


#: Record of the files the demo wrote into a folder (name -> SHA-256), so that it never
#: overwrites a file it did not write, or one edited since, without --force.
DEMO_MANIFEST = ".trapbudget-demo.json"


def _run_demo(args: argparse.Namespace) -> int:
    import hashlib

    from trapbudget.sensitivity.io import atomic_write_bytes, atomic_write_json

    folder = Path(args.out) if args.out is not None else DEFAULT_DEMO_DIR
    if folder.exists() and not folder.is_dir():
        raise UsageError(f"{PROG} demo: --out {folder} is a file; give a folder")
    manifest_path = folder / DEMO_MANIFEST
    try:
        written = json.loads(manifest_path.read_text(encoding="utf-8"))
        written = written if isinstance(written, dict) else {}
    except (OSError, ValueError):
        written = {}
    files = {item.name: item.read_bytes() for item in _demo_files()}
    for name, data in files.items():
        target = folder / name
        if args.force or not target.exists():
            continue
        current = hashlib.sha256(target.read_bytes()).hexdigest()
        if current not in (written.get(name), hashlib.sha256(data).hexdigest()):
            raise UsageError(
                f"{PROG} demo: {target} exists and is not the demo's own copy (edited, or "
                "not written by the demo); keep it by giving --out another folder, or "
                "overwrite it with --force"
            )
    for name, data in files.items():
        atomic_write_bytes(folder / name, data)
    atomic_write_json(
        manifest_path, {name: hashlib.sha256(data).hexdigest() for name, data in files.items()}
    )
    if not args.quiet and not args.json:
        print(f"Demo files (invented lab) written to {folder}/", file=sys.stderr)
    scenario = load(folder / DEMO_SCENARIO)
    args.convergence = True
    args.second_order = False
    args.out = folder / f"report-{Path(DEMO_SCENARIO).stem}"
    return _rank_and_report(scenario, args, stem=Path(DEMO_SCENARIO).stem)

"""The subcommands that read a lab's data: ``calibrate`` and ``diagnose``."""

from __future__ import annotations

import argparse
from pathlib import Path
from typing import Any

from trapbudget.cli.options import (
    add_common_options,
    add_workers_options,
    false_alarm_rate,
    reference_period,
)
from trapbudget.cli.output import emit_json, load, report_dir, stdout_console, where_to_run
from trapbudget.sensitivity.errors import UsageError

__all__ = []


def add_calibrate(subparsers: argparse._SubParsersAction) -> None:
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
    p.add_argument(
        "--allow-settings",
        action="store_true",
        help="allow --free to name settings of the apparatus too (not only model constants)",
    )
    p.add_argument("--robust", action="store_true", help="soft-L1 loss (outlier-tolerant)")
    p.add_argument("--two-body", action="store_true", help="fit loading curves with two-body loss")
    add_common_options(p)
    p.set_defaults(run=_run_calibrate)


def add_diagnose(subparsers: argparse._SubParsersAction) -> None:
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
        type=reference_period,
        default="first-day",
        metavar="DAY",
        help="reference period: 'first-day' (default), YYYY-MM-DD or START:END",
    )
    p.add_argument(
        "--false-alarm-rate",
        type=false_alarm_rate,
        default=0.01,
        metavar="A",
        help="probability per day of flagging a day with nothing unmonitored (default 0.01)",
    )
    add_common_options(p, seed=False)
    add_workers_options(p)
    p.set_defaults(run=_run_diagnose)


def _check_free(scenario: Any, free: list[str] | None) -> None:
    """--free names, checked as an option (the scenario's own list is checked as the file)."""
    import difflib

    if free is None:
        if not (scenario.calibration or {}).get("free"):
            raise UsageError(
                "calibrate: no constants to fit; give --free A,B (see 'trapbudget inputs "
                "SCENARIO' for the constants) or list them in [calibration] free = [...]"
            )
        return
    if not free:
        raise UsageError("calibrate: --free is empty; give constants such as loading_prefactor")
    for name in free:
        if name not in scenario.model.inputs:
            close = difflib.get_close_matches(name, list(scenario.model.inputs), n=1)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            raise UsageError(f"calibrate: --free {name!r} is not a model input{hint}")


def _run_calibrate(args: argparse.Namespace) -> int:
    scenario = load(args.scenario)
    from trapbudget.reports.calibration import calibration_json, calibration_rich_table
    from trapbudget.reports.render import write_report
    from trapbudget.sensitivity.io import atomic_write_text
    from trapbudget.sensitivity.lab.calibrate import calibrate
    from trapbudget.sensitivity.study_record import describe_study

    stem = Path(args.scenario).stem
    out = report_dir(args, f"{stem}-calibration")
    free = [n.strip() for n in args.free.split(",") if n.strip()] if args.free else None
    _check_free(scenario, free)
    cal = calibrate(
        scenario,
        args.data,
        free=free,
        robust=args.robust,
        two_body=args.two_body,
        rng=args.seed,
        allow_settings=args.allow_settings,
    )
    ds = cal.to_dataset()
    study = describe_study(scenario, seed=args.seed, n_samples=0, datasets={})
    result = calibration_json(ds)
    written = write_report(
        out,
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
    scenario = load(args.scenario)
    from trapbudget.reports.diagnosis import diagnosis_json, diagnosis_rich_tables
    from trapbudget.reports.render import write_report
    from trapbudget.sensitivity.lab.diagnose import diagnose
    from trapbudget.sensitivity.study_record import describe_study

    out = report_dir(args, f"{Path(args.log).stem}-diagnosis")
    reference = args.reference.split(":") if ":" in args.reference else args.reference
    with where_to_run(args):
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
        out,
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

"""The report's sections on checks and limits: linear check, convergence, requirements,
validity, assumptions and cautions.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np
import xarray as xr

from trapbudget.reports import figures
from trapbudget.reports.blocks import Figure, Section, Table, Text
from trapbudget.reports.cautions import safety_cautions
from trapbudget.reports.conclusion import bottom_line_section
from trapbudget.reports.formatting import (
    format_number,
    format_percent,
    main_index,
)
from trapbudget.reports.sections import (
    Datasets,
    _flt,
    _outputs,
    _q,
    _unit,
    budget_section,
    inputs_section,
    interactions_section,
    outputs_section,
    scatter_section,
    study_section,
)

__all__ = [
    "CLOSING_BUILDERS",
    "CORE_BUILDERS",
    "SAFETY_CAUTIONS",
    "assumptions_section",
    "convergence_section",
    "linear_section",
    "requirements_section",
    "safety_section",
    "validity_section",
]

#: The cautions of a report on a rubidium vapor cell (the others: ``safety_cautions``).
SAFETY_CAUTIONS: list[str] = safety_cautions("Rb87", "VaporCellMOT", {})


# --------------------------------------------------------------------------- checks


def _cell(value: Any, unit: str = "") -> str:
    arr = np.asarray(value)
    if arr.dtype == bool:
        return "yes" if bool(arr) else "no"
    if arr.dtype.kind in "iu":
        return str(int(arr))
    if arr.dtype.kind == "f":
        return _q(arr, unit) if unit else format_number(float(arr))
    return str(arr)


_CHECK_COLUMNS = (
    ("linear_std", "u linear", True),
    ("monte_carlo_std", "u Monte Carlo", True),
    ("std_ratio", "ratio", False),
    ("d_low", "d low", True),
    ("d_high", "d high", True),
    ("numerical_tolerance", "delta", True),
    ("validated", "linear result validated", False),
    ("validated_digits", "validated to digits", False),
)


def linear_section(datasets: Datasets, study: Mapping[str, Any]) -> Section | None:
    linear, summary = datasets.get("linear"), datasets.get("summary")
    if linear is None or summary is None:
        return None
    check = datasets.get("linear_check")
    level = format_percent(study.get("confidence_level", 0.95), digits=0)
    blocks: list[Any] = [
        Text(
            "First-order propagation (GUM, JCGM 100) at the nominal point against the Monte "
            "Carlo result (JCGM 101). The linear result is validated when both ends of its "
            f"{level} interval lie within the numerical tolerance delta of the Monte Carlo "
            "interval (JCGM 101 section 8.2), delta being half a unit in the last of the "
            f"{study.get('significant_digits', 2)} significant digits of the Monte Carlo "
            "standard uncertainty; 'validated to digits' gives the most digits (of 1 and 2) "
            "at which it holds, 0 for neither. Where it fails the model is not linear enough "
            "over the tolerances and the Monte Carlo result is the one to use."
        )
    ]
    linear_outputs = [str(o) for o in linear["output"].values]
    rows = []
    for name in _outputs({"summary": summary}):
        if name not in linear_outputs:
            continue
        unit = _unit(datasets, name)
        row = [name, _q(linear["output_nominal"].sel(output=name), unit)]
        if check is not None and name in [str(o) for o in check["output"].values]:
            item = check.sel(output=name)
            for key, _, in_units in _CHECK_COLUMNS:
                if key not in item:
                    row.append("")
                elif in_units:
                    row.append(_q(item[key], unit))
                else:
                    row.append(_cell(item[key]))
        else:
            lin_std = _flt(linear["output_std_linear"].sel(output=name))
            mc_std = _flt(summary["std"].sel(output=name))
            row += [
                _q(lin_std, unit),
                _q(mc_std, unit),
                format_number(lin_std / mc_std) if mc_std else "",
            ] + [""] * 4
        rows.append(row)
    columns = ["Output", "Nominal (linear)"] + [label for _, label, _ in _CHECK_COLUMNS]
    blocks.append(Table(columns, rows, numeric=[False] + [True] * (len(columns) - 1)))
    return Section("Linear check", blocks)


def convergence_section(datasets: Datasets, study: Mapping[str, Any]) -> Section | None:
    budget = datasets.get("budget")
    if budget is None or f"history_{main_index(budget)[0]}" not in budget:
        return None
    converged = budget.attrs.get("converged")
    steps = [int(n) for n in np.asarray(budget["step_n_samples"].values)]
    if converged is None:
        state = "unknown"
    else:
        state = "converged" if bool(converged) else "did NOT converge (use the indices with care)"
    blocks: list[Any] = [
        Text(
            f"The base sample size was doubled ({', '.join(map(str, steps))}) until every index's "
            "confidence interval was narrow enough and the ranking stopped changing (Sarrazin, "
            f"Pianosi & Wagener 2016). The loop {state}."
        )
    ]
    for name in _outputs({"budget": budget}):
        png = figures.convergence_figure(budget, name)
        if png is not None:
            blocks.append(
                Figure(
                    f"convergence-{name}",
                    png,
                    caption=f"{main_index(budget)[1].capitalize()} of {name} against N.",
                )
            )
    return Section("Convergence", blocks)


def _requirement_rows(reqs: xr.Dataset) -> list[list[str]]:
    rows = []
    for label in reqs["requirement"].values:
        item = reqs.sel(requirement=label)
        unit = str(item["limit_units"].values) if "limit_units" in item else ""
        kind = str(item["kind"].values) if "kind" in item else ""
        lo = _flt(item["limit_low"]) if "limit_low" in item else math.nan
        hi = _flt(item["limit_high"]) if "limit_high" in item else math.nan
        if kind == "relative_spread_at_most":
            limit = format_percent(hi, digits=2)
        elif math.isfinite(lo) and math.isfinite(hi):
            limit = f"[{_q(lo, unit)}, {_q(hi, unit)}]"
        else:
            limit = _q(lo if math.isfinite(lo) else hi, unit)
        asked = _flt(item["probability_required"]) if "probability_required" in item else math.nan
        prob = _flt(item["probability"]) if "probability" in item else math.nan
        se = _flt(item["standard_error"]) if "standard_error" in item else math.nan
        if math.isfinite(prob):
            got = format_percent(prob, digits=1) + (
                f" +- {format_percent(se, digits=1)}" if math.isfinite(se) else ""
            )
        else:
            got = ""
        estimate = ""
        if kind == "relative_spread_at_most" and "estimate" in item:
            estimate = format_percent(_flt(item["estimate"]), digits=2)
            if "estimate_low" in item and "estimate_high" in item:
                estimate += (
                    f" [{format_percent(_flt(item['estimate_low']), digits=2)}, "
                    f"{format_percent(_flt(item['estimate_high']), digits=2)}]"
                )
        met = _cell(item["met"]) if "met" in item else ""
        rows.append(
            [
                str(label),
                str(item["output"].values) if "output" in item else "",
                kind.replace("_", " "),
                limit,
                format_percent(asked, digits=0) if math.isfinite(asked) else "",
                got,
                estimate,
                met,
            ]
        )
    return rows


def requirements_section(datasets: Datasets, study: Mapping[str, Any]) -> Section | None:
    reqs = datasets.get("requirements")
    if reqs is None or "requirement" not in reqs.dims:
        return None
    blocks: list[Any] = [
        Text(
            "Probability that each requirement is met: the fraction of Monte Carlo samples "
            "meeting it, with its binomial standard error; for a spread requirement, the "
            "estimated relative standard deviation with its interval."
        ),
        Table(
            [
                "Requirement",
                "Output",
                "Kind",
                "Limit",
                "Probability asked",
                "Probability met",
                "Spread estimate",
                "Met",
            ],
            _requirement_rows(reqs),
            numeric=[False, False, False, True, True, True, True, False],
        ),
    ]
    return Section("Requirements", blocks)


def _validity_counts(ds: xr.Dataset | None) -> dict[str, int]:
    if ds is None:
        return {}
    counts = ds.attrs.get("validity_counts") or {}
    return {str(k): int(v) for k, v in dict(counts).items() if int(v) and str(k) != "any"}


def _flagged(ds: xr.Dataset) -> int | None:
    if "validity" in ds:
        return int(np.count_nonzero(np.asarray(ds["validity"].values)))
    for key in ("n_invalid",):
        if key in ds.attrs:
            return int(ds.attrs[key])
    counts = ds.attrs.get("validity_counts") or {}
    return int(dict(counts)["any"]) if "any" in dict(counts) else None


def validity_section(datasets: Datasets, study: Mapping[str, Any]) -> Section:
    """How many model runs fell outside the model's validity, and why."""
    blocks: list[Any] = []
    for key, label in (("samples", "Monte Carlo samples"), ("budget", "Sensitivity-design runs")):
        ds = datasets.get(key)
        if ds is None:
            continue
        total = int(ds.sizes.get("sample", 0) or ds.attrs.get("n_evaluations", 0) or 0)
        flagged = _flagged(ds)
        if flagged is not None:
            of = f" of {total}" if total else ""
            blocks.append(Text(f"{label}: {flagged}{of} outside the model's validity."))
        counts = _validity_counts(ds)
        if counts:
            blocks.append(
                Table(
                    ["Reason", "Runs"],
                    [[k, str(v)] for k, v in sorted(counts.items())],
                    caption=f"{label}: reasons (a run may have several)",
                    numeric=[False, True],
                )
            )
    if not blocks:
        blocks.append(Text("The model reported no runs outside its validity."))
    return Section("Validity", blocks)


# --------------------------------------------------------------------------- closing


def assumptions_section(datasets: Datasets, study: Mapping[str, Any]) -> Section:
    items = study.get("assumptions") or ["The model states no assumptions of its own."]
    blocks: list[Any] = [Text(a) for a in items]
    blocks.append(
        Text(
            "The indices describe the model over the tolerances written in the "
            "scenario; they are only as good as the model's calibration to the "
            "apparatus and the realism of those tolerances.",
            kind="note",
        )
    )
    return Section("Model assumptions and limits", blocks)


def safety_section(datasets: Datasets, study: Mapping[str, Any]) -> Section:
    """Cautions fitted to the study's species and source (wavelengths, metal, oven, coils)."""
    cautions = safety_cautions(
        str(study.get("species", "") or ""),
        str(study.get("model", "") or ""),
        study.get("model_options") or {},
    )
    return Section("Safety", [Text(c, kind="caution") for c in cautions])


CORE_BUILDERS = [
    bottom_line_section,
    study_section,
    inputs_section,
    outputs_section,
    budget_section,
    interactions_section,
    scatter_section,
    linear_section,
    convergence_section,
    requirements_section,
    validity_section,
]
CLOSING_BUILDERS = [assumptions_section, safety_section]

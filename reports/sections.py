"""The core sections of the error-budget report, built from result Datasets.

Each builder is ``builder(datasets, study) -> Section | None`` and returns None
when the Datasets it needs are absent. ``datasets`` keys: ``samples``,
``summary``, ``linear``, ``linear_check``, ``budget``, ``requirements``
(schemas in DEVELOPERS.md); ``study`` is the record of
:func:`trapbudget.sensitivity.study_record.describe_study`."""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np
import xarray as xr

from trapbudget.reports import figures
from trapbudget.reports.blocks import Figure, Section, Table, Text
from trapbudget.reports.formatting import (
    format_index,
    format_percent,
    format_quantity,
    main_index,
    output_unit,
)

__all__ = [
    "SHAPLEY_COLUMNS",
    "Datasets",
    "budget_columns",
    "budget_rows",
    "budget_section",
    "inputs_section",
    "interactions_section",
    "outputs_section",
    "scatter_section",
    "study_section",
    "summary_rows",
]

Datasets = Mapping[str, xr.Dataset]


def _flt(value: Any) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        return math.nan


def _outputs(datasets: Datasets) -> list[str]:
    for key in ("summary", "budget", "linear"):
        if key in datasets and "output" in datasets[key].coords:
            return [str(o) for o in datasets[key]["output"].values]
    return []


def _unit(datasets: Datasets, output: str) -> str:
    keys = ("summary", "samples", "budget", "linear")
    return output_unit(output, *(datasets.get(k) for k in keys))


def _q(value: Any, unit: str) -> str:
    return format_quantity(_flt(value), unit)


# --------------------------------------------------------------------------- study and inputs


def study_section(datasets: Datasets, study: Mapping[str, Any]) -> Section:
    options = ", ".join(f"{k} = {v}" for k, v in study.get("model_options", {}).items())
    model = study.get("model", "") + (f" ({options})" if options else "")
    rows = [
        ["Title", study.get("title", "")],
        ["Species", study.get("species", "")],
        ["Model", model],
        ["trapbudget version", study.get("trapbudget_version", "")],
        ["Scenario file", study.get("scenario_file", "")],
        ["Scenario SHA-256", study.get("sha256", "")],
    ]
    if study.get("n_samples"):  # a calibration or a diagnosis draws no samples
        rows += [
            ["Seed", str(study.get("seed", ""))],
            ["Sample size", f"{study['n_samples']} (base size N of the index design)"],
            ["Model evaluations", str(study.get("n_evaluations", ""))],
            ["Sampling method", study.get("method", "")],
            ["Confidence level", format_percent(study.get("confidence_level", 0.95), digits=0)],
        ]
    samples = datasets.get("samples")
    if samples is not None and "sample" in samples.dims:
        rule = " (JCGM 101 adaptive rule)" if "numerical_tolerance" in samples.attrs else ""
        rows.append(["Monte Carlo draws", f"{samples.sizes['sample']}{rule}"])
    rows.append(["Date", study.get("date", "")])
    blocks: list[Any] = []
    if study.get("description"):
        blocks.append(Text(study["description"]))
    blocks.append(Table(["", ""], rows))
    return Section("What was studied", blocks)


def inputs_section(datasets: Datasets, study: Mapping[str, Any]) -> Section:
    columns = [
        "Input",
        "Nominal",
        "Tolerance (as written)",
        "Shape",
        "Meaning",
        "Standard uncertainty",
        "Relative",
        "Group",
    ]
    rows = [
        [
            r["name"],
            r["nominal_text"],
            r["tolerance_text"],
            r["shape"],
            r["meaning"],
            r["u_text"],
            r["relative_u_text"],
            r["group"],
        ]
        for r in study.get("inputs", [])
    ]
    blocks: list[Any] = [
        Table(
            columns,
            rows,
            caption="Uncertain inputs (varied in the study)",
            numeric=[False, True, True, False, False, True, True, False],
        ),
    ]
    meanings = [(r["name"], r["description"]) for r in study.get("inputs", []) if r["description"]]
    if meanings:
        blocks.append(Table(["Input", "Meaning"], [list(m) for m in meanings]))
    fixed = study.get("fixed", [])
    if fixed:
        blocks.append(
            Table(
                ["Input", "Value", "Meaning"],
                [[r["name"], r["value_text"], r["description"]] for r in fixed],
                caption="Inputs held fixed",
                numeric=[False, True, False],
            )
        )
    corr = study.get("correlations", [])
    if corr:
        blocks.append(
            Table(
                ["Input", "Input", "Coefficient"],
                [[r["a"], r["b"], f"{r['coefficient']:+.2f}"] for r in corr],
                caption="Correlations (Gaussian copula: Pearson coefficient of the normal scores)",
                numeric=[False, False, True],
            )
        )
    defaults = study.get("defaults", [])
    if defaults:
        blocks.append(
            Table(
                ["Input", "Default", "Constant", "Meaning"],
                [
                    [r["name"], r["value_text"], "yes" if r["constant"] else "", r["description"]]
                    for r in defaults
                ],
                caption="Inputs left at the model's defaults (constants: calibratable)",
                numeric=[False, True, False, False],
            )
        )
    else:
        blocks.append(Text("Inputs not listed take the model's defaults.", kind="note"))
    return Section("Inputs and tolerances", blocks)


# --------------------------------------------------------------------------- outputs


def summary_rows(summary: xr.Dataset, datasets: Datasets | None = None) -> list[list[str]]:
    """Rows of the output summary table (formatted in display units)."""
    datasets = datasets or {"summary": summary}
    rows = []
    for name in [str(o) for o in summary["output"].values]:
        row = summary.sel(output=name)
        unit = _unit(datasets, name)
        mean, std = _flt(row["mean"]), _flt(row["std"])
        nominal = _q(row["nominal"], unit) if "nominal" in row else ""
        rel = format_percent(std / abs(mean), digits=2) if mean else ""
        rows.append(
            [
                name,
                nominal,
                _q(mean, unit),
                _q(std, unit),
                rel,
                f"[{_q(row['interval_low'], unit)}, {_q(row['interval_high'], unit)}]",
                f"[{_q(row['shortest_low'], unit)}, {_q(row['shortest_high'], unit)}]"
                if "shortest_low" in row
                else "",
            ]
        )
    return rows


def outputs_section(datasets: Datasets, study: Mapping[str, Any]) -> Section | None:
    summary = datasets.get("summary")
    if summary is None:
        return None
    level = format_percent(study.get("confidence_level", 0.95), digits=0)
    blocks: list[Any] = [
        Table(
            [
                "Output",
                "Nominal",
                "Mean",
                "Standard deviation",
                "Relative",
                f"{level} interval (symmetric)",
                f"{level} interval (shortest)",
            ],
            summary_rows(summary, datasets),
            caption="Monte Carlo results (JCGM 101)",
            numeric=[False, True, True, True, True, True, True],
        ),
    ]
    samples = datasets.get("samples")
    if samples is not None:
        for name in _outputs(datasets):
            if name in samples:
                blocks.append(
                    Figure(
                        f"distribution-{name}",
                        figures.histogram_figure(samples, summary, name),
                        caption=f"Distribution of {name} over the Monte Carlo "
                        "samples, with the nominal value and the coverage interval.",
                    )
                )
    return Section("Outputs", blocks)


# --------------------------------------------------------------------------- budget


def _ci(ds: xr.Dataset, key: str) -> str:
    value = format_index(ds[key])  # type: ignore[arg-type]
    if f"{key}_low" in ds and f"{key}_high" in ds:
        return f"{value} [{format_index(ds[f'{key}_low'])}, {format_index(ds[f'{key}_high'])}]"  # type: ignore[arg-type]
    return value


#: Column titles of the budget of correlated inputs, by the share each one states.
SHAPLEY_COLUMNS = ("Shapley effect", "Alone (full first order)", "Added last (total, own part)")


def budget_columns(budget: xr.Dataset) -> list[str]:
    """Column titles of :func:`budget_rows` for this budget (Sobol', Shapley or given-data)."""
    _, label = main_index(budget)
    tail = ["sqrt(variance share)", "Linear |c| u"]
    if label == "Shapley effect":
        return ["Rank", "Input", *SHAPLEY_COLUMNS, *tail]
    if label == "total order":
        extra = ["Shapley effect"] if "shapley_effect" in budget else []
        return ["Rank", "Input", "First order", "Total order", "Interaction", *extra, *tail]
    return ["Rank", "Input", "First order", label.capitalize(), *tail]


def budget_rows(
    budget: xr.Dataset, output: str, *, unit: str = "", top: int | None = None
) -> list[list[str]]:
    """Rows of one output's ranked budget: rank, input, indices, contributions in output units."""
    key, label = main_index(budget)
    row = budget.sel(output=output)
    order = np.argsort(np.asarray(row["rank"].values, dtype=float), kind="stable")
    if top is not None:
        order = order[:top]
    std = _flt(row["output_std"]) if "output_std" in row else math.nan
    rows = []
    for i in order:
        item = row.isel(input=int(i))
        share = _flt(item["variance_share"]) if "variance_share" in item else math.nan
        if math.isnan(share) and not math.isnan(std):
            share = _flt(item[key]) * std**2
        floor = bool(item["below_noise_floor"]) if "below_noise_floor" in item else False
        cells = [
            str(int(_flt(item["rank"]))),
            str(item["input"].values) + (" (noise floor)" if floor else ""),
        ]
        if label == "Shapley effect":
            cells += [_ci(item, "shapley_effect"), _ci(item, "first_order")]
            cells.append(_ci(item, "total_order"))
        else:
            cells += [_ci(item, "first_order"), _ci(item, key)]
        if label == "total order":
            cells.append(format_index(item["interaction"]) if "interaction" in item else "")
            if "shapley_effect" in row:
                cells.append(_ci(item, "shapley_effect"))
        cells.append(_q(math.sqrt(share), unit) if share >= 0 else "nan")
        contribution = item.get("uncertainty_contribution")
        cells.append("" if contribution is None else _q(contribution, unit))
        rows.append(cells)
    return rows


_SOBOL_TEXT = (
    "Inputs ranked by their total-order Sobol' index: the fraction of the output's variance "
    "that would vanish if that input were known exactly (first order: its effect alone; "
    "interaction: total minus first)."
)
_CONDITIONAL_TEXT = (
    "The scenario correlates some inputs, so the indices come from conditional sampling under "
    "the Gaussian copula (Kucherenko, Tarantola & Annoni 2012): the first-order index is the "
    "full Var(E[Y|Xi])/Var(Y) (a drift shared through a correlation counts for both inputs), "
    "the total-order index the expected variance left by the input's own, independent part "
    "E[Var(Y|X~i)]/Var(Y), by which the inputs are ranked. With correlations the first order "
    "can exceed the total order; the interaction column is then not an interaction."
)
_SHAPLEY_TEXT = (
    "The scenario correlates some inputs, so each input's headline share is its Shapley "
    "effect (Owen 2014; Song, Nelson & Staum 2016), computed by exact conditioning under the "
    "Gaussian copula: the shares are non-negative, sum to one and split a drift shared "
    "through a correlation fairly between the inputs. Beside it, 'alone' is the full "
    "first-order index Var(E[Y|Xi])/Var(Y), the share the input explains on its own with its "
    "correlations included, and 'added last' the total-order index of its own, independent "
    "part, the share it adds when it joins the others last. These two need not bracket the "
    "Shapley effect."
)
_GIVEN_DATA_TEXT = (
    "The scenario correlates some inputs, and Sobol' total-order indices assume independent "
    "inputs, so this budget comes from one correlated sample: the full first-order index "
    "Var(E[Y|Xi])/Var(Y) (correlations included: a drift shared by two inputs counts for "
    "both) and the moment-independent delta index (Borgonovo 2007), by which the inputs are "
    "ranked."
)


def _interval_text(budget: xr.Dataset) -> str:
    replicates = budget.attrs.get("n_replicates")
    if str(budget.attrs.get("interval_method", "")) == "replicates" and replicates:
        return (
            f"Student t over {int(replicates)} independent randomizations of the design, "
            f"{int(replicates) - 1} degrees of freedom"
        )
    return "bootstrap of independent draws"


def budget_section(datasets: Datasets, study: Mapping[str, Any]) -> Section | None:
    budget = datasets.get("budget")
    if budget is None:
        return None
    level = format_percent(budget.attrs.get("confidence_level", 0.95), digits=0)
    _, label = main_index(budget)
    blocks: list[Any] = [
        Text(
            _SHAPLEY_TEXT
            if label == "Shapley effect"
            else _SOBOL_TEXT
            if label == "total order" and budget.attrs.get("method") != "kucherenko"
            else _CONDITIONAL_TEXT
            if label == "total order"
            else _GIVEN_DATA_TEXT
        ),
        Text(
            "The last two columns are in output units: the square root of the input's share of "
            "the variance (index x variance), and the linear (GUM) contribution |c| u at the "
            f"nominal point. Brackets: {level} confidence intervals ({_interval_text(budget)}). "
            "Inputs whose "
            "index is indistinguishable from that of a dummy input the model ignores are marked "
            "as being at the noise floor."
        ),
    ]
    if budget.attrs.get("first_order_meaning"):
        blocks.append(Text(f"First order here: {budget.attrs['first_order_meaning']}.", "note"))
    names = list(budget.attrs.get("unranked_outputs", []) or [])
    reasons = list(budget.attrs.get("unranked_reasons", []) or [])
    for name, why in zip(names, reasons, strict=False):
        blocks.append(Text(f"{name} is not ranked: {why}.", "note"))
    for name in _outputs({"budget": budget}):
        unit = _unit(datasets, name)
        blocks.append(
            Figure(
                f"budget-{name}",
                figures.budget_figure(budget, name),
                caption=f"Ranked indices of {name}.",
            )
        )
        columns = budget_columns(budget)
        blocks.append(
            Table(
                columns,
                budget_rows(budget, name, unit=unit),
                caption=f"Error budget of {name}",
                numeric=[c != "Input" for c in columns],
            )
        )
    return Section("Error budget", blocks)


def interactions_section(datasets: Datasets, study: Mapping[str, Any]) -> Section | None:
    budget = datasets.get("budget")
    if budget is None or "second_order" not in budget:
        return None
    blocks: list[Any] = [
        Text(
            "Second-order Sobol' indices (Saltelli 2002): the share of the "
            "variance due to the joint effect of two inputs beyond their "
            "separate effects."
        )
    ]
    for name in _outputs({"budget": budget}):
        png = figures.interaction_figure(budget, name)
        if png is not None:
            blocks.append(Figure(f"interactions-{name}", png, caption=f"Interactions of {name}."))
        matrix = budget["second_order"].sel(output=name)
        inputs = [str(i) for i in budget["input"].values]
        pairs = []
        for a in range(len(inputs)):
            for b in range(a + 1, len(inputs)):
                value = _flt(matrix.isel(input=a, input_b=b))
                if not math.isfinite(value):
                    value = _flt(matrix.isel(input=b, input_b=a))
                if math.isfinite(value):
                    pairs.append((value, inputs[a], inputs[b]))
        pairs.sort(reverse=True)
        blocks.append(
            Table(
                ["Input", "Input", "Second-order index"],
                [[a, b, format_index(v)] for v, a, b in pairs[:8]],
                caption=f"Largest interactions of {name}",
                numeric=[False, False, True],
            )
        )
    return Section("Interactions", blocks)


def scatter_section(datasets: Datasets, study: Mapping[str, Any]) -> Section | None:
    samples, budget = datasets.get("samples"), datasets.get("budget")
    if samples is None or budget is None:
        return None
    if not any(str(name) in samples for name in budget["input"].values):
        return None  # a summary-only Monte Carlo keeps no input samples
    blocks: list[Any] = []
    for name in _outputs({"budget": budget}):
        if name in samples:
            blocks.append(
                Figure(
                    f"scatter-{name}",
                    figures.scatter_figure(samples, budget, name),
                    caption=f"{name} against its three top-ranked inputs (Monte Carlo samples).",
                )
            )
    return Section("Output against its top drifts", blocks) if blocks else None

"""The core sections of the error-budget report, built from result Datasets.

Each builder is ``builder(datasets, study) -> Section | None`` and returns None
when the Datasets it needs are absent. ``datasets`` keys: ``samples``,
``summary``, ``linear``, ``linear_check``, ``budget``, ``requirements``
(schemas in DEVELOPERS.md); ``study`` is the record of
:func:`trapbudget.sensitivity.study_record.describe_study`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np
import xarray as xr

from trapbudget.reports import figures
from trapbudget.reports.formatting import (
    format_index,
    format_number,
    format_percent,
    format_quantity,
    main_index,
    output_unit,
)
from trapbudget.reports.render import Figure, Section, Table, Text

__all__ = [
    "CLOSING_BUILDERS",
    "CORE_BUILDERS",
    "SAFETY_CAUTIONS",
    "budget_columns",
    "budget_rows",
    "summary_rows",
]

Datasets = Mapping[str, xr.Dataset]

#: The cautions every report carries.
SAFETY_CAUTIONS: list[str] = [
    "This report computes numbers; it does not make an apparatus safe.",
    "Lasers used for cooling and trapping (often class 3B or 4, near-infrared and nearly "
    "invisible) can blind in a fraction of a second, including by stray reflections: use the "
    "eyewear, enclosures and interlocks your laser-safety officer specifies.",
    "Quadrupole coils carry high currents, store magnetic energy and get hot: follow local "
    "electrical-safety codes; interlock the supplies and cooling.",
    "Alkali metals (rubidium, caesium, potassium) react violently with water and can ignite in "
    "air: handle them under the chemical-safety rules of your institution.",
    "Glass vacuum cells can implode; heated cells, ovens and bake-outs burn: shield and label "
    "them.",
    "Defer to your laser-safety officer, local codes and licensed practice; nothing in this "
    "report replaces them.",
]


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
        ["Seed", str(study.get("seed", ""))],
        ["Sample size", f"{study.get('n_samples', '')} (Monte Carlo n and Saltelli base N)"],
        ["Model evaluations", str(study.get("n_evaluations", ""))],
        ["Sampling method", study.get("method", "")],
        ["Confidence level", format_percent(study.get("confidence_level", 0.95), digits=0)],
        ["Date", study.get("date", "")],
    ]
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
    value = format_index(ds[key])
    if f"{key}_low" in ds and f"{key}_high" in ds:
        return f"{value} [{format_index(ds[f'{key}_low'])}, {format_index(ds[f'{key}_high'])}]"
    return value


def budget_columns(budget: xr.Dataset) -> list[str]:
    """Column titles of :func:`budget_rows` for this budget (Sobol' or given-data)."""
    _, label = main_index(budget)
    middle = ["Total order", "Interaction"] if label == "total order" else [label.capitalize()]
    return ["Rank", "Input", "First order", *middle, "sqrt(variance share)", "Linear |c| u"]


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
            _ci(item, "first_order"),
            _ci(item, key),
        ]
        if label == "total order":
            cells.append(format_index(item["interaction"]) if "interaction" in item else "")
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
_GIVEN_DATA_TEXT = (
    "The scenario correlates some inputs, and Sobol' total-order indices assume independent "
    "inputs, so this budget comes from one correlated sample: the full first-order index "
    "Var(E[Y|Xi])/Var(Y) (correlations included: a drift shared by two inputs counts for "
    "both) and the moment-independent delta index (Borgonovo 2007), by which the inputs are "
    "ranked."
)


def budget_section(datasets: Datasets, study: Mapping[str, Any]) -> Section | None:
    budget = datasets.get("budget")
    if budget is None:
        return None
    level = format_percent(budget.attrs.get("confidence_level", 0.95), digits=0)
    _, label = main_index(budget)
    blocks: list[Any] = [
        Text(
            _GIVEN_DATA_TEXT
            if label != "total order"
            else _CONDITIONAL_TEXT
            if budget.attrs.get("method") == "kucherenko"
            else _SOBOL_TEXT
        ),
        Text(
            "The last two columns are in output units: the square root of the input's share of "
            "the variance (index x variance), and the linear (GUM) contribution |c| u at the "
            f"nominal point. Brackets: {level} bootstrap confidence intervals. Inputs whose "
            "index is indistinguishable from that of a dummy input the model ignores are marked "
            "as being at the noise floor."
        ),
    ]
    if budget.attrs.get("first_order_meaning"):
        blocks.append(Text(f"First order here: {budget.attrs['first_order_meaning']}.", "note"))
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
            "interval (JCGM 101 section 8); otherwise the model is not linear enough over "
            "the tolerances and the Monte Carlo result is the one to use."
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
    state = {True: "converged", False: "did NOT converge (use the indices with care)"}.get(
        bool(converged) if converged is not None else None, "unknown"
    )
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
    return Section("Safety", [Text(c, kind="caution") for c in SAFETY_CAUTIONS])


CORE_BUILDERS = [
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

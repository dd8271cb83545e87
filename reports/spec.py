"""Report section for a tolerance allocation (``trapbudget spec``).

Built from the ``allocation`` Dataset (:meth:`Allocation.to_dataset
<trapbudget.sensitivity.decisions.allocation.Allocation.to_dataset>`): a spec-sheet table
ready to paste into a document, the probability each requirement is met, a
chart of present against required tolerances and a plain-language summary for
readers who are not physicists.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import matplotlib
import numpy as np
import xarray as xr

from trapbudget.reports.blocks import Figure, Section, Table, Text, register_section
from trapbudget.reports.figures import BLUE, FIGURE_STYLE, GREY, ORANGE, figure_png, subplots
from trapbudget.reports.formatting import format_number, format_percent, format_quantity
from trapbudget.reports.results import dim_records, plain_value

__all__ = [
    "LIMITS",
    "allocation_json",
    "allocation_rich_table",
    "plain_summary",
    "spec_rows",
    "spec_section",
    "spec_sheet_csv",
    "tolerance_figure",
]

#: Limits stated with every allocation.
LIMITS: list[str] = [
    "The allocation is only as good as the model and the cost tables behind it: the tolerances "
    "are those the model needs, and the prices are those written in the scenario.",
    "Probabilities come from a finite Monte Carlo sample of the model (standard errors shown); "
    "they say nothing about effects the model leaves out.",
    "Check the model against measurements on the apparatus before buying on the strength of "
    "this sheet.",
]


def _money(value: float, currency: str) -> str:
    if not math.isfinite(value):
        return "n/a"
    return f"{value:,.0f} {currency}".strip()


def _cost_line(attrs: Mapping[str, Any], currency: str) -> str:
    if bool(attrs.get("default_costs", False)):
        spent = format_number(float(attrs.get("new_spending", math.nan)))
        return f"default prices (t_present / t), {spent} units above the present set-up"
    new = _money(float(attrs.get("new_spending", math.nan)), currency)
    level = _money(float(attrs.get("total_cost", math.nan)), currency)
    return f"new spending {new} (price level {level})"


def _spending_text(attrs: Mapping[str, Any], currency: str) -> str:
    """What must be bought, in words: new spending first, the price level beside it."""
    if bool(attrs.get("default_costs", False)):
        return (
            "The scenario has no cost tables, so every input is priced by the stated default: "
            "holding it to a tolerance t costs t_present / t (1 at the present tolerance, 2 "
            "at half of it; tightening any input by the same factor is equally hard). The "
            "least tightening found that meets the requirements costs "
            f"{format_number(float(attrs.get('new_spending', math.nan)))} of these units "
            "above the present set-up."
        )
    new = _money(float(attrs.get("new_spending", math.nan)), currency)
    level = _money(float(attrs.get("total_cost", math.nan)), currency)
    return (
        f"The cheapest way found to meet the requirements needs new spending of {new} "
        f"(the price level of the whole allocation is {level}; relaxing an input refunds "
        "nothing)."
    )


def _percent_text(text: str) -> str:
    """A relative tolerance as written (``"2.01995 %"``) rounded to three digits."""
    try:
        return f"{format_number(float(text.strip()[:-1]))} %"
    except ValueError:
        return text.strip()


def _tol(value: float, unit: str, text: str) -> str:
    if not math.isfinite(value):
        return "any"
    shown = format_quantity(value, unit) if unit else format_number(value)
    return f"{_percent_text(text)} ({shown})" if text.strip().endswith("%") else shown


def spec_rows(allocation: xr.Dataset) -> list[list[str]]:
    """Rows of the spec sheet: input, present, required, headroom, tier, cost, set by."""
    currency = str(allocation.attrs.get("currency", ""))
    rows = []
    for name in allocation["input"].values:
        item = allocation.sel(input=name)
        unit = str(item["unit"].values)
        free = bool(item["free"].values)
        rows.append(
            [
                str(name),
                _tol(float(item["present_tolerance"]), unit, str(item["present_text"].values)),
                _tol(float(item["required_tolerance"]), unit, str(item["required_text"].values))
                if free
                else "as present (no cost model)",
                format_number(float(item["headroom"])),
                str(item["tier"].values) or ("smooth cost" if free else ""),
                _money(float(item["cost"]), currency) if free else "",
                str(item["binding"].values) or ("cheapest option" if free else ""),
            ]
        )
    return rows


#: Name of the spec sheet written beside a ``spec`` report.
SPEC_SHEET_FILE = "spec-sheet.csv"


def spec_sheet_csv(allocation: xr.Dataset) -> str:
    """The spec sheet as CSV text, one row per uncertain input.

    Columns: ``input``, ``unit`` (the display unit every value of the row is in),
    ``nominal``, ``tolerance_now``, ``tolerance_specified`` (both in the sense of
    ``meaning``: standard uncertainty, half-width or expanded uncertainty), ``meaning``,
    ``shape``, ``cost`` (in the scenario's currency, or relative units with the default
    prices; empty for inputs without a cost model), ``set_by`` (the requirement that
    binds the tolerance; empty where the cheapest option already suffices). Numbers carry
    six significant digits; an infeasible allocation leaves ``tolerance_specified`` empty.
    """
    import csv
    import io

    from trapbudget.sensitivity.scenario.units import display_unit, ureg

    currency = str(allocation.attrs.get("currency", ""))
    if bool(allocation.attrs.get("default_costs", False)):
        currency = "relative"
    feasible = bool(allocation.attrs.get("feasible", False))
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    cost_header = f"cost_{currency}" if currency else "cost"
    writer.writerow(
        [
            "input",
            "unit",
            "nominal",
            "tolerance_now",
            "tolerance_specified",
            "meaning",
            "shape",
            cost_header,
            "set_by",
        ]
    )

    def number(value: float) -> str:
        return f"{value:.6g}" if math.isfinite(value) else ""

    for name in allocation["input"].values:
        item = allocation.sel(input=name)
        unit = str(item["unit"].values)
        nominal = float(item["nominal"]) if "nominal" in item else math.nan
        present = float(item["present_tolerance"])
        shown = display_unit(unit, abs(present) if present else abs(nominal))
        factor = 1.0
        if unit and shown != unit:
            factor = float(ureg.Quantity(1.0, unit).to(shown).magnitude)
        free = bool(item["free"].values)
        required = float(item["required_tolerance"]) if free and feasible else math.nan
        cost = float(item["cost"]) if free else math.nan
        writer.writerow(
            [
                str(name),
                shown,
                number(nominal * factor),
                number(present * factor),
                number(required * factor) if free else number(present * factor),
                str(item["meaning"].values) if "meaning" in item else "",
                str(item["shape"].values) if "shape" in item else "",
                number(cost),
                str(item["binding"].values),
            ]
        )
    return buffer.getvalue()


def _requirement_rows(allocation: xr.Dataset) -> list[list[str]]:
    rows = []
    for label in allocation["requirement"].values:
        item = allocation.sel(requirement=label)
        p = float(item["probability"])
        se = float(item["standard_error"])
        fresh = float(item["fresh_probability"]) if "fresh_probability" in item else math.nan
        if math.isfinite(fresh):
            # the winner checked on fresh independent draws: the estimate with its one-sided
            # Clopper-Pearson bound (a width even when every draw passes)
            bound = float(item["fresh_probability_low"])
            achieved = f"{format_percent(fresh)} (at least {format_percent(bound, digits=2)})"
        elif math.isfinite(p):
            achieved = f"{format_percent(p)} +- {format_percent(se, digits=2)}"
        else:
            achieved = f"relative spread {format_number(float(item['relative_spread']))}"
        target = float(item["target"])
        rows.append(
            [
                str(label),
                str(item["output"].values),
                str(item["kind"].values).replace("_", " "),
                format_percent(target) if math.isfinite(target) else "",
                achieved,
                "yes" if bool(item["met"]) else "no",
            ]
        )
    return rows


def _requirement_caption(allocation: xr.Dataset) -> str:
    fresh = int(allocation.attrs.get("fresh_n_samples", 0) or 0)
    if fresh and "fresh_probability" in allocation:
        return (
            f"Each requirement checked on {fresh} fresh independent model runs (the choice "
            f"was made on {allocation.attrs.get('n_samples', '')} common runs); 'at least' is "
            "the one-sided Clopper-Pearson bound at the safety margin"
        )
    return (
        f"Each requirement checked on {allocation.attrs.get('n_samples', '')} model runs "
        "(binomial standard error)"
    )


def plain_summary(allocation: xr.Dataset) -> str:
    """One paragraph for a non-physicist: what is bought, what it changes, how sure we are."""
    attrs = allocation.attrs
    currency = str(attrs.get("currency", ""))
    n = int(attrs.get("n_samples", 0) or 0)
    if not bool(attrs.get("feasible", False)):
        return (
            f"No affordable combination of the priced options meets every requirement. "
            f"{attrs.get('reason', '')}. Nothing should be bought on the basis of this "
            "study until the requirement or the options change."
        )
    changes, relaxed, kept = [], [], []
    for name in allocation["input"].values:
        item = allocation.sel(input=name)
        if not bool(item["free"].values):
            continue
        headroom = float(item["headroom"])
        tier = str(item["tier"].values)
        what = f"'{tier}' for {name}" if tier else f"{name} held to {item['required_text'].values}"
        if headroom > 1.0 + 1e-6:
            changes.append(f"{what} (about {format_number(headroom, digits=2)} times tighter)")
        elif headroom < 1.0 - 1e-6:
            relaxed.append(f"{name} (to {item['required_text'].values})")
        else:
            kept.append(str(name))
    reqs = []
    for label in allocation["requirement"].values:
        p = float(allocation["probability"].sel(requirement=label))
        if math.isfinite(p):
            reqs.append(f"'{label}' holds in about {format_percent(p)} of runs")
    bought = "; ".join(changes) if changes else "no change to the present set-up"
    text = f"{_spending_text(attrs, currency)} It buys {bought}."
    if relaxed:
        text += f" These may be relaxed: {', '.join(relaxed)}."
    if kept:
        text += f" These stay as they are: {', '.join(kept)}."
    if reqs:
        text += f" With these changes the simulation says {', and '.join(reqs)}."
    text += (
        f" How sure: these figures come from {n} simulated runs of a physics model of the trap, "
        "so the sampling error is small (shown beside each number); the larger uncertainty is "
        "whether the model describes this apparatus, which measurements should confirm."
    )
    return text


def tolerance_figure(allocation: xr.Dataset) -> bytes:
    """Bar chart: present and required tolerance of each free input, relative to present."""
    free = [str(n) for n in allocation["input"].values if bool(allocation["free"].sel(input=n))]
    ratio = np.array(
        [
            float(allocation["required_tolerance"].sel(input=n))
            / float(allocation["present_tolerance"].sel(input=n))
            for n in free
        ]
    )
    with matplotlib.rc_context(FIGURE_STYLE):  # type: ignore[arg-type]
        fig, ax = subplots(figsize=(6.0, 0.42 * len(free) + 1.3))
        y = np.arange(len(free))
        finite = np.where(np.isfinite(ratio), ratio, 1.0)
        for k in range(len(free)):
            ax.plot([1.0, finite[k]], [y[k], y[k]], color=GREY, lw=1.0, zorder=1)
        ax.scatter(np.ones(len(free)), y, color=GREY, s=30, zorder=2, label="present")
        colors = [ORANGE if r < 1 else BLUE for r in finite]
        ax.scatter(finite, y, color=colors, s=40, marker="D", zorder=3, label="required")
        ax.set_yticks(y, [n.replace("_", " ") for n in free])
        ax.set_xscale("log")
        span = max(float(np.max(np.abs(np.log10(finite)))), 0.3)
        ax.set_xlim(10 ** (-1.3 * span), 10 ** (1.3 * span))
        ax.axvline(1.0, color=GREY, lw=0.8, ls=":")
        ax.set_xlabel("required tolerance / present (orange: tighten, blue: may relax)")
        ax.set_ylim(len(free) - 0.5, -0.5)
        ax.legend(loc="lower right")
    return figure_png(fig)


def allocation_json(allocation: xr.Dataset) -> dict[str, Any]:
    """The machine-readable allocation: attrs, one record per input and per requirement."""
    keys = (
        "title",
        "feasible",
        "reason",
        "total_cost",
        "new_spending",
        "default_costs",
        "currency",
        "blocking_input",
        "failing_requirement",
        "n_samples",
        "method",
        "seed",
        "iterations",
    )
    out: dict[str, Any] = {k: plain_value(allocation.attrs.get(k, "")) for k in keys}
    out["feasible"] = bool(allocation.attrs.get("feasible", False))
    out["inputs"] = dim_records(allocation, "input")
    out["requirements"] = dim_records(allocation, "requirement")
    return out


def allocation_rich_table(allocation: xr.Dataset) -> Any:
    """The spec sheet as a rich table for the terminal (fits 80 columns).

    Tolerances in each input's display unit, the tightening factor, the cost and the
    tier chosen; which requirement sets which tolerances is said below the table.
    """
    from rich import box
    from rich.table import Table as RichTable

    currency = str(allocation.attrs.get("currency", ""))
    title = "Spec sheet: " + (
        _cost_line(allocation.attrs, currency)
        if bool(allocation.attrs.get("feasible", False))
        else "no allocation meets every requirement"
    )
    table = RichTable(
        title=title,
        title_justify="left",
        box=box.SIMPLE_HEAD,
        pad_edge=False,
        collapse_padding=True,
    )
    table.add_column("input", no_wrap=True)
    table.add_column("now", justify="right", no_wrap=True)
    table.add_column("required", justify="right", no_wrap=True)
    table.add_column("tighten", justify="right", no_wrap=True)
    table.add_column("cost", justify="right", no_wrap=True)
    table.add_column("choice", ratio=1, overflow="fold")
    default_costs = bool(allocation.attrs.get("default_costs", False))
    set_by: dict[str, list[str]] = {}
    for name in allocation["input"].values:
        item = allocation.sel(input=name)
        unit = str(item["unit"].values)
        free = bool(item["free"].values)

        def shown(value: float, unit: str = unit) -> str:
            if not math.isfinite(value):
                return "any"
            return format_quantity(value, unit) if unit else format_number(value)

        headroom = float(item["headroom"])
        cost = float(item["cost"])
        table.add_row(
            str(name),
            shown(float(item["present_tolerance"])),
            shown(float(item["required_tolerance"])) if free else "as now",
            f"{format_number(headroom, digits=2)}x" if free and math.isfinite(headroom) else "",
            (format_number(cost) if default_costs else _money(cost, "")) if free else "",
            (str(item["tier"].values) or "smooth cost") if free else "no cost model",
        )
        binding = str(item["binding"].values)
        if binding:
            set_by.setdefault(binding, []).append(str(name))
    notes = [f"set by '{label}': {', '.join(names)}" for label, names in set_by.items()]
    unit_note = "relative units (default prices)" if default_costs else currency
    notes.append(f"cost in {unit_note}; tighten = now / required" if unit_note else "")
    table.caption = "\n".join(n for n in notes if n)
    table.caption_justify = "left"
    return table


def spec_section(datasets: Mapping[str, xr.Dataset], study: Mapping[str, Any]) -> Section | None:
    """The tolerance-allocation section (None when there is no ``allocation`` Dataset)."""
    allocation = datasets.get("allocation")
    if allocation is None:
        return None
    currency = str(allocation.attrs.get("currency", ""))
    blocks: list[Any] = [Text(plain_summary(allocation))]
    blocks.append(
        Table(
            ["Input", "Present", "Required", "Headroom", "Tier", "Cost", "Set by"],
            spec_rows(allocation),
            caption="Spec sheet (headroom = present / required tolerance: above 1 the input "
            f"must be tightened by that factor); {_cost_line(allocation.attrs, currency)}",
            numeric=[False, True, True, True, False, True, False],
        )
    )
    if "requirement" in allocation.dims:
        blocks.append(
            Table(
                ["Requirement", "Output", "Kind", "Asked", "Achieved (Monte Carlo)", "Met"],
                _requirement_rows(allocation),
                caption=_requirement_caption(allocation),
                numeric=[False, False, False, True, True, False],
            )
        )
    if bool(allocation["free"].values.any()) and bool(allocation.attrs.get("feasible", False)):
        blocks.append(
            Figure(
                "allocation-tolerances",
                tolerance_figure(allocation),
                caption="Present and required tolerance of each priced input.",
            )
        )
    if not bool(allocation.attrs.get("feasible", False)):
        blocks.append(Text(str(allocation.attrs.get("reason", "")), kind="note"))
    blocks += [Text(t, kind="note") for t in LIMITS]
    return Section("Tolerance allocation", blocks)


register_section(spec_section)

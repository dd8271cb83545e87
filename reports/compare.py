"""Report section for before/after comparisons (``trapbudget compare``).

Built from the ``comparison`` Dataset of
:func:`trapbudget.sensitivity.decisions.compare.compare` (one change) or
:func:`~trapbudget.sensitivity.decisions.compare.compare_upgrades` (dim ``upgrade``):
tables of what changes, before/after distribution plots, a cost-versus-benefit
chart and a plain-language summary.
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
from trapbudget.reports.formatting import (
    display_scale,
    format_number,
    format_percent,
    format_quantity,
)
from trapbudget.reports.results import dim_records, plain_value

__all__ = [
    "benefit_figure",
    "compare_section",
    "comparison_json",
    "comparison_rich_tables",
    "distribution_figure",
    "plain_summary",
]

_LIMITS = (
    "Both sides are simulated with the same random draws (common random numbers), so the "
    "differences shown are those of the change, not of sampling noise; they are still only "
    "as good as the model of the trap and the tolerances written for each side."
)


def _plain_text(text: str) -> str:
    """Text for matplotlib with '$' shown literally (not as mathtext)."""
    return str(text).replace("$", r"\$")


def _options(ds: xr.Dataset) -> list[str]:
    return [str(u) for u in ds["upgrade"].values] if "upgrade" in ds.dims else ["after"]


def _pick(ds: xr.Dataset, option: str) -> xr.Dataset:
    return ds.sel(upgrade=option) if "upgrade" in ds.dims else ds


def _unit(ds: xr.Dataset, output: str) -> str:
    return str(ds.attrs.get(f"units_{output}", ""))


def _q(value: float, unit: str) -> str:
    return format_quantity(value, unit) if unit else format_number(value)


def _output_rows(ds: xr.Dataset, option: str) -> list[list[str]]:
    item = _pick(ds, option)
    rows = []
    for output in ds["output"].values:
        o = item.sel(output=output)
        unit = _unit(ds, str(output))
        rows.append(
            [
                str(output),
                f"{_q(float(o['mean_before']), unit)} → {_q(float(o['mean_after']), unit)}",
                f"{_q(float(o['std_before']), unit)} → {_q(float(o['std_after']), unit)}",
                f"[{_q(float(o['interval_low_before']), unit)}, "
                f"{_q(float(o['interval_high_before']), unit)}]",
                f"[{_q(float(o['interval_low_after']), unit)}, "
                f"{_q(float(o['interval_high_after']), unit)}]",
                format_percent(float(o["variance_removed_fraction"])),
            ]
        )
    return rows


def _requirement_rows(ds: xr.Dataset) -> list[list[str]]:
    rows = []  # type: ignore[var-annotated]
    if "requirement" not in ds.dims:
        return rows
    for option in _options(ds):
        item = _pick(ds, option)
        for label in ds["requirement"].values:
            r = item.sel(requirement=label)
            pb, pa = float(r["probability_before"]), float(r["probability_after"])
            if math.isfinite(pb):
                change = (
                    f"{format_percent(pb)} → {format_percent(pa)} "
                    f"(+- {format_percent(float(r['shift_standard_error']), digits=2)})"
                )
                fb, fa = float(r["failing_per_day_before"]), float(r["failing_per_day_after"])
                per_day = f"{format_number(fb)} → {format_number(fa)}" if math.isfinite(fb) else ""
            else:
                change = (
                    f"spread {format_number(float(r['relative_spread_before']))} → "
                    f"{format_number(float(r['relative_spread_after']))}"
                )
                per_day = ""
            rows.append([option, str(label), change, per_day])
    return rows


def _is_probability(ds: xr.Dataset) -> bool:
    return str(ds.attrs.get("benefit_metric", "")).startswith("probability")


def upgrade_columns(ds: xr.Dataset) -> list[str]:
    """Headers of the ranking table, each with its unit."""
    currency = str(ds.attrs.get("currency", ""))
    first = str(ds.attrs.get("benefit_first_output", "first output"))
    gain = "Runs meeting reqs. (+pp)" if _is_probability(ds) else f"Var({first}) removed (%)"
    per = f"{'pp' if _is_probability(ds) else '%'} per 1,000 {currency}".strip()
    columns = ["Rank", "Upgrade", "Cost", gain]
    if _is_probability(ds):
        columns.append(f"Var({first}) removed")
    return [*columns, per]


def benefit_definition(ds: xr.Dataset) -> str:
    """What 'benefit' means, in words, with its unit."""
    first = str(ds.attrs.get("benefit_first_output", "the first output"))
    if _is_probability(ds):
        return (
            "Benefit: the gain in the share of runs that meet each requirement, in percentage "
            "points (pp), summed over the requirements; ranked by benefit per 1,000 of cost. "
            f"Options equal there (as when several reach every requirement on every run) are "
            f"ordered by the share of the variance of {first} they remove per cost."
        )
    return (
        f"Benefit: the share of the variance of {first} the option removes, in %, ranked per "
        "1,000 of cost (no option moves the probability of meeting a requirement)."
    )


def _upgrade_rows(ds: xr.Dataset) -> list[list[str]]:
    currency = str(ds.attrs.get("currency", ""))
    rows = []
    for option in sorted(_options(ds), key=lambda u: int(ds["rank"].sel(upgrade=u))):
        item = ds.sel(upgrade=option)
        per_cost = 1000.0 * 100.0 * float(item["benefit_per_cost"])
        row = [
            str(int(item["rank"])),
            option,
            f"{float(item['cost']):,.0f} {currency}".strip(),
            format_number(100.0 * float(item["benefit"])),
        ]
        if _is_probability(ds) and "variance_removed_first" in item:
            row.append(format_percent(float(item["variance_removed_first"]), digits=0))
        row.append("free" if math.isinf(per_cost) else format_number(per_cost))
        rows.append(row)
    return rows


def plain_summary(ds: xr.Dataset) -> str:
    """One paragraph for a non-physicist: what is bought, what it changes, how sure we are."""
    n = int(ds.attrs.get("n_samples", 0) or 0)
    if "upgrade" in ds.dims:
        best = min(_options(ds), key=lambda u: int(ds["rank"].sel(upgrade=u)))
        item = ds.sel(upgrade=best)
        currency = str(ds.attrs.get("currency", ""))
        head = (
            f"Of {len(_options(ds))} options, '{best}' gives the most improvement per unit "
            f"of money ({float(item['cost']):,.0f} {currency})."
        )
    else:
        item = ds
        head = "The proposed change was compared with the present set-up."
    first = str(ds["output"].values[0])
    removed = float(item["variance_removed_fraction"].sel(output=first))
    parts = [head]
    if removed >= 0:
        parts.append(
            f"It removes {format_percent(removed)} of the run-to-run scatter (variance) of "
            f"{first.replace('_', ' ')}."
        )
    else:
        parts.append(
            f"It increases the run-to-run scatter (variance) of {first.replace('_', ' ')} by "
            f"{format_percent(-removed)}."
        )
    if "requirement" in ds.dims:
        for label in ds["requirement"].values:
            r = item.sel(requirement=label)
            pb, pa = float(r["probability_before"]), float(r["probability_after"])
            if math.isfinite(pb):
                parts.append(
                    f"The share of runs meeting '{label}' goes from {format_percent(pb)} to "
                    f"{format_percent(pa)}."
                )
    if ds.attrs.get("model_before") and ds.attrs.get("model_after") != ds.attrs["model_before"]:
        parts.append(
            f"The two sides use different models ({ds.attrs['model_before']} before, "
            f"{ds.attrs['model_after']} after): only the outputs both give are compared."
        )
    if ds.attrs.get("outputs_left_out"):
        parts.append(
            f"Left out, as only one side gives them: {ds.attrs['outputs_left_out']} "
            "(with any requirement on them)."
        )
    parts.append(
        f"How sure: both sides were simulated with the same {n} random runs of a physics "
        "model, so the difference is measured precisely (standard errors in the tables); "
        "whether the model describes this apparatus is the larger question, and a measurement "
        "before and after the change settles it."
    )
    return " ".join(parts)


def distribution_figure(ds: xr.Dataset, output: str) -> bytes:
    """Empirical distribution functions of an output before and after each change."""
    unit = _unit(ds, output)
    levels = np.asarray(ds["quantile"].values, dtype=float)
    base = np.asarray(_pick(ds, _options(ds)[0])["quantiles_before"].sel(output=output).values)
    scale, label = display_scale(unit, float(np.nanmax(np.abs(base))) or 1.0)
    colors = [BLUE, ORANGE, "#5a8a3a", "#8a3a6a", "#3a7a8a", "#7a6a3a"]
    with matplotlib.rc_context(FIGURE_STYLE):  # type: ignore[arg-type]
        fig, ax = subplots(figsize=(6.0, 3.4))
        ax.plot(base * scale, levels, color=GREY, lw=1.6, label="before")
        for k, option in enumerate(_options(ds)[: len(colors)]):
            after = _pick(ds, option)["quantiles_after"].sel(output=output).values
            ax.plot(
                np.asarray(after) * scale,
                levels,
                color=colors[k],
                lw=1.2,
                label=_plain_text(option),
            )
        text = output.replace("_", " ")
        ax.set_xlabel(f"{text} ({label})" if label and label != "1" else text)
        ax.set_ylabel("fraction of runs below")
        ax.legend(loc="lower right")
    return figure_png(fig)


def benefit_figure(ds: xr.Dataset) -> bytes:
    """Cost against benefit of each upgrade (benefit as in ``attrs['benefit_metric']``)."""
    costs = np.asarray(ds["cost"].values, dtype=float)
    benefit = np.asarray(ds["benefit"].values, dtype=float)
    with matplotlib.rc_context(FIGURE_STYLE):  # type: ignore[arg-type]
        fig, ax = subplots(figsize=(6.0, 3.6))
        ax.scatter(costs, benefit, color=BLUE, zorder=3)
        for name, x, y in zip(_options(ds), costs, benefit, strict=True):
            ax.annotate(
                _plain_text(name), (x, y), xytext=(4, 4), textcoords="offset points", fontsize=7
            )
        ax.axhline(0.0, color=GREY, lw=0.8)
        ax.set_xlabel(f"cost ({ds.attrs.get('currency', '')})".replace(" ()", ""))
        ax.set_ylabel(str(ds.attrs.get("benefit_metric", "benefit")))
    return figure_png(fig)


def comparison_json(ds: xr.Dataset) -> dict[str, Any]:
    """The machine-readable comparison: one entry per change, outputs and requirements."""
    keys = (
        "title",
        "title_before",
        "title_after",
        "model_before",
        "model_after",
        "outputs_left_out",
        "n_samples",
        "method",
        "seed",
        "confidence_level",
        "repetition_rate",
        "currency",
        "benefit_metric",
        "benefit_first_output",
    )
    out: dict[str, Any] = {k: plain_value(ds.attrs[k]) for k in keys if k in ds.attrs}
    if "upgrade" in ds.dims:
        out["benefit_definition"] = benefit_definition(ds)
    changes = []
    for option in _options(ds):
        item = _pick(ds, option)
        entry: dict[str, Any] = {"name": option}
        for key in ("cost", "benefit", "benefit_per_cost", "variance_removed_first", "rank"):
            if key in item:
                entry[key] = plain_value(item[key])
        if "upgrade" not in ds.dims:
            entry["cost"] = plain_value(ds.attrs.get("cost", math.nan))
        entry["outputs"] = dim_records(item, "output")
        if "requirement" in ds.dims:
            entry["requirements"] = dim_records(item, "requirement")
        changes.append(entry)
    out["changes"] = changes
    return out


def comparison_rich_tables(ds: xr.Dataset) -> list[Any]:
    """Rich tables for the terminal: the ranking (upgrades) and each change's outputs."""
    from rich import box
    from rich.table import Table as RichTable

    tables = []
    if "upgrade" in ds.dims:
        ranking = RichTable(
            title="Upgrades ranked by improvement per unit cost",
            title_justify="left",
            box=box.SIMPLE_HEAD,
            pad_edge=False,
        )
        for column in upgrade_columns(ds):
            ranking.add_column(column, overflow="fold")
        ranking.caption = benefit_definition(ds)
        ranking.caption_justify = "left"
        for row in _upgrade_rows(ds):
            ranking.add_row(*row)
        tables.append(ranking)
    for option in _options(ds):
        table = RichTable(
            title=f"{option}: before → after",
            title_justify="left",
            box=box.SIMPLE_HEAD,
            pad_edge=False,
        )
        table.add_column("output", no_wrap=True)
        for column in ("mean", "std"):
            table.add_column(column, justify="right", no_wrap=True)
        table.add_column("variance", justify="right", no_wrap=True)
        item = _pick(ds, option)
        for output in ds["output"].values:
            o = item.sel(output=output)
            unit = _unit(ds, str(output))
            removed = float(o["variance_removed_fraction"])
            change = (
                f"{format_percent(removed)} less"
                if removed >= 0
                else f"×{format_number(1.0 - removed)} more"
            )
            table.add_row(
                str(output),
                f"{_q(float(o['mean_before']), unit)}\n→ {_q(float(o['mean_after']), unit)}",
                f"{_q(float(o['std_before']), unit)}\n→ {_q(float(o['std_after']), unit)}",
                change,
            )
        notes = ["95 % intervals in the report and --json"]
        if ds.attrs.get("outputs_left_out"):
            notes.insert(
                0,
                f"{ds.attrs.get('model_before', '')} before, {ds.attrs.get('model_after', '')} "
                f"after; left out (only one side gives them): {ds.attrs['outputs_left_out']}",
            )
        table.caption = "\n".join(notes)
        table.caption_justify = "left"
        tables.append(table)
    rows = _requirement_rows(ds)
    if rows:
        table = RichTable(
            title="Requirements before → after",
            title_justify="left",
            box=box.SIMPLE_HEAD,
            pad_edge=False,
        )
        per_day = any(row[3] for row in rows)
        columns = ["change", "requirement", "probability met"]
        columns += ["failing runs per day"] if per_day else []
        for column in columns:
            table.add_column(column, ratio=1 if column == "requirement" else None)
        for row in rows:
            table.add_row(*(row if per_day else row[:3]))
        tables.append(table)
    return tables


def compare_section(
    datasets: Mapping[str, xr.Dataset], study: Mapping[str, Any]
) -> Section | None:
    """The before/after section (None when there is no ``comparison`` Dataset)."""
    ds = datasets.get("comparison")
    if ds is None:
        return None
    blocks: list[Any] = [Text(plain_summary(ds))]
    if "upgrade" in ds.dims:
        columns = upgrade_columns(ds)
        blocks.append(
            Table(
                columns,
                _upgrade_rows(ds),
                caption="Options ranked by improvement per unit cost. " + benefit_definition(ds),
                numeric=[True, False, *([True] * (len(columns) - 2))],
            )
        )
    for option in _options(ds):
        blocks.append(
            Table(
                ["Output", "Mean", "Std", "Interval before", "Interval after", "Variance removed"],
                _output_rows(ds, option),
                caption=f"{option}: outputs before → after "
                f"({format_percent(float(ds.attrs.get('confidence_level', 0.95)))} intervals)",
                numeric=[False, True, True, True, True, True],
            )
        )
    rows = _requirement_rows(ds)
    if rows:
        rate = float(ds.attrs.get("repetition_rate", math.nan))
        blocks.append(
            Table(
                ["Change", "Requirement", "Probability met", "Failing runs per day"],
                rows,
                caption="Requirements before → after (paired standard error of the shift)"
                + (f"; {format_number(rate)} runs per second" if math.isfinite(rate) else ""),
                numeric=[False, False, True, True],
            )
        )
    for output in ds["output"].values:
        blocks.append(
            Figure(
                f"compare-{output}",
                distribution_figure(ds, str(output)),
                caption=f"Distribution of {output} before and after.",
            )
        )
    if "upgrade" in ds.dims:
        blocks.append(
            Figure(
                "compare-cost-benefit",
                benefit_figure(ds),
                caption="Cost against benefit of each option.",
            )
        )
    blocks.append(Text(_LIMITS, kind="note"))
    return Section("Before and after", blocks)


register_section(compare_section)

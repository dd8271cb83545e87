"""Terminal tables (rich) for the command line, built from result Datasets."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import xarray as xr
from rich import box
from rich.table import Table

from trapbudget.reports.formatting import (
    display_scale,
    format_index,
    format_number,
    format_percent,
    format_quantity,
    main_index,
    output_unit,
)

__all__ = [
    "budget_tables",
    "inputs_rich_tables",
    "prediction_table",
    "print_bottom_line",
    "species_detail",
    "species_rich_table",
    "unranked_lines",
]


def prediction_table(linear: xr.Dataset, *, title: str = "", top: int = 3) -> Table:
    """Nominal outputs with first-order uncertainties and their largest contributions.

    Contributions are shares of the linear variance, (c_i u_i)^2 / u^2 (JCGM 100, 5.1.2,
    independent inputs), so the column fits 80 terminal columns whatever the unit.
    """
    table = Table(
        title=f"{title}: first-order (GUM) prediction" if title else None,
        title_justify="left",
        box=box.SIMPLE_HEAD,
        pad_edge=False,
    )
    for column, justify in (
        ("output", "left"),
        ("nominal", "right"),
        ("u (linear)", "right"),
        ("relative", "right"),
        ("largest shares of u²", "left"),
    ):
        table.add_column(column, justify=justify, no_wrap=column != "largest shares of u²")  # type: ignore[arg-type]
    inputs = [str(i) for i in linear["input"].values]
    for name in [str(o) for o in linear["output"].values]:
        row = linear.sel(output=name)
        unit = output_unit(name, linear)
        nominal = float(row["output_nominal"])
        std = float(row["output_std_linear"])
        contrib = np.nan_to_num(np.asarray(row["uncertainty_contribution"].values, float))
        order = np.argsort(-contrib, kind="stable")[:top]
        total = float(np.sum(contrib**2))
        tops = "\n".join(
            f"{inputs[i]} {format_percent(contrib[i] ** 2 / total, digits=0)}"
            for i in order
            if total > 0 and contrib[i] > 0
        )
        rel = format_percent(std / abs(nominal), digits=2) if nominal else ""
        table.add_row(name, format_quantity(nominal, unit), format_quantity(std, unit), rel, tops)
    return table


def budget_tables(summary: xr.Dataset, budget: xr.Dataset, *, top: int = 5) -> list[Any]:
    """One table per output: its Monte Carlo mean and spread, then its top drifts.

    Columns: rank, input, the headline index with the half-width of its confidence
    interval, the first-order index ("alone" with correlations: the full first order),
    and the spread share sqrt(index x variance) in output units. Fits 80 columns.
    """
    tables = []
    key, index_label = main_index(budget)
    for name in [str(o) for o in budget["output"].values]:
        unit = output_unit(name, summary, budget)
        head = ""
        if name in summary["output"].values:
            row = summary.sel(output=name)
            head = (
                f"{format_quantity(float(row['mean']), unit)} "
                f"+- {format_quantity(float(row['std']), unit)}"
            )
        table = Table(
            title=f"{name}: {head}" if head else name,
            title_justify="left",
            box=box.SIMPLE_HEAD,
            pad_edge=False,
        )
        second = "alone" if key == "shapley_effect" else "first order"
        table.add_column("#", justify="right")
        table.add_column("input", justify="left", no_wrap=True)
        table.add_column(index_label, justify="right", no_wrap=True)
        table.add_column(second, justify="right")
        table.add_column("spread share", justify="right", no_wrap=True)
        brow = budget.sel(output=name)
        order = np.argsort(np.asarray(brow["rank"].values, dtype=float), kind="stable")[:top]
        std = float(brow["output_std"]) if "output_std" in brow else float("nan")
        for i in order:
            item = brow.isel(input=int(i))
            total = float(item[key])
            share = (
                float(item["variance_share"])
                if "variance_share" in item
                else float(item["total_order"]) * std**2
            )
            label = str(item["input"].values)
            if "below_noise_floor" in item and bool(item["below_noise_floor"]):
                label += " (noise floor)"
            ci = ""
            if f"{key}_low" in item and f"{key}_high" in item:
                half = 0.5 * (float(item[f"{key}_high"]) - float(item[f"{key}_low"]))
                ci = f" ± {format_index(half)}" if np.isfinite(half) else ""
            table.add_row(
                str(int(item["rank"])),
                label,
                format_index(total) + ci,
                format_index(item["first_order"]),
                format_quantity(np.sqrt(max(share, 0.0)), unit),
            )
        tables.append(table)
    tables += unranked_lines(budget)
    return tables


def unranked_lines(budget: xr.Dataset) -> list[Any]:
    """One line per output the study could not rank, with the reason (rich Text)."""
    from rich.text import Text as RichText

    names = list(budget.attrs.get("unranked_outputs", []) or [])
    reasons = list(budget.attrs.get("unranked_reasons", []) or [])
    return [
        RichText(f"{name}: not ranked, {why}", style="yellow")
        for name, why in zip(names, reasons, strict=False)
    ]


#: Columns of the species table: key, header, significant digits.
SPECIES_COLUMNS: tuple[tuple[str, str, int], ...] = (
    ("wavelength_nm", "λ\nnm", 7),
    ("linewidth_mhz", "Γ/2π\nMHz", 4),
    ("saturation_intensity_mw_cm2", "I_sat\nmW/cm²", 4),
    ("mass_u", "mass\nu", 6),
    ("doppler_temperature_uk", "T_D\nµK", 4),
    ("recoil_temperature_nk", "T_r\nnK", 4),
)


def _rounded(value: Any, digits: int) -> str:
    try:
        return f"{float(value):.{digits}g}"
    except (TypeError, ValueError):
        return str(value)


def species_rich_table(rows: Sequence[Mapping[str, Any]]) -> Table:
    """The atomic data table (rows of ``trapbudget.models.catalog.species_table``).

    One row per species, values rounded to the digits people quote (the full values
    and their sources are in ``--json`` and :func:`species_detail`); fits 80 columns.
    """
    table = Table(
        title="Atomic data (cycling transition)",
        title_justify="left",
        box=box.SIMPLE_HEAD,
        pad_edge=False,
    )
    table.add_column("species", no_wrap=True)
    for _key, header, _digits in SPECIES_COLUMNS:
        table.add_column(header, justify="right", no_wrap=True)
    for row in rows:
        cells = [str(row.get("name", ""))]
        cells += [_rounded(row.get(key, ""), digits) for key, _h, digits in SPECIES_COLUMNS]
        table.add_row(*cells)
    return table


def species_detail(console: Any, row: Mapping[str, Any]) -> None:
    """Print one species: its line, each value with more digits, then the sources."""
    from rich.table import Table as RichTable

    console.print(f"[bold]{row.get('name', '')}[/bold]: {row.get('label', '')}")
    values = RichTable(show_header=False, box=None, pad_edge=False)
    values.add_column(no_wrap=True)
    values.add_column(justify="right", no_wrap=True)
    for key, header, digits in SPECIES_COLUMNS:
        name, unit = header.split("\n")
        values.add_row(f"{name} ({unit})", _rounded(row.get(key, ""), digits + 2))
    console.print(values)
    sources = row.get("sources") or {}
    if isinstance(sources, Mapping) and sources:
        cited = RichTable(title="Sources", title_justify="left", box=None, pad_edge=False)
        cited.add_column("value", no_wrap=True, style="bold")
        cited.add_column("source", ratio=1)
        for field, text in sources.items():
            cited.add_row(str(field), str(text))
        console.print(cited)


def inputs_rich_tables(
    rows: Sequence[Mapping[str, Any]], outputs: Sequence[Mapping[str, Any]], *, title: str = ""
) -> list[Table]:
    """A model's inputs (value, range, setting or constant, meaning) and outputs, 80 columns.

    Each input's meaning is the dim second line under its name.
    """
    inputs = Table(title=f"Inputs of {title}" if title else "Inputs", title_justify="left")
    inputs.add_column("input / meaning", overflow="fold", ratio=1)
    inputs.add_column("value", justify="right", no_wrap=True)
    inputs.add_column("valid range", justify="right", no_wrap=True)
    inputs.add_column("kind", no_wrap=True)
    for row in rows:
        unit = str(row["unit"])
        low, high = float(row["low"]), float(row["high"])
        typical = max(abs(v) for v in (low, high, 1e-300) if np.isfinite(v))
        factor, label = display_scale(unit, typical)
        span = f"{format_number(low * factor)} .. {format_number(high * factor)} {label}"
        kind = str(row["kind"]) + ("" if row["set_by"] == "default" else "*")
        name = f"[bold]{row['name']}[/bold]\n[dim]{row['meaning']}[/dim]"
        inputs.add_row(name, format_quantity(float(row["value"]), unit), span, kind)
    inputs.caption = "* set in the scenario (the others take the model's default)"
    outs = Table(title="Outputs", title_justify="left")
    outs.add_column("output", no_wrap=True)
    outs.add_column("unit", no_wrap=True)
    outs.add_column("meaning", overflow="fold", ratio=1)
    for row in outputs:
        outs.add_row(str(row["name"]), str(row["unit"]), str(row["meaning"]))
    return [inputs, outs]


def print_bottom_line(console: Any, sentences: Sequence[str]) -> None:
    """Print the bottom-line sentences, verdicts in colour, wrapped to the console width."""
    from rich.text import Text as RichText

    styles = {"MET": "bold green", "MISSED": "bold red", "CAUTION": "bold yellow", "NEXT": "bold"}
    console.print(RichText("Bottom line", style="bold underline"))
    for sentence in sentences:
        word, _, rest = sentence.partition(": ")
        text = RichText("- ")
        if word in styles:
            text.append(word, style=styles[word])
            text.append(": " + rest)
        else:
            text.append(sentence)
        console.print(text)

"""Figures of the report, drawn from result Datasets with matplotlib (no pyplot).

Every function takes Datasets (the schemas of DEVELOPERS.md) and returns PNG
bytes, so the HTML can embed them and the Markdown can sit beside them. The
style is deliberately plain: white background, one blue for estimates, grey
for reference marks, light grid.
"""

from __future__ import annotations

import io
from typing import Any

import matplotlib
import numpy as np
import xarray as xr
from matplotlib.figure import Figure

from trapbudget.reports.formatting import display_scale, main_index, units_of

__all__ = [
    "BLUE",
    "FIGURE_STYLE",
    "GREY",
    "LIGHT_BLUE",
    "ORANGE",
    "budget_figure",
    "convergence_figure",
    "figure_png",
    "histogram_figure",
    "interaction_figure",
    "scatter_figure",
    "subplots",
    "tick_label",
]

BLUE = "#2b5d8a"
LIGHT_BLUE = "#9bbbd6"
GREY = "#6b6b6b"
ORANGE = "#b8641c"

FIGURE_STYLE: dict[str, Any] = {
    "figure.facecolor": "white",
    "axes.facecolor": "white",
    "axes.edgecolor": "#444444",
    "axes.grid": True,
    "grid.color": "#e3e3e3",
    "grid.linewidth": 0.6,
    "axes.spines.top": False,
    "axes.spines.right": False,
    "font.size": 9,
    "axes.titlesize": 10,
    "axes.labelsize": 9,
    "legend.fontsize": 8,
    "legend.frameon": False,
    # no "1e-9" offset text drawn over the axis title: values carry SI-prefixed units instead
    "axes.formatter.useoffset": False,
}


def subplots(*args: Any, figsize: tuple[float, float] | None = None, **kwargs: Any):
    """A new :class:`matplotlib.figure.Figure` and its axes, like ``pyplot.subplots``.

    Figures are made without pyplot, so drawing a report neither changes a
    notebook's backend nor keeps figures alive in pyplot's list.
    """
    fig = Figure(figsize=figsize)
    return fig, fig.subplots(*args, **kwargs)


def tick_label(value: float, _position: Any = None) -> str:
    """A tick label that carries its own power of ten: ``0.5``, ``250``, ``4×10^9``.

    Matplotlib's default puts a shared multiplier or offset ("1e9", "1e-9") at the end of
    the axis, where it collides with the axis title and is easily missed.
    """
    if value == 0 or not np.isfinite(value):
        return "0" if value == 0 else ""
    text = f"{value:.6g}"
    if "e" not in text:
        return text
    mantissa, exponent = text.split("e")
    power = rf"10^{{{int(exponent)}}}"
    return rf"${power}$" if mantissa in ("1", "1.0") else rf"${mantissa}\times{power}$"


def _plain_ticks(fig: Figure) -> None:
    from matplotlib.ticker import FuncFormatter, ScalarFormatter

    for ax in fig.axes:
        for axis in (ax.xaxis, ax.yaxis):
            if type(axis.get_major_formatter()) is ScalarFormatter:
                axis.set_major_formatter(FuncFormatter(tick_label))


def figure_png(fig: Figure) -> bytes:
    """The figure as PNG bytes (no timestamp metadata, so reports are reproducible).

    Linear axes get :func:`tick_label` ticks (no shared multiplier over the axis title).
    """
    _plain_ticks(fig)
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=110, bbox_inches="tight", metadata={"Software": None})
    return buffer.getvalue()


def _finite(values: np.ndarray) -> np.ndarray:
    values = np.asarray(values, dtype=float).ravel()
    return values[np.isfinite(values)]


def _label(name: str, unit_label: str) -> str:
    text = name.replace("_", " ")
    return f"{text} ({unit_label})" if unit_label and unit_label != "1" else text


def histogram_figure(samples: xr.Dataset, summary: xr.Dataset, output: str) -> bytes:
    """Histogram of one output's samples with its nominal value and coverage interval.

    Parameters
    ----------
    samples : xarray.Dataset
        Samples Dataset (dim ``sample``) holding ``output``.
    summary : xarray.Dataset
        Summary Dataset (dim ``output``): ``mean``, ``interval_low``,
        ``interval_high`` and, when known, ``nominal``.
    output : str
        Output name.
    """
    values = _finite(samples[output].values)
    unit = units_of(samples, output)
    row = summary.sel(output=output)
    factor, unit_label = display_scale(unit, float(np.median(values)) if values.size else 1.0)
    with matplotlib.rc_context(FIGURE_STYLE):  # type: ignore[arg-type]
        fig, ax = subplots(figsize=(5.6, 3.0))
        if values.size:
            bins = int(np.clip(np.sqrt(values.size), 10, 60))
            ax.hist(values * factor, bins=bins, color=LIGHT_BLUE, edgecolor=BLUE, linewidth=0.4)
        low, high = float(row["interval_low"]), float(row["interval_high"])
        level = summary.attrs.get("confidence_level", 0.95)
        ax.axvspan(low * factor, high * factor, color=BLUE, alpha=0.08, lw=0)
        ax.axvline(low * factor, color=BLUE, ls="--", lw=1, label=f"{100 * level:.0f} % interval")
        ax.axvline(high * factor, color=BLUE, ls="--", lw=1)
        ax.axvline(float(row["mean"]) * factor, color=BLUE, lw=1.4, label="mean")
        if "nominal" in summary and np.isfinite(float(row["nominal"])):
            ax.axvline(float(row["nominal"]) * factor, color=ORANGE, lw=1.4, label="nominal")
        ax.set_xlabel(_label(output, unit_label))
        ax.set_ylabel("samples")
        ax.legend(loc="upper right")
        ax.set_title(f"Distribution of {output.replace('_', ' ')}")
        return figure_png(fig)


def _ranked_inputs(budget: xr.Dataset, output: str, top: int | None) -> list[str]:
    row = budget.sel(output=output)
    order = np.argsort(np.asarray(row["rank"].values, dtype=float), kind="stable")
    names = [str(budget["input"].values[i]) for i in order]
    return names if top is None else names[:top]


def budget_figure(budget: xr.Dataset, output: str, *, top: int = 12) -> bytes:
    """Ranked first- and total-order indices of one output with their confidence intervals.

    Inputs below the noise floor (``below_noise_floor``) are drawn in grey.
    """
    names = _ranked_inputs(budget, output, top)
    row = budget.sel(output=output, input=names)
    y = np.arange(len(names))[::-1]
    level = budget.attrs.get("confidence_level", 0.95)
    floor = (
        np.asarray(row["below_noise_floor"].values, dtype=bool)
        if "below_noise_floor" in row
        else np.zeros(len(names), dtype=bool)
    )
    with matplotlib.rc_context(FIGURE_STYLE):  # type: ignore[arg-type]
        fig, ax = subplots(figsize=(5.6, 0.9 + 0.32 * len(names)))
        key, label = main_index(budget)
        total = np.asarray(row[key].values, dtype=float)
        first = np.asarray(row["first_order"].values, dtype=float)
        colours = [GREY if f else BLUE for f in floor]
        ax.barh(y + 0.18, total, height=0.34, color=colours, label=label)
        ax.barh(y - 0.18, first, height=0.34, color=LIGHT_BLUE, label="first order")
        for lo_key, hi_key, centre, dy in (
            (f"{key}_low", f"{key}_high", total, 0.18),
            ("first_order_low", "first_order_high", first, -0.18),
        ):
            if lo_key in row and hi_key in row:
                lo = np.asarray(row[lo_key].values, dtype=float)
                hi = np.asarray(row[hi_key].values, dtype=float)
                err = np.vstack([np.clip(centre - lo, 0, None), np.clip(hi - centre, 0, None)])
                ax.errorbar(centre, y + dy, xerr=err, fmt="none", ecolor="#222222", lw=0.8)
        ax.set_yticks(y, [n.replace("_", " ") for n in names])
        ax.set_xlabel(f"sensitivity index (lines: {100 * level:.0f} % confidence interval)")
        ax.set_xlim(left=min(0.0, float(np.nanmin(np.r_[first, 0.0]))))
        ax.legend(loc="lower right")
        ax.set_title(f"What drives {output.replace('_', ' ')}")
        return figure_png(fig)


def scatter_figure(
    samples: xr.Dataset, budget: xr.Dataset, output: str, *, top: int = 3, max_points: int = 3000
) -> bytes:
    """Scatter plots of one output against its ``top`` ranked inputs (a fixed subsample)."""
    names = [n for n in _ranked_inputs(budget, output, None) if n in samples][:top]
    y_all = np.asarray(samples[output].values, dtype=float)
    n = y_all.size
    # An evenly spaced subsample: deterministic and keeps the design's spread.
    index = np.unique(np.linspace(0, n - 1, min(n, max_points)).astype(int)) if n else []  # type: ignore[var-annotated]
    y = y_all[index]
    y_factor, y_unit = display_scale(units_of(samples, output), float(np.nanmedian(y)) if n else 1)
    with matplotlib.rc_context(FIGURE_STYLE):  # type: ignore[arg-type]
        fig, axes = subplots(
            1, max(1, len(names)), figsize=(2.2 + 2.0 * max(1, len(names)), 2.6), squeeze=False
        )
        for ax, name in zip(axes[0], names, strict=False):
            x = np.asarray(samples[name].values, dtype=float)[index]
            x_factor, x_unit = display_scale(units_of(samples, name), float(np.nanmedian(x)))
            ax.scatter(x * x_factor, y * y_factor, s=3, color=BLUE, alpha=0.35, linewidths=0)
            ax.set_xlabel(_label(name, x_unit))
        axes[0][0].set_ylabel(_label(output, y_unit))
        fig.suptitle(f"{output.replace('_', ' ')} against its top drifts", fontsize=10)
        return figure_png(fig)


def convergence_figure(budget: xr.Dataset, output: str, *, top: int = 6) -> bytes | None:
    """The ranking index (total order, or delta) of the top inputs against N, or None."""
    key, label = main_index(budget)
    if f"history_{key}" not in budget:
        return None
    names = _ranked_inputs(budget, output, top)
    history = budget[f"history_{key}"].sel(output=output)
    steps = np.asarray(budget["step_n_samples"].values, dtype=float)
    with matplotlib.rc_context(FIGURE_STYLE):  # type: ignore[arg-type]
        fig, ax = subplots(figsize=(5.6, 3.0))
        for name in names:
            ax.plot(steps, history.sel(input=name).values, marker="o", ms=3, lw=1, label=name)
        ax.set_xscale("log", base=2)
        ax.set_xlabel("base sample size N")
        ax.set_ylabel(f"{label} index" if "index" not in label else label)
        ax.legend(loc="center left", bbox_to_anchor=(1.0, 0.5))
        ax.set_title(f"Convergence of the indices of {output.replace('_', ' ')}")
        return figure_png(fig)


def interaction_figure(budget: xr.Dataset, output: str, *, top: int = 8) -> bytes | None:
    """Heat map of the second-order indices among the top inputs, or None when not computed."""
    if "second_order" not in budget:
        return None
    names = _ranked_inputs(budget, output, top)
    matrix = budget["second_order"].sel(output=output, input=names, input_b=names).values
    matrix = np.asarray(matrix, dtype=float)
    sym = np.where(np.isfinite(matrix), matrix, matrix.T)
    with matplotlib.rc_context({**FIGURE_STYLE, "axes.grid": False}):  # type: ignore[dict-item]
        fig, ax = subplots(figsize=(4.8, 4.0))
        image = ax.imshow(np.clip(sym, 0, None), cmap="Blues", vmin=0)
        labels = [n.replace("_", " ") for n in names]
        ax.set_xticks(range(len(names)), labels, rotation=45, ha="right")
        ax.set_yticks(range(len(names)), labels)
        fig.colorbar(image, ax=ax, label="second-order index")
        ax.set_title(f"Interactions ({output.replace('_', ' ')})")
        return figure_png(fig)

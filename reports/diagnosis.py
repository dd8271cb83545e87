"""Report section for a drift diagnosis (``trapbudget diagnose``).

Built from the ``diagnosis`` Dataset (:meth:`Diagnosis.to_dataset
<trapbudget.sensitivity.lab.diagnose.Diagnosis.to_dataset>`): measured against
predicted atom number over time, the daily change split over the monitored
channels, the channels ranked, and the days whose change the channels do not
explain.
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
from trapbudget.reports.formatting import format_number, format_percent

__all__ = [
    "attribution_figure",
    "day_rows",
    "diagnosis_json",
    "diagnosis_section",
    "time_series_figure",
]

_PALETTE = [BLUE, ORANGE, "#4d8b57", "#7a4d8b", "#b33a3a", "#3a8bb3", GREY, "#8b7a4d"]


def _days(ds: xr.Dataset) -> list[str]:
    return [str(d)[:10] for d in ds["day"].values]


def time_series_figure(ds: xr.Dataset) -> bytes:
    """Measured and predicted output per log entry; flagged days shaded."""
    time = ds["time"].values
    with matplotlib.rc_context(FIGURE_STYLE):  # type: ignore[arg-type]
        fig, ax = subplots(figsize=(6.8, 2.9))
        for day, flagged in zip(ds["day"].values, ds["flagged"].values, strict=True):
            if flagged:
                ax.axvspan(day, day + np.timedelta64(1, "D"), color=ORANGE, alpha=0.15, lw=0)
        ax.plot(time, ds["measured"].values, ".", ms=2.5, color=GREY, label="measured")
        ax.plot(time, ds["predicted"].values, "-", lw=1.2, color=BLUE, label="predicted")
        ax.set_ylabel(str(ds.attrs.get("output", "output")).replace("_", " "))
        ax.legend(loc="best")
        fig.autofmt_xdate()
        return figure_png(fig)


def attribution_figure(ds: xr.Dataset) -> bytes:
    """Stacked daily attribution per channel (relative to the reference), measured marked."""
    level = float(ds.attrs.get("reference_level", 1.0)) or 1.0
    phi = np.asarray(ds["attribution"].values, dtype=float) / level
    x = np.arange(ds.sizes["day"])
    with matplotlib.rc_context(FIGURE_STYLE):  # type: ignore[arg-type]
        fig, ax = subplots(figsize=(6.8, 3.2))
        pos = np.zeros(x.size)
        neg = np.zeros(x.size)
        for j, name in enumerate(ds["channel"].values):
            col = phi[:, j]
            bottom = np.where(col >= 0, pos, neg)
            ax.bar(
                x,
                col,
                bottom=bottom,
                color=_PALETTE[j % len(_PALETTE)],
                width=0.7,
                label=str(name).replace("_", " "),
            )
            pos += np.where(col >= 0, col, 0)
            neg += np.where(col < 0, col, 0)
        measured = np.asarray(ds["measured_change"].values, dtype=float) / level
        sigma = np.asarray(ds["remainder_sigma"].values, dtype=float) / level
        predicted = np.asarray(ds["predicted_change"].values, dtype=float) / level
        ax.errorbar(x, measured, yerr=sigma, fmt="kD", ms=4, lw=1, label="measured change")
        ax.plot(x, predicted, "_", color="k", ms=14, mew=1.5, label="predicted change")
        flagged = np.asarray(ds["flagged"].values, dtype=bool)
        for i in np.flatnonzero(flagged):
            ax.annotate(
                "flagged",
                (x[i], measured[i]),
                textcoords="offset points",
                xytext=(0, -14),
                ha="center",
                color=ORANGE,
                fontsize=8,
            )
        ax.axhline(0, color="#444444", lw=0.8)
        ax.set_xticks(x, _days(ds), rotation=30, ha="right")
        ax.set_ylabel("change vs reference (fraction)")
        ax.legend(loc="center left", bbox_to_anchor=(1.0, 0.5))
        return figure_png(fig)


def day_rows(ds: xr.Dataset) -> list[list[str]]:
    """Rows: day, entries, measured change, predicted change, remainder, z, verdict."""
    level = float(ds.attrs.get("reference_level", 1.0)) or 1.0
    rows = []
    for i, day in enumerate(_days(ds)):
        if bool(ds["reference"][i]):
            verdict = "reference"
        elif bool(ds["flagged"][i]):
            verdict = "FLAGGED: not explained by the monitored channels"
        else:
            verdict = "explained"
        rows.append(
            [
                day,
                str(int(ds["entries"][i])),
                format_percent(float(ds["measured_change"][i]) / level),
                format_percent(float(ds["predicted_change"][i]) / level),
                format_percent(float(ds["remainder"][i]) / level),
                f"{float(ds['z'][i]):+.1f}",
                verdict,
            ]
        )
    return rows


def diagnosis_section(
    datasets: Mapping[str, xr.Dataset], study: Mapping[str, Any]
) -> Section | None:
    """The drift section, or None without a ``diagnosis`` Dataset."""
    ds = datasets.get("diagnosis")
    if ds is None:
        return None
    alpha = float(ds.attrs.get("false_alarm_rate", math.nan))
    share = np.asarray(ds["variance_share"].values, dtype=float)
    order = np.argsort(-share)
    ranking = Table(
        ["rank", "log channel", "model input", "share of the movement"],
        [
            [
                str(k + 1),
                str(ds["channel"].values[j]),
                str(ds["input"].values[j]),
                format_percent(share[j]),
            ]
            for k, j in enumerate(order)
        ],
        caption="Channels ranked by their share of the mean square daily attribution",
        numeric=[True, False, False, True],
    )
    blocks: list[Any] = [Text(str(m)) for m in ds.attrs.get("messages", []) or []]
    blocks += [
        Figure(
            "drift-time-series",
            time_series_figure(ds),
            caption="Measured and predicted atom number; flagged days shaded",
        ),
        Figure(
            "drift-attribution",
            attribution_figure(ds),
            caption="Daily change against the reference split over the monitored channels "
            "(exact Shapley attribution: the bars sum to the predicted change); measured "
            "change with the standard deviation allowed for the remainder",
        ),
        ranking,
        Table(
            ["day", "entries", "measured change", "predicted change", "remainder", "z", "verdict"],
            day_rows(ds),
            caption=(
                f"Changes relative to the reference level; flagged when |z| > "
                f"{format_number(float(ds.attrs.get('threshold', math.nan)))} "
                f"(false-alarm rate {format_number(alpha, digits=2)} per day)"
            ),
            numeric=[False, True, True, True, True, True, False],
        ),
        Text(
            "The attribution is only as good as the model and the calibration: a channel "
            "that is not logged cannot be blamed, and a flagged day says where to look, not "
            "what broke. Inspect the apparatus only under your lab's laser and electrical "
            "safety rules.",
            kind="note",
        ),
    ]
    return Section("Day-to-day drift", blocks)


def _num(value: Any) -> float | None:
    value = float(value)
    return value if math.isfinite(value) else None


def diagnosis_json(ds: xr.Dataset) -> dict[str, Any]:
    """Machine-readable diagnosis (plain Python values; non-finite numbers as null)."""
    channels = [str(c) for c in ds["channel"].values]
    days = []
    for i, day in enumerate(_days(ds)):
        days.append(
            {
                "day": day,
                "entries": int(ds["entries"][i]),
                "reference": bool(ds["reference"][i]),
                "measured_change": _num(ds["measured_change"][i]),
                "predicted_change": _num(ds["predicted_change"][i]),
                "attribution": {c: _num(ds["attribution"][i, j]) for j, c in enumerate(channels)},
                "remainder": _num(ds["remainder"][i]),
                "remainder_sigma": _num(ds["remainder_sigma"][i]),
                "z": _num(ds["z"][i]),
                "flagged": bool(ds["flagged"][i]),
            }
        )
    share = np.asarray(ds["variance_share"].values, dtype=float)
    return {
        "output": str(ds.attrs.get("output")),
        "reference_level": _num(ds.attrs.get("reference_level", math.nan)),
        "false_alarm_rate": _num(ds.attrs.get("false_alarm_rate", math.nan)),
        "threshold": _num(ds.attrs.get("threshold", math.nan)),
        "ranking": [
            {"channel": channels[j], "input": str(ds["input"].values[j]), "share": _num(share[j])}
            for j in np.argsort(-share)
        ],
        "days": days,
        "flagged_days": [d["day"] for d in days if d["flagged"]],
        "skipped_rows": int(ds.attrs.get("skipped_rows", 0)),
        "ignored_columns": list(ds.attrs.get("ignored_columns", []) or []),
        "messages": list(ds.attrs.get("messages", []) or []),
    }


register_section(diagnosis_section)


def diagnosis_rich_tables(ds: xr.Dataset) -> list[Any]:
    """Rich renderables for the terminal: the messages, the channel ranking, the days."""
    from rich.table import Table as RichTable

    out: list[Any] = list(ds.attrs.get("messages", []) or [])
    share = np.asarray(ds["variance_share"].values, dtype=float)
    ranking = RichTable(title="Channels by share of the daily movement")
    for column in ("rank", "log channel", "model input", "share"):
        ranking.add_column(column, justify="right" if column in ("rank", "share") else "left")
    for k, j in enumerate(np.argsort(-share)):
        ranking.add_row(
            str(k + 1),
            str(ds["channel"].values[j]),
            str(ds["input"].values[j]),
            format_percent(share[j]),
        )
    days = RichTable(title="Days against the reference")
    for column in ("day", "entries", "measured", "predicted", "remainder", "z", "verdict"):
        days.add_column(column, justify="left" if column in ("day", "verdict") else "right")
    for row in day_rows(ds):
        days.add_row(*row)
    return [*out, ranking, days]

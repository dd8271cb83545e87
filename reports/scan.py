"""Report section, terminal tables and JSON for scans (``trapbudget scan``).

Built from the ``scan`` Dataset of :func:`trapbudget.sensitivity.scanning.scan`:
per output a curve (one swept setting) or a pair of maps (two), with the
coverage band a lab would see at each setting, the model at nominal drawn
dashed and the scenario's nominal setting marked.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import matplotlib
import numpy as np
import xarray as xr

from trapbudget.reports.blocks import Figure, Section, Table, Text, register_section
from trapbudget.reports.figures import BLUE, FIGURE_STYLE, GREY, LIGHT_BLUE, figure_png, subplots
from trapbudget.reports.formatting import display_scale, format_number, format_percent

__all__ = [
    "scan_figure",
    "scan_json",
    "scan_rich_tables",
    "scan_section",
    "scan_summary",
]

#: Grid points shown per swept setting in the terminal and report tables.
TABLE_POINTS = 9


def _swept(ds: xr.Dataset) -> list[str]:
    return [str(s) for s in np.atleast_1d(ds.attrs.get("swept", []))]


def _input_unit(ds: xr.Dataset, name: str) -> str:
    return str(ds[name].attrs.get("units", ""))


def _output_unit(ds: xr.Dataset, output: str) -> str:
    return str(ds.attrs.get(f"units_{output}", ""))


def _scale(unit: str, values: Any) -> tuple[float, str]:
    finite = np.asarray(values, dtype=float)
    finite = finite[np.isfinite(finite)]
    typical = float(np.median(np.abs(finite))) if finite.size else 0.0
    return display_scale(unit, typical)


def _axis_label(name: str, label: str) -> str:
    return f"{name} ({label})" if label else name


def _level(ds: xr.Dataset) -> str:
    return format_percent(float(ds.attrs.get("confidence_level", 0.95)), digits=0)


def _shown(values: np.ndarray, factor: float) -> str:
    return format_number(float(values) * factor) if math.isfinite(float(values)) else "no trap"


def _rows_index(n: int) -> list[int]:
    if n <= TABLE_POINTS:
        return list(range(n))
    return sorted({round(float(i)) for i in np.linspace(0, n - 1, TABLE_POINTS)})


def _at(ds: xr.Dataset, swept: list[str], where: tuple[Any, ...]) -> str:
    at = []
    for axis, name in enumerate(swept):
        f, lab = _scale(_input_unit(ds, name), ds[name].values)
        at.append(
            f"{name} = {format_number(float(ds[name].values[where[axis]]) * f)} {lab}".rstrip()
        )
    return " and ".join(at)


def scan_summary(ds: xr.Dataset) -> str:
    """A plain-language paragraph: where each output is best and how wide its band is."""
    swept = _swept(ds)
    level = _level(ds)
    parts = []
    for output in [str(o) for o in ds["output"].values]:
        values = np.asarray(ds["median"].sel(output=output).values, dtype=float)
        if not np.isfinite(values).any():
            parts.append(f"{output}: no trap anywhere on the scanned grid.")
            continue
        factor, label = _scale(_output_unit(ds, output), values)

        def q(x: float, factor: float = factor, label: str = label) -> str:
            return f"{format_number(x * factor)} {label}".rstrip()

        best = np.unravel_index(int(np.nanargmax(values)), values.shape)
        near = tuple(
            int(np.argmin(np.abs(ds[name].values - float(ds.attrs.get(f"nominal_{name}", 0.0)))))
            for name in swept
        )
        low = float(ds["low"].sel(output=output).values[near])
        high = float(ds["high"].sel(output=output).values[near])
        parts.append(
            f"{output} runs from {q(float(np.nanmin(values)))} to {q(float(np.nanmax(values)))} "
            f"(median) over the scan and is largest at {_at(ds, swept, best)}; at the grid "
            f"point nearest the nominal ({_at(ds, swept, near)}) the median is "
            f"{q(float(values[near]))}, {level} of runs between {q(low)} and {q(high)}."
        )
    others = list(np.atleast_1d(ds.attrs.get("propagated", [])))
    conditioned = list(np.atleast_1d(ds.attrs.get("conditioned", [])))
    spread = (
        f"At each setting the other {len(others)} uncertain inputs are drawn from "
        f"{int(ds.attrs.get('n_samples', 0))} common random draws"
        + (
            f" ({', '.join(map(str, conditioned))} conditioned on the swept value through "
            "their correlation)"
            if conditioned
            else ""
        )
        + f"; the band holds {level} of the runs a lab would see there (JCGM 101 7.7), "
        "not a confidence band on the mean."
        if others
        else "No other input is uncertain, so the band is the model itself."
    )
    return " ".join([*parts, spread])


def scan_figure(ds: xr.Dataset, output: str) -> bytes:
    """PNG of one output over the scan: a curve with its band, or median and band-width maps."""
    swept = _swept(ds)
    unit = _output_unit(ds, output)
    med = np.asarray(ds["median"].sel(output=output).values, dtype=float)
    factor, label = _scale(unit, med)
    level = _level(ds)
    with matplotlib.rc_context(FIGURE_STYLE):  # type: ignore[arg-type]
        if len(swept) == 1:
            name = swept[0]
            fx, lx = _scale(_input_unit(ds, name), ds[name].values)
            x = np.asarray(ds[name].values, dtype=float) * fx
            fig, ax = subplots(figsize=(6.0, 3.6))
            low = np.asarray(ds["low"].sel(output=output).values, dtype=float) * factor
            high = np.asarray(ds["high"].sel(output=output).values, dtype=float) * factor
            ax.fill_between(x, low, high, color=LIGHT_BLUE, alpha=0.6, lw=0, label=f"{level} band")
            ax.plot(x, med * factor, color=BLUE, lw=1.6, label="median")
            nominal = np.asarray(ds["nominal_curve"].sel(output=output).values, dtype=float)
            ax.plot(x, nominal * factor, color=GREY, lw=1.0, ls="--", label="others at nominal")
            ax.axvline(
                float(ds.attrs.get(f"nominal_{name}", math.nan)) * fx,
                color=GREY,
                lw=0.8,
                ls=":",
                label="scenario nominal",
            )
            ax.set_xlabel(_axis_label(name, lx))
            ax.set_ylabel(_axis_label(output, label))
            ax.legend(loc="best")
        else:
            a, b = swept[:2]
            fa, la = _scale(_input_unit(ds, a), ds[a].values)
            fb, lb = _scale(_input_unit(ds, b), ds[b].values)
            xa = np.asarray(ds[a].values, dtype=float) * fa
            xb = np.asarray(ds[b].values, dtype=float) * fb
            width = np.asarray(
                (ds["high"] - ds["low"]).sel(output=output).values, dtype=float
            ) / np.where(np.abs(med) > 0, np.abs(med), np.nan)
            fig, axes = subplots(1, 2, figsize=(8.4, 3.4))
            for ax, values, title in (
                (axes[0], med * factor, f"median {output}" + (f" ({label})" if label else "")),
                (axes[1], width * 100.0, f"{level} band width / median (%)"),
            ):
                mesh = ax.pcolormesh(xb, xa, values, shading="auto", cmap="viridis")
                fig.colorbar(mesh, ax=ax)
                ax.plot(
                    float(ds.attrs.get(f"nominal_{b}", math.nan)) * fb,
                    float(ds.attrs.get(f"nominal_{a}", math.nan)) * fa,
                    marker="+",
                    color="white",
                    ms=10,
                    mew=1.6,
                )
                ax.set_xlabel(_axis_label(b, lb))
                ax.set_ylabel(_axis_label(a, la))
                ax.set_title(title)
                ax.grid(False)
        return figure_png(fig)


def _table_rows(ds: xr.Dataset, output: str) -> tuple[list[str], list[list[str]]]:
    swept = _swept(ds)
    unit = _output_unit(ds, output)
    med = np.asarray(ds["median"].sel(output=output).values, dtype=float)
    factor, label = _scale(unit, med)
    if len(swept) == 1:
        name = swept[0]
        fx, lx = _scale(_input_unit(ds, name), ds[name].values)
        low = ds["low"].sel(output=output).values
        high = ds["high"].sel(output=output).values
        invalid = ds["invalid_fraction"].values
        header = [
            _axis_label(name, lx),
            "median" + (f" ({label})" if label else ""),
            f"{_level(ds)} band",
            "no-trap share",
        ]
        rows = [
            [
                format_number(float(ds[name].values[i]) * fx),
                _shown(med[i], factor),
                f"{_shown(low[i], factor)} to {_shown(high[i], factor)}",
                format_percent(float(invalid[i]), digits=0),
            ]
            for i in _rows_index(med.size)
        ]
        return header, rows
    a, b = swept[:2]
    fa, la = _scale(_input_unit(ds, a), ds[a].values)
    fb, lb = _scale(_input_unit(ds, b), ds[b].values)
    cols = _rows_index(ds[b].size)[:: max(1, math.ceil(len(_rows_index(ds[b].size)) / 5))]
    header = [f"{a} \\ {b}"] + [format_number(float(ds[b].values[j]) * fb) for j in cols]
    rows = [
        [f"{format_number(float(ds[a].values[i]) * fa)}"]
        + [_shown(med[i, j], factor) for j in cols]
        for i in _rows_index(ds[a].size)
    ]
    header[0] = f"{a} ({la}) \\ {b} ({lb})" if (la or lb) else header[0]
    return header, rows


def scan_rich_tables(ds: xr.Dataset) -> list[Any]:
    """One rich table per output at up to nine grid points per swept setting."""
    from rich.table import Table as RichTable

    tables = []
    for output in [str(o) for o in ds["output"].values]:
        header, rows = _table_rows(ds, output)
        unit = _output_unit(ds, output)
        _, label = _scale(unit, ds["median"].sel(output=output).values)
        title = f"{output}" + (f" ({label})" if label and len(_swept(ds)) > 1 else "")
        table = RichTable(title=title, title_justify="left")
        for i, column in enumerate(header):
            table.add_column(column, justify="right" if i else "left", overflow="fold")
        for row in rows:
            table.add_row(*row)
        tables.append(table)
    return tables


def _plain(values: Any) -> Any:
    """Nested lists of floats with None where the model gives no trap (JSON has no NaN)."""
    arr = np.asarray(values, dtype=float)
    if arr.ndim == 0:
        return float(arr) if math.isfinite(float(arr)) else None
    return [_plain(v) for v in arr]


def scan_json(ds: xr.Dataset) -> dict[str, Any]:
    """The scan as plain JSON-serialisable values: the grid and, per output, the curves."""
    swept = _swept(ds)
    grid = {name: [float(v) for v in ds[name].values] for name in swept}
    outputs: dict[str, Any] = {}
    for output in [str(o) for o in ds["output"].values]:
        outputs[output] = {
            "unit": _output_unit(ds, output),
            **{
                key: _plain(ds[key].sel(output=output).values)
                for key in ("median", "mean", "std", "low", "high", "nominal_curve")
            },
        }
    return {
        "kind": "scan",
        "swept": swept,
        "grid": grid,
        "grid_units": {name: _input_unit(ds, name) for name in swept},
        "nominal": {name: float(ds.attrs.get(f"nominal_{name}", math.nan)) for name in swept},
        "confidence_level": float(ds.attrs.get("confidence_level", 0.95)),
        "n_samples": int(ds.attrs.get("n_samples", 0)),
        "n_evaluations": int(ds.attrs.get("n_evaluations", 0)),
        "propagated": [str(v) for v in np.atleast_1d(ds.attrs.get("propagated", []))],
        "conditioned": [str(v) for v in np.atleast_1d(ds.attrs.get("conditioned", []))],
        "invalid_fraction": _plain(ds["invalid_fraction"].values),
        "outputs": outputs,
        "summary": scan_summary(ds),
    }


def scan_section(datasets: Mapping[str, xr.Dataset], study: Mapping[str, Any]) -> Section | None:
    """The scan section (None when there is no ``scan`` Dataset)."""
    ds = datasets.get("scan")
    if ds is None:
        return None
    swept = _swept(ds)
    blocks: list[Any] = [Text(scan_summary(ds))]
    for output in [str(o) for o in ds["output"].values]:
        what = (
            f"median and {_level(ds)} band against {swept[0]}; dashed: the model with the other "
            "inputs at nominal; dotted: the scenario's nominal"
            if len(swept) == 1
            else f"median (left) and relative width of the {_level(ds)} band (right) over "
            f"{swept[0]} and {swept[1]}; +: the scenario's nominal"
        )
        blocks.append(
            Figure(f"scan-{output}", scan_figure(ds, output), caption=f"{output}: {what}.")
        )
        header, rows = _table_rows(ds, output)
        blocks.append(
            Table(
                header,
                rows,
                caption=f"{output} at {len(rows)} of the scanned settings",
                numeric=[True] * len(header),
            )
        )
    return Section(f"Scan of {' and '.join(swept)}", blocks)


register_section(scan_section)

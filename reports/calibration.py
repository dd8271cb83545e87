"""Report section for a calibration (``trapbudget calibrate``).

Built from the ``calibration`` Dataset (:meth:`Calibration.to_dataset
<trapbudget.sensitivity.lab.calibration.Calibration.to_dataset>`): the fitted
constants with their uncertainties, their correlations, the quality of the
fit, the residuals, and plainly what the data could not pin down.
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

__all__ = [
    "calibration_json",
    "calibration_section",
    "constant_rows",
    "fit_figure",
    "residual_figure",
    "trace_figure",
]


def _value(value: float, unit: str) -> str:
    if not math.isfinite(value):
        return "n/a"
    return format_quantity(value, unit) if unit and unit != "1" else format_number(value, digits=4)


def constant_rows(ds: xr.Dataset) -> list[list[str]]:
    """Rows: constant, start, fitted, standard uncertainty, relative uncertainty, status."""
    units = ds.attrs.get("units", {}) or {}
    rows = []
    for i, name in enumerate(ds["constant"].values):
        name = str(name)
        unit = str(units.get(name, ""))
        value = float(ds["value"][i])
        u = float(ds["uncertainty"][i])
        fitted = bool(ds["fitted"][i])
        rows.append(
            [
                name,
                _value(float(ds["start"][i]), unit),
                _value(value, unit) if fitted else "not fitted",
                _value(u, unit) if fitted else "-",
                format_percent(u / abs(value)) if fitted and value else "-",
                "fitted" if fitted else "held: not determined by the data",
            ]
        )
    return rows


def residual_figure(ds: xr.Dataset) -> bytes:
    """Normalised residuals (measured - predicted) / u per observation, by output."""
    outputs = [str(o) for o in ds["output"].values]
    residual = np.asarray(ds["normalized_residual"].values, dtype=float)
    colours = [BLUE, ORANGE, GREY, "#4d8b57", "#7a4d8b"]
    with matplotlib.rc_context(FIGURE_STYLE):  # type: ignore[arg-type]
        fig, ax = subplots(figsize=(6.4, 2.8))
        for k, name in enumerate(dict.fromkeys(outputs)):
            idx = np.flatnonzero(np.array(outputs) == name)
            ax.plot(
                idx,
                residual[idx],
                "o",
                ms=4,
                color=colours[k % len(colours)],
                label=name.replace("_", " "),
            )
        for level in (-2, 2):
            ax.axhline(level, color=GREY, lw=0.8, ls="--")
        ax.axhline(0, color="#444444", lw=0.8)
        ax.set_xlabel("observation")
        ax.set_ylabel("(measured - predicted) / u")
        ax.legend(loc="upper right", ncols=min(3, len(set(outputs))))
        return figure_png(fig)


def _measured(ax, x, y, sigma, *, size: float) -> None:
    """Measured points with their standard uncertainties (none drawn where unknown)."""
    ax.errorbar(
        x,
        y,
        yerr=np.where(np.isfinite(sigma), sigma, 0.0),
        fmt="o",
        ms=size,
        color=ORANGE,
        capsize=size * 0.6,
        label="measured",
    )


def _panels(n: int, columns: int, figsize: tuple[float, float]) -> tuple[Any, list[Any]]:
    """A figure with a grid of ``n`` panels, ``columns`` wide; the unused places hidden."""
    rows = math.ceil(n / columns)
    fig, axes = subplots(rows, columns, figsize=figsize, squeeze=False)
    flat = [axes[k // columns][k % columns] for k in range(rows * columns)]
    for ax in flat[n:]:
        ax.set_visible(False)
    return fig, flat[:n]


def fit_figure(ds: xr.Dataset) -> bytes | None:
    """Each data set against the model: measured points with their standard uncertainties,
    the model with the fitted constants (line) and with the starting ones (dashed), over
    the setting the data set scans. None when the Dataset holds no curves."""
    if "curve" not in ds.dims or ds.sizes["curve"] == 0:
        return None
    n_curves = ds.sizes["curve"]
    columns = min(2, n_curves)
    rows = math.ceil(n_curves / columns)
    measured = np.asarray(ds["measured"].values, dtype=float)
    sigma = np.asarray(ds["measurement_uncertainty"].values, dtype=float)
    owner = np.asarray(ds["observation_curve"].values)
    x_obs = np.asarray(ds["observation_x"].values, dtype=float)
    with matplotlib.rc_context(FIGURE_STYLE):  # type: ignore[arg-type]
        fig, axes = _panels(n_curves, columns, (6.4 if columns == 2 else 4.2, 2.7 * rows))
        for k, ax in enumerate(axes):
            curve = ds.isel(curve=k)
            axis = str(curve["curve_axis"].values)
            output = str(curve["curve_output"].values)
            mine = owner == k
            y_unit = str(curve["curve_output_unit"].values)
            y_factor, y_label = display_scale(y_unit, float(np.nanmax(np.abs(measured[mine]))))
            if axis:
                x_unit = str(curve["curve_axis_unit"].values)
                x_grid = np.asarray(curve["curve_x"].values, dtype=float)
                x_factor, x_label = display_scale(x_unit, float(np.nanmax(np.abs(x_grid))))
                ax.plot(
                    x_grid * x_factor,
                    np.asarray(curve["curve_start"].values) * y_factor,
                    color=GREY,
                    lw=1.0,
                    ls="--",
                    label="model, start",
                )
                ax.plot(
                    x_grid * x_factor,
                    np.asarray(curve["curve_fitted"].values) * y_factor,
                    color=BLUE,
                    lw=1.5,
                    label="model, fitted",
                )
                ax.set_xlabel(f"{axis.replace('_', ' ')} ({x_label})" if x_label else axis)
            else:
                x_factor = 1.0
                ax.plot(
                    x_obs[mine],
                    np.asarray(ds["predicted"].values, dtype=float)[mine] * y_factor,
                    "s",
                    color=BLUE,
                    ms=4,
                    label="model, fitted",
                )
                ax.set_xlabel("observation")
            _measured(
                ax, x_obs[mine] * x_factor, measured[mine] * y_factor, sigma[mine] * y_factor,
                size=3.5,
            )  # fmt: skip
            name = output.replace("_", " ")
            ax.set_ylabel(f"{name} ({y_label})" if y_label else name)
            ax.set_title(str(curve["curve_data_set"].values), fontsize="small")
            if k == 0:
                ax.legend(loc="best", fontsize="small")
        fig.tight_layout()
        return figure_png(fig)


def trace_figure(ds: xr.Dataset) -> bytes | None:
    """Each raw loading curve and time-of-flight expansion with the calibrated model over it.

    None when the Dataset holds no traces.
    """
    if "trace" not in ds.dims or ds.sizes["trace"] == 0:
        return None
    n = ds.sizes["trace"]
    columns = min(3, n)
    rows = math.ceil(n / columns)
    with matplotlib.rc_context(FIGURE_STYLE):  # type: ignore[arg-type]
        fig, axes = _panels(n, columns, (3.1 * columns, 2.5 * rows))
        for k, ax in enumerate(axes):
            trace = ds.isel(trace=k)
            t = np.asarray(trace["trace_time"].values, dtype=float)
            y = np.asarray(trace["trace_measured"].values, dtype=float)
            u = np.asarray(trace["trace_uncertainty"].values, dtype=float)
            keep = np.isfinite(t) & np.isfinite(y)
            unit = str(trace["trace_unit"].values)
            y_factor, y_label = display_scale(unit, float(np.nanmax(np.abs(y[keep]))))
            grid = np.asarray(trace["trace_grid_time"].values, dtype=float)
            t_factor, t_label = display_scale("s", float(np.nanmax(grid)))
            _measured(ax, t[keep] * t_factor, y[keep] * y_factor, u[keep] * y_factor, size=2.5)
            ax.plot(
                grid * t_factor,
                np.asarray(trace["trace_model"].values) * y_factor,
                color=BLUE,
                lw=1.4,
                label="model, fitted",
            )
            signal = str(trace["trace_signal"].values).replace("_", " ")
            ax.set_xlabel(f"time ({t_label})")
            ax.set_ylabel(f"{signal} ({y_label})" if y_label else signal)
            label = str(trace["trace_label"].values)
            ax.set_title(label.replace(": ", ":\n", 1), fontsize="x-small")
            if k == 0:
                ax.legend(loc="lower right", fontsize="x-small")
        fig.tight_layout()
        return figure_png(fig)


def _correlation_table(ds: xr.Dataset) -> Table | None:
    names = [str(n) for n in ds["constant_fit"].values]
    if len(names) < 2:
        return None
    corr = np.asarray(ds["correlation"].values, dtype=float)
    rows = [[a] + [f"{corr[i, j]:+.3f}" for j in range(len(names))] for i, a in enumerate(names)]
    return Table(
        ["", *names],
        rows,
        caption="Correlations of the fitted constants",
        numeric=[False] + [True] * len(names),
    )


def _residual_rows(ds: xr.Dataset, *, top: int = 12) -> list[list[str]]:
    residual = np.asarray(ds["normalized_residual"].values, dtype=float)
    order = np.argsort(-np.abs(residual))[:top]
    rows = []
    for i in order:
        rows.append(
            [
                str(ds["source"].values[i]),
                str(ds["output"].values[i]).replace("_", " "),
                format_number(float(ds["measured"][i])),
                format_number(float(ds["predicted"][i])),
                format_number(float(ds["measurement_uncertainty"][i])),
                f"{residual[i]:+.2f}",
            ]
        )
    return rows


def _fit_summary(attrs: Mapping[str, Any], n_fit: int, n_obs: int) -> str:
    loss = ", soft-L1 loss" if attrs.get("robust") else ""
    chi = format_number(attrs.get("reduced_chi2", math.nan))
    p = format_number(attrs.get("p_value", math.nan), digits=2)
    scaling = (
        "the covariance is scaled by chi2/dof."
        if attrs.get("covariance_scaled")
        else "the given measurement uncertainties are taken as they are (covariance not scaled)."
    )
    return (
        f"{n_fit} model constants fitted to {n_obs} observations by weighted least squares "
        f"(bounded by the constants' valid ranges{loss}). Chi-square per degree of freedom "
        f"{chi} with {attrs.get('dof')} degrees of freedom (p = {p}); {scaling}"
    )


def calibration_section(
    datasets: Mapping[str, xr.Dataset], study: Mapping[str, Any]
) -> Section | None:
    """The calibration section, or None without a ``calibration`` Dataset."""
    ds = datasets.get("calibration")
    if ds is None:
        return None
    attrs = ds.attrs
    n_obs = ds.sizes["observation"]
    n_fit = int(np.count_nonzero(ds["fitted"].values))
    blocks: list[Any] = [
        Text(_fit_summary(attrs, n_fit, n_obs)),
        Table(
            ["constant", "start", "fitted", "standard uncertainty", "relative", "status"],
            constant_rows(ds),
            caption="Model constants (standard uncertainties, coverage factor 1)",
            numeric=[False, True, True, True, True, False],
        ),
    ]
    corr = _correlation_table(ds)
    if corr is not None:
        blocks.append(corr)
    flats = list(attrs.get("flat_directions", []) or [])
    if flats:
        blocks.append(Text("What the data cannot pin down:", kind="note"))
        blocks += [Text(line, kind="note") for line in flats]
    else:
        blocks.append(
            Text(
                "Every constant asked for is determined by the data (no flat "
                "direction of the fit).",
                kind="note",
            )
        )
    for note in attrs.get("notes", []) or []:
        blocks.append(Text(str(note), kind="note"))
    fits = fit_figure(ds)
    if fits is not None:
        blocks.append(
            Figure(
                "calibration-fits",
                fits,
                caption="Each data set against the model over the setting it scans: measured "
                "(points, standard uncertainty as used in the fit), the model with the fitted "
                "constants (line) and with the starting ones (dashed); other settings at their "
                "median over the data set",
            )
        )
    traces = trace_figure(ds)
    if traces is not None:
        blocks.append(
            Figure(
                "calibration-traces",
                traces,
                caption="The raw loading curves and time-of-flight expansions (points, with "
                "their uncertainties where the file gives them) and the calibrated model at "
                "each curve's settings: S (1 - exp(-t/tau)) from the model's steady-state "
                "signal and loading time, sqrt(sigma0^2 + kB T t^2 / m) from its cloud radius "
                "and temperature",
            )
        )
    blocks.append(
        Figure(
            "calibration-residuals",
            residual_figure(ds),
            caption="Normalised residuals; dashed lines at +-2",
        )
    )
    blocks.append(
        Table(
            ["observation", "output", "measured", "predicted", "uncertainty", "residual / u"],
            _residual_rows(ds),
            caption="Largest residuals (SI units)",
            numeric=[False, False, True, True, True, True],
        )
    )
    blocks.append(
        Text(
            "The calibrated scenario carries the fitted constants as inputs with this joint "
            "normal distribution; constants not determined keep what the scenario said. A fit "
            "is only as good as the model: check residual patterns before trusting a constant.",
            kind="note",
        )
    )
    return Section("Calibration to measurements", blocks)


def _num(value: Any) -> float | None:
    value = float(value)
    return value if math.isfinite(value) else None


def calibration_json(ds: xr.Dataset) -> dict[str, Any]:
    """Machine-readable calibration result (plain Python values)."""
    units = ds.attrs.get("units", {}) or {}
    constants = {}
    for i, name in enumerate(ds["constant"].values):
        name = str(name)
        fitted = bool(ds["fitted"][i])
        constants[name] = {
            "value": float(ds["value"][i]),
            "start": float(ds["start"][i]),
            "uncertainty": _num(ds["uncertainty"][i]) if fitted else None,
            "unit": str(units.get(name, "")),
            "fitted": fitted,
        }
    names = [str(n) for n in ds["constant_fit"].values]
    return {
        "constants": constants,
        "correlation": {
            "constants": names,
            "matrix": np.asarray(ds["correlation"].values, dtype=float).round(12).tolist(),
        },
        "chi2": _num(ds.attrs["chi2"]),
        "dof": int(ds.attrs["dof"]),
        "reduced_chi2": _num(ds.attrs["reduced_chi2"]),
        "p_value": _num(ds.attrs["p_value"]),
        "covariance_scaled": bool(ds.attrs["covariance_scaled"]),
        "flat_directions": list(ds.attrs.get("flat_directions", []) or []),
        "notes": list(ds.attrs.get("notes", []) or []),
        "n_observations": int(ds.sizes["observation"]),
    }


register_section(calibration_section)


def calibration_rich_table(ds: xr.Dataset) -> Any:
    """A rich table of the fitted constants, with the fit quality and flat directions below."""
    from rich.table import Table as RichTable

    table = RichTable(
        title="Calibrated constants",
        caption=_fit_summary(
            ds.attrs, int(np.count_nonzero(ds["fitted"].values)), ds.sizes["observation"]
        )
        + "".join(f"\n{line}" for line in ds.attrs.get("flat_directions", []) or []),
    )
    for column, justify in zip(
        ["constant", "start", "fitted", "std. uncertainty", "relative", "status"],
        ["left", "right", "right", "right", "right", "left"],
        strict=True,
    ):
        table.add_column(column, justify=justify)  # type: ignore[arg-type]
    for row in constant_rows(ds):
        table.add_row(*row)
    return table

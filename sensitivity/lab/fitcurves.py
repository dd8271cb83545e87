"""The calibrated model drawn over its data: one curve per data set and output.

A calibration compares each observation with the model at that observation's settings.
To show the fit as a physicist reads it (the data of a detuning scan with the model's
curve through it, before and after the fit), each data set (the label before ``": "`` in
an observation's source) and each output it measures becomes one curve: the setting
that varies most across its observations is the axis, the model is evaluated on a
grid over that axis's measured range with every other setting at its median over the
data set, once with the starting constants and once with the fitted ones.

The raw curves of loading-curve and time-of-flight files (:func:`fit_traces`) are kept
beside the calibrated model at each curve's settings, grouped as the calibration
grouped them (one curve per set of settings).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np
import xarray as xr

from trapbudget.models.observables import loading_curve, time_of_flight_radius
from trapbudget.sensitivity.lab.datafiles import _signal_of
from trapbudget.sensitivity.lab.observations import _setting_groups
from trapbudget.sensitivity.scenario.units import format_quantity

__all__ = ["GRID_POINTS", "fit_curves", "fit_traces"]

#: Points of each model curve.
GRID_POINTS = 80


def _data_set(source: str) -> str:
    return source.split(": ", 1)[0] if ": " in source else source


def _axis(settings: Mapping[str, np.ndarray], rows: np.ndarray) -> str:
    """The setting with the most distinct measured values in ``rows`` ("" if none varies)."""
    best, count = "", 1
    for name in sorted(settings):
        values = np.asarray(settings[name], dtype=float)[rows]
        distinct = np.unique(values[np.isfinite(values)]).size
        if distinct > count:
            best, count = name, distinct
    return best


def fit_curves(
    model: Any,
    base_values: Mapping[str, np.ndarray],
    observations: Any,
    start: Mapping[str, float],
    fitted: Mapping[str, float],
    *,
    n_points: int = GRID_POINTS,
) -> xr.Dataset:
    """Model curves over each data set's scanned setting, before and after the fit.

    Parameters
    ----------
    model : model
        The scenario's bound model.
    base_values : mapping name -> array
        Each model input per observation (settings where the files set them, nominal
        values elsewhere), as the calibration evaluates them.
    observations : Observations
        What was fitted (``output``, ``settings``, ``source``).
    start, fitted : mapping name -> float
        The constants before and after the fit (SI).
    n_points : int
        Grid points per curve.

    Returns
    -------
    xarray.Dataset
        Dims ``curve`` and ``grid``: ``curve_data_set``, ``curve_output``, ``curve_axis``
        (the swept setting, "" where no setting varies), ``curve_axis_unit``,
        ``curve_output_unit`` (dim ``curve``), ``curve_x`` (the axis, SI),
        ``curve_fitted``, ``curve_start`` (the output, SI); dim ``observation``:
        ``observation_curve`` (index of the observation's curve) and ``observation_x``
        (its value on that curve's axis; its index within the data set where no
        setting varies).
    """
    outputs = np.asarray(observations.output).astype(str)
    sources = np.asarray([_data_set(s) for s in np.asarray(observations.source).astype(str)])
    n_obs = outputs.size
    obs_curve = np.full(n_obs, -1, dtype=np.int64)
    obs_x = np.full(n_obs, math.nan)
    rows_of: dict[str, list[Any]] = {
        key: []
        for key in ("data_set", "output", "axis", "axis_unit", "output_unit", "x", "fit", "start")
    }
    for data_set in dict.fromkeys(sources):
        for output in dict.fromkeys(outputs[sources == data_set]):
            rows = np.flatnonzero((sources == data_set) & (outputs == output))
            k = len(rows_of["data_set"])
            obs_curve[rows] = k
            axis = _axis(observations.settings, rows)
            x = np.full(n_points, math.nan)
            fit_line = np.full(n_points, math.nan)
            start_line = np.full(n_points, math.nan)
            if axis:
                measured = np.asarray(base_values[axis], dtype=float)[rows]
                obs_x[rows] = measured
                x = np.linspace(float(np.min(measured)), float(np.max(measured)), n_points)
                values = {
                    name: np.full(n_points, float(np.median(np.asarray(col)[rows])))
                    for name, col in base_values.items()
                }
                values[axis] = x
                for constants, line in ((fitted, fit_line), (start, start_line)):
                    point = {
                        **values,
                        **{n: np.full(n_points, float(v)) for n, v in constants.items()},
                    }
                    with np.errstate(all="ignore"):
                        line[:] = np.broadcast_to(
                            np.asarray(model.evaluate(point)[output], dtype=float), (n_points,)
                        )
            else:
                obs_x[rows] = np.arange(rows.size, dtype=float)
            rows_of["data_set"].append(str(data_set))
            rows_of["output"].append(str(output))
            rows_of["axis"].append(axis)
            rows_of["axis_unit"].append(str(model.inputs[axis].unit) if axis else "")
            rows_of["output_unit"].append(str(getattr(model.outputs.get(output), "unit", "")))
            rows_of["x"].append(x)
            rows_of["fit"].append(fit_line)
            rows_of["start"].append(start_line)
    n_curves = len(rows_of["data_set"])
    grid = (n_curves, n_points)
    return xr.Dataset(
        {
            "curve_data_set": ("curve", np.asarray(rows_of["data_set"], dtype=str)),
            "curve_output": ("curve", np.asarray(rows_of["output"], dtype=str)),
            "curve_axis": ("curve", np.asarray(rows_of["axis"], dtype=str)),
            "curve_axis_unit": ("curve", np.asarray(rows_of["axis_unit"], dtype=str)),
            "curve_output_unit": ("curve", np.asarray(rows_of["output_unit"], dtype=str)),
            "curve_x": (("curve", "grid"), np.reshape(rows_of["x"], grid)),
            "curve_fitted": (("curve", "grid"), np.reshape(rows_of["fit"], grid)),
            "curve_start": (("curve", "grid"), np.reshape(rows_of["start"], grid)),
            "observation_curve": ("observation", obs_curve),
            "observation_x": ("observation", obs_x),
        }
    )


def fit_traces(
    model: Any,
    nominal: Mapping[str, float],
    measurement_sets: Any,
    constants: Mapping[str, float],
    *,
    mass: float | None,
    n_points: int = GRID_POINTS,
) -> xr.Dataset | None:
    """The raw loading curves and time-of-flight expansions beside the calibrated model.

    Each curve of a ``loading-curve`` or ``time-of-flight`` file (its rows with one set of
    settings) is kept as measured; beside it, the model at that curve's settings with the
    fitted constants: ``S (1 - exp(-t / tau))`` from the model's steady-state signal and
    loading time (one-body loading, Monroe et al. 1990), or the ballistic expansion
    ``sqrt(sigma_0^2 + k_B T t^2 / m)`` from its cloud radius and temperature.

    Returns
    -------
    xarray.Dataset or None
        Dims ``trace``, ``point`` (measured rows, nan-padded) and ``trace_grid``:
        ``trace_label``, ``trace_kind``, ``trace_signal``, ``trace_unit``,
        ``trace_time``, ``trace_measured``, ``trace_uncertainty``, ``trace_grid_time``,
        ``trace_model``; None when no file holds curves.
    """
    records: list[dict[str, Any]] = []
    for mset in measurement_sets:
        if mset.kind not in ("loading-curve", "time-of-flight"):
            continue
        if mset.kind == "time-of-flight" and mass is None:
            continue
        names = [name for name in mset.columns if name in model.inputs]
        signal = _signal_of(mset.kind, list(mset.columns), mset.where)
        given = mset.columns.get(f"{signal}_uncertainty")
        for k, rows in enumerate(_setting_groups(mset, names), start=1):
            point = {name: float(value) for name, value in nominal.items() if name in model.inputs}
            point.update({n: float(v) for n, v in mset.settings.items() if n in model.inputs})
            point.update({name: float(mset.columns[name][rows[0]]) for name in names})
            point.update({name: float(value) for name, value in constants.items()})
            with np.errstate(all="ignore"):
                out = model.evaluate(point)
            time = np.asarray(mset.columns["time"][rows], dtype=float)
            grid = np.linspace(0.0, float(np.max(time)), n_points)
            if mset.kind == "loading-curve":
                curve = loading_curve(
                    grid, float(np.asarray(out[signal])), float(np.asarray(out["loading_time"]))
                )
            else:
                curve = time_of_flight_radius(
                    grid,
                    float(np.asarray(out["cloud_radius"])),
                    float(np.asarray(out["temperature"])),
                    mass=float(mass),  # type: ignore[arg-type]
                )
            shown = ", ".join(
                f"{name} {format_quantity(float(mset.columns[name][rows[0]]), mset.units[name])}"
                for name in names
            )
            records.append(
                {
                    "label": f"{mset.label}: curve {k}" + (f" ({shown})" if shown else ""),
                    "kind": mset.kind,
                    "signal": signal,
                    "unit": str(mset.units.get(signal, "")),
                    "time": time,
                    "measured": np.asarray(mset.columns[signal][rows], dtype=float),
                    "uncertainty": (
                        np.full(rows.size, math.nan)
                        if given is None
                        else np.asarray(given[rows], dtype=float)
                    ),
                    "grid": grid,
                    "model": np.asarray(curve, dtype=float),
                }
            )
    if not records:
        return None
    width = max(r["time"].size for r in records)

    def padded(key: str) -> np.ndarray:
        out = np.full((len(records), width), math.nan)
        for i, r in enumerate(records):
            out[i, : r[key].size] = r[key]
        return out

    return xr.Dataset(
        {
            "trace_label": ("trace", np.asarray([r["label"] for r in records], dtype=str)),
            "trace_kind": ("trace", np.asarray([r["kind"] for r in records], dtype=str)),
            "trace_signal": ("trace", np.asarray([r["signal"] for r in records], dtype=str)),
            "trace_unit": ("trace", np.asarray([r["unit"] for r in records], dtype=str)),
            "trace_time": (("trace", "point"), padded("time")),
            "trace_measured": (("trace", "point"), padded("measured")),
            "trace_uncertainty": (("trace", "point"), padded("uncertainty")),
            "trace_grid_time": (("trace", "trace_grid"), np.stack([r["grid"] for r in records])),
            "trace_model": (("trace", "trace_grid"), np.stack([r["model"] for r in records])),
        }
    )

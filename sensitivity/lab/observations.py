"""Measurement sets turned into what the calibration fits: values, uncertainties, settings."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from trapbudget.sensitivity.errors import DataError
from trapbudget.sensitivity.lab.datafiles import MeasurementSet, _signal_of
from trapbudget.sensitivity.lab.fits import fit_loading_curve, fit_time_of_flight

__all__ = ["Observations", "to_observations"]


# ------------------------------------------------------------------ observations


@dataclass(frozen=True)
class Observations:
    """Measured model outputs with the settings each was taken at (the calibration's data).

    Attributes
    ----------
    output : ndarray of str
        Model output each observation measures.
    value : ndarray
        Measured value (SI).
    uncertainty : ndarray
        Standard uncertainty (SI); nan where unknown (then estimated from the
        fit residuals by the calibration).
    settings : dict of str to ndarray
        Setting of each model input per observation; nan where the file did
        not set it (the scenario's nominal value is used).
    source : ndarray of str
        "label: row r" or "label: curve k" for reports.
    """

    output: np.ndarray
    value: np.ndarray
    uncertainty: np.ndarray
    settings: dict[str, np.ndarray]
    source: np.ndarray

    def __len__(self) -> int:
        return int(self.value.size)

    @staticmethod
    def concatenate(parts: Sequence[Observations]) -> Observations:
        """Join observations from several files (settings missing in one become nan)."""
        names = sorted({name for part in parts for name in part.settings})
        settings = {
            name: np.concatenate(
                [part.settings.get(name, np.full(len(part), np.nan)) for part in parts]
            )
            for name in names
        }
        return Observations(
            output=np.concatenate([p.output for p in parts]),
            value=np.concatenate([p.value for p in parts]),
            uncertainty=np.concatenate([p.uncertainty for p in parts]),
            settings=settings,
            source=np.concatenate([p.source for p in parts]),
        )


def _setting_groups(mset: MeasurementSet, setting_names: Sequence[str]) -> list[np.ndarray]:
    """Row indices of each group of rows with identical settings, in file order."""
    if not setting_names:
        return [np.arange(mset.n_rows)]
    keys = np.column_stack([mset.columns[name] for name in setting_names])
    groups: dict[tuple[float, ...], list[int]] = {}
    for i, key in enumerate(map(tuple, keys)):
        groups.setdefault(key, []).append(i)
    return [np.array(rows) for rows in groups.values()]


def to_observations(
    mset: MeasurementSet,
    *,
    model: Any,
    mass: float | None = None,
    two_body: bool = False,
    robust: bool = False,
) -> Observations:
    """Turn a measurement file into observations of model outputs.

    Parameters
    ----------
    mset : MeasurementSet
        A file read with :func:`read_measurements`.
    model : model protocol object
        Decides which columns are settings (inputs) and which are outputs.
    mass : float, kg, optional
        Atomic mass, needed for time-of-flight files.
    two_body : bool
        Fit loading curves with two-body loss.
    robust : bool
        Outlier-tolerant (soft-L1) fits of curves.

    Returns
    -------
    Observations

    Notes
    -----
    - steady-state: every output column of every row is one observation.
      Without an uncertainty column, the uncertainty is the sample standard
      deviation of the repeated rows at the same settings; rows without
      repeats get the pooled relative scatter of the groups that have
      repeats; with no repeats at all the uncertainty stays unknown (nan).
    - loading-curve: rows with identical settings form one curve, fitted by
      :func:`fit_loading_curve`; each curve gives the steady-state signal (as
      ``atom_number`` or ``fluorescence``) and ``loading_time`` (the time from
      empty to 1 - 1/e of the steady state, equal to the time constant
      without two-body loss), with their fit uncertainties.
    - time-of-flight: each group gives ``temperature``, fitted by
      :func:`fit_time_of_flight`.
    """
    setting_names = [name for name in mset.columns if name in model.inputs]
    outputs = [
        name
        for name in mset.columns
        if name in model.outputs and name != "time" and not name.endswith("_uncertainty")
    ]
    groups = _setting_groups(mset, setting_names)
    rows_out: list[tuple[str, float, float, dict[str, float], str]] = []
    if mset.kind == "steady-state":
        if not outputs:
            raise DataError(
                "no model output column (e.g. 'atom_number [1]') to calibrate against",
                path=mset.where,
            )
        for output in outputs:
            given = mset.columns.get(f"{output}_uncertainty")
            u = _scatter_uncertainty(mset.columns[output], groups) if given is None else given
            for i in range(mset.n_rows):
                settings = {name: float(mset.columns[name][i]) for name in setting_names}
                rows_out.append(
                    (
                        output,
                        float(mset.columns[output][i]),
                        float(u[i]),
                        settings,
                        f"{mset.label}: row {i + 1}",
                    )
                )
    else:
        signal = _signal_of(mset.kind, list(mset.columns), mset.where)
        given = mset.columns.get(f"{signal}_uncertainty")
        if mset.kind == "time-of-flight" and mass is None:
            raise DataError(
                "time-of-flight data need the species mass; set the scenario species",
                path=mset.where,
            )
        for k, rows in enumerate(groups, start=1):
            settings = {name: float(mset.columns[name][rows[0]]) for name in setting_names}
            where = f"{mset.where}: curve {k}"
            sigma = None if given is None else given[rows]
            if mset.kind == "loading-curve":
                fit = fit_loading_curve(
                    mset.columns["time"][rows],
                    mset.columns[signal][rows],
                    uncertainty=sigma,
                    two_body=two_body,
                    robust=robust,
                    label=where,
                )
                rows_out.append(
                    (
                        signal,
                        fit.value("steady_state"),
                        fit.uncertainty("steady_state"),
                        settings,
                        f"{mset.label}: curve {k}",
                    )
                )
                tau, u_tau = fit.derived["loading_time"]
                rows_out.append(("loading_time", tau, u_tau, settings, f"{mset.label}: curve {k}"))
            else:
                fit = fit_time_of_flight(
                    mset.columns["time"][rows],
                    mset.columns[signal][rows],
                    mass=float(mass),  # type: ignore[arg-type]
                    uncertainty=sigma,
                    robust=robust,
                    label=where,
                )
                rows_out.append(
                    (
                        "temperature",
                        fit.value("temperature"),
                        fit.uncertainty("temperature"),
                        settings,
                        f"{mset.label}: curve {k}",
                    )
                )
    for output, *_ in rows_out:
        if output not in model.outputs:
            raise DataError(f"the model has no output {output!r} to compare with", path=mset.where)
    names = sorted(set(setting_names) | set(mset.settings))
    settings_arrays = {
        name: np.array(
            [row[3].get(name, mset.settings.get(name, math.nan)) for row in rows_out], dtype=float
        )
        for name in names
    }
    return Observations(
        output=np.array([row[0] for row in rows_out], dtype=object).astype(str),
        value=np.array([row[1] for row in rows_out], dtype=float),
        uncertainty=np.array([row[2] for row in rows_out], dtype=float),
        settings=settings_arrays,
        source=np.array([row[4] for row in rows_out], dtype=object).astype(str),
    )


def _scatter_uncertainty(values: np.ndarray, groups: Sequence[np.ndarray]) -> np.ndarray:
    """Per-row standard uncertainty from the scatter of repeats (see to_observations)."""
    u = np.full(values.size, np.nan)
    relative: list[float] = []
    weights: list[int] = []
    for rows in groups:
        if rows.size >= 2:
            std = float(np.std(values[rows], ddof=1))
            u[rows] = std
            mean = float(np.mean(values[rows]))
            if mean != 0:
                relative.append((std / abs(mean)) ** 2)
                weights.append(rows.size - 1)
    if relative:
        pooled = math.sqrt(float(np.average(relative, weights=weights)))
        missing = np.isnan(u)
        u[missing] = pooled * np.abs(values[missing])
    return u

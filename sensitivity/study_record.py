"""What a study was: the plain, JSON-serialisable record of its scenario, saved beside its results.

:func:`describe_study` reads a Scenario's attributes (it never runs the model)
and returns a dict that is saved as ``study.json`` beside the Datasets, so a
report can be re-rendered from the folder alone.
"""

from __future__ import annotations

import datetime as _dt
import math
from collections.abc import Mapping
from typing import Any

import numpy as np

from trapbudget.sensitivity.scenario.core import Scenario
from trapbudget.sensitivity.scenario.units import format_percent, format_quantity

__all__ = ["describe_study", "trapbudget_version"]


def trapbudget_version() -> str:
    """The installed trapbudget version, or 'unknown' from a bare source tree."""
    try:
        from importlib.metadata import version

        return version("trapbudget")
    except Exception:  # not installed
        return "unknown"


def _unit(model: Any, name: str) -> str:
    spec = getattr(model, "inputs", {}).get(name) if hasattr(model, "inputs") else None
    return str(getattr(spec, "unit", "") or "")


def _description(model: Any, name: str) -> str:
    spec = getattr(model, "inputs", {}).get(name) if hasattr(model, "inputs") else None
    return str(getattr(spec, "description", "") or "")


def _float(value: Any) -> float:
    try:
        return float(value)
    except (TypeError, ValueError):
        return math.nan


def _input_rows(scenario: Scenario) -> list[dict[str, Any]]:
    model = scenario.model
    tolerances: Mapping[str, Any] = getattr(scenario, "tolerances", {}) or {}
    groups = getattr(scenario, "groups", {}) or {}
    group_of = {member: g for g, members in groups.items() for member in members}
    rows = []
    for name, dist in scenario.inputs.items():
        unit = _unit(model, name)
        tol = tolerances.get(name)
        nominal = _float(scenario.nominal.get(name, getattr(tol, "nominal", math.nan)))
        if tol is not None:
            u = _float(tol.standard_uncertainty)
        else:
            u = _float(dist.std())
        rows.append(
            {
                "name": name,
                "description": _description(model, name),
                "unit": unit,
                "nominal": nominal,
                "nominal_text": format_quantity(nominal, unit),
                "tolerance_text": str(getattr(tol, "text", "") or ""),
                "shape": str(getattr(tol, "shape", "") or getattr(dist.dist, "name", "")),
                "meaning": str(getattr(tol, "meaning", "") or ""),
                "standard_uncertainty": u,
                "u_text": format_quantity(u, unit),
                "relative_u_text": format_percent(u / abs(nominal), digits=2)
                if nominal not in (0.0,) and math.isfinite(nominal)
                else "",
                "group": str(group_of.get(name, "")),
            }
        )
    return rows


def _fixed_rows(scenario: Scenario) -> list[dict[str, Any]]:
    model = scenario.model
    rows = []
    for name, value in scenario.nominal.items():
        if name in scenario.inputs:
            continue
        unit = _unit(model, name)
        rows.append(
            {
                "name": name,
                "description": _description(model, name),
                "unit": unit,
                "value": _float(value),
                "value_text": format_quantity(_float(value), unit),
            }
        )
    return rows


def _default_rows(scenario: Scenario) -> list[dict[str, Any]]:
    """Model inputs the scenario leaves at their defaults (constants flagged)."""
    specs = getattr(scenario.model, "inputs", {}) or {}
    rows = []
    for name, spec in specs.items():
        if name in scenario.inputs or name in scenario.nominal:
            continue
        unit = str(getattr(spec, "unit", "") or "")
        value = _float(getattr(spec, "default", math.nan))
        rows.append(
            {
                "name": name,
                "description": str(getattr(spec, "description", "") or ""),
                "unit": unit,
                "value": value,
                "value_text": format_quantity(value, unit),
                "constant": bool(getattr(spec, "constant", False)),
            }
        )
    return rows


def _correlation_rows(scenario: Scenario) -> list[dict[str, Any]]:
    matrix = getattr(scenario, "correlation", None)
    if matrix is None:
        return []
    matrix = np.asarray(matrix, dtype=float)
    names = list(scenario.inputs)
    rows = []
    for i in range(len(names)):
        for j in range(i + 1, len(names)):
            if matrix[i, j] != 0:
                rows.append({"a": names[i], "b": names[j], "coefficient": float(matrix[i, j])})
    return rows


def _limit_text(limit: Any, unit: str, kind: str) -> str:
    if kind == "relative_spread_at_most":
        return format_percent(_float(limit), digits=2)
    if isinstance(limit, tuple | list | np.ndarray):
        lo, hi = (format_quantity(_float(v), unit) for v in limit)
        return f"[{lo}, {hi}]"
    return format_quantity(_float(limit), unit)


def _requirement_rows(scenario: Scenario) -> list[dict[str, Any]]:
    outputs = getattr(scenario.model, "outputs", {}) or {}
    rows = []
    for req in getattr(scenario, "requirements", ()) or ():
        spec = outputs.get(req.output) if hasattr(outputs, "get") else None
        unit = str(getattr(spec, "unit", "") or "")
        rows.append(
            {
                "output": req.output,
                "kind": req.kind,
                "limit_text": _limit_text(req.limit, unit, req.kind),
                "probability": None if req.probability is None else float(req.probability),
                "label": str(getattr(req, "label", "") or ""),
            }
        )
    return rows


def _assumptions(scenario: Scenario) -> list[str]:
    model = scenario.model
    for obj in (model, getattr(model, "base", None)):
        found = getattr(obj, "assumptions", None)
        if found:
            return [str(a) for a in found]
    return []


def describe_study(
    scenario: Scenario,
    *,
    seed: int | None,
    n_samples: int,
    datasets: Mapping[str, Any] | None = None,
    date: str | None = None,
) -> dict[str, Any]:
    """The record of what was studied, for the report's first sections and ``study.json``.

    Parameters
    ----------
    scenario : Scenario
        The loaded scenario (only its attributes are read).
    seed : int or None
        The seed the study ran with.
    n_samples : int
        Monte Carlo sample size and Saltelli base size N.
    datasets : mapping, optional
        The result Datasets; their attrs give the number of model evaluations.
    date : str, optional
        ISO date-time of the study (default: now, UTC).

    Returns
    -------
    dict
        Plain JSON-serialisable values: title, description, species, model,
        version, seed, sample size, date, SHA-256 of the scenario, the inputs
        and tolerances table, fixed inputs, correlations, requirements and the
        model's assumptions.
    """
    datasets = datasets or {}
    settings = getattr(scenario, "settings", None)
    n_eval = 0
    for name, ds in datasets.items():
        if ds is None or not hasattr(ds, "attrs"):
            continue
        if "n_evaluations" in ds.attrs:
            n_eval += int(ds.attrs["n_evaluations"] or 0)
        elif name == "samples":
            n_eval += int(ds.sizes.get("sample", 0))
    source = getattr(scenario, "source", None)
    return {
        "title": str(scenario.title),
        "description": str(getattr(scenario, "description", "") or ""),
        "species": str(getattr(scenario, "species", "") or ""),
        "model": str(getattr(scenario, "model_name", "") or type(scenario.model).__name__),
        "model_options": {
            str(k): str(v) for k, v in (getattr(scenario, "model_options", {}) or {}).items()
        },
        "trapbudget_version": trapbudget_version(),
        "seed": None if seed is None else int(seed),
        "n_samples": int(n_samples),
        "n_evaluations": n_eval,
        "method": str(getattr(settings, "method", "") or ""),
        "confidence_level": float(getattr(settings, "confidence_level", 0.95)),
        "significant_digits": int(getattr(settings, "significant_digits", 2) or 2),
        "date": date or _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%d %H:%M UTC"),
        "sha256": str(getattr(scenario, "sha256", "") or ""),
        "scenario_file": "" if source is None else str(getattr(source, "name", source)),
        "outputs": [str(o) for o in scenario.outputs],
        "inputs": _input_rows(scenario),
        "fixed": _fixed_rows(scenario),
        "defaults": _default_rows(scenario),
        "correlations": _correlation_rows(scenario),
        "requirements": _requirement_rows(scenario),
        "assumptions": _assumptions(scenario),
    }

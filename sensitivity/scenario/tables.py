"""Checks shared by the scenario readers: known keys, table types, valid ranges."""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.scenario.units import did_you_mean

__all__ = []


_TOP_KEYS = (
    "scenario",
    "inputs",
    "correlations",
    "outputs",
    "settings",
    "requirements",
    "costs",
    "upgrades",
    "calibration",
    "diagnosis",
)
_SCENARIO_KEYS = ("title", "description", "species", "model", "currency", "options")
_INPUT_KEYS = (
    "nominal",
    "tolerance",
    "meaning",
    "coverage_factor",
    "shape",
    "bounds",
    "group",
    "note",
)


_close = did_you_mean


def _check_keys(table: Mapping[str, Any], valid: Sequence[str], *, path, key) -> None:
    for name in table:
        if name not in valid:
            where = f"{key}.{name}" if key else name
            raise ScenarioError(f"unknown key {name!r}{_close(name, valid)}", path=path, key=where)


def _table(value: Any, *, path, key) -> Mapping[str, Any]:
    if value is None:
        return {}
    if not isinstance(value, Mapping):
        raise ScenarioError(f"must be a table, got {value!r}", path=path, key=key)
    return value


def _text(value: Any, *, path, key, example: str) -> str:
    """``value`` if it is a string; else a ScenarioError naming the key and an example."""
    if not isinstance(value, str):
        shown = type(value).__name__ if isinstance(value, Mapping | list) else repr(value)
        raise ScenarioError(
            f"must be a string, got {shown}; write e.g. {example}", path=path, key=key
        )
    return value


def _canonical(value: Any) -> Any:
    """A hashable, float-rounded form for comparing scenarios."""
    if isinstance(value, float):
        return float(f"{value:.12g}") if math.isfinite(value) else repr(value)
    if isinstance(value, np.ndarray):
        return _canonical(value.tolist())
    if isinstance(value, Mapping):
        return tuple(sorted((str(k), _canonical(v)) for k, v in value.items()))
    if isinstance(value, list | tuple):
        return tuple(_canonical(v) for v in value)
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return (
            type(value).__name__,
            *(_canonical(getattr(value, f.name)) for f in dataclasses.fields(value) if f.compare),
        )
    return value


def _check_range(spec: Any, value: float, *, path, key) -> None:
    if not math.isfinite(value) or not spec.low <= value <= spec.high:
        raise ScenarioError(
            f"nominal {value:g} {spec.unit} lies outside the model's valid range "
            f"[{spec.low:g}, {spec.high:g}] {spec.unit}; choose a value inside it".replace(
                "  ", " "
            ),
            path=path,
            key=key,
        )

"""Parsing of the ``[inputs]``, ``[[correlations]]`` and ``[outputs]`` tables of a scenario."""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np

from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.sampling import (
    check_correlation,
    rank_correlation_to_copula,
)
from trapbudget.sensitivity.scenario.distributions import MEANINGS, SHAPES, Tolerance
from trapbudget.sensitivity.scenario.tables import _INPUT_KEYS, _check_keys, _check_range, _close
from trapbudget.sensitivity.scenario.units import parse_quantity, parse_tolerance_text

__all__ = []


def _parse_inputs(raw: Mapping[str, Any], *, model, path):
    nominal: dict[str, float] = {}
    fixed: dict[str, float] = {}
    tolerances: dict[str, Tolerance] = {}
    groups: dict[str, str] = {}
    notes: dict[str, str] = {}
    units: dict[str, str] = {}
    for name, table in raw.items():
        key = f"inputs.{name}"
        if name not in model.inputs:
            raise ScenarioError(
                f"{name!r} is not an input of the model{_close(name, model.inputs)}",
                path=path,
                key=key,
            )
        if not isinstance(table, Mapping):
            table = {"nominal": table}
        _check_keys(table, _INPUT_KEYS, path=path, key=key)
        spec = model.inputs[name]
        unit = spec.unit
        units[name] = unit
        if "nominal" in table:
            value = parse_quantity(table["nominal"], unit=unit, key=f"{key}.nominal", path=path)
        elif math.isfinite(spec.default):
            value = float(spec.default)
        else:
            raise ScenarioError("needs a nominal value", path=path, key=f"{key}.nominal")
        _check_range(spec, value, path=path, key=f"{key}.nominal")
        nominal[name] = value
        for text_key in ("group", "note"):
            if text_key in table and not isinstance(table[text_key], str):
                raise ScenarioError(
                    f"{table[text_key]!r} must be a string", path=path, key=f"{key}.{text_key}"
                )
        if "group" in table:
            groups[name] = table["group"]
        if "note" in table:
            notes[name] = table["note"]
        meaning = table.get("meaning", "standard")
        shape = table.get("shape", "normal")
        if meaning not in MEANINGS:
            raise ScenarioError(
                f"meaning {meaning!r} is not known; use one of {', '.join(MEANINGS)}",
                path=path,
                key=f"{key}.meaning",
            )
        if shape not in SHAPES:
            raise ScenarioError(
                f"shape {shape!r} is not known; use one of {', '.join(SHAPES)}",
                path=path,
                key=f"{key}.shape",
            )
        if "tolerance" not in table:
            extra = [k for k in ("meaning", "coverage_factor", "shape") if k in table]
            if extra:
                raise ScenarioError(
                    f'{extra[0]!r} given without a tolerance; add tolerance = "..." or '
                    f"remove {extra[0]!r}",
                    path=path,
                    key=f"{key}.{extra[0]}",
                )
            fixed[name] = value
            continue
        amount, relative = parse_tolerance_text(
            table["tolerance"],
            unit=unit,
            nominal=value,
            key=f"{key}.tolerance",
            path=path,
            nominal_text=table.get("nominal"),
        )
        coverage = table.get("coverage_factor")
        if coverage is not None and (
            isinstance(coverage, bool) or not isinstance(coverage, int | float)
        ):
            raise ScenarioError(
                f"{coverage!r} must be a number, e.g. 2", path=path, key=f"{key}.coverage_factor"
            )
        bounds = None
        if "bounds" in table:
            b = table["bounds"]
            if not isinstance(b, list) or len(b) != 2:
                raise ScenarioError(
                    f'{b!r} must be [low, high] with units, e.g. ["0 mW", "10 mW"]',
                    path=path,
                    key=f"{key}.bounds",
                )
            bounds = tuple(parse_quantity(v, unit=unit, key=f"{key}.bounds", path=path) for v in b)
        try:
            tol = Tolerance(
                nominal=value,
                value=amount,
                meaning=meaning,
                coverage_factor=None if coverage is None else float(coverage),
                shape=shape,
                relative=relative,
                text=str(table["tolerance"]),
                bounds=bounds,  # type: ignore[arg-type]
                unit=unit,
                where=key,
            )
        except ScenarioError as error:
            raise ScenarioError(error.message, path=path, key=key) from None
        if amount == 0:
            fixed[name] = value
            continue
        tolerances[name] = tol
    return nominal, fixed, tolerances, groups, notes, units


def _parse_correlations(raw, *, tolerances, known, model, path) -> np.ndarray | None:
    if raw is None:
        return None
    if not isinstance(raw, list):
        raise ScenarioError(
            "must be an array of tables; write [[correlations]]", path=path, key="correlations"
        )
    names = list(tolerances)
    matrix = np.eye(len(names))
    seen: set[frozenset[str]] = set()
    for i, table in enumerate(raw):
        key = f"correlations[{i}]"
        if not isinstance(table, Mapping):
            raise ScenarioError("must be a table; write [[correlations]]", path=path, key=key)
        _check_keys(table, ("inputs", "coefficient", "rank_coefficient"), path=path, key=key)
        pair = table.get("inputs")
        if isinstance(pair, list) and not all(isinstance(name, str) for name in pair):
            raise ScenarioError(
                "inputs must be two input names (strings); write e.g. "
                'inputs = ["beam_power", "repump_power"]',
                path=path,
                key=f"{key}.inputs",
            )
        if not isinstance(pair, list) or len(pair) != 2 or pair[0] == pair[1]:
            raise ScenarioError(
                f"inputs = {pair!r} must name two different inputs", path=path, key=f"{key}.inputs"
            )
        for name in pair:
            if name not in model.inputs:
                raise ScenarioError(
                    f"{name!r} is not an input of the model{_close(name, model.inputs)}",
                    path=path,
                    key=f"{key}.inputs",
                )
            if name not in tolerances:
                state = "is fixed (no tolerance)" if name in known else "is not set"
                raise ScenarioError(
                    f"input {name!r} {state}; give it a tolerance in [inputs.{name}] or remove "
                    "the correlation",
                    path=path,
                    key=f"{key}.inputs",
                )
        if frozenset(pair) in seen:
            raise ScenarioError(
                f"the pair {pair!r} is correlated twice; keep one", path=path, key=key
            )
        seen.add(frozenset(pair))
        kinds = [k for k in ("coefficient", "rank_coefficient") if k in table]
        if len(kinds) != 1:
            raise ScenarioError(
                "give exactly one of coefficient or rank_coefficient", path=path, key=key
            )
        value = table[kinds[0]]
        if isinstance(value, bool) or not isinstance(value, int | float) or not -1 < value < 1:
            raise ScenarioError(
                f"{kinds[0]} = {value!r} must be a number strictly between -1 and 1",
                path=path,
                key=f"{key}.{kinds[0]}",
            )
        if kinds[0] == "rank_coefficient":
            value = float(rank_correlation_to_copula(value))
        a, b = names.index(pair[0]), names.index(pair[1])
        matrix[a, b] = matrix[b, a] = float(value)
    if not seen:
        return None
    return check_correlation(matrix, names, path=path, key="correlations")


def _parse_outputs(raw, *, model, path) -> tuple[str, ...]:
    if raw is None:
        return tuple(name for name in model.outputs if name != "validity")
    if not isinstance(raw, list) or not raw or not all(isinstance(n, str) for n in raw):
        raise ScenarioError(
            f"names = {raw!r} must be a non-empty list of output names",
            path=path,
            key="outputs.names",
        )
    for name in raw:
        if model.outputs and name not in model.outputs:
            raise ScenarioError(
                f"{name!r} is not an output of the model{_close(name, model.outputs)}",
                path=path,
                key="outputs.names",
            )
    return tuple(raw)

"""Writing a scenario back as TOML (units on every value)."""

from __future__ import annotations

import json
import math
import re
from collections.abc import Mapping
from typing import TYPE_CHECKING, Any

import numpy as np

from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.scenario.costs import CostModel, SmoothCost, TieredCost
from trapbudget.sensitivity.scenario.distributions import Tolerance
from trapbudget.sensitivity.scenario.units import parse_tolerance_text

if TYPE_CHECKING:
    from trapbudget.sensitivity.scenario.core import Scenario

__all__ = ["scenario_to_toml", "toml_dumps"]


def _written(value: float, unit: str) -> str | float:
    if unit in ("", "1"):
        return float(value)
    return f"{float(value)!r} {unit}"


def _written_tolerance(tol: Tolerance) -> str | float:
    if tol.relative:
        try:
            value, relative = parse_tolerance_text(
                tol.text,
                unit=tol.unit,
                nominal=tol.nominal,
                key="",
                nominal_text=(_written(tol.nominal, tol.unit)),
            )
            if relative and value == tol.value:
                return tol.text
        except ScenarioError:
            pass
        if tol.nominal != 0:
            return f"{100.0 * tol.value / abs(tol.nominal)!r} %"
    if tol.unit in ("", "1"):
        return float(tol.value)
    return f"{float(tol.value)!r} {tol.unit}"


def _written_cost(cost: CostModel) -> dict[str, Any]:
    if isinstance(cost, TieredCost):
        return {
            "tiers": [
                {"name": t.name, "tolerance": _written_tolerance(t.tolerance), "cost": t.cost}
                for t in cost.tiers
            ]
        }
    assert isinstance(cost, SmoothCost)
    return {
        "smooth": {
            "tolerance": _written_tolerance(cost.tolerance),
            "cost": cost.reference_cost,
            "exponent": cost.exponent,
        }
    }


# -- a small TOML writer ------------------------------------------------------------

_BARE_KEY = re.compile(r"^[A-Za-z0-9_-]+$")


def _key(name: str) -> str:
    return name if _BARE_KEY.match(name) else json.dumps(name)


def _scalar(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int | np.integer):
        return str(int(value))
    if isinstance(value, float | np.floating):
        v = float(value)
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)
    if isinstance(value, Mapping):
        return "{ " + ", ".join(f"{_key(k)} = {_scalar(v)}" for k, v in value.items()) + " }"
    if isinstance(value, list | tuple):
        return "[" + ", ".join(_scalar(v) for v in value) + "]"
    raise TypeError(f"cannot write {type(value).__name__} to TOML")


def _is_table_array(value: Any) -> bool:
    return isinstance(value, list) and bool(value) and all(isinstance(v, Mapping) for v in value)


def _write_table(lines: list[str], prefix: str, table: Mapping[str, Any]) -> None:
    plain = {
        k: v for k, v in table.items() if not isinstance(v, Mapping) and not _is_table_array(v)
    }
    for k, v in plain.items():
        lines.append(f"{_key(k)} = {_scalar(v)}")
    for k, v in table.items():
        name = f"{prefix}.{_key(k)}" if prefix else _key(k)
        if isinstance(v, Mapping):
            has_plain = any(
                not isinstance(x, Mapping) and not _is_table_array(x) for x in v.values()
            )
            if has_plain or not v:
                lines.extend(["", f"[{name}]"])
            _write_table(lines, name, v)
        elif _is_table_array(v):
            for item in v:
                lines.extend(["", f"[[{name}]]"])
                # nested tables inside an array item are written inline
                for ik, iv in item.items():
                    lines.append(f"{_key(ik)} = {_scalar(iv)}")


def toml_dumps(data: Mapping[str, Any]) -> str:
    """Write a mapping as TOML (tables, arrays of tables, inline tables in arrays)."""
    lines: list[str] = []
    _write_table(lines, "", data)
    return "\n".join(lines).lstrip("\n") + "\n"


def scenario_to_toml(scenario: Scenario) -> str:
    """The scenario as TOML text that :func:`load_scenario` reads back to an equal scenario."""
    header = (
        "# trapbudget scenario (SI values written out in full).\n"
        "# Lasers, coil currents, alkali metals and vacuum glass can hurt people: follow the\n"
        "# local laser-safety officer, local codes and licensed practice.\n"
    )
    return header + toml_dumps(scenario.to_dict())

"""What it costs to hold an input to a tolerance: priced tiers or a smooth law.

Notes
-----
A tiered cost lists what a lab can buy (free-running laser, noise eater,
...); holding a tolerance t costs the cheapest tier whose tolerance is at
most t, and is infinite when no tier is good enough. A smooth cost is
``C(t) = C_ref (t_ref / t)^n``: halving a tolerance multiplies the cost by
``2^n`` (common practice in tolerance allocation). Tolerances here are the
absolute ``Tolerance.value`` in the input's own meaning and shape.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.scenario.distributions import Tolerance
from trapbudget.sensitivity.scenario.units import parse_tolerance_text

__all__ = ["CostModel", "CostTier", "SmoothCost", "TieredCost", "parse_costs"]

# Relative slack when comparing a requested tolerance with a tier's.
_SLACK = 1e-9


@dataclass(frozen=True)
class CostTier:
    """One purchasable option: its name, the tolerance it achieves and its cost."""

    name: str
    tolerance: Tolerance
    cost: float


@dataclass(frozen=True)
class TieredCost:
    """Priced tiers of one input (any order; sorted loosest first)."""

    tiers: tuple[CostTier, ...]

    def __post_init__(self) -> None:
        if not self.tiers:
            raise ScenarioError("tiers must list at least one tier")
        ordered = tuple(sorted(self.tiers, key=lambda t: (-t.tolerance.value, t.cost)))
        object.__setattr__(self, "tiers", ordered)

    def cost(self, absolute_tolerance: float) -> float:
        """Cost of holding the input to ``absolute_tolerance`` (SI): the
        cheapest tier at least as tight; ``inf`` when none is."""
        t = float(absolute_tolerance)
        costs = [tier.cost for tier in self.tiers if tier.tolerance.value <= t * (1 + _SLACK)]
        return min(costs) if costs else math.inf

    def tier_for(self, absolute_tolerance: float) -> CostTier | None:
        """The cheapest tier at least as tight as ``absolute_tolerance``, or None."""
        t = float(absolute_tolerance)
        good = [tier for tier in self.tiers if tier.tolerance.value <= t * (1 + _SLACK)]
        return min(good, key=lambda tier: tier.cost) if good else None

    @property
    def tightest(self) -> float:
        """The smallest tolerance on offer (SI)."""
        return min(tier.tolerance.value for tier in self.tiers)


@dataclass(frozen=True, init=False)
class SmoothCost:
    """Cost ``C(t) = cost * (tolerance.value / t)^exponent`` of holding a tolerance t.

    Parameters
    ----------
    tolerance : Tolerance
        The reference tolerance t_ref.
    cost : float
        The cost at t_ref (stored as ``reference_cost``; ``.cost(t)`` is the law).
    exponent : float
        n > 0.
    """

    tolerance: Tolerance
    reference_cost: float
    exponent: float

    def __init__(self, tolerance: Tolerance, cost: float, exponent: float = 1.0) -> None:
        object.__setattr__(self, "tolerance", tolerance)
        object.__setattr__(self, "reference_cost", float(cost))
        object.__setattr__(self, "exponent", float(exponent))
        if not (tolerance.value > 0 and math.isfinite(self.reference_cost) and exponent > 0):
            raise ScenarioError(
                "smooth cost needs a positive reference tolerance, a finite cost and exponent > 0"
            )

    def cost(self, absolute_tolerance: float) -> float:
        """Cost of holding the input to ``absolute_tolerance`` (SI); inf for t <= 0."""
        t = float(absolute_tolerance)
        if t <= 0:
            return math.inf
        return float(self.reference_cost * (self.tolerance.value / t) ** self.exponent)


CostModel = TieredCost | SmoothCost


def _number(value: Any, *, path, key) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float) or not math.isfinite(value):
        raise ScenarioError(f"{value!r} must be a finite number, e.g. 1000", path=path, key=key)
    if value < 0:
        raise ScenarioError(f"{value!r} must not be negative", path=path, key=key)
    return float(value)


def _tier_tolerance(text: Any, base: Tolerance, *, path, key) -> Tolerance:
    value, relative = parse_tolerance_text(
        text,
        unit=base.unit,
        nominal=base.nominal,
        key=key,
        path=path,
        nominal_text=f"{base.nominal} {base.unit}" if base.unit else base.nominal,
    )
    return Tolerance(
        nominal=base.nominal,
        value=value,
        meaning=base.meaning,
        coverage_factor=base.coverage_factor,
        shape=base.shape,
        relative=relative,
        text=str(text),
        bounds=base.bounds,
        unit=base.unit,
        where=key,
    )


def parse_costs(
    raw: Mapping[str, Any] | None,
    *,
    tolerances: Mapping[str, Tolerance],
    path: object | None = None,
) -> dict[str, CostModel]:
    """Parse the ``[costs.<input>]`` tables of a scenario.

    Parameters
    ----------
    raw : mapping input -> table
        Each table has ``tiers = [{name, tolerance, cost}, ...]`` or
        ``smooth = {tolerance, cost, exponent}``; tolerances are written like
        the input's tolerance (relative or with a unit) and share its meaning
        and shape.
    tolerances : mapping input -> Tolerance
        The scenario's parsed tolerances (costs only for uncertain inputs).
    path : path-like, optional
        Scenario file, for messages.

    Raises
    ------
    ScenarioError
        Unknown input or key, an input without tolerance, malformed tiers.
    """
    if raw is None:
        return {}
    if not isinstance(raw, Mapping):
        raise ScenarioError("must be a table of [costs.<input>] tables", path=path, key="costs")
    out: dict[str, CostModel] = {}
    for name, table in raw.items():
        key = f"costs.{name}"
        if name not in tolerances:
            raise ScenarioError(
                f"{name!r} is not an input with a tolerance; add a tolerance in "
                f"[inputs.{name}] or remove the costs",
                path=path,
                key=key,
            )
        if (
            not isinstance(table, Mapping)
            or set(table) - {"tiers", "smooth"}
            or (("tiers" in table) == ("smooth" in table))
        ):
            raise ScenarioError(
                "give exactly one of tiers = [{name, tolerance, cost}, ...] or "
                "smooth = {tolerance, cost, exponent}",
                path=path,
                key=key,
            )
        base = tolerances[name]
        if "tiers" in table:
            tiers = table["tiers"]
            if not isinstance(tiers, list) or not tiers:
                raise ScenarioError(
                    "tiers must be a non-empty array of {name, tolerance, cost} tables",
                    path=path,
                    key=f"{key}.tiers",
                )
            parsed = []
            for i, tier in enumerate(tiers):
                where = f"{key}.tiers[{i}]"
                if not isinstance(tier, Mapping) or set(tier) != {"name", "tolerance", "cost"}:
                    raise ScenarioError(
                        f"{tier!r} must be a table with exactly name, tolerance and cost",
                        path=path,
                        key=where,
                    )
                tol = _tier_tolerance(tier["tolerance"], base, path=path, key=f"{where}.tolerance")
                cost = _number(tier["cost"], path=path, key=f"{where}.cost")
                parsed.append(CostTier(str(tier["name"]), tol, cost))
            out[name] = TieredCost(tuple(parsed))
        else:
            smooth = table["smooth"]
            where = f"{key}.smooth"
            if (
                not isinstance(smooth, Mapping)
                or not {"tolerance", "cost"} <= set(smooth)
                or (set(smooth) - {"tolerance", "cost", "exponent"})
            ):
                raise ScenarioError(
                    f"{smooth!r} must be a table {{tolerance, cost, exponent}}",
                    path=path,
                    key=where,
                )
            tol = _tier_tolerance(smooth["tolerance"], base, path=path, key=f"{where}.tolerance")
            if tol.value <= 0:
                raise ScenarioError(
                    "reference tolerance must be positive", path=path, key=f"{where}.tolerance"
                )
            exponent = _number(smooth.get("exponent", 1.0), path=path, key=f"{where}.exponent")
            if exponent <= 0:
                raise ScenarioError(
                    "exponent must be > 0, e.g. 1", path=path, key=f"{where}.exponent"
                )
            out[name] = SmoothCost(
                tol, _number(smooth["cost"], path=path, key=f"{where}.cost"), exponent
            )
    return out

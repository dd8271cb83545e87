"""Cost models: tiers and the power law, and the parsing of [costs] tables."""

from __future__ import annotations

import math

import pytest

from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.scenario.costs import CostTier, SmoothCost, TieredCost, parse_costs
from trapbudget.sensitivity.scenario.distributions import Tolerance

BASE = Tolerance(nominal=4e-3, value=8e-5, relative=True, text="2 %", unit="W")
TOLERANCES = {"beam_power": BASE}


def _tol(value: float) -> Tolerance:
    return BASE.with_value(value)


def test_tiers_choose_cheapest_that_is_tight_enough():
    cost = TieredCost(
        (
            CostTier("noise eater", _tol(2e-5), 3000.0),
            CostTier("free-running", _tol(2e-4), 0.0),
            CostTier("better eater", _tol(1e-5), 5000.0),
        )
    )
    assert [t.name for t in cost.tiers] == ["free-running", "noise eater", "better eater"]
    assert cost.cost(3e-4) == 0.0
    assert cost.cost(2e-4) == 0.0  # a tier meets its own tolerance
    assert cost.cost(5e-5) == 3000.0
    assert cost.cost(1e-5) == 5000.0
    assert cost.cost(1e-6) == math.inf
    assert cost.tier_for(5e-5).name == "noise eater" and cost.tier_for(1e-6) is None
    assert cost.tightest == 1e-5


def test_smooth_power_law():
    # definition of the cost law: C(t) = C_ref (t_ref / t)^n (DEVELOPERS.md, [costs])
    law = SmoothCost(_tol(4e-5), 1000.0, 2.0)
    assert law.cost(4e-5) == pytest.approx(1000.0)
    assert law.cost(2e-5) == pytest.approx(4000.0)  # halving t costs 2^n
    assert law.cost(8e-5) == pytest.approx(250.0)
    assert law.cost(0.0) == math.inf
    assert law.reference_cost == 1000.0
    with pytest.raises(ScenarioError, match=r"exponent > 0"):
        SmoothCost(_tol(4e-5), 1000.0, 0.0)


def test_parse_tiers_and_smooth():
    raw = {
        "beam_power": {
            "tiers": [
                {"name": "free-running", "tolerance": "5 %", "cost": 0},
                {"name": "noise eater", "tolerance": "0.02 mW", "cost": 3000},
            ]
        }
    }
    costs = parse_costs(raw, tolerances=TOLERANCES, path="s.toml")
    tiers = costs["beam_power"].tiers
    assert tiers[0].tolerance.value == pytest.approx(0.05 * 4e-3) and tiers[0].tolerance.relative
    assert tiers[1].tolerance.value == pytest.approx(2e-5) and not tiers[1].tolerance.relative
    smooth = parse_costs(
        {"beam_power": {"smooth": {"tolerance": "1 %", "cost": 1000, "exponent": 1}}},
        tolerances=TOLERANCES,
    )["beam_power"]
    assert smooth.cost(0.5 * 0.01 * 4e-3) == pytest.approx(2000.0)


@pytest.mark.parametrize(
    ("raw", "message"),
    [
        ({"detuning": {"tiers": []}}, r"'detuning' is not an input with a tolerance"),
        ({"beam_power": {}}, r"give exactly one of tiers"),
        ({"beam_power": {"tiers": [], "smooth": {}}}, r"give exactly one of tiers"),
        ({"beam_power": {"tiers": []}}, r"tiers must be a non-empty array"),
        (
            {"beam_power": {"tiers": [{"name": "a", "cost": 1}]}},
            r"exactly name, tolerance and cost",
        ),
        (
            {"beam_power": {"tiers": [{"name": "a", "tolerance": "1 %", "cost": -1}]}},
            r"must not be negative",
        ),
        (
            {"beam_power": {"tiers": [{"name": "a", "tolerance": "1 mQ", "cost": 1}]}},
            r"'mQ' is not a unit; did you mean 'mW'",
        ),
        (
            {"beam_power": {"smooth": {"cost": 1}}},
            r"must be a table \{tolerance, cost, exponent\}",
        ),
        (
            {"beam_power": {"smooth": {"tolerance": "1 %", "cost": 1, "exponent": 0}}},
            r"exponent must be > 0",
        ),
    ],
)
def test_parse_errors_are_one_line(raw, message):
    with pytest.raises(ScenarioError, match=message) as info:
        parse_costs(raw, tolerances=TOLERANCES, path="s.toml")
    assert "\n" not in str(info.value) and str(info.value).startswith("s.toml: costs.")

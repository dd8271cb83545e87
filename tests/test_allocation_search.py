"""Allocation on nonlinear models: the Monte Carlo tier search against exhaustive enumeration.

The reference is an enumeration written here: every tier combination pushed through
the model on the same common-random-number sample (the unit design ``allocate``
draws from the scenario's seed), each requirement judged by the one-sided
Clopper-Pearson lower bound ``beta.ppf(1 - q, k, n - k + 1)`` at q = Phi(1)
(Clopper & Pearson 1934), and the cheapest passing combination kept. Ties: costs
within the stated relative tolerance 1e-9 count as equal.
"""

from __future__ import annotations

import itertools
import math
from typing import ClassVar

import numpy as np
import pytest
from scipy import stats

from trapbudget.models.protocol import InputSpec, OutputSpec
from trapbudget.sensitivity.decisions.allocate import allocate
from trapbudget.sensitivity.decisions.compare import common_random_samples
from trapbudget.sensitivity.decisions.search import TIE_TOLERANCE, by_cost
from trapbudget.sensitivity.propagation import propagate
from trapbudget.sensitivity.sampling import unit_design
from trapbudget.sensitivity.scenario.core import Scenario

N = 2**12


class Toy:
    """y = f(a, b, c) for a named closed-form toy."""

    outputs: ClassVar[dict[str, OutputSpec]] = {"y": OutputSpec("y", "", "toy output")}

    def __init__(self, kind: str):
        self.kind = kind
        self.inputs = {n: InputSpec(n, "", 0.0, -math.inf, math.inf, n) for n in ("a", "b", "c")}

    def evaluate(self, values):
        a, b, c = (np.asarray(values.get(n, 0.0), dtype=float) for n in ("a", "b", "c"))
        if self.kind == "square":  # zero slope in a at a = 0
            return {"y": a**2 + b + 0.3 * c}
        return {"y": a * b * c}  # product


def tiers(values, costs):
    return {
        "tiers": [
            {"name": f"t{i}", "tolerance": v, "cost": c}
            for i, (v, c) in enumerate(zip(values, costs, strict=True))
        ]
    }


def toy_scenario(kind, *, nominal, tolerances, costs, requirement, seed=3):
    return Scenario.from_dict(
        {
            "scenario": {"title": f"{kind} toy", "model": kind},
            "inputs": {
                n: {"nominal": nominal[n], "tolerance": tolerances[n]} for n in ("a", "b", "c")
            },
            "outputs": {"names": ["y"]},
            "settings": {"n_samples": N, "method": "sobol", "seed": seed},
            "requirements": [requirement],
            "costs": costs,
        },
        model=Toy(kind),
    )


def enumerate_on_the_same_sample(scenario):
    """Cheapest tier combination meeting the requirement on the allocate's CRN sample."""
    names = list(scenario.costs)
    options = [scenario.costs[n].tiers for n in names]
    unit = unit_design(N, len(scenario.inputs), method="sobol", rng=scenario.settings.seed)
    req = scenario.requirements[0]
    q = stats.norm.cdf(1.0)
    best = (math.inf, None)
    for combo in itertools.product(*options):
        cost = sum(float(t.cost) for t in combo)
        candidate = scenario.with_tolerances(
            {n: t.tolerance for n, t in zip(names, combo, strict=True)}
        )
        (samples,) = common_random_samples([candidate], n_samples=N, method="sobol", unit=unit)
        y = samples["y"].values
        k = int(np.count_nonzero(req.satisfied(y)))
        lower = stats.beta.ppf(1 - q, k, N - k + 1) if k else 0.0
        if lower >= req.probability and cost < best[0] * (1 - TIE_TOLERANCE):
            best = (cost, tuple(t.name for t in combo))
    return best


def test_zero_slope_input_is_tightened_when_it_must_be():
    # y = a^2 + b + 0.3 c at a = 0: dy/da = 0 at the nominal point, yet a's spread adds
    # a positive bias and variance; only tightening a meets P(y <= 1.2) >= 0.95.
    costs = {
        "a": tiers([0.6, 0.3], [0.0, 100.0]),
        "b": tiers([0.3, 0.2], [0.0, 400.0]),
        "c": tiers([0.5, 0.25], [0.0, 300.0]),
    }
    scenario = toy_scenario(
        "square",
        nominal={"a": 0.0, "b": 0.0, "c": 0.0},
        tolerances={"a": 0.6, "b": 0.3, "c": 0.5},
        costs=costs,
        requirement={"output": "y", "at_most": 1.2, "probability": 0.95, "label": "low"},
    )
    cost, names = enumerate_on_the_same_sample(scenario)
    assert names is not None and names[0] == "t1"  # a tightened
    allocation = allocate(scenario)
    assert allocation.feasible, allocation.reason
    assert allocation.total_cost == pytest.approx(cost, rel=TIE_TOLERANCE)
    assert allocation.spec["tier"].sel(input="a").item() == "t1"
    assert bool(allocation.requirements["fresh_met"].item())
    # Independent check: 2^16 fresh pseudo-random draws, 4 binomial SE below the target.
    check = propagate(
        allocation.scenario.model, allocation.scenario.inputs, n_samples=2**16,
        method="random", rng=99, outputs=["y"],
    )  # fmt: skip
    p = float(np.mean(check["y"].values <= 1.2))
    assert p >= 0.95 - 4 * math.sqrt(0.95 * 0.05 / 2**16)


def test_product_model_matches_enumeration():
    # y = a b c around 1: no single linear slope tells the interplay of the tiers.
    costs = {
        n: tiers([0.2, 0.1, 0.05, 0.02], [0.0, c, 3 * c, 8 * c])
        for n, c in (("a", 100.0), ("b", 140.0), ("c", 70.0))
    }
    scenario = toy_scenario(
        "product",
        nominal={"a": 1.0, "b": 1.0, "c": 1.0},
        tolerances={"a": 0.2, "b": 0.2, "c": 0.2},
        costs=costs,
        requirement={"output": "y", "within": [0.8, 1.2], "probability": 0.95, "label": "ok"},
    )
    cost, _ = enumerate_on_the_same_sample(scenario)
    allocation = allocate(scenario)
    assert allocation.feasible, allocation.reason
    assert allocation.total_cost == pytest.approx(cost, rel=TIE_TOLERANCE)


@pytest.mark.parametrize("seed", range(12))
def test_random_tiered_problems_equal_enumeration(seed):
    # Random tiers and costs on both toys, random limits: the search by cost equals the
    # enumeration on the same common-random-number sample (cost up to the tie tolerance),
    # or both find nothing.
    rng = np.random.default_rng(seed)
    kind = "square" if seed % 2 else "product"
    nominal = {"a": 0.0, "b": 0.0, "c": 0.0} if kind == "square" else dict.fromkeys("abc", 1.0)
    costs, present = {}, {}
    for n in "abc":
        values = np.sort(rng.uniform(0.02, 0.5, size=3))[::-1]
        price = np.concatenate([[0.0], np.sort(rng.integers(1, 20, size=2)) * 50.0])
        costs[n] = tiers(list(values), list(price))
        present[n] = float(values[0])
    if kind == "square":
        limit = float(rng.uniform(0.5, 1.5))
        requirement = {"output": "y", "at_most": limit, "probability": 0.9, "label": "r"}
    else:
        half = float(rng.uniform(0.3, 0.8))
        requirement = {"output": "y", "within": [1 - half, 1 + half], "probability": 0.9}
    scenario = toy_scenario(
        kind, nominal=nominal, tolerances=present, costs=costs, requirement=requirement
    )
    cost, names = enumerate_on_the_same_sample(scenario)
    allocation = allocate(scenario)
    if names is None:
        assert not allocation.feasible, allocation.reason
    else:
        assert allocation.feasible, allocation.reason
        assert allocation.total_cost == pytest.approx(cost, rel=TIE_TOLERANCE)


def test_by_cost_visits_every_combination_in_cost_order():
    # Against itertools.product, sorted (Python standard library).
    rng = np.random.default_rng(0)
    for _ in range(30):
        costs = [list(rng.integers(0, 6, size=rng.integers(1, 5)) * 1.0) for _ in range(3)]
        got = list(by_cost(costs))
        every = sorted(
            sum(c[k] for c, k in zip(costs, combo, strict=True))
            for combo in itertools.product(*[range(len(c)) for c in costs])
        )
        assert [g[0] for g in got] == every
        assert len({g[1] for g in got}) == len(every)


def test_smooth_costs_see_a_zero_slope_input():
    # y = a^2 + b + 0.3 c at a = 0 with smooth costs: the nominal slope of a is 0, so a
    # linear pass alone would loosen a freely; the effective slope from a's own spread
    # (Var(a^2) = 2 u^4 for a normal a, so c_eff^2 = 2 u^2) keeps it in the budget.
    costs = {n: {"smooth": {"tolerance": 0.3, "cost": 100.0, "exponent": 1.0}} for n in "abc"}
    scenario = toy_scenario(
        "square",
        nominal={"a": 0.0, "b": 0.0, "c": 0.0},
        tolerances={"a": 0.6, "b": 0.3, "c": 0.3},
        costs=costs,
        requirement={"output": "y", "at_most": 0.8, "probability": 0.95, "label": "low"},
    )
    allocation = allocate(scenario, max_iterations=12)
    assert allocation.feasible, allocation.reason
    assert allocation.tolerances["a"].value < 0.6
    # Independent check: 2^16 fresh pseudo-random draws, 4 binomial SE below the target.
    check = propagate(
        allocation.scenario.model, allocation.scenario.inputs, n_samples=2**16,
        method="random", rng=5, outputs=["y"],
    )  # fmt: skip
    p = float(np.mean(check["y"].values <= 0.8))
    assert p >= 0.95 - 4 * math.sqrt(0.95 * 0.05 / 2**16), p

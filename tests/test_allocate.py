"""Tests of tolerance allocation (trapbudget.sensitivity.allocate)."""

from __future__ import annotations

import dataclasses
import itertools
import math
from importlib import resources
from pathlib import Path

import numpy as np
import pytest
from scipy import optimize, stats

from trapbudget.sensitivity.decisions.allocate import allocate
from trapbudget.sensitivity.decisions.linear_allocation import (
    LinearProblem,
    TierOption,
    allocate_tiers,
    lagrange_allocation,
    uncertainty_bound,
)
from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.propagation import propagate
from trapbudget.sensitivity.scenario.core import Scenario
from trapbudget.sensitivity.scenario.reader import load_scenario

# ---------------------------------------------------------------- bounds from requirements


@pytest.mark.parametrize("p", [0.5, 0.9, 0.95, 0.999])
def test_at_least_bound_gives_the_required_normal_probability(p):
    # exact normal tail, scipy.stats.norm.sf (the normal approximation the bound assumes)
    mean, limit = 3.0e8, 2.0e8
    u = uncertainty_bound("at_least", limit, mean=mean, probability=p)
    if p == 0.5:
        assert u == math.inf
    else:
        assert stats.norm.sf(limit, loc=mean, scale=u) == pytest.approx(p, rel=1e-12)


def test_at_most_bound_mirrors_at_least():
    # exact normal CDF, scipy.stats.norm.cdf
    u = uncertainty_bound("at_most", 1.0, mean=0.6, probability=0.99)
    assert stats.norm.cdf(1.0, loc=0.6, scale=u) == pytest.approx(0.99, rel=1e-12)


def test_within_bound_solves_the_two_sided_normal_probability():
    # exact normal interval probability, scipy.stats.norm.cdf, off-centre mean
    lo, hi, mean, p = 1.0, 3.0, 1.8, 0.9
    u = uncertainty_bound("within", (lo, hi), mean=mean, probability=p)
    covered = stats.norm.cdf(hi, mean, u) - stats.norm.cdf(lo, mean, u)
    assert covered == pytest.approx(p, abs=1e-10)


def test_bound_is_zero_when_the_mean_fails():
    # a normal output whose mean is below the limit meets P(Y >= x) >= 0.9 for no spread
    assert uncertainty_bound("at_least", 2.0, mean=1.0, probability=0.9) == 0.0
    assert uncertainty_bound("within", (0.0, 1.0), mean=1.5, probability=0.5) == 0.0


def test_relative_spread_bound():
    # definition of the relative spread u(Y)/|mean| (common practice)
    assert uncertainty_bound("relative_spread_at_most", 0.05, mean=-4.0) == pytest.approx(0.2)


def test_bad_probability_and_kind_raise():
    with pytest.raises(ValueError, match="probability must lie in"):
        uncertainty_bound("at_least", 1.0, mean=2.0, probability=1.5)
    with pytest.raises(ValueError, match="unknown requirement kind 'bigger'"):
        uncertainty_bound("bigger", 1.0, mean=2.0, probability=0.9)


# ---------------------------------------------------------------- smooth costs (Lagrange)


def _closed_form_equal_exponent(a, cost, reference, p, budget):
    # Lagrange condition (derived here): d/dt_i [C_i (r_i/t_i)^p + lam a_i t_i^2] = 0
    #   -> t_i^(p+2) = p C_i r_i^p / (2 lam a_i); the constraint sum a_i t_i^2 = B fixes lam.
    shape = (cost * reference**p / a) ** (1.0 / (p + 2.0))
    scale = math.sqrt(budget / np.sum(a * shape**2))
    return shape * scale


@pytest.mark.parametrize("p", [0.5, 1.0, 2.0])
def test_lagrange_matches_closed_form_for_equal_exponents(p):
    rng = np.random.default_rng(3)
    a = rng.uniform(0.1, 5.0, size=5)
    cost = rng.uniform(100.0, 2000.0, size=5)
    reference = rng.uniform(0.5, 2.0, size=5)
    budget = 0.7
    t = lagrange_allocation(a, budget, cost=cost, reference=reference, exponent=np.full(5, p))
    expected = _closed_form_equal_exponent(a, cost, reference, p, budget)
    np.testing.assert_allclose(t, expected, rtol=1e-9)
    assert np.sum(a * t**2) == pytest.approx(budget, rel=1e-9)


@pytest.mark.filterwarnings("ignore:delta_grad == 0.0:UserWarning")
def test_lagrange_with_mixed_exponents_and_two_budgets_matches_a_general_solver():
    # independent check: scipy.optimize.minimize (trust-constr) on the same convex problem
    weights = np.array([[1.0, 4.0, 0.25, 0.0], [2.0, 0.1, 1.0, 3.0]])
    budgets = np.array([2.0, 1.5])
    cost = np.array([100.0, 200.0, 50.0, 80.0])
    reference = np.ones(4)
    exponent = np.array([1.0, 2.0, 0.5, 1.0])
    t = lagrange_allocation(weights, budgets, cost=cost, reference=reference, exponent=exponent)

    def total(y):
        return float(np.sum(cost * np.exp(-exponent * y)))

    cons = optimize.NonlinearConstraint(lambda y: weights @ np.exp(2 * y), -np.inf, budgets)
    ref = optimize.minimize(
        total,
        np.zeros(4),
        method="trust-constr",
        constraints=[cons],
        options={"gtol": 1e-12, "xtol": 1e-12, "maxiter": 5000},
    )
    assert np.all(weights @ t**2 <= budgets * (1 + 1e-7))
    assert total(np.log(t)) == pytest.approx(total(ref.x), rel=1e-5)


def test_lagrange_respects_upper_bounds():
    # an input with no effect on the output (a = 0) is left at its loosest allowed value
    t = lagrange_allocation(
        np.array([1.0, 0.0]),
        0.5,
        cost=np.array([10.0, 10.0]),
        reference=np.ones(2),
        exponent=np.ones(2),
        upper=np.array([5.0, 3.0]),
    )
    assert t[1] == 3.0
    assert t[0] == pytest.approx(math.sqrt(0.5))


# ---------------------------------------------------------------- tiers (branch and bound)


def _random_tier_problem(seed, n_inputs=4, n_tiers=3, n_req=2):
    rng = np.random.default_rng(seed)
    sens = rng.uniform(0.2, 3.0, size=(n_req, n_inputs)) ** 2
    tiers = []
    for j in range(n_inputs):
        u = np.sort(rng.uniform(0.05, 1.0, size=n_tiers))[::-1]
        costs = np.sort(rng.uniform(0, 1000, size=n_tiers))
        costs[0] = 0.0
        tiers.append([TierOption(f"t{j}{k}", u[k], u[k], float(costs[k])) for k in range(n_tiers)])
    budgets = rng.uniform(0.5, 3.0, size=n_req)
    return LinearProblem(
        requirements=[f"r{r}" for r in range(n_req)],
        budgets=budgets,
        fixed_variance=np.full(n_req, 0.05),
        tiered=[f"x{j}" for j in range(n_inputs)],
        tiered_sensitivity=sens,
        tiers=tiers,
    )


def _brute_force(problem):
    best = (math.inf, None)
    for combo in itertools.product(*[range(len(t)) for t in problem.tiers]):
        var = problem.fixed_variance + sum(
            problem.tiered_sensitivity[:, j] * problem.tiers[j][k].standard_uncertainty ** 2
            for j, k in enumerate(combo)
        )
        if np.all(var < problem.budgets):
            cost = sum(problem.tiers[j][k].cost for j, k in enumerate(combo))
            if cost < best[0]:
                best = (cost, combo)
    return best


@pytest.mark.parametrize("seed", range(12))
def test_branch_and_bound_matches_exhaustive_enumeration(seed):
    # reference: exhaustive enumeration with itertools.product (computed here)
    problem = _random_tier_problem(seed)
    cost, combo = _brute_force(problem)
    solution = allocate_tiers(problem)
    if combo is None:
        assert not solution.feasible
    else:
        assert solution.feasible
        assert solution.cost == pytest.approx(cost)
        assert np.all(solution.variance < problem.budgets)


def test_infeasible_tiers_name_the_requirement_and_the_blocking_input():
    # the tightest tier of x1 alone exceeds the budget of r0 (arithmetic, by construction)
    tiers = [
        [TierOption("loose", 1.0, 1.0, 0.0), TierOption("tight", 0.1, 0.1, 10.0)],
        [TierOption("loose", 2.0, 2.0, 0.0), TierOption("tight", 1.5, 1.5, 10.0)],
    ]
    problem = LinearProblem(
        requirements=["enough atoms"],
        budgets=np.array([1.0]),
        fixed_variance=np.array([0.0]),
        tiered=["x0", "x1"],
        tiered_sensitivity=np.ones((1, 2)),
        tiers=tiers,
    )
    solution = allocate_tiers(problem)
    assert not solution.feasible
    assert solution.failing == "enough atoms"
    assert solution.blocking == "x1"


def test_mixed_tiers_and_smooth_costs_beat_every_tier_choice():
    # reference: enumerate the tiers and solve the smooth rest in closed form (derived above)
    tiers = [
        [
            TierOption("a", 1.0, 1.0, 0.0),
            TierOption("b", 0.3, 0.3, 40.0),
            TierOption("c", 0.1, 0.1, 300.0),
        ]
    ]
    a = np.array([[2.0, 0.5]])
    problem = LinearProblem(
        requirements=["r"],
        budgets=np.array([1.2]),
        fixed_variance=np.array([0.1]),
        smooth=["s0", "s1"],
        smooth_weights=a,
        smooth_cost=np.array([20.0, 50.0]),
        smooth_reference=np.ones(2),
        smooth_exponent=np.ones(2),
        smooth_lower=np.full(2, 1e-12),
        smooth_upper=np.full(2, np.inf),
        tiered=["x"],
        tiered_sensitivity=np.array([[1.0]]),
        tiers=tiers,
    )
    costs = []
    for option in tiers[0]:
        remaining = 1.2 - 0.1 - option.standard_uncertainty**2
        if remaining <= 0:
            continue
        t = _closed_form_equal_exponent(a[0], np.array([20.0, 50.0]), np.ones(2), 1.0, remaining)
        costs.append(option.cost + float(np.sum(np.array([20.0, 50.0]) / t)))
    solution = allocate_tiers(problem)
    assert solution.feasible
    assert solution.cost == pytest.approx(min(costs), rel=1e-8)


# ---------------------------------------------------------------- the scenario-level driver

B = {"x1": 2.0, "x2": -1.0, "x3": 0.5}
OFFSET = 10.0
N_MC = 2**14


def _linear_scenario(
    *, limit, costs, probability=0.95, tolerances=None, kind="at_least", n_samples=N_MC, seed=7
):
    tolerances = tolerances or {"x1": 0.2, "x2": 0.2, "x3": 0.1}
    requirement = {"output": "y", kind: limit, "label": "enough"}
    if probability is not None:
        requirement["probability"] = probability
    return Scenario.from_dict(
        {
            "scenario": {
                "title": "linear allocation test",
                "model": "linear",
                "options": {"coefficients": B, "offset": OFFSET},
            },
            "inputs": {n: {"nominal": 0.0, "tolerance": t} for n, t in tolerances.items()},
            "outputs": {"names": ["y"]},
            "settings": {"n_samples": n_samples, "method": "sobol", "seed": seed},
            "requirements": [requirement],
            "costs": costs,
        }
    )


SMOOTH = {
    "x1": {"smooth": {"tolerance": 0.2, "cost": 100.0, "exponent": 1.0}},
    "x2": {"smooth": {"tolerance": 0.2, "cost": 300.0, "exponent": 1.0}},
}


def _mc_relative_error(p, n, safety_margin):
    # relative error of the bound U = (mu - x)/z implied by a binomial error on P:
    # dU/U = dz/z, dz = se / phi(z), se = sqrt(p (1 - p) / n); the margin shifts by that many se
    z = stats.norm.ppf(p)
    se = math.sqrt(p * (1 - p) / n)
    return (safety_margin + 3.0) * se / (stats.norm.pdf(z) * z)


def test_smooth_allocation_matches_the_closed_form_lagrange_optimum():
    scenario = _linear_scenario(limit=9.0, costs=SMOOTH)
    allocation = allocate(scenario, max_loosen=100.0)
    assert allocation.feasible, allocation.reason
    # closed form (derived in _closed_form_equal_exponent): a_i = b_i^2 (normal, u = t),
    # fixed variance b3^2 u3^2, U = (mu - x)/z_p
    a = np.array([B["x1"] ** 2, B["x2"] ** 2])
    u_bound = (OFFSET - 9.0) / stats.norm.ppf(0.95)
    budget = u_bound**2 - (B["x3"] * 0.1) ** 2
    expected = _closed_form_equal_exponent(
        a, np.array([100.0, 300.0]), np.full(2, 0.2), 1.0, budget
    )
    got = np.array([allocation.tolerances["x1"].value, allocation.tolerances["x2"].value])
    # the ratio t1/t2 does not depend on the bound: exact
    assert got[0] / got[1] == pytest.approx(expected[0] / expected[1], rel=1e-6)
    # the scale follows the Monte Carlo estimate of P: within its error (+ the stop band)
    rel = (_mc_relative_error(0.95, N_MC, 1.0) + 0.02) * u_bound**2 / budget
    np.testing.assert_allclose(got, expected, rtol=rel)
    spec = allocation.spec
    assert spec["binding"].sel(input="x1").item() == "enough"
    assert not bool(spec["free"].sel(input="x3"))
    assert float(spec["required_tolerance"].sel(input="x3")) == 0.1


def test_allocated_tolerances_meet_the_claimed_probability_in_an_independent_sample():
    scenario = _linear_scenario(limit=9.0, costs=SMOOTH)
    allocation = allocate(scenario)
    claimed = float(allocation.requirements["probability"].item())
    claimed_se = float(allocation.requirements["standard_error"].item())
    # independent check: a fresh pseudo-random sample through H3's propagate, other seed
    samples = propagate(
        allocation.scenario.model,
        allocation.scenario.inputs,
        n_samples=2**15,
        method="random",
        rng=2024,
        outputs=["y"],
    )
    p = float(np.mean(samples["y"].values >= 9.0))
    se = math.sqrt(p * (1 - p) / 2**15)
    assert p >= 0.95 - 4 * se
    assert p == pytest.approx(claimed, abs=4 * math.hypot(se, claimed_se))


def _tiers(values, costs):
    return {
        "tiers": [
            {"name": f"t{v}", "tolerance": v, "cost": c}
            for v, c in zip(values, costs, strict=True)
        ]
    }


TIERS = {
    "x1": _tiers([0.3, 0.15, 0.05], [0.0, 100.0, 400.0]),
    "x2": _tiers([0.4, 0.2, 0.1], [0.0, 150.0, 300.0]),
}


@pytest.mark.parametrize("limit", [9.25, 9.55, 9.7])
def test_tiered_allocation_matches_brute_force_over_exact_probabilities(limit):
    scenario = _linear_scenario(limit=limit, costs=TIERS)
    # brute force: every tier combination, exact normal P(Y >= x) (scipy.stats.norm.sf)
    options = []
    for (t1, c1), (t2, c2) in itertools.product(
        zip([0.3, 0.15, 0.05], [0.0, 100.0, 400.0], strict=True),
        zip([0.4, 0.2, 0.1], [0.0, 150.0, 300.0], strict=True),
    ):
        sd = math.sqrt((B["x1"] * t1) ** 2 + (B["x2"] * t2) ** 2 + (B["x3"] * 0.1) ** 2)
        options.append((c1 + c2, stats.norm.sf(limit, OFFSET, sd), (t1, t2)))
    se = math.sqrt(0.95 * 0.05 / N_MC)
    # the test is only sharp when no option sits within the Monte Carlo error of the target
    assert all(abs(p - 0.95) > 6 * se for _, p, _ in options)
    cost, _, (t1, t2) = min((o for o in options if o[1] >= 0.95), key=lambda o: o[0])
    allocation = allocate(scenario)
    assert allocation.feasible, allocation.reason
    assert allocation.total_cost == pytest.approx(cost)
    assert allocation.tolerances["x1"].value == pytest.approx(t1)
    assert allocation.tolerances["x2"].value == pytest.approx(t2)


def test_tightening_a_requirement_never_lowers_the_cost():
    # mixed tiers and smooth costs; stricter limits in turn (monotonicity of the optimum)
    costs = {"x1": TIERS["x1"], "x2": SMOOTH["x2"]}
    found = [
        allocate(_linear_scenario(limit=x, costs=costs), n_samples=2**12).total_cost
        for x in (8.8, 9.0, 9.2, 9.4, 9.6)
    ]
    assert all(b >= a - 1e-9 for a, b in itertools.pairwise(found)), found


def test_infeasible_requirement_names_the_blocking_input():
    # x3 has no cost model and alone spreads y by 0.5 * 2 = 1: P(Y >= 9.5) < 0.95 whatever
    scenario = _linear_scenario(
        limit=9.5, costs=TIERS, tolerances={"x1": 0.2, "x2": 0.2, "x3": 2.0}
    )
    allocation = allocate(scenario)
    assert not allocation.feasible
    assert allocation.blocking_input == "x3"
    assert "enough" in allocation.reason and "'x3'" in allocation.reason
    assert math.isinf(allocation.total_cost)


def test_requirement_failing_at_the_nominal_point_is_reported():
    allocation = allocate(_linear_scenario(limit=10.5, costs=TIERS))
    assert not allocation.feasible
    assert "fails at the nominal point" in allocation.reason


def test_allocation_without_requirements_is_refused():
    scenario = _linear_scenario(limit=9.0, costs=TIERS)
    with pytest.raises(ScenarioError, match="no requirements to allocate against"):
        allocate(dataclasses.replace(scenario, requirements=()))


def test_allocation_without_cost_tables_uses_the_stated_default_prices():
    # Default price of every uncertain input: C_i(t) = t_present_i / t (equal factors of
    # tightening equally hard), i.e. the smooth cost with C_i = 1, r_i = t_present_i, p = 1,
    # whose optimum is the closed form _closed_form_equal_exponent (Lagrange, derived above)
    scenario = _linear_scenario(limit=9.0, costs={})
    allocation = allocate(scenario, max_loosen=100.0)
    assert allocation.feasible, allocation.reason
    present = np.array([0.2, 0.2, 0.1])
    a = np.array([B["x1"] ** 2, B["x2"] ** 2, B["x3"] ** 2])
    u_bound = (OFFSET - 9.0) / stats.norm.ppf(0.95)
    expected = _closed_form_equal_exponent(a, np.ones(3), present, 1.0, u_bound**2)
    got = np.array([allocation.tolerances[n].value for n in ("x1", "x2", "x3")])
    # ratios do not depend on the bound: exact; the scale within the Monte Carlo error
    np.testing.assert_allclose(got / got[0], expected / expected[0], rtol=1e-6)
    rel = _mc_relative_error(0.95, N_MC, 1.0) + 0.02
    np.testing.assert_allclose(got, expected, rtol=rel)
    spec = allocation.spec
    assert spec.attrs["default_costs"] is True
    assert bool(spec["free"].all())
    # new spending: the rise of each input's price above its present price of 1, relaxing
    # refunds nothing (definition stated in the report)
    cost = present / got
    assert spec.attrs["new_spending"] == pytest.approx(np.sum(np.maximum(cost - 1.0, 0.0)))
    assert spec.attrs["total_cost"] == pytest.approx(np.sum(cost))


def test_trap_allocation_holds_up_in_an_independent_monte_carlo_sample():
    # the invented upgrade case on VaporCellMOT; the check is an independent pseudo-random
    # sample (H3's propagate, other seed and method) of the allocated scenario
    path = resources.files("trapbudget.examples") / "harrier-upgrade.toml"
    scenario = load_scenario(Path(str(path)))
    allocation = allocate(scenario, n_samples=1024, rng=5)
    assert allocation.feasible, allocation.reason
    assert allocation.total_cost > 0  # the example asks for more than the present set-up gives
    allocated = allocation.scenario
    n = 4096
    samples = propagate(
        allocated.model,
        allocated.inputs,
        n_samples=n,
        method="random",
        correlation=allocated.correlation,
        rng=99,
        outputs=["atom_number", "loading_time"],
    )
    reqs = allocation.requirements
    for req in scenario.requirements:
        label = req.label
        values = samples[req.output].values
        if req.kind == "relative_spread_at_most":
            spread = float(np.std(values, ddof=1) / abs(np.mean(values)))
            # standard error of a sample standard deviation ~ s / sqrt(2 (n - 1)) (normal theory)
            assert spread <= req.limit * (1 + 4 / math.sqrt(2 * (n - 1)))
            continue
        p = float(np.mean(req.satisfied(values)))
        se = math.sqrt(max(p * (1 - p), 1.0 / n) / n)
        claimed = float(reqs["probability"].sel(requirement=label))
        claimed_se = math.sqrt(max(claimed * (1 - claimed), 1.0 / 1024) / 1024)
        assert p >= req.probability - 4 * se
        assert p == pytest.approx(claimed, abs=4 * math.hypot(se, claimed_se))


def test_within_requirement_is_allocated_and_holds_in_an_independent_sample():
    # two-sided requirement P(9.5 <= Y <= 10.6) >= 0.9 on the linear-Gaussian model;
    # exact probability of the allocation from scipy.stats.norm.cdf
    scenario = _linear_scenario(limit=[9.5, 10.6], costs=SMOOTH, kind="within", probability=0.9)
    allocation = allocate(scenario)
    assert allocation.feasible, allocation.reason
    u = {n: t.standard_uncertainty for n, t in allocation.scenario.tolerances.items()}
    sd = math.sqrt(sum((B[n] * u[n]) ** 2 for n in u))
    exact = stats.norm.cdf(10.6, OFFSET, sd) - stats.norm.cdf(9.5, OFFSET, sd)
    se = math.sqrt(0.9 * 0.1 / N_MC)
    assert exact >= 0.9 - 3 * se
    assert float(allocation.requirements["probability"].item()) == pytest.approx(exact, abs=4 * se)


def test_relative_spread_requirement_is_allocated_to_the_limit():
    # std(Y)/|mean| <= 2 %: for the linear model std = sqrt(sum b^2 u^2) exactly (references.md)
    scenario = _linear_scenario(
        limit=0.02, costs=SMOOTH, kind="relative_spread_at_most", probability=None
    )
    allocation = allocate(scenario, max_loosen=100.0)
    assert allocation.feasible, allocation.reason
    u = {n: t.standard_uncertainty for n, t in allocation.scenario.tolerances.items()}
    spread = math.sqrt(sum((B[n] * u[n]) ** 2 for n in u)) / OFFSET
    # at or just inside the limit: the refinement stops within convergence_tolerance = 2 %
    assert 0.02 * (1 - 0.03) <= spread <= 0.02 * (1 + 1.0 / math.sqrt(N_MC))


def test_without_refinement_the_linear_answer_is_the_closed_form():
    # refine=False: exactly the Lagrange optimum of the linearized problem (derived above)
    scenario = _linear_scenario(limit=9.0, costs=SMOOTH)
    allocation = allocate(scenario, refine=False, max_loosen=100.0)
    a = np.array([B["x1"] ** 2, B["x2"] ** 2])
    budget = ((OFFSET - 9.0) / stats.norm.ppf(0.95)) ** 2 - (B["x3"] * 0.1) ** 2
    expected = _closed_form_equal_exponent(
        a, np.array([100.0, 300.0]), np.full(2, 0.2), 1.0, budget
    )
    got = [allocation.tolerances["x1"].value, allocation.tolerances["x2"].value]
    np.testing.assert_allclose(got, expected, rtol=1e-8)
    assert allocation.iterations == 1
    assert "refinement off" in allocation.reason
    # its Monte Carlo probability is the exact 0.95 within the binomial error (linear model)
    p = float(allocation.requirements["probability"].item())
    assert p == pytest.approx(0.95, abs=4 * math.sqrt(0.95 * 0.05 / N_MC))

"""Tolerance allocation: the cheapest tolerances that meet every requirement.

Two passes. The first works on the linearized variance budget of each
required output,

    Var Y_r  ~=  V_r,fixed + sum_i a_ri t_i^2 ,      a_ri = (c_ri u_i / t_i)^2 ,

with ``c_ri`` the sensitivity coefficient dY_r/dX_i at the nominal point,
``u_i`` the standard uncertainty that goes with the tolerance value ``t_i`` as
written (so shape and meaning are kept), and inputs without a cost model in
the fixed part. Each requirement becomes a bound ``U_r`` on u(Y_r) through the
normal approximation (:func:`uncertainty_bound`). Smooth power-law costs
``C_i (t_ref,i / t_i)^p_i`` are allocated by the Lagrange condition
(:func:`lagrange_allocation`), tiered costs by an exact branch-and-bound over
the tiers (:func:`allocate_tiers`), the two mixed when a scenario has both.

The second pass verifies and refines the answer with the full nonlinear Monte
Carlo: every candidate allocation is pushed through the model on the *same*
unit-cube design (common random numbers), the probability each requirement is
met is estimated with its binomial standard error, and the bounds ``U_r`` are
rescaled until every requirement is met, since the linear answer can be wrong
where the model curves."""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import replace
from typing import Any

import numpy as np

from trapbudget.sensitivity.decisions.allocation import Allocation, _check, _result, _Setup
from trapbudget.sensitivity.decisions.linear_allocation import (
    LinearProblem,
    TierOption,
    TierSolution,
    allocate_tiers,
    uncertainty_bound,
)
from trapbudget.sensitivity.decisions.search import (
    MAX_ENUMERATION,
    combinations,
    effective_slopes,
    search_tiers,
)
from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.executors import Workers, running_on
from trapbudget.sensitivity.scenario.core import Scenario
from trapbudget.sensitivity.scenario.costs import SmoothCost, TieredCost

__all__ = ["allocate"]


def _linear_setup(scenario, requirements, labels) -> _Setup:
    from trapbudget.sensitivity.linear import linear_propagation

    source = getattr(scenario, "source", None)
    for name in scenario.costs:
        if name not in scenario.inputs:
            raise ScenarioError(
                f"input {name!r} has a cost but no tolerance; give inputs.{name} a tolerance "
                "or remove the cost table",
                path=source,
                key=f"costs.{name}",
            )
    outputs = list(dict.fromkeys(req.output for req in requirements))
    linear = linear_propagation(
        scenario.model,
        scenario.inputs,
        nominal=scenario.nominal,
        correlation=None,
        outputs=outputs,
    )
    coefficient = linear["sensitivity_coefficient"]
    effective = effective_slopes(scenario, outputs)
    sensitivity = {}
    for r, req in enumerate(requirements):
        for name in scenario.inputs:
            c = float(coefficient.sel(output=req.output, input=name))
            c2 = c * c if math.isfinite(c) else 0.0
            # Where the nominal slope misses most of what an input does (zero slope at a
            # symmetric point, strong curvature), use the slope its own Monte Carlo spread
            # implies: Var(Y | only X_i varies) / u_i^2.
            e2 = effective[(req.output, name)]
            sensitivity[(r, name)] = e2 if c2 < 0.5 * e2 else c2
    means = np.array(
        [float(linear["output_nominal"].sel(output=req.output)) for req in requirements]
    )
    bounds = np.array(
        [
            uncertainty_bound(req.kind, req.limit, mean=m, probability=req.probability)
            for req, m in zip(requirements, means, strict=True)
        ]
    )
    smooth = [n for n, c in scenario.costs.items() if not hasattr(c, "tiers")]
    tiered = [n for n, c in scenario.costs.items() if hasattr(c, "tiers")]
    fixed = [n for n in scenario.inputs if n not in scenario.costs]
    return _Setup(tuple(requirements), labels, smooth, tiered, fixed, sensitivity, means, bounds)


def _problem(scenario, setup: _Setup, bounds: np.ndarray, max_loosen: float) -> LinearProblem:
    n_req = len(setup.requirements)
    tol = scenario.tolerances

    def u(name):
        return float(tol[name].standard_uncertainty)

    def sens(names):
        return np.array(
            [[setup.sensitivity[(r, n)] for n in names] for r in range(n_req)]
        ).reshape(n_req, len(names))

    fixed_var = np.array(
        [sum(setup.sensitivity[(r, n)] * u(n) ** 2 for n in setup.fixed) for r in range(n_req)]
    )
    smooth_models = [scenario.costs[n] for n in setup.free_smooth]
    ratio = np.array([u(n) / float(tol[n].value) for n in setup.free_smooth])
    tiers = [
        [
            TierOption(
                str(t.name),
                float(t.tolerance.value),
                float(t.tolerance.standard_uncertainty),
                float(t.cost),
            )
            for t in scenario.costs[n].tiers
        ]
        for n in setup.free_tiered
    ]
    return LinearProblem(
        requirements=setup.labels,
        budgets=np.asarray(bounds, dtype=float) ** 2,
        fixed_variance=fixed_var,
        smooth=setup.free_smooth,
        smooth_weights=sens(setup.free_smooth) * ratio**2,
        smooth_cost=np.array([float(m.reference_cost) for m in smooth_models]),
        smooth_reference=np.array([float(m.tolerance.value) for m in smooth_models]),
        smooth_exponent=np.array([float(m.exponent) for m in smooth_models]),
        smooth_lower=np.full(len(smooth_models), 1e-300),
        smooth_upper=np.array([float(tol[n].value) * max_loosen for n in setup.free_smooth]),
        tiered=setup.free_tiered,
        tiered_sensitivity=sens(setup.free_tiered),
        tiers=tiers,
    )


def _tolerances(scenario, setup: _Setup, solution: TierSolution) -> dict:
    out = {}
    for name, t in zip(setup.free_smooth, solution.smooth_tolerance, strict=True):
        out[name] = scenario.tolerances[name].with_value(float(t))
    for name, k in zip(setup.free_tiered, solution.tier_index, strict=True):
        out[name] = scenario.costs[name].tiers[k].tolerance
    return out


def _label_of(req, index: int) -> str:
    label = getattr(req, "label", "") or ""
    return label or f"{req.output} {req.kind} #{index + 1}"


#: Cost of an input at its present tolerance under the default prices (relative units).
DEFAULT_REFERENCE_COST = 1.0


def with_default_costs(scenario: Scenario) -> Scenario:
    """The scenario with every uncertain input priced C(t) = t_present / t (relative units).

    Used when a scenario has requirements but no cost tables: tightening any input by the
    same factor costs the same (a smooth cost of exponent 1 referred to the present
    tolerance; common practice for a first allocation without prices), so the allocation
    spreads the tightening where it buys the most.
    """
    costs: dict[str, TieredCost | SmoothCost] = {
        name: SmoothCost(tolerance, DEFAULT_REFERENCE_COST, 1.0)
        for name, tolerance in scenario.tolerances.items()
        if name in scenario.inputs and float(tolerance.value) > 0
    }
    return replace(scenario, costs=costs)


def allocate(
    scenario: Scenario,
    *,
    n_samples: int | None = None,
    rng: int | np.random.Generator | None = None,
    method: str | None = None,
    refine: bool = True,
    max_iterations: int = 8,
    safety_margin: float = 1.0,
    max_loosen: float = 4.0,
    convergence_tolerance: float = 0.02,
    progress: Callable[[int, int], None] | None = None,
    executor: Any = None,
    workers: Workers = None,
) -> Allocation:
    """Find the tolerances that meet every requirement at least cost.

    Inputs with a cost model (``[costs.<input>]``) are free to change; the
    other uncertain inputs are held at their present tolerance. A scenario with
    no cost table at all is priced by :func:`with_default_costs` (every input
    ``t_present / t``), and the result says so (``attrs["default_costs"]``).

    Parameters
    ----------
    scenario : Scenario
        With requirements and costs.
    n_samples : int, optional
        Monte Carlo samples of each verification (default the scenario's).
    rng : seed or numpy.random.Generator, optional
        Randomness of the shared design (default the scenario's seed).
    method : {"random", "latin", "sobol"}, optional
        Design (default the scenario's).
    refine : bool
        Rescale the requirement bounds from the Monte Carlo result until every
        requirement is met (True), or return the linear answer with its Monte
        Carlo check (False: ``feasible`` then means linearly feasible, and
        ``requirements["met"]`` says what the Monte Carlo found).
    max_iterations : int
        Monte Carlo rounds of refinement at most.
    safety_margin : float
        A probability requirement counts as met when the one-sided
        Clopper-Pearson lower bound at this many standard normal quantiles
        (1: 84 %) reaches the required probability; 0 compares the estimate
        itself. Unlike "estimate minus k standard errors" it keeps a margin
        when every sample passes (Clopper & Pearson 1934).
    max_loosen : float
        A smooth-cost tolerance may be loosened to at most this multiple of
        its present value (the linear model is not trusted far outside).
    convergence_tolerance : float
        Refinement stops once every requirement passes and no binding bound
        would move by more than this fraction.
    progress : callable, optional
        ``progress(done, total)`` for each verification.
    executor, workers : optional
        Where the model runs, as for :func:`~trapbudget.sensitivity.propagate`.

    Returns
    -------
    Allocation

    Raises
    ------
    ScenarioError
        No requirements, or a cost on an input without a tolerance.

    Notes
    -----
    Linear pass: see the module notes, :func:`uncertainty_bound`,
    :func:`lagrange_allocation`, :func:`allocate_tiers`. Correlations between
    inputs are ignored by the linear pass and included by the Monte Carlo
    verification. Refinement: a probability requirement met with estimate
    ``P`` against a target ``p`` rescales its bound by ``z(P) / z(p)`` (normal
    quantiles; clipped to [1/2, 2] per round), a spread requirement by
    ``limit / spread``; every round reuses the same unit design (common
    random numbers), and the cheapest allocation that passes is kept.
    """
    with running_on(executor, workers):
        from trapbudget.sensitivity.decisions.compare import common_random_samples
        from trapbudget.sensitivity.sampling import unit_design

        requirements = tuple(scenario.requirements)
        source = getattr(scenario, "source", None)
        if not requirements:
            raise ScenarioError(
                "no requirements to allocate against; add a [[requirements]] table",
                path=source,
                key="requirements",
            )
        default_costs = not scenario.costs
        if default_costs:
            scenario = with_default_costs(scenario)
        labels = [_label_of(req, i) for i, req in enumerate(requirements)]
        setup = _linear_setup(scenario, requirements, labels)
        options = scenario.settings.resolve(n_samples=n_samples, method=method, rng=rng)
        n, m, seed = options.n_samples, options.method, options.rng
        unit = unit_design(n, len(scenario.inputs), method=m, rng=seed)  # type: ignore[arg-type]

        if refine and setup.free_tiered and not setup.free_smooth:
            tier_costs = [
                [float(t.cost) for t in scenario.costs[k].tiers]  # type: ignore[union-attr]
                for k in setup.free_tiered
            ]
            if combinations(tier_costs) <= MAX_ENUMERATION:
                searched = _allocate_by_search(
                    scenario,
                    setup,
                    tier_costs,
                    unit,
                    n,
                    m,
                    seed,
                    safety_margin,
                    max_loosen,
                    progress,
                )
                if searched is not None:
                    return _mark_default_costs(searched, default_costs)
                # Infeasible on the Monte Carlo and on the linear model: the linear pass
                # below names the requirement and the input that blocks it.

        bounds = setup.bounds.astype(float).copy()
        best = None
        history = []
        last = None
        reason = ""
        failing = blocking = ""
        rounds = max(1, int(max_iterations)) if refine else 1
        seen: dict = {}  # candidate allocation -> its Monte Carlo check (same design: reuse)
        repeats = 0
        for _ in range(rounds):
            problem = _problem(scenario, setup, bounds, max_loosen)
            solution = allocate_tiers(problem, fixed_parts=_fixed_parts(scenario, setup))
            if not solution.feasible:
                failing, blocking = solution.failing, solution.blocking
                last = (problem, solution, None, None)
                break
            tolerances = _tolerances(scenario, setup, solution)
            key = (
                solution.tier_index,
                tuple(
                    np.round(
                        np.log(solution.smooth_tolerance) / math.log1p(convergence_tolerance / 10)
                    ).astype(int)
                ),
            )
            if key in seen:
                repeats += 1
                if repeats >= 2:
                    break
                candidate, samples, checks = seen[key]
            else:
                repeats = 0
                candidate = scenario.with_tolerances(tolerances)
                (samples,) = common_random_samples(
                    [candidate], n_samples=n, method=m, unit=unit, progress=progress
                )
                checks = _check(samples, requirements, safety_margin=safety_margin)
                seen[key] = (candidate, samples, checks)
            passed = all(c["met"] for c in checks)
            history.append((solution.cost, passed))
            last = (problem, solution, tolerances, (candidate, samples, checks))  # type: ignore[assignment]
            if passed and (best is None or solution.cost <= best[1].cost):
                best = last
            # a failing requirement is aimed a little inside its limit, so the bound is not
            # approached from the wrong side forever
            factors = np.array(
                [
                    min(
                        max(
                            c["factor"]
                            if c["met"]
                            else min(c["factor"], 1.0) * (1 - convergence_tolerance / 2),
                            0.5,
                        ),
                        2.0,
                    )
                    for c in checks
                ]
            )
            # Keep refining while the Monte Carlo shows slack or a shortfall in any requirement
            # (not only in those the linear pass found active: with none active, np.all([])
            # would end the loop at once). Repeated candidates end it (seen, above).
            if passed and np.all(np.abs(np.log(factors)) < math.log1p(convergence_tolerance)):
                break
            for r in range(len(checks)):
                if not math.isfinite(bounds[r]):
                    bounds[r] = math.sqrt(max(solution.variance[r], 1e-300))
                bounds[r] *= factors[r]

        if not refine and last is not None and last[3] is not None:
            best = last  # the linear answer as it stands; its Monte Carlo check is reported
        chosen = best if best is not None else last
        problem, solution, tolerances, verified = chosen  # type: ignore[assignment,misc]
        feasible = best is not None
        if not solution.feasible:
            r = labels.index(failing) if failing in labels else 0
            if setup.bounds[r] == 0.0:
                reason = (
                    f"requirement '{failing}' fails at the nominal point "
                    f"({requirements[r].output} = {setup.means[r]:.4g}); "
                    "no tolerance can meet it: "
                    "change a nominal value or the requirement"
                )
                blocking = "nominal"
            else:
                reason = (
                    f"requirement '{failing}' cannot be met by any affordable choice: "
                    f"'{blocking}' alone (at its tightest option, or held fixed) "
                    "leaves too little "
                    "room; add a tighter tier for it or relax the requirement"
                )
        elif not feasible:
            bad = [labels[r] for r, c in enumerate(verified[2]) if not c["met"]]  # type: ignore[index]
            failing = bad[0] if bad else ""
            reason = (
                f"the linear allocation fails the Monte Carlo check of '{', '.join(bad)}' after "
                f"{len(history)} rounds; the model curves too much here: raise max_iterations "
                "or n_samples"
            )
        else:
            reason = f"all {len(requirements)} requirement(s) met at a cost of {solution.cost:.6g}"
            if not refine:
                bad = [labels[r] for r, c in enumerate(verified[2]) if not c["met"]]  # type: ignore[index]
                reason = (
                    f"linear allocation at a cost of {solution.cost:.6g} (refinement off); the "
                    + (
                        f"Monte Carlo check fails '{', '.join(bad)}': refine it"
                        if bad
                        else "Monte Carlo check meets every requirement"
                    )
                )
        return _mark_default_costs(
            _result(
                scenario,
                setup,
                problem,
                solution,
                tolerances,
                verified,
                feasible=feasible,
                reason=reason,
                failing=failing,
                blocking=blocking,
                n_samples=n,
                method=m,
                seed=seed,
                history=tuple(history),
                max_loosen=max_loosen,
            ),
            default_costs,
        )


def _mark_default_costs(allocation: Allocation, default_costs: bool) -> Allocation:
    """Record in the result whether the prices are the stated default, not the lab's."""
    for ds in (allocation.spec, allocation.requirements):
        ds.attrs["default_costs"] = bool(default_costs)
    return allocation


def _allocate_by_search(
    scenario, setup, tier_costs, unit, n, m, seed, safety_margin, max_loosen, progress
) -> Allocation | None:
    """Tiered problems: the Monte Carlo search by cost, verified on fresh draws.

    None when no combination passes and the linear pass finds none either (its
    diagnosis names the blocking input).
    """
    from trapbudget.sensitivity.decisions.compare import common_random_samples
    from trapbudget.sensitivity.propagation import propagate

    requirements = setup.requirements
    names = setup.free_tiered
    tiers = [scenario.costs[k].tiers for k in names]

    def tolerances_of(combo):
        return {k: t[i].tolerance for k, t, i in zip(names, tiers, combo, strict=True)}

    def evaluate(combo):
        candidate = scenario.with_tolerances(tolerances_of(combo))
        (samples,) = common_random_samples(
            [candidate], n_samples=n, method=m, unit=unit, progress=progress
        )
        return _check(samples, requirements, safety_margin=safety_margin), (candidate, samples)

    tightest = tuple(
        int(np.argmin([float(x.tolerance.standard_uncertainty) for x in t])) for t in tiers
    )
    found = search_tiers(tier_costs, evaluate, tightest=tightest, labels=setup.labels)
    problem = _problem(scenario, setup, setup.bounds, max_loosen)
    if not found.feasible:
        linear = allocate_tiers(problem, fixed_parts=_fixed_parts(scenario, setup))
        if not linear.feasible:
            return None
    variance = problem.fixed_variance + sum(
        problem.tiered_sensitivity[:, j] * float(t[k].tolerance.standard_uncertainty) ** 2
        for j, (t, k) in enumerate(zip(tiers, found.tier_index, strict=True))
    )
    solution = TierSolution(
        feasible=True,
        cost=found.cost,
        tier_index=found.tier_index,
        smooth_tolerance=np.zeros(0),
        variance=np.asarray(variance, dtype=float),
        failing=found.failing,
    )
    candidate: Scenario = found.samples[0]  # type: ignore[index]
    verified = (candidate, found.samples[1], found.checks)  # type: ignore[index]
    fresh = None
    if found.feasible:
        # Fresh independent draws: the choice was made on the common sample.
        stream = (
            seed.spawn(1)[0]
            if isinstance(seed, np.random.Generator)
            else np.random.default_rng(np.random.SeedSequence(seed).spawn(1)[0])
        )
        draws = propagate(
            candidate.model,
            candidate.inputs,
            n_samples=n,
            method="random",
            correlation=candidate.correlation,
            rng=stream,
            outputs=list(dict.fromkeys(r.output for r in requirements)),
        )
        fresh = (draws, _check(draws, requirements, safety_margin=safety_margin))
        reason = (
            f"all {len(requirements)} requirement(s) met at a cost of {found.cost:.6g} "
            f"(cheapest of {found.evaluated} tier combinations checked on the Monte Carlo)"
        )
        if not all(c["met"] for c in fresh[1]):
            reason += "; on fresh draws it falls short: raise n_samples"
    else:
        reason = (
            f"requirement '{found.failing}' is not met by any tier combination on the Monte "
            "Carlo, not even the tightest tiers: add a tighter tier or relax the requirement"
        )
    return _result(
        scenario,
        setup,
        problem,
        solution,
        tolerances_of(found.tier_index),
        verified,
        feasible=found.feasible,
        reason=reason,
        failing=found.failing,
        blocking="" if found.feasible else "tiers",
        n_samples=n,
        method=m,
        seed=seed,
        history=((found.cost, found.feasible),),
        max_loosen=max_loosen,
        fresh=fresh,
        search=f"Monte Carlo over {found.evaluated} tier combinations by cost",
    )


def _fixed_parts(scenario, setup: _Setup) -> dict[str, np.ndarray]:
    n_req = len(setup.requirements)
    return {
        name: np.array(
            [
                setup.sensitivity[(r, name)]
                * float(scenario.tolerances[name].standard_uncertainty) ** 2
                for r in range(n_req)
            ]
        )
        for name in setup.fixed
    }

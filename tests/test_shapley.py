"""Shapley effects: closed forms for linear Gaussian models, a brute-force nested estimate,
coverage of the replicate intervals, and the budget columns for correlated inputs."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from scipy import stats
from scipy.stats import qmc

from trapbudget.sensitivity.indices.shapley import (
    EXACT_LIMIT,
    shapley_design,
    shapley_from_costs,
    shapley_plan,
)
from trapbudget.sensitivity.ranking import rank
from trapbudget.sensitivity.testfunctions import LinearModel

CORR = np.array([[1.0, 0.5, 0.8], [0.5, 1.0, 0.0], [0.8, 0.0, 1.0]])
# Bonferroni over the coverage checks of this file (3 + 8 effects), as in test_coverage.py.
N_CHECKS = 11


def closed_form_shapley(cov: np.ndarray, beta: np.ndarray) -> np.ndarray:
    """Shapley effects of Y = beta . X, X ~ N(0, cov), by averaging over all orderings.

    The cost Var(E[Y | X_u]) = c_u' cov_uu^-1 c_u, c_u = Cov(X_u, Y), is the Gaussian
    conditioning closed form (Iooss & Prieur 2019, section 3); the effect is the mean
    marginal cost over the d! orderings (Shapley 1953, Owen 2014).
    """
    d = len(beta)
    cy = cov @ beta
    var = beta @ cy

    memo: dict[tuple[int, ...], float] = {(): 0.0}

    def cost(u):
        key = tuple(sorted(u))
        if key not in memo:
            k = list(key)
            memo[key] = float(cy[k] @ np.linalg.solve(cov[np.ix_(k, k)], cy[k]))
        return memo[key]

    effects = np.zeros(d)
    orders = list(itertools.permutations(range(d)))
    for order in orders:
        for k, i in enumerate(order):
            effects[i] += cost(order[: k + 1]) - cost(order[:k])
    return effects / len(orders) / var


def band(n_seeds: int) -> int:
    return int(stats.binom.ppf(0.001 / N_CHECKS / 2, n_seeds, 0.95))


def replicate_effects(f, corr, n, r, seed, plan_for):
    """Shapley effects of each of r independent replicates (n points each)."""
    d = corr.shape[0]
    streams = np.random.default_rng(seed).spawn(2 * r)
    reps = []
    for k in range(r):
        plan = plan_for(d, streams[r + k])
        base = qmc.Sobol(d=2 * d, scramble=True, rng=streams[k]).random(n)
        a, u = shapley_design(base, corr, plan.subsets)
        reps.append(shapley_from_costs(f(a)[:, None], f(u)[..., None], plan.weights)[:, 0])
    return np.array(reps)


def test_check_value_of_the_closed_form():
    # references.md [F]: Shapley (0.4779, 0.2239, 0.2981) for Y = x1 + x2 + x3.
    np.testing.assert_allclose(
        closed_form_shapley(CORR, np.ones(3)), [0.4779, 0.2239, 0.2981], atol=1e-4
    )


def test_exact_weights_reproduce_the_closed_form_on_exact_costs():
    # The combinatorial weights of the plan against the ordering average (Shapley 1953).
    rng = np.random.default_rng(0)
    for d in (2, 3, 4):
        m = rng.normal(size=(d, d))
        cov = m @ m.T + d * np.eye(d)
        beta = rng.normal(size=d)
        plan = shapley_plan(d)
        cy, var = cov @ beta, beta @ cov @ beta
        # Costs E[Var(Y | X_~u)] = Var(Y) - Var(E[Y | X_~u]) (Song, Nelson & Staum 2016).
        costs = []
        for u in plan.subsets:
            rest = [j for j in range(d) if j not in u]
            explained = (
                cy[rest] @ np.linalg.solve(cov[np.ix_(rest, rest)], cy[rest]) if rest else 0
            )
            costs.append(var - explained)
        np.testing.assert_allclose(
            plan.weights @ np.array(costs) / var, closed_form_shapley(cov, beta), atol=1e-12
        )


def test_replicate_intervals_cover_the_closed_form():
    # 200 seeds, N = 64 per replicate, R = 10; t-interval on 9 degrees of freedom.
    exact = closed_form_shapley(CORR, np.ones(3))
    t = stats.t.ppf(0.975, 9)
    hits = []
    for seed in range(200):
        reps = replicate_effects(
            lambda u: stats.norm.ppf(u).sum(axis=-1),
            CORR,
            64,
            10,
            seed,
            lambda d, g: shapley_plan(d),
        )
        half = t * reps.std(axis=0, ddof=1) / math.sqrt(10)
        hits.append(np.abs(reps.mean(axis=0) - exact) <= half)
        np.testing.assert_allclose(reps.sum(axis=1), 1.0, atol=1e-12)  # efficiency
    counts = np.sum(hits, axis=0)
    assert np.all(counts >= band(200)), counts


def test_random_permutations_cover_above_the_exact_limit():
    # d = 8 > EXACT_LIMIT: each replicate draws its own 8 permutations, so the t-interval
    # carries the permutation noise too. Random correlated linear Gaussian model, closed form.
    d = 8
    assert d > EXACT_LIMIT
    rng = np.random.default_rng(7)
    m = rng.normal(size=(d, d))
    cov = m @ m.T + 2 * np.eye(d)
    sd = np.sqrt(np.diag(cov))
    corr = cov / np.outer(sd, sd)
    corr = (corr + corr.T) / 2
    np.fill_diagonal(corr, 1.0)
    beta = rng.normal(size=d)
    exact = closed_form_shapley(corr, beta)
    t = stats.t.ppf(0.975, 9)
    hits = []
    for seed in range(60):
        reps = replicate_effects(
            lambda u: stats.norm.ppf(u) @ beta,
            corr,
            32,
            10,
            seed,
            lambda d, g: shapley_plan(d, rng=g),
        )
        half = t * reps.std(axis=0, ddof=1) / math.sqrt(10)
        hits.append(np.abs(reps.mean(axis=0) - exact) <= half)
    counts = np.sum(hits, axis=0)
    assert np.all(counts >= band(60)), counts


def test_brute_force_nested_estimate_on_a_nonlinear_model():
    # y = x1 x2 + x3 with rho13 = 0.6: costs Var(E[Y | X_u]) by a brute-force nested Monte
    # Carlo (outer draws of X_u, inner conditional draws of the rest), the other cost of
    # Song, Nelson & Staum 2016 (same effects). Tolerance: 4 standard errors of the nested
    # estimate (from 20 independent outer batches) plus 4 of the engine's replicates.
    corr = np.array([[1.0, 0.0, 0.6], [0.0, 1.0, 0.0], [0.6, 0.0, 1.0]])
    beta_model = lambda x: x[..., 0] * x[..., 1] + x[..., 2]  # noqa: E731
    rng = np.random.default_rng(11)
    chol = np.linalg.cholesky(corr)
    d, n_outer, n_inner, batches = 3, 400, 400, 20

    def explained(u, outer):
        rest = [j for j in range(d) if j not in u]
        z = outer @ chol.T
        if not rest:
            return beta_model(z).var()
        coef = np.linalg.solve(corr[np.ix_(u, u)], corr[np.ix_(u, rest)])
        cond = corr[np.ix_(rest, rest)] - corr[np.ix_(rest, u)] @ coef
        lower = np.linalg.cholesky(cond)
        inner = rng.normal(size=(n_inner, len(rest))) @ lower.T
        x = np.empty((outer.shape[0], n_inner, d))
        x[:, :, u] = z[:, None, u]
        x[:, :, rest] = (z[:, u] @ coef)[:, None, :] + inner[None]
        return beta_model(x).mean(axis=1).var(ddof=1)

    per_batch = []
    for _ in range(batches):
        outer = rng.normal(size=(n_outer, d))
        costs = {(): 0.0}
        for size in (1, 2, 3):
            for u in itertools.combinations(range(d), size):
                costs[u] = explained(list(u), outer)
        effects = np.zeros(d)
        for order in itertools.permutations(range(d)):
            for k, i in enumerate(order):
                effects[i] += (
                    costs[tuple(sorted(order[: k + 1]))] - costs[tuple(sorted(order[:k]))]
                )
        per_batch.append(effects / 6 / costs[(0, 1, 2)])
    brute = np.mean(per_batch, axis=0)
    brute_se = np.std(per_batch, axis=0, ddof=1) / math.sqrt(batches)
    reps = replicate_effects(
        lambda u: beta_model(stats.norm.ppf(u)), corr, 1024, 10, 3, lambda d, g: shapley_plan(d)
    )
    engine, engine_se = reps.mean(axis=0), reps.std(axis=0, ddof=1) / math.sqrt(10)
    assert np.all(np.abs(engine - brute) <= 4 * np.hypot(brute_se, engine_se)), (engine, brute)


def test_budget_headline_is_shapley_when_correlations_are_declared():
    inputs = {f"x{i + 1}": stats.norm(0, 2.0) for i in range(3)}
    ds = rank(LinearModel([1.0, 1.0, 1.0]), inputs, n_samples=256, correlation=CORR, rng=4)
    assert ds.attrs["headline"] == "shapley_effect" and ds.attrs["rank_by"] == "shapley_effect"
    assert ds.attrs["method_name"] == "conditional sampling (Kucherenko)"
    sub = ds.sel(output="y")
    exact = closed_form_shapley(CORR, np.ones(3))
    assert np.all(
        (sub["shapley_effect_low"] <= exact + 0.02) & (exact - 0.02 <= sub["shapley_effect_high"])
    )
    assert list(sub["rank"].values) == [1, 3, 2]
    np.testing.assert_allclose(
        ds["variance_share"].sum("input"), ds["output_std"] ** 2, rtol=1e-12
    )
    assert bool(ds["interaction"].isnull().all())
    # Independent inputs: Sobol' indices stay the headline, Shapley beside them.
    indep = rank(LinearModel([1.0, 2.0, 0.5]), inputs, n_samples=256, rng=4)
    assert indep.attrs["headline"] == "total_order" and "shapley_effect" in indep
    b2 = np.array([1.0, 4.0, 0.25])
    # Additive independent model: Shapley effect = first = total = b_i^2 / sum (Owen 2014).
    np.testing.assert_allclose(indep["shapley_effect"].sel(output="y"), b2 / b2.sum(), atol=0.01)


@pytest.mark.parametrize("d", [1, 2])
def test_tiny_plans(d):
    plan = shapley_plan(d)
    assert plan.subsets[-1] == tuple(range(d)) and plan.exact
    np.testing.assert_allclose(plan.weights.sum(axis=0)[-1], 1.0)

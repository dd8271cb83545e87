"""Shapley effects: each input's fair share of the output variance, for dependent inputs too.

The cost of a set u of inputs is ``c(u) = E[Var(Y | X_~u)]``, the variance
left when every input outside u is known. Its Shapley value

``Sh_i = sum_{u not containing i} |u|! (d - |u| - 1)! / d! (c(u + i) - c(u)) / Var(Y)``

is non-negative, and the effects sum to one for any dependence (Owen 2014;
Song, Nelson & Staum 2016, who show that this cost and ``Var(E[Y | X_u])``
give the same effects). Under a Gaussian copula the conditional law of any
set given the others is Gaussian in the normal scores, so ``c(u)`` has the
pick-freeze form ``E[(f(X) - f(X'))^2] / 2`` with X' sharing ``X_~u`` and
``X'_u`` drawn from its exact conditional law (Iooss & Prieur 2019; Broto,
Bachoc & Depecker 2020). With all ``2^d - 1`` sets the Shapley sum is exact
in the costs; for many inputs permutations are used (the estimator of
Song et al. 2016, section 4): ``Sh_i`` is the mean over permutations of
``c(P_i + i) - c(P_i)``, ``P_i`` the inputs before i, here the rotations of
one random order and their reversals (Mitchell et al. 2022), which keeps the
estimate unbiased (the order is uniformly random) with one order per replicate.

References
----------
A. B. Owen, "Sobol' indices and Shapley value", SIAM/ASA J. Uncertain.
Quantif. 2, 245 (2014);
E. Song, B. L. Nelson, J. Staum, "Shapley effects for global sensitivity
analysis: theory and computation", SIAM/ASA J. Uncertain. Quantif. 4, 1060
(2016);
B. Iooss, C. Prieur, "Shapley effects for sensitivity analysis with
correlated inputs: comparisons with Sobol' indices, numerical estimation and
applications", Int. J. Uncertain. Quantif. 9, 493 (2019);
B. Broto, F. Bachoc, M. Depecker, "Variance reduction for estimation of
Shapley effects and adaptation to unknown input distribution", SIAM/ASA J.
Uncertain. Quantif. 8, 693 (2020);
R. Mitchell, J. Cooper, E. Frank, G. Holmes, "Sampling permutations for
Shapley value estimation", J. Mach. Learn. Res. 23, 1 (2022).
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass

import numpy as np
import xarray as xr
from scipy import special

from trapbudget.sensitivity.indices.budget import _ranks
from trapbudget.sensitivity.indices.dependent import _conditional
from trapbudget.sensitivity.indices.replicates import replicate_interval

__all__ = [
    "EXACT_LIMIT",
    "ShapleyPlan",
    "add_shapley",
    "shapley_design",
    "shapley_from_costs",
    "shapley_plan",
]

#: Up to this many inputs every one of the 2^d - 1 sets is used; above, permutations.
EXACT_LIMIT = 7


@dataclass(frozen=True)
class ShapleyPlan:
    """The sets whose costs one replicate estimates, and how the effects combine them.

    Attributes
    ----------
    subsets : tuple of tuple of int
        Non-empty sets of input columns; the last is the full set (its cost
        is Var(Y)).
    weights : numpy.ndarray, shape (d, len(subsets))
        ``Sh_i = weights[i] @ c / c(full)``.
    exact : bool
        All 2^d - 1 sets (True) or random permutations.
    """

    subsets: tuple[tuple[int, ...], ...]
    weights: np.ndarray
    exact: bool


def shapley_plan(
    d: int, *, rng: np.random.Generator | None = None, n_permutations: int | None = None
) -> ShapleyPlan:
    """Sets and weights for d inputs: all sets up to EXACT_LIMIT, else random permutations.

    Parameters
    ----------
    d : int
        Number of inputs.
    rng : numpy.random.Generator, optional
        Draws the permutations (needed above EXACT_LIMIT or with n_permutations).
    n_permutations : int, optional
        Force the permutation estimator with this many independent random
        permutations (their sets deduplicated: the count may vary). Default
        above EXACT_LIMIT: the d rotations of one random order and their
        reversals, d (d - 1) + 1 sets (antithetic and position-balanced
        permutations, in the spirit of Mitchell et al. 2022).

    Returns
    -------
    ShapleyPlan
    """
    full = tuple(range(d))
    if n_permutations is None and d <= EXACT_LIMIT:
        subsets = [s for size in range(1, d + 1) for s in itertools.combinations(range(d), size)]
        position = {s: j for j, s in enumerate(subsets)}
        weights = np.zeros((d, len(subsets)))
        for i in range(d):
            others = [j for j in range(d) if j != i]
            for size in range(d):
                w = math.factorial(size) * math.factorial(d - size - 1) / math.factorial(d)
                for u in itertools.combinations(others, size):
                    weights[i, position[tuple(sorted((*u, i)))]] += w
                    if u:
                        weights[i, position[u]] -= w
        return ShapleyPlan(tuple(subsets), weights, True)
    generator = np.random.default_rng(rng)
    first = generator.permutation(d)
    if n_permutations is None:
        # The d rotations of one random order and their reversals: every input takes every
        # position twice and every pair comes in each order equally often, so a pair
        # joined by a correlation is split without permutation noise. Their prefixes are
        # the d (d - 1) cyclic intervals of the order, plus the full set.
        rotations = [np.roll(first, -k) for k in range(d)]
        orders = rotations + [r[::-1] for r in rotations]
    else:
        orders = [first] + [generator.permutation(d) for _ in range(int(n_permutations) - 1)]
    index: dict[tuple[int, ...], int] = {}
    for order in orders:
        for k in range(1, d):
            index.setdefault(tuple(sorted(int(v) for v in order[:k])), len(index))
    index[full] = len(index)
    m = len(orders)
    weights = np.zeros((d, len(index)))
    for order in orders:
        before: tuple[int, ...] = ()
        for i in order:
            now = tuple(sorted((*before, int(i))))
            weights[int(i), index[now]] += 1.0 / m
            if before:
                weights[int(i), index[before]] -= 1.0 / m
            before = now
    subsets = list(index)
    return ShapleyPlan(tuple(subsets), weights, False)


def shapley_design(
    base: np.ndarray, correlation: np.ndarray, subsets: tuple[tuple[int, ...], ...]
) -> tuple[np.ndarray, np.ndarray]:
    """Rows for the set costs under a Gaussian copula.

    Parameters
    ----------
    base : numpy.ndarray, shape (n, 2d)
        Independent unit points; the first d columns give X, the last d the
        fresh normals of the redrawn sets.
    correlation : numpy.ndarray, shape (d, d)
        Correlation of the normal scores (the identity for independent inputs).
    subsets : sequence of tuple of int
        The sets u to redraw.

    Returns
    -------
    A : numpy.ndarray, shape (n, d)
        X on the copula scale.
    U : numpy.ndarray, shape (len(subsets), n, d)
        ``U[j]``: A with the columns of ``subsets[j]`` drawn from their exact
        conditional law given the other columns of A.
    """
    d = base.shape[1] // 2
    tiny = np.finfo(float).eps
    eps_a = special.ndtri(np.clip(base[:, :d], tiny, 1 - tiny))
    eps_b = special.ndtri(np.clip(base[:, d:], tiny, 1 - tiny))
    z_a = eps_a @ np.linalg.cholesky(correlation).T
    rows = np.empty((len(subsets), base.shape[0], d))
    for j, u in enumerate(subsets):
        rest = tuple(c for c in range(d) if c not in u)
        rows[j] = _conditional(z_a, eps_b, correlation, rest, u)
    return special.ndtr(z_a), special.ndtr(rows)


def shapley_from_costs(f_A: np.ndarray, f_U: np.ndarray, weights: np.ndarray) -> np.ndarray:
    """Shapley effects of one replicate from its evaluations.

    Parameters
    ----------
    f_A : numpy.ndarray, shape (n, m)
        Outputs on A.
    f_U : numpy.ndarray, shape (s, n, m)
        Outputs on each set's rows (the full set last).
    weights : numpy.ndarray, shape (d, s)
        From :class:`ShapleyPlan`.

    Returns
    -------
    numpy.ndarray, shape (d, m)
        ``weights @ c / c(full)``, c the Jansen estimates ``mean((f_A - f_U)^2) / 2``;
        they sum to one over the inputs.
    """
    costs = 0.5 * np.mean((f_A[None] - f_U) ** 2, axis=1)  # (s, m)
    variance = costs[-1]
    safe = np.where(variance > 0, variance, np.nan)
    return (weights @ costs) / safe[None, :]


def add_shapley(
    ds: xr.Dataset,
    f_A: np.ndarray,
    f_U: np.ndarray,
    plans: list[ShapleyPlan],
    *,
    confidence_level: float,
    headline: bool,
) -> None:
    """Add ``shapley_effect`` with its replicate bounds to a budget Dataset.

    ``f_A`` (R, n, m) and ``f_U`` (R, s, n, m): the evaluations of each
    replicate; ``plans`` one per replicate. With ``headline`` (correlations
    declared) the effect ranks the inputs, sets ``variance_share`` and the
    noise-floor verdict.
    """
    reps = np.stack(
        [shapley_from_costs(f_A[r], f_U[r], plan.weights) for r, plan in enumerate(plans)]
    )
    res = replicate_interval(reps, confidence_level=confidence_level)
    for key, values in (("", res.estimate), ("_low", res.low), ("_high", res.high)):
        ds[f"shapley_effect{key}"] = (("output", "input"), np.asarray(values).T)
        ds[f"shapley_effect{key}"].attrs.update(
            units="1",
            long_name="Shapley effect (share of Var(Y), correlations shared fairly)"
            + {"": "", "_low": ", lower bound", "_high": ", upper bound"}[key],
        )
    ds.attrs.update(
        shapley_method="exact sets" if plans[0].exact else "random permutations",
        shapley_sets=len(plans[0].subsets),
        headline="shapley_effect" if headline else "total_order",
    )
    if headline:
        ds["rank"] = _ranks(ds["shapley_effect"])
        ds["rank"].attrs["long_name"] = "rank (1 = largest Shapley effect)"
        ds.attrs["rank_by"] = "shapley_effect"
        ds["variance_share"] = ds["shapley_effect"] * ds["output_std"] ** 2
        ds["variance_share"].attrs["long_name"] = "Shapley effect x Var(Y), output units squared"
        ds["below_noise_floor"] = ds["shapley_effect"] < ds["noise_floor"]
        if not ds.attrs.get("dummy", True):
            ds["below_noise_floor"][:] = False

"""Monte Carlo search over cost tiers: the cheapest combination that meets every requirement.

The linear pass of :mod:`~trapbudget.sensitivity.decisions.allocate` sees a
model only through its slope at the nominal point, so an input with zero
slope there (``y = a^2`` at ``a = 0``, a pointing offset of nominal 0) or a
product of inputs looks free. This search does not use the slope: it visits
the tier combinations in order of increasing cost and checks each one with
the full model on one common-random-number sample (the same unit design for
every combination), stopping at the first that passes. Combinations that cost
the same as it, up to a relative ``tie_tolerance``, are checked too and the
one with the most probability in hand is kept. On that sample the answer is
exactly what exhaustive enumeration returns, up to the tie rule. The winner is
then verified on fresh independent draws, since choosing the best of many
candidates on one sample favours those the sample happens to flatter.

For smooth costs, which keep the linear pass, :func:`effective_slopes` gives
it the slope each input's own Monte Carlo spread implies wherever the nominal
slope misses most of it.
"""

from __future__ import annotations

import heapq
import math
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass

import numpy as np

__all__ = [
    "MAX_ENUMERATION",
    "TIE_TOLERANCE",
    "TierSearch",
    "by_cost",
    "effective_slopes",
    "search_tiers",
]

#: Largest number of tier combinations searched on the Monte Carlo (beyond: linear pass).
MAX_ENUMERATION = 4096
#: Costs within this relative difference count as equal (ties broken by the margin).
TIE_TOLERANCE = 1e-9


@dataclass(frozen=True)
class TierSearch:
    """Outcome of :func:`search_tiers`.

    Attributes
    ----------
    feasible : bool
    tier_index : tuple of int
        Chosen tier of each input (or the tightest combination, if infeasible).
    cost : float
    checks : list of dict
        The requirement checks of the choice on the common sample.
    samples : xarray.Dataset
        Its Monte Carlo samples on the common sample.
    evaluated : int
        Combinations checked.
    failing : str
        Label of the first failing requirement at the tightest combination
        (infeasible only).
    """

    feasible: bool
    tier_index: tuple[int, ...]
    cost: float
    checks: list
    samples: object
    evaluated: int
    failing: str = ""


def by_cost(costs: Sequence[Sequence[float]]) -> Iterator[tuple[float, tuple[int, ...]]]:
    """Every combination of one option per list, in order of increasing total cost.

    Lazy: a heap holds the frontier. Each combination is produced once, from the
    parent that has its last raised position one step lower (the standard
    successor rule for sums of sorted lists).
    """
    order = [sorted(range(len(c)), key=lambda k, c=c: (c[k], k)) for c in costs]  # type: ignore[misc]
    sorted_costs = [[c[k] for k in o] for c, o in zip(costs, order, strict=True)]
    k = len(costs)
    start = (0,) * k
    heap = [(sum(c[0] for c in sorted_costs), start, 0)]
    while heap:
        total, combo, last = heapq.heappop(heap)
        yield total, tuple(order[j][i] for j, i in enumerate(combo))
        for j in range(last, k):
            if combo[j] + 1 < len(sorted_costs[j]):
                child = (*combo[:j], combo[j] + 1, *combo[j + 1 :])
                step = sorted_costs[j][combo[j] + 1] - sorted_costs[j][combo[j]]
                heapq.heappush(heap, (total + step, child, j))


def _margin(checks: list) -> float:
    """Smallest slack over the requirements (probability or spread factor in hand)."""
    out = math.inf
    for c in checks:
        if math.isfinite(c.get("probability", math.nan)):
            out = min(out, c["probability"] - c.get("target", 0.0))
        else:
            out = min(out, math.log(max(c["factor"], 1e-300)))
    return out


def search_tiers(
    costs: Sequence[Sequence[float]],
    evaluate: Callable[[tuple[int, ...]], tuple[list, object]],
    *,
    tightest: tuple[int, ...],
    labels: Sequence[str],
    tie_tolerance: float = TIE_TOLERANCE,
) -> TierSearch:
    """Cheapest combination whose checks all pass, visiting combinations by cost.

    Parameters
    ----------
    costs : sequence of sequences of float
        Cost of each tier of each input.
    evaluate : callable
        ``evaluate(combination) -> (checks, samples)`` on the common sample;
        ``checks[r]["met"]`` says whether requirement r passes.
    tightest : tuple of int
        The combination of the tightest tiers (named in the infeasible result).
    labels : sequence of str
        Requirement labels.
    tie_tolerance : float
        Relative cost difference below which two combinations tie.

    Returns
    -------
    TierSearch
    """
    found = None
    evaluated = 0
    for total, combo in by_cost(costs):
        if found is not None and total > found[0] * (1 + tie_tolerance) + tie_tolerance:
            break
        checks, samples = evaluate(combo)
        evaluated += 1
        if all(c["met"] for c in checks):
            if found is None or _margin(checks) > _margin(found[2]):
                found = (total if found is None else found[0], combo, checks, samples, total)
    if found is not None:
        return TierSearch(True, found[1], found[4], found[2], found[3], evaluated)
    checks, samples = evaluate(tightest)
    bad = [labels[r] for r, c in enumerate(checks) if not c["met"]]
    total = float(sum(c[k] for c, k in zip(costs, tightest, strict=True)))
    return TierSearch(False, tightest, total, checks, samples, evaluated, bad[0] if bad else "")


def combinations(costs: Sequence[Sequence[float]]) -> int:
    """Number of tier combinations."""
    return int(np.prod([len(c) for c in costs])) if costs else 0


def effective_slopes(scenario, outputs, n_samples: int = 2**12) -> dict:
    """(output, input) -> Var(Y | only X_i varies, others nominal) / u_i^2, by Monte Carlo.

    A stratified sample of X_i alone per input (one point in each of n equal-probability
    strata, fixed seeds: the same numbers on every call); for a linear model it is the
    squared slope up to sampling error.
    """
    from trapbudget.sensitivity.protocol import evaluate_in_chunks

    out = {}
    nominal = dict(scenario.nominal)
    for j, (name, dist) in enumerate(scenario.inputs.items()):
        u = np.random.default_rng(j).permutation(
            (np.arange(n_samples) + np.random.default_rng(10_000 + j).random()) / n_samples
        )
        values = {k: np.full(n_samples, v) for k, v in nominal.items() if k != name}
        values[name] = np.asarray(dist.ppf(u), dtype=float)
        result = evaluate_in_chunks(scenario.model, values, chunk_size=n_samples)
        var_x = float(dist.var())
        for output in outputs:
            y = np.asarray(result[output], dtype=float)
            y = y[np.isfinite(y)]
            slope2 = float(np.var(y, ddof=1)) / var_x if var_x > 0 and y.size > 1 else 0.0
            out[(output, name)] = slope2
    return out

"""Tolerance allocation on the linear model: Lagrange (smooth costs), branch and bound (tiers)."""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
from scipy import optimize, stats

__all__ = [
    "LinearProblem",
    "TierOption",
    "TierSolution",
    "allocate_tiers",
    "lagrange_allocation",
    "uncertainty_bound",
]


# ---------------------------------------------------------------------------
# requirements -> bounds on the output standard uncertainty
# ---------------------------------------------------------------------------


def uncertainty_bound(
    kind: str,
    limit: float | tuple[float, float],
    *,
    mean: float,
    probability: float | None = None,
) -> float:
    """Largest standard uncertainty of an output that still meets a requirement.

    The output is taken as normal with the given mean (normal approximation of
    the linearized budget).

    Parameters
    ----------
    kind : {"at_least", "at_most", "within", "relative_spread_at_most"}
        Requirement kind, as in :class:`trapbudget.sensitivity.scenario.requirements.Requirement`.
    limit : float or (float, float)
        Limit in output units (SI); a pair ``(lo, hi)`` for ``"within"``; the
        largest allowed relative spread u(Y)/|mean| for ``"relative_spread_at_most"``.
    mean : float
        Mean (or nominal) of the output, output units.
    probability : float, optional
        Probability the requirement must hold with, in (0, 1] (1 is read as
        1 - 1e-9); ``None`` is read as 0.5 (the requirement holds for the median).

    Returns
    -------
    float
        Bound ``U`` on u(Y), output units; ``inf`` when any spread will do,
        ``0.0`` when no spread will do (the mean itself fails, or sits exactly
        on the limit with ``probability > 0.5``).

    Notes
    -----
    ``at_least x`` with probability p: ``P(Y >= x) = Phi((mu - x)/u) >= p``,
    so ``u <= (mu - x) / z_p`` with ``z_p = Phi^-1(p)``; ``at_most`` likewise.
    ``within [lo, hi]``: the largest ``u`` with
    ``Phi((hi - mu)/u) - Phi((lo - mu)/u) >= p``, found by root finding (the
    left side falls monotonically with ``u``).

    References
    ----------
    JCGM 100:2008 (GUM), section G.6 (normal approximation of the output).
    """
    p = 0.5 if probability is None else float(probability)
    if not 0.0 < p <= 1.0:
        raise ValueError(f"probability must lie in (0, 1]; got {p}")
    p = min(p, 1.0 - 1e-9)  # certainty is out of reach of a normal output: about 6 sigma
    if kind == "relative_spread_at_most":
        return float(limit) * abs(mean)  # type: ignore[arg-type]
    if kind in ("at_least", "at_most"):
        margin = (mean - float(limit)) if kind == "at_least" else (float(limit) - mean)  # type: ignore[arg-type]
        z = stats.norm.ppf(p)
        if abs(z) < 1e-12:
            return math.inf if margin >= 0 else 0.0
        if z > 0:
            return max(margin, 0.0) / z
        # p < 0.5: any spread meets it while the mean meets it; otherwise u >= margin/z
        return math.inf if margin >= 0 else 0.0
    if kind == "within":
        lo, hi = (float(v) for v in limit)  # type: ignore[union-attr]
        if not lo < mean < hi:
            return 0.0

        def covered(u: float) -> float:
            return stats.norm.cdf((hi - mean) / u) - stats.norm.cdf((lo - mean) / u) - p

        upper = (hi - lo) * 1e6
        if covered(upper) >= 0:
            return math.inf
        small = min(hi - mean, mean - lo) * 1e-9
        return float(optimize.brentq(covered, small, upper, xtol=1e-14 * (hi - lo), rtol=1e-12))
    raise ValueError(
        f"unknown requirement kind {kind!r}; use at_least, at_most, within or "
        "relative_spread_at_most"
    )


# ---------------------------------------------------------------------------
# the linearized problem
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class TierOption:
    """One priced tier of one input in the linearized problem.

    Parameters
    ----------
    name : str
        Tier name as the cost table writes it.
    tolerance : float
        Tolerance value (as written, absolute SI).
    standard_uncertainty : float
        Standard uncertainty of the input at this tier, input units.
    cost : float
        Price of the tier, in the scenario's currency.
    """

    name: str
    tolerance: float
    standard_uncertainty: float
    cost: float


@dataclass(frozen=True)
class LinearProblem:
    """Linearized allocation problem over ``R`` requirements and free inputs.

    Parameters
    ----------
    requirements : sequence of str
        Requirement labels, length R.
    budgets : array (R,)
        ``U_r^2``: allowed variance of each required output, output units squared.
    fixed_variance : array (R,)
        Variance from the inputs held at their present tolerance.
    smooth : sequence of str
        Names of inputs with a smooth cost.
    smooth_weights : array (R, S)
        ``a_ri``: variance per squared tolerance value, ``(c_ri u_i / t_i)^2``.
    smooth_cost, smooth_reference, smooth_exponent : array (S,)
        ``C_i``, ``t_ref,i`` and ``p_i`` of ``C_i (t_ref,i / t_i)^p_i``.
    smooth_lower, smooth_upper : array (S,)
        Range the tolerance may take.
    tiered : sequence of str
        Names of inputs with tiered costs.
    tiered_sensitivity : array (R, T)
        ``c_ri^2``: variance per squared standard uncertainty.
    tiers : sequence of sequence of TierOption
        The tiers of each tiered input.
    """

    requirements: Sequence[str]
    budgets: np.ndarray
    fixed_variance: np.ndarray
    smooth: Sequence[str] = ()
    smooth_weights: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    smooth_cost: np.ndarray = field(default_factory=lambda: np.zeros(0))
    smooth_reference: np.ndarray = field(default_factory=lambda: np.zeros(0))
    smooth_exponent: np.ndarray = field(default_factory=lambda: np.zeros(0))
    smooth_lower: np.ndarray = field(default_factory=lambda: np.zeros(0))
    smooth_upper: np.ndarray = field(default_factory=lambda: np.zeros(0))
    tiered: Sequence[str] = ()
    tiered_sensitivity: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    tiers: Sequence[Sequence[TierOption]] = ()


def _smooth_cost(t, cost, reference, exponent) -> float:
    t = np.asarray(t, dtype=float)
    return float(np.sum(cost * (reference / t) ** exponent))


def _variance(weights: np.ndarray, t: np.ndarray) -> np.ndarray:
    """``weights @ t**2`` with zero weight times infinite tolerance counted as zero."""
    with np.errstate(invalid="ignore"):
        terms = np.where(weights > 0, weights * np.asarray(t, dtype=float) ** 2, 0.0)
    return terms.sum(axis=-1)


def _single_constraint(weights, budget, cost, reference, exponent, lower, upper) -> np.ndarray:
    """KKT solution of one variance constraint: bisection on the multiplier."""
    numerator = exponent * cost * reference**exponent

    def tolerances(log_lam: float) -> np.ndarray:
        lam = math.exp(log_lam)
        with np.errstate(divide="ignore"):
            free = (numerator / (2.0 * lam * weights)) ** (1.0 / (exponent + 2.0))
        free = np.where(weights > 0, free, np.inf)
        return np.clip(free, lower, upper)

    def excess(log_lam: float) -> float:
        return float(_variance(weights, tolerances(log_lam))) / budget - 1.0

    loosest = np.clip(upper, lower, upper)
    if _variance(weights, loosest) <= budget:
        return loosest
    lo, hi = -50.0, 50.0
    while excess(lo) < 0:
        lo -= 50.0
    while excess(hi) > 0:
        hi += 50.0
        if hi > 2000:
            return tolerances(hi)  # lower bounds alone exceed the budget
    log_lam = optimize.brentq(excess, lo, hi, xtol=1e-13, rtol=1e-13, maxiter=500)
    return tolerances(log_lam)


def lagrange_allocation(
    weights: np.ndarray,
    budgets: np.ndarray,
    *,
    cost: np.ndarray,
    reference: np.ndarray,
    exponent: np.ndarray,
    lower: np.ndarray | None = None,
    upper: np.ndarray | None = None,
) -> np.ndarray:
    """Cheapest tolerances under smooth power-law costs and variance budgets.

    Minimise ``sum_i C_i (t_ref,i / t_i)^p_i`` subject to
    ``sum_i a_ri t_i^2 <= B_r`` for every requirement r and
    ``lower_i <= t_i <= upper_i``.

    Parameters
    ----------
    weights : array (R, S) or (S,)
        ``a_ri``, output units squared per squared tolerance unit.
    budgets : array (R,) or float
        ``B_r``, output units squared (already net of the fixed variance).
    cost, reference, exponent : array (S,)
        ``C_i`` (currency), ``t_ref,i`` (tolerance units), ``p_i > 0``.
    lower, upper : array (S,), optional
        Range of each tolerance (default ``(0, inf)``).

    Returns
    -------
    numpy.ndarray (S,)
        Allocated tolerance values. Where the lower bounds alone break a
        budget the result is the lower bounds (check the budget afterwards).

    Notes
    -----
    With one requirement the Lagrange (KKT) condition gives, for an input
    inside its range,

        t_i = (p_i C_i t_ref,i^p_i / (2 lambda a_i))^(1 / (p_i + 2)),

    and ``lambda`` follows from ``sum a_i t_i^2 = B`` (one-dimensional root,
    monotone). For equal exponents p this is closed form:
    ``t_i^(p+2) proportional to C_i t_ref,i^p / a_i``. With several
    requirements the problem is convex in ``log t`` (a sum of exponentials in
    both objective and constraints) and is solved by SLSQP from a feasible
    start.

    References
    ----------
    S. Boyd & L. Vandenberghe, "Convex Optimization" (CUP 2004), section 5.5
    (KKT conditions); the tolerance-cost form is the reciprocal power law of
    the tolerance-allocation literature (e.g. Chase, Greenwood, Loosli &
    Hauglund, Manufacturing Review 3, 49 (1990)).
    """
    weights = np.atleast_2d(np.asarray(weights, dtype=float))
    budgets = np.atleast_1d(np.asarray(budgets, dtype=float))
    cost = np.asarray(cost, dtype=float)
    reference = np.asarray(reference, dtype=float)
    exponent = np.asarray(exponent, dtype=float)
    n = weights.shape[1]
    lower = np.full(n, 1e-300) if lower is None else np.maximum(np.asarray(lower, float), 1e-300)
    upper = np.full(n, np.inf) if upper is None else np.asarray(upper, dtype=float)
    if n == 0:
        return np.zeros(0)
    if np.any(exponent <= 0):
        raise ValueError("smooth cost exponents must be positive")
    starts = [
        _single_constraint(weights[r], budgets[r], cost, reference, exponent, lower, upper)
        for r in range(len(budgets))
    ]
    start = np.min(np.vstack(starts), axis=0)
    if len(budgets) == 1:
        return start
    active = [r for r in range(len(budgets)) if _variance(weights[r], start) > budgets[r] * 1e-9]
    if not np.all(np.isfinite(start)):
        return start
    scale = max(_smooth_cost(start, cost, reference, exponent), 1e-300)

    def objective(y):
        return float(np.sum(cost * reference**exponent * np.exp(-exponent * y))) / scale

    def gradient(y):
        return -exponent * cost * reference**exponent * np.exp(-exponent * y) / scale

    constraints = [
        {
            "type": "ineq",
            "fun": (lambda y, r=r: 1.0 - float(np.sum(weights[r] * np.exp(2 * y))) / budgets[r]),
            "jac": (lambda y, r=r: -2.0 * weights[r] * np.exp(2 * y) / budgets[r]),
        }
        for r in active
    ]
    bounds = list(zip(np.log(lower), np.log(upper), strict=True))
    result = optimize.minimize(
        objective,
        np.log(start),
        jac=gradient,
        method="SLSQP",
        bounds=bounds,
        constraints=constraints,
        options={"ftol": 1e-14, "maxiter": 500},
    )
    t = np.clip(np.exp(result.x), lower, upper)
    # keep the solver's answer only if it is feasible (to a hair) and cheaper
    slack = [1.0 - _variance(weights[r], t) / budgets[r] for r in range(len(budgets))]
    if min(slack) < -1e-7:
        t = t * math.sqrt(1.0 / (1.0 - min(slack)))
        t = np.clip(t, lower, upper)
    if _smooth_cost(t, cost, reference, exponent) <= _smooth_cost(
        start, cost, reference, exponent
    ):
        return t
    return start


@dataclass(frozen=True)
class TierSolution:
    """Result of the linearized allocation.

    Attributes
    ----------
    feasible : bool
        Whether every variance budget can be met.
    cost : float
        Total cost (tiers plus smooth), currency; ``inf`` if infeasible.
    tier_index : tuple of int
        Chosen tier of each tiered input (index into its tiers).
    smooth_tolerance : numpy.ndarray
        Allocated smooth tolerance values.
    variance : numpy.ndarray (R,)
        Linearized variance of each required output at the allocation.
    blocking : str
        When infeasible, the input whose contribution (at its tightest tier,
        or held fixed) is largest in the requirement that fails.
    failing : str
        When infeasible, the requirement no affordable choice meets.
    """

    feasible: bool
    cost: float
    tier_index: tuple[int, ...]
    smooth_tolerance: np.ndarray
    variance: np.ndarray
    blocking: str = ""
    failing: str = ""


def _smooth_part(problem: LinearProblem, remaining: np.ndarray):
    """Allocate the smooth inputs in the remaining budgets; return (t, cost)."""
    if not len(problem.smooth):
        return np.zeros(0), 0.0
    if np.any(remaining <= 0):
        return None, math.inf
    t = lagrange_allocation(
        problem.smooth_weights,
        remaining,
        cost=problem.smooth_cost,
        reference=problem.smooth_reference,
        exponent=problem.smooth_exponent,
        lower=problem.smooth_lower,
        upper=problem.smooth_upper,
    )
    used = _variance(problem.smooth_weights, t)
    if np.any(used > remaining * (1 + 1e-9)):
        return None, math.inf
    return t, _smooth_cost(
        t, problem.smooth_cost, problem.smooth_reference, problem.smooth_exponent
    )


def allocate_tiers(
    problem: LinearProblem, *, fixed_parts: Mapping[str, np.ndarray] | None = None
) -> TierSolution:
    """Exact least-cost choice of tiers (and smooth tolerances) by branch and bound.

    Parameters
    ----------
    problem : LinearProblem
        The linearized problem.
    fixed_parts : mapping of str to array (R,), optional
        Variance of each fixed input per requirement, used only to name the
        blocking input when the problem is infeasible.

    Returns
    -------
    TierSolution

    Notes
    -----
    Depth-first over the tiered inputs, tiers tried cheapest first. A branch is
    cut when its cost so far plus the cheapest tiers of the inputs still open
    reaches the best complete cost found, or when its variance so far plus the
    tightest tiers still open already breaks a budget. Leaves allocate the
    smooth inputs in what remains of each budget (:func:`lagrange_allocation`).
    The search is exact: it returns what exhaustive enumeration of every tier
    combination returns, usually after visiting far fewer of them.

    References
    ----------
    A. H. Land & A. G. Doig, Econometrica 28, 497 (1960) (branch and bound).
    """
    budgets = np.asarray(problem.budgets, dtype=float)
    n_req = len(budgets)
    tiers = [sorted(range(len(opts)), key=lambda k, o=opts: o[k].cost) for opts in problem.tiers]  # type: ignore[misc]
    variances = [
        np.array([problem.tiered_sensitivity[:, j] * o.standard_uncertainty**2 for o in opts]).T
        if len(opts)
        else np.zeros((n_req, 0))
        for j, opts in enumerate(problem.tiers)
    ]
    min_cost = [min(o.cost for o in opts) for opts in problem.tiers]
    min_var = [v.min(axis=1) for v in variances]
    smooth_floor = (
        problem.smooth_weights @ np.maximum(problem.smooth_lower, 0.0) ** 2
        if len(problem.smooth)
        else np.zeros(n_req)
    )
    n = len(problem.tiers)
    rest_cost = np.zeros(n + 1)
    rest_var = np.zeros((n + 1, n_req))
    for j in range(n - 1, -1, -1):
        rest_cost[j] = rest_cost[j + 1] + min_cost[j]
        rest_var[j] = rest_var[j + 1] + min_var[j]

    best: dict[str, object] = {"cost": math.inf, "index": None, "smooth": None}
    choice = [0] * n

    def visit(j: int, cost_so_far: float, var_so_far: np.ndarray) -> None:
        if cost_so_far + rest_cost[j] >= best["cost"]:
            return
        if np.any(var_so_far + rest_var[j] + smooth_floor >= budgets):
            return
        if j == n:
            t, c = _smooth_part(problem, budgets - var_so_far)
            if t is not None and cost_so_far + c < best["cost"]:
                best.update(cost=cost_so_far + c, index=tuple(choice), smooth=t)
            return
        for k in tiers[j]:
            choice[j] = k
            visit(j + 1, cost_so_far + problem.tiers[j][k].cost, var_so_far + variances[j][:, k])

    visit(0, 0.0, np.asarray(problem.fixed_variance, dtype=float))
    if best["index"] is None:
        failing, blocking = _infeasibility_named(problem, fixed_parts or {})
        return TierSolution(
            False,
            math.inf,
            (),
            np.zeros(len(problem.smooth)),
            np.full(n_req, np.nan),
            blocking=blocking,
            failing=failing,
        )
    index = best["index"]
    t = best["smooth"]
    variance = np.asarray(problem.fixed_variance, dtype=float).copy()
    for j, k in enumerate(index):  # type: ignore[arg-type,var-annotated]
        variance += variances[j][:, k]
    if len(problem.smooth):
        variance += _variance(problem.smooth_weights, t)  # type: ignore[arg-type]
    return TierSolution(
        True,
        float(best["cost"]),  # type: ignore[arg-type]
        tuple(index),  # type: ignore[arg-type]
        np.asarray(t),
        variance,
    )


def _infeasibility_named(problem: LinearProblem, fixed_parts: Mapping[str, np.ndarray]):
    tight = {
        name: problem.tiered_sensitivity[:, j] * min(o.standard_uncertainty for o in opts) ** 2
        for j, (name, opts) in enumerate(zip(problem.tiered, problem.tiers, strict=True))
    }
    total = np.asarray(problem.fixed_variance, dtype=float).copy()
    for v in tight.values():
        total = total + v
    with np.errstate(divide="ignore", invalid="ignore"):
        pressure = np.where(problem.budgets > 0, total / problem.budgets, np.inf)
    r = int(np.argmax(pressure))
    parts = {name: float(v[r]) for name, v in {**dict(fixed_parts), **tight}.items()}
    blocking = max(parts, key=parts.get) if parts else ""  # type: ignore[arg-type]
    return problem.requirements[r], blocking

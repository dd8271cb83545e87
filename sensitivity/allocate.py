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
where the model curves.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import xarray as xr
from scipy import optimize, stats

from trapbudget.sensitivity.errors import ScenarioError

__all__ = [
    "Allocation",
    "InfeasibleError",
    "LinearProblem",
    "TierOption",
    "TierSolution",
    "allocate",
    "allocate_tiers",
    "lagrange_allocation",
    "uncertainty_bound",
]


class InfeasibleError(ScenarioError):
    """No affordable choice of tolerances meets the scenario's requirements (exit code 1)."""


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
        Requirement kind, as in :class:`trapbudget.sensitivity.requirements.Requirement`.
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
        return float(limit) * abs(mean)
    if kind in ("at_least", "at_most"):
        margin = (mean - float(limit)) if kind == "at_least" else (float(limit) - mean)
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
    tiers = [sorted(range(len(opts)), key=lambda k, o=opts: o[k].cost) for opts in problem.tiers]
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
        if cost_so_far + rest_cost[j] >= best["cost"]:  # type: ignore[operator]
            return
        if np.any(var_so_far + rest_var[j] + smooth_floor >= budgets):
            return
        if j == n:
            t, c = _smooth_part(problem, budgets - var_so_far)
            if t is not None and cost_so_far + c < best["cost"]:  # type: ignore[operator]
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
    for j, k in enumerate(index):  # type: ignore[arg-type]
        variance += variances[j][:, k]
    if len(problem.smooth):
        variance += _variance(problem.smooth_weights, t)  # type: ignore[arg-type]
    return TierSolution(
        True,
        float(best["cost"]),
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
    blocking = max(parts, key=parts.get) if parts else ""
    return problem.requirements[r], blocking


# ---------------------------------------------------------------------------
# the scenario-level driver
# ---------------------------------------------------------------------------


@dataclass(frozen=True)
class Allocation:
    """The cheapest tolerances found that meet every requirement.

    Attributes
    ----------
    feasible : bool
        Whether an allocation meeting every requirement was found.
    reason : str
        One line: what was bought, or why no allocation meets the requirements
        (the requirement no affordable choice meets and the input that blocks it).
    total_cost : float
        Cost of the allocation in the scenario's currency (``inf`` if infeasible).
    spec : xarray.Dataset
        The spec sheet, dim ``input``: ``present_tolerance``,
        ``required_tolerance`` (tolerance values as written, absolute SI),
        ``present_uncertainty``, ``required_uncertainty`` (standard
        uncertainties), ``headroom`` (present / required tolerance: above 1 the
        input must be tightened by that factor), ``tier``, ``cost``,
        ``binding`` (label of the requirement that sets it; empty when the
        cheapest option already suffices), ``free`` (has a cost model).
    requirements : xarray.Dataset
        Dim ``requirement``: ``probability`` met at the allocation with its
        binomial ``standard_error``, ``target`` probability, ``met``,
        ``linear_bound`` (bound on u(Y) used by the linear pass), ``output``,
        ``kind``.
    tolerances : mapping of str to Tolerance
        The allocated tolerance of every free input.
    scenario : Scenario or None
        The scenario with the allocated tolerances (None if infeasible).
    samples : xarray.Dataset or None
        The Monte Carlo samples of the final verification.
    """

    feasible: bool
    reason: str
    total_cost: float
    spec: xr.Dataset
    requirements: xr.Dataset
    tolerances: Mapping[str, object]
    scenario: object | None = None
    samples: xr.Dataset | None = None
    iterations: int = 0
    history: tuple[tuple[float, bool], ...] = ()

    @property
    def blocking_input(self) -> str:
        """Input named as blocking an infeasible requirement ('' if feasible)."""
        return str(self.spec.attrs.get("blocking_input", ""))

    def to_dataset(self) -> xr.Dataset:
        """Spec sheet and requirement checks merged into one Dataset (dims input, requirement)."""
        ds = xr.merge([self.spec, self.requirements], combine_attrs="override")
        ds.attrs = {**self.requirements.attrs, **self.spec.attrs}
        return ds


def _z(probability: float, kind: str) -> float:
    """Normal quantile a requirement's probability stands for (two-sided for 'within')."""
    if kind == "within":
        return float(stats.norm.ppf(0.5 * (1.0 + probability)))
    return float(stats.norm.ppf(probability))


def _check(samples, requirements, *, safety_margin: float):
    """Probability met (with binomial standard error) and pass/fail of each requirement."""
    from trapbudget.sensitivity.compare import requirement_indicator

    rows = []
    for req in requirements:
        values = np.asarray(samples[req.output].values, dtype=float)
        n = values.size
        indicator = requirement_indicator(values, req)
        if indicator is None:
            spread = float(np.std(values, ddof=1) / abs(np.mean(values)))
            rows.append(
                {
                    "probability": math.nan,
                    "standard_error": math.nan,
                    "spread": spread,
                    "met": spread <= float(req.limit),
                    "factor": float(req.limit) / spread,
                }
            )
            continue
        p_hat = float(indicator.mean())
        se = math.sqrt(p_hat * (1.0 - p_hat) / n)
        target = 0.5 if req.probability is None else float(req.probability)
        met = p_hat - safety_margin * se >= target
        wanted = min(target + safety_margin * math.sqrt(target * (1 - target) / n), 1 - 1.0 / n)
        z_target = _z(wanted, req.kind)
        z_hat = _z(min(max(p_hat, 0.5 / n), 1.0 - 0.5 / n), req.kind)
        if z_target <= 0:
            factor = 2.0 if met else 0.5
        elif z_hat <= 0:
            factor = 0.5
        else:
            factor = z_hat / z_target
        rows.append(
            {
                "probability": p_hat,
                "standard_error": se,
                "spread": math.nan,
                "met": bool(met),
                "factor": factor,
            }
        )
    return rows


@dataclass
class _Setup:
    """Everything the linear pass needs, gathered once from the scenario."""

    requirements: tuple
    labels: list[str]
    free_smooth: list[str]
    free_tiered: list[str]
    fixed: list[str]
    sensitivity: dict[tuple[int, str], float]  # (requirement index, input) -> c^2 per u^2
    means: np.ndarray
    bounds: np.ndarray


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
    sensitivity = {}
    for r, req in enumerate(requirements):
        for name in scenario.inputs:
            c = float(coefficient.sel(output=req.output, input=name))
            sensitivity[(r, name)] = c * c if math.isfinite(c) else 0.0
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


def allocate(
    scenario: object,
    *,
    n_samples: int | None = None,
    rng: object = None,
    method: str | None = None,
    refine: bool = True,
    max_iterations: int = 8,
    safety_margin: float = 1.0,
    max_loosen: float = 4.0,
    rtol: float = 0.02,
    progress: object = None,
) -> Allocation:
    """Find the tolerances that meet every requirement at least cost.

    Inputs with a cost model (``[costs.<input>]``) are free to change; the
    other uncertain inputs are held at their present tolerance.

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
        A probability requirement counts as met when the estimate minus this
        many binomial standard errors reaches the required probability.
    max_loosen : float
        A smooth-cost tolerance may be loosened to at most this multiple of
        its present value (the linear model is not trusted far outside).
    rtol : float
        Refinement stops once every requirement passes and no binding bound
        would move by more than this fraction.
    progress : callable, optional
        ``progress(done, total)`` for each verification.

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
    from trapbudget.sensitivity.compare import common_random_samples
    from trapbudget.sensitivity.sampling import unit_design

    requirements = tuple(scenario.requirements)  # type: ignore[attr-defined]
    source = getattr(scenario, "source", None)
    if not requirements:
        raise ScenarioError(
            "no requirements to allocate against; add a [[requirements]] table",
            path=source,
            key="requirements",
        )
    if not scenario.costs:  # type: ignore[attr-defined]
        raise ScenarioError(
            "no cost tables, so no input is free to change; add [costs.<input>] tiers or smooth",
            path=source,
            key="costs",
        )
    labels = [_label_of(req, i) for i, req in enumerate(requirements)]
    setup = _linear_setup(scenario, requirements, labels)
    settings = getattr(scenario, "settings", None)
    n = int(n_samples if n_samples is not None else getattr(settings, "n_samples", 4096))
    m = str(method if method is not None else getattr(settings, "method", "sobol"))
    seed = rng if rng is not None else getattr(settings, "seed", None)
    unit = unit_design(n, len(scenario.inputs), method=m, rng=seed)  # type: ignore[attr-defined]

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
            tuple(np.round(np.log(solution.smooth_tolerance) / math.log1p(rtol / 10)).astype(int)),
        )
        if key in seen:
            repeats += 1
            if repeats >= 2:
                break
            candidate, samples, checks = seen[key]
        else:
            repeats = 0
            candidate = scenario.with_tolerances(tolerances)  # type: ignore[attr-defined]
            (samples,) = common_random_samples(
                [candidate], n_samples=n, method=m, unit=unit, progress=progress
            )  # type: ignore[arg-type]
            checks = _check(samples, requirements, safety_margin=safety_margin)
            seen[key] = (candidate, samples, checks)
        passed = all(c["met"] for c in checks)
        history.append((solution.cost, passed))
        last = (problem, solution, tolerances, (candidate, samples, checks))
        if passed and (best is None or solution.cost <= best[1].cost):
            best = last
        # a failing requirement is aimed a little inside its limit, so the bound is not
        # approached from the wrong side forever
        factors = np.array(
            [
                min(
                    max(c["factor"] if c["met"] else min(c["factor"], 1.0) * (1 - rtol / 2), 0.5),
                    2.0,
                )
                for c in checks
            ]
        )
        used = solution.variance / np.where(np.isfinite(problem.budgets), problem.budgets, np.inf)
        active = used > 0.9
        if passed and np.all(np.abs(np.log(factors[active])) < math.log1p(rtol)):
            break
        for r, check in enumerate(checks):
            if check["met"] and not active[r]:
                continue
            if not math.isfinite(bounds[r]):
                bounds[r] = math.sqrt(max(solution.variance[r], 1e-300))
            bounds[r] *= factors[r]

    if not refine and last is not None and last[3] is not None:
        best = last  # the linear answer as it stands; its Monte Carlo check is reported
    chosen = best if best is not None else last
    problem, solution, tolerances, verified = chosen  # type: ignore[misc]
    feasible = best is not None
    if not solution.feasible:
        r = labels.index(failing) if failing in labels else 0
        if setup.bounds[r] == 0.0:
            reason = (
                f"requirement '{failing}' fails at the nominal point "
                f"({requirements[r].output} = {setup.means[r]:.4g}); no tolerance can meet it: "
                "change a nominal value or the requirement"
            )
            blocking = "nominal"
        else:
            reason = (
                f"requirement '{failing}' cannot be met by any affordable choice: "
                f"'{blocking}' alone (at its tightest option, or held fixed) leaves too little "
                "room; add a tighter tier for it or relax the requirement"
            )
    elif not feasible:
        bad = [labels[r] for r, c in enumerate(verified[2]) if not c["met"]]
        failing = bad[0] if bad else ""
        reason = (
            f"the linear allocation fails the Monte Carlo check of '{', '.join(bad)}' after "
            f"{len(history)} rounds; the model curves too much here: raise max_iterations "
            "or n_samples"
        )
    else:
        reason = f"all {len(requirements)} requirement(s) met at a cost of {solution.cost:.6g}"
        if not refine:
            bad = [labels[r] for r, c in enumerate(verified[2]) if not c["met"]]
            reason = (
                f"linear allocation at a cost of {solution.cost:.6g} (refinement off); the "
                + (
                    f"Monte Carlo check fails '{', '.join(bad)}': refine it"
                    if bad
                    else "Monte Carlo check meets every requirement"
                )
            )
    return _result(
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


def _result(
    scenario,
    setup,
    problem,
    solution,
    tolerances,
    verified,
    *,
    feasible,
    reason,
    failing,
    blocking,
    n_samples,
    method,
    seed,
    history,
    max_loosen,
) -> Allocation:
    names = list(scenario.inputs)
    tol = scenario.tolerances
    tolerances = tolerances or {}
    n_req = len(setup.requirements)
    budgets = np.asarray(problem.budgets, dtype=float)
    variance = np.asarray(solution.variance, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        pressure = np.where(budgets > 0, variance / budgets, np.inf)
    rows: dict[str, list] = {
        k: []
        for k in (
            "present_tolerance",
            "required_tolerance",
            "present_uncertainty",
            "required_uncertainty",
            "headroom",
            "tier",
            "cost",
            "binding",
            "free",
            "present_text",
            "required_text",
            "unit",
        )
    }
    for name in names:
        present = tol[name]
        required = tolerances.get(name, present)
        model = scenario.costs.get(name)
        tier, cost, cheapest = "", 0.0, True
        if model is not None and name in tolerances:
            if hasattr(model, "tiers"):
                k = solution.tier_index[setup.free_tiered.index(name)]
                tier, cost = str(model.tiers[k].name), float(model.tiers[k].cost)
                cheapest = cost <= min(float(t.cost) for t in model.tiers)
            else:
                cost = float(model.cost(float(required.value)))
                cheapest = float(required.value) >= float(present.value) * max_loosen * (1 - 1e-9)
        binding = ""
        if model is not None and not cheapest:
            contributes = [r for r in range(n_req) if setup.sensitivity[(r, name)] > 0]
            if contributes:
                binding = setup.labels[max(contributes, key=lambda r: pressure[r])]
        rows["present_tolerance"].append(float(present.value))
        rows["required_tolerance"].append(float(required.value))
        rows["present_uncertainty"].append(float(present.standard_uncertainty))
        rows["required_uncertainty"].append(float(required.standard_uncertainty))
        rows["headroom"].append(
            float(present.value) / float(required.value) if required.value > 0 else math.inf
        )
        rows["tier"].append(tier)
        rows["cost"].append(cost if feasible else math.nan)
        rows["binding"].append(binding)
        rows["free"].append(model is not None)
        rows["present_text"].append(str(present.text or ""))
        rows["required_text"].append(str(required.text or ""))
        rows["unit"].append(str(getattr(present, "unit", "") or ""))
    long_names = {
        "present_tolerance": "present tolerance value (as written, SI)",
        "required_tolerance": "required tolerance value (as written, SI)",
        "present_uncertainty": "present standard uncertainty (SI)",
        "required_uncertainty": "required standard uncertainty (SI)",
        "headroom": "present / required tolerance (above 1: tighten by this factor)",
        "tier": "cost tier chosen",
        "cost": "cost of the allocated tolerance",
        "binding": "requirement that sets this tolerance",
        "free": "has a cost model (free to change)",
        "present_text": "present tolerance as written",
        "required_text": "required tolerance as written",
        "unit": "SI unit of the input",
    }
    spec = xr.Dataset(coords={"input": names})
    for key, values in rows.items():
        dtype = bool if key == "free" else (str if isinstance(values[0], str) else float)
        spec[key] = xr.DataArray(
            np.asarray(values, dtype=dtype), dims="input", attrs={"long_name": long_names[key]}
        )
    total = float(solution.cost) if feasible else math.inf
    attrs = {
        "feasible": bool(feasible),
        "reason": reason,
        "total_cost": total,
        "currency": str(getattr(scenario, "currency", "") or ""),
        "failing_requirement": failing,
        "blocking_input": blocking if not feasible else "",
        "n_samples": int(n_samples),
        "method": method,
        "seed": seed if isinstance(seed, int) else "",
        "iterations": len(history),
        "title": str(getattr(scenario, "title", "")),
    }
    spec.attrs.update(attrs)

    checks = verified[2] if verified is not None else None
    samples = verified[1] if verified is not None else None
    reqs = xr.Dataset(coords={"requirement": setup.labels})
    req_rows = {
        "output": [r.output for r in setup.requirements],
        "kind": [r.kind for r in setup.requirements],
        "target": [
            math.nan if r.probability is None else float(r.probability) for r in setup.requirements
        ],
        "probability": [
            c["probability"] if checks else math.nan for c in (checks or [{}] * n_req)
        ],
        "standard_error": [
            c["standard_error"] if checks else math.nan for c in (checks or [{}] * n_req)
        ],
        "relative_spread": [c["spread"] if checks else math.nan for c in (checks or [{}] * n_req)],
        "met": [bool(c["met"]) if checks else False for c in (checks or [{}] * n_req)],
        "linear_bound": list(np.sqrt(budgets)),
        "linear_std": list(np.sqrt(np.maximum(variance, 0.0))),
        "monte_carlo_std": [
            float(np.std(samples[r.output].values, ddof=1)) if samples is not None else math.nan
            for r in setup.requirements
        ],
        "output_nominal": list(setup.means),
    }
    for key, values in req_rows.items():
        dtype = bool if key == "met" else (str if isinstance(values[0], str) else float)
        reqs[key] = xr.DataArray(np.asarray(values, dtype=dtype), dims="requirement")
    reqs.attrs.update(attrs)
    return Allocation(
        feasible=bool(feasible),
        reason=reason,
        total_cost=total,
        spec=spec,
        requirements=reqs,
        tolerances=dict(tolerances),
        scenario=verified[0] if (verified is not None and feasible) else None,
        samples=samples,
        iterations=len(history),
        history=history,
    )

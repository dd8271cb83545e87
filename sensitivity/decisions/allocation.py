"""The result of an allocation and the Monte Carlo check of requirements behind it."""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
import xarray as xr
from scipy import stats

from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.scenario.core import Scenario

__all__ = ["Allocation", "InfeasibleError"]


class InfeasibleError(ScenarioError):
    """No affordable choice of tolerances meets the scenario's requirements (exit code 1)."""


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
        Cost of the allocation in the scenario's currency (``inf`` if infeasible): the
        price level of every free input at its allocated tolerance.
    new_spending : float
        (in ``spec.attrs``) what must be bought: the sum over inputs of the allocated
        cost above the cost of the present tolerance; relaxing an input refunds nothing.
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
    scenario: Scenario | None = None
    samples: xr.Dataset | None = None
    iterations: int = 0
    history: tuple[tuple[float, bool], ...] = ()

    def __repr__(self) -> str:
        state = "feasible" if self.feasible else f"infeasible ({self.reason})"
        return (
            f"Allocation({state}, total_cost={self.total_cost:g}, "
            f"tolerances={sorted(self.tolerances)}, iterations={self.iterations})"
        )

    def _repr_html_(self) -> str:
        import html

        return f"<pre>{html.escape(repr(self))}</pre>"

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


def _lower_bound(hits: int, n: int, margin: float) -> float:
    """One-sided Clopper-Pearson lower bound on a probability at ``margin`` normal quantiles."""
    if margin <= 0:
        return hits / n
    from trapbudget.sensitivity.compliance import probability_interval

    level = 2.0 * float(stats.norm.cdf(margin)) - 1.0
    return probability_interval(hits, n, confidence_level=level)[0]


def _check(samples, requirements, *, safety_margin: float):
    """Probability met (with binomial standard error) and pass/fail of each requirement."""
    from trapbudget.sensitivity.decisions.compare import requirement_indicator

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
                    "target": math.nan,
                    "lower_bound": math.nan,
                    "spread": spread,
                    "met": spread <= float(req.limit),
                    "factor": float(req.limit) / spread,
                }
            )
            continue
        hits = int(np.count_nonzero(indicator))
        p_hat = hits / n
        se = math.sqrt(p_hat * (1.0 - p_hat) / n)
        target = 0.5 if req.probability is None else float(req.probability)
        # The margin is a one-sided Clopper-Pearson bound at normal quantile safety_margin:
        # unlike p - k se it stays below 1 when every sample passes.
        lower = _lower_bound(hits, n, safety_margin)
        met = lower >= target
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
                "target": target,
                "lower_bound": lower,
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
    fresh=None,
    search="linear",
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
            "present_cost",
            "new_spending",
            "binding",
            "free",
            "present_text",
            "required_text",
            "unit",
            "nominal",
            "meaning",
            "shape",
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
        # what the present tolerance already costs (the price level in place); relaxing an
        # input refunds nothing, so new spending is only the rise above it
        held = float(model.cost(float(present.value))) if model is not None else 0.0
        held = held if math.isfinite(held) else 0.0
        rows["present_cost"].append(held)
        rows["new_spending"].append(max(0.0, cost - held) if feasible else math.nan)
        rows["binding"].append(binding)
        rows["free"].append(model is not None)
        rows["present_text"].append(str(present.text or ""))
        rows["required_text"].append(str(required.text or ""))
        rows["unit"].append(str(getattr(present, "unit", "") or ""))
        rows["nominal"].append(float(scenario.nominal.get(name, present.nominal)))
        rows["meaning"].append(str(present.meaning))
        rows["shape"].append(str(present.shape))
    long_names = {
        "present_tolerance": "present tolerance value (as written, SI)",
        "required_tolerance": "required tolerance value (as written, SI)",
        "present_uncertainty": "present standard uncertainty (SI)",
        "required_uncertainty": "required standard uncertainty (SI)",
        "headroom": "present / required tolerance (above 1: tighten by this factor)",
        "tier": "cost tier chosen",
        "cost": "cost of the allocated tolerance",
        "present_cost": "cost of the present tolerance (the price level in place)",
        "new_spending": "cost above the present one (relaxing refunds nothing)",
        "binding": "requirement that sets this tolerance",
        "free": "has a cost model (free to change)",
        "present_text": "present tolerance as written",
        "required_text": "required tolerance as written",
        "unit": "SI unit of the input",
        "nominal": "nominal value (SI)",
        "meaning": "what the tolerance value states (standard, half-width or expanded)",
        "shape": "distribution shape of the input",
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
        "new_spending": float(np.nansum(rows["new_spending"])) if feasible else math.inf,
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
    if fresh is not None:
        fresh_checks = fresh[1]
        reqs["fresh_probability"] = ("requirement", [c["probability"] for c in fresh_checks])
        reqs["fresh_probability_low"] = ("requirement", [c["lower_bound"] for c in fresh_checks])
        reqs["fresh_met"] = ("requirement", np.array([c["met"] for c in fresh_checks], bool))
        reqs["fresh_probability"].attrs["long_name"] = (
            "probability on fresh independent draws (the choice was made on the common sample)"
        )
        reqs["fresh_probability_low"].attrs["long_name"] = (
            "one-sided Clopper-Pearson bound of the fresh probability at the safety margin"
        )
        attrs["verified_on_fresh_draws"] = bool(all(c["met"] for c in fresh_checks))
        attrs["fresh_n_samples"] = int(fresh[0].sizes.get("sample", 0))
    attrs["search"] = search
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

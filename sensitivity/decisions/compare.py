"""Before/after comparison of scenarios with common random numbers.

A proposed change (a tighter tolerance, a new nominal, a different component)
is judged by pushing the *same* unit-cube design through the distributions of
both sides (common random numbers, CRN): sample k of "before" and sample k of
"after" share their underlying uniforms, so the differences of means,
variances and probabilities carry only the noise of the change itself, not that
of two independent draws. Standard errors of the differences are those of the
paired samples.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from typing import Any

import numpy as np
import xarray as xr
from scipy import stats

from trapbudget.sensitivity.decisions.crn import (
    _required_outputs,
    _uncertain_names,
    common_random_samples,
    replicated_unit,
)
from trapbudget.sensitivity.executors import Workers, running_on
from trapbudget.sensitivity.scenario.core import Scenario
from trapbudget.sensitivity.scenario.requirements import Requirement
from trapbudget.sensitivity.scenario.settings import Upgrade

__all__ = [
    "common_random_samples",
    "compare",
    "compare_samples",
    "compare_upgrades",
    "requirement_indicator",
]

SECONDS_PER_DAY = 86400.0
#: Probability levels of the stored empirical quantiles (for distribution plots).
QUANTILE_LEVELS = np.linspace(0.0, 1.0, 201)


# ---------------------------------------------------------------------------
# analysis of paired samples
# ---------------------------------------------------------------------------


def requirement_indicator(values: np.ndarray, requirement: Requirement) -> np.ndarray | None:
    """Per-sample indicator that a requirement holds (None for a spread requirement).

    Parameters
    ----------
    values : array
        Samples of the requirement's output, output units.
    requirement : Requirement
        With ``kind`` and ``limit`` (SI).

    Returns
    -------
    numpy.ndarray of bool or None
        ``None`` for ``"relative_spread_at_most"``, a property of the whole
        distribution rather than of one run.
    """
    if requirement.kind == "relative_spread_at_most":
        return None
    return np.asarray(requirement.satisfied(values), dtype=bool)


def _quantiles(values: np.ndarray, confidence_level: float) -> tuple[float, float]:
    tail = (1.0 - confidence_level) / 2.0
    lo, hi = np.quantile(values, [tail, 1.0 - tail])
    return float(lo), float(hi)


def _label(requirement: Requirement, index: int) -> str:
    label = getattr(requirement, "label", "") or ""
    return label or f"{requirement.output} {requirement.kind} #{index + 1}"


def _paired_se(diff: np.ndarray, n_replicates: int) -> float:
    """Standard error of mean(diff): from R independent block means, or from the rows."""
    if n_replicates > 1:
        means = diff.reshape(n_replicates, -1).mean(axis=1)
        return float(np.std(means, ddof=1) / math.sqrt(n_replicates))
    return float(np.std(diff, ddof=1) / math.sqrt(diff.size))


def compare_samples(
    before: xr.Dataset,
    after: xr.Dataset,
    *,
    outputs: Sequence[str] | None = None,
    requirements: Sequence[Requirement] = (),
    confidence_level: float = 0.95,
    repetition_rate: float | None = None,
    cost: float | None = None,
    n_replicates: int = 1,
) -> xr.Dataset:
    """Compare paired output samples of two scenarios (same design, row by row).

    Parameters
    ----------
    before, after : xarray.Dataset
        Samples Datasets (dim ``sample``) from :func:`common_random_samples`.
    outputs : sequence of str, optional
        Outputs to compare (default: every output variable present in both).
    requirements : sequence of Requirement
        Requirements whose probability of being met is compared.
    confidence_level : float
        Probability of the probabilistically symmetric coverage intervals.
    repetition_rate : float, optional
        Experimental runs per second (Hz); gives the expected failing runs per day.
    cost : float, optional
        Cost of the change, in the scenario's currency.
    n_replicates : int, default 1
        R > 1: the rows are R equal consecutive blocks, each an independent
        randomization of a QMC design (:func:`replicated_unit`); standard
        errors of the paired mean change and probability shift come from the
        R block means, ``s / sqrt(R)``, and ``mean_change_low/high`` are
        Student-t intervals on R - 1 degrees of freedom. 1: independent rows.

    Returns
    -------
    xarray.Dataset
        Dim ``output``: ``mean_before``, ``mean_after``, ``mean_change``,
        ``mean_change_standard_error`` (paired), ``std_before``, ``std_after``,
        ``interval_low_before`` ... ``interval_high_after``,
        ``variance_before``, ``variance_after``, ``variance_removed``
        (before minus after, output units squared) and
        ``variance_removed_fraction``; dims ``output``, ``quantile``:
        ``quantiles_before`` and ``quantiles_after`` (empirical quantiles at
        :data:`QUANTILE_LEVELS`, for distribution plots). Dim ``requirement``:
        ``probability_before``, ``probability_after``, ``probability_shift``
        and its paired ``shift_standard_error``, ``failing_per_day_before`` and
        ``failing_per_day_after`` (NaN without a repetition rate), and for a
        spread requirement the estimated ``relative_spread_before/after``.

    Notes
    -----
    With indicators ``I_b``, ``I_a`` of one requirement on paired samples, the
    standard error of the shift ``mean(I_a - I_b)`` is
    ``std(I_a - I_b) / sqrt(n)``: zero when the change never flips a run,
    however rare the failures (binomial, paired). Expected failing runs per day
    are ``(1 - P) f_rep 86400 s``.
    """
    if before.sizes.get("sample") != after.sizes.get("sample"):
        raise ValueError("before and after must have the same number of paired samples")
    n = int(before.sizes["sample"])
    if outputs is None:
        outputs = [
            v  # type: ignore[misc]
            for v in before.data_vars
            if before[v].attrs.get("role") == "output" and v in after.data_vars
        ]
    outputs = list(outputs)
    dof = (n_replicates - 1) if n_replicates > 1 else max(n - 1, 1)
    t_factor = float(stats.t.ppf(0.5 + confidence_level / 2, dof))
    per_output: dict[str, list[float]] = {}
    for name in outputs:
        b = np.asarray(before[name].values, dtype=float)
        a = np.asarray(after[name].values, dtype=float)
        diff = a - b
        change_se = _paired_se(diff, n_replicates)
        vb, va = float(np.var(b, ddof=1)), float(np.var(a, ddof=1))
        lb, hb = _quantiles(b, confidence_level)
        la, ha = _quantiles(a, confidence_level)
        row = {
            "mean_before": float(np.mean(b)),
            "mean_after": float(np.mean(a)),
            "mean_change": float(np.mean(diff)),
            "mean_change_standard_error": change_se,
            "mean_change_low": float(np.mean(diff)) - t_factor * change_se,
            "mean_change_high": float(np.mean(diff)) + t_factor * change_se,
            "std_before": math.sqrt(vb),
            "std_after": math.sqrt(va),
            "interval_low_before": lb,
            "interval_high_before": hb,
            "interval_low_after": la,
            "interval_high_after": ha,
            "variance_before": vb,
            "variance_after": va,
            "variance_removed": vb - va,
            "variance_removed_fraction": (vb - va) / vb if vb > 0 else 0.0,
        }
        for key, value in row.items():
            per_output.setdefault(key, []).append(value)
    ds = xr.Dataset(coords={"output": outputs, "quantile": QUANTILE_LEVELS})
    for key, values in per_output.items():
        ds[key] = ("output", np.asarray(values))
    for side, data in (("before", before), ("after", after)):
        ds[f"quantiles_{side}"] = (
            ("output", "quantile"),
            np.array(
                [np.quantile(np.asarray(data[o].values, float), QUANTILE_LEVELS) for o in outputs]
            ).reshape(len(outputs), QUANTILE_LEVELS.size),
        )
    for name in outputs:
        ds.attrs[f"units_{name}"] = before[name].attrs.get("units", "")
    ds.attrs["n_replicates"] = int(n_replicates)
    ds.attrs["standard_error_method"] = (
        f"{n_replicates} independent randomizations (block means)"
        if n_replicates > 1
        else "independent rows"
    )

    labels, rows = [], []
    rate = math.nan if repetition_rate is None else float(repetition_rate)
    for i, req in enumerate(requirements):
        labels.append(_label(req, i))
        b = np.asarray(before[req.output].values, dtype=float)
        a = np.asarray(after[req.output].values, dtype=float)
        ib, ia = requirement_indicator(b, req), requirement_indicator(a, req)
        row = dict.fromkeys(
            (
                "probability_before",
                "probability_after",
                "probability_shift",
                "shift_standard_error",
                "failing_per_day_before",
                "failing_per_day_after",
                "relative_spread_before",
                "relative_spread_after",
            ),
            math.nan,
        )
        row["target"] = math.nan if req.probability is None else float(req.probability)
        if ib is None:
            row["relative_spread_before"] = float(np.std(b, ddof=1) / abs(np.mean(b)))
            row["relative_spread_after"] = float(np.std(a, ddof=1) / abs(np.mean(a)))
        else:
            pb, pa = float(ib.mean()), float(ia.mean())  # type: ignore[union-attr]
            flips = ia.astype(float) - ib.astype(float)  # type: ignore[union-attr]
            row.update(
                probability_before=pb,
                probability_after=pa,
                probability_shift=pa - pb,
                shift_standard_error=_paired_se(flips, n_replicates) if n > 1 else 0.0,
                failing_per_day_before=(1.0 - pb) * rate * SECONDS_PER_DAY,
                failing_per_day_after=(1.0 - pa) * rate * SECONDS_PER_DAY,
            )
        row["output_name"] = req.output  # type: ignore[assignment]
        row["kind"] = req.kind  # type: ignore[assignment]
        rows.append(row)
    if rows:
        coords = {"requirement": labels}
        for key in rows[0]:
            values = [r[key] for r in rows]
            dtype = object if isinstance(values[0], str) else float
            ds[key] = xr.DataArray(
                np.asarray(values, dtype=dtype).astype(str if dtype is object else float),
                dims="requirement",
                coords=coords,
            )
        ds = ds.rename({"output_name": "requirement_output"})
    ds.attrs.update(
        n_samples=n,
        confidence_level=float(confidence_level),
        repetition_rate=rate,
        cost=math.nan if cost is None else float(cost),
    )
    return ds


# ---------------------------------------------------------------------------
# scenario-level drivers
# ---------------------------------------------------------------------------


def _settings(scenario: Scenario, n_samples, method, rng):
    options = scenario.settings.resolve(n_samples=n_samples, method=method, rng=rng)
    return options.n_samples, options.method, options.rng, options.confidence_level


def _chunk_size(scenario: Any) -> int:
    settings = getattr(scenario, "settings", None)
    return int(getattr(settings, "chunk_size", 65536) or 65536)


def _same_species(before: Any, after: Any) -> None:
    """Refuse a before/after pair of two species: that is not a change to one apparatus."""
    from trapbudget.sensitivity.errors import ScenarioError

    a, b = str(getattr(before, "species", "") or ""), str(getattr(after, "species", "") or "")
    if a and b and a != b:
        raise ScenarioError(
            f"the 'after' scenario is {b} but 'before' is {a}; compare judges one apparatus "
            "before and after a change on common random numbers, which two species do not "
            "share (different atoms, lines and vapor); run 'trapbudget rank' on each instead",
            path=getattr(after, "source", None),
            key="scenario.species",
        )


def _model_label(scenario: Any) -> str:
    return str(getattr(scenario, "model_name", "") or type(scenario.model).__name__)


def _shared_outputs(before: Any, after: Any, wanted: Sequence[str]) -> tuple[list[str], list[str]]:
    """The wanted outputs both models give, and those left out (two models, e.g. two sources).

    A model without an ``outputs`` table (a plain callable) is taken to give them all.
    """
    names = []
    for side in (before, after):
        table = getattr(side.model, "outputs", None)
        names.append(None if table is None else set(table))
    shared = [o for o in wanted if all(t is None or o in t for t in names)]
    if not shared:
        from trapbudget.sensitivity.errors import ScenarioError

        raise ScenarioError(
            f"the two models share none of the outputs {', '.join(wanted)}; name an output "
            "both give in [outputs] names",
            path=getattr(after, "source", None),
            key="outputs.names",
        )
    return shared, [o for o in wanted if o not in shared]


def compare(
    before: Scenario,
    after: Scenario,
    *,
    n_samples: int | None = None,
    rng: int | np.random.Generator | None = None,
    method: str | None = None,
    outputs: Sequence[str] | None = None,
    repetition_rate: float | None = None,
    cost: float | None = None,
    progress: Callable[[int, int], None] | None = None,
    executor: Any = None,
    workers: Workers = None,
) -> xr.Dataset:
    """Compare two scenarios (before and after a change) with common random numbers.

    Parameters
    ----------
    before, after : Scenario
        The present apparatus and the proposed one.
    n_samples : int, optional
        Samples per side (default the ``before`` scenario's setting).
    rng : seed or numpy.random.Generator, optional
        Randomness of the shared design (default the scenario's seed).
    method : {"random", "latin", "sobol"}, optional
        Design (default the scenario's setting).
    outputs : sequence of str, optional
        Outputs to compare (default those of ``before``).
    repetition_rate : float, optional
        Runs per second, Hz, for expected failing runs per day.
    cost : float, optional
        Cost of the change.
    progress : callable, optional
        ``progress(done, total)``.
    executor, workers : optional
        Where the model runs, as for :func:`~trapbudget.sensitivity.propagate`.

    Returns
    -------
    xarray.Dataset
        As :func:`compare_samples`, judged against the requirements of
        ``before`` (a change must not move the goalposts). The two may use different
        models of the same species (a vapor cell before, a 2D-MOT source after): the
        outputs both give are compared, and ``attrs["outputs_left_out"]`` names the rest
        (requirements on them are left out too); ``model_before`` and ``model_after``
        name the models.

    Raises
    ------
    ScenarioError
        When ``before`` and ``after`` are of different species.
    """
    with running_on(executor, workers):
        _same_species(before, after)
        n, m, r, level = _settings(before, n_samples, method, rng)
        wanted = list(outputs) if outputs is not None else _required_outputs(before, None)
        outs, left_out = _shared_outputs(before, after, wanted)
        requirements = tuple(req for req in before.requirements if req.output in outs)
        unit, blocks = replicated_unit(n, len(_uncertain_names([before, after])), method=m, rng=r)
        samples_before, samples_after = common_random_samples(
            [before, after],
            n_samples=n,
            method=m,
            unit=unit,
            outputs=outs,
            progress=progress,
            chunk_size=_chunk_size(before),
        )
        ds = compare_samples(
            samples_before,
            samples_after,
            outputs=outs,
            requirements=requirements,
            confidence_level=level,
            repetition_rate=repetition_rate,
            cost=cost,
            n_replicates=blocks,
        )
        ds.attrs.update(
            title_before=str(getattr(before, "title", "")),
            title_after=str(getattr(after, "title", "")),
            model_before=_model_label(before),
            model_after=_model_label(after),
            outputs_left_out=", ".join(left_out),
            method=m,
            seed=r if isinstance(r, int) else "",
        )
        return ds


def _benefit(parts: Sequence[xr.Dataset]) -> tuple[np.ndarray, np.ndarray, str]:
    """Improvement of each change: the probability gained (summed over the requirements),
    and the fraction of the variance of the first output removed, which breaks ties.

    When no change moves any probability the variance removed is the benefit itself.
    """
    shifts = [
        np.nan_to_num(p["probability_shift"].values, nan=0.0) if "probability_shift" in p else None
        for p in parts
    ]
    first = str(parts[0]["output"].values[0])
    removed = np.array([float(p["variance_removed_fraction"].sel(output=first)) for p in parts])
    if any(s is not None and np.any(s != 0) for s in shifts):
        values = np.array([float(np.sum(s)) if s is not None else 0.0 for s in shifts])
        return values, removed, "probability gained, summed over requirements"
    return removed, removed, f"fraction of Var({first}) removed"


def _per_cost(values: np.ndarray, costs: np.ndarray) -> np.ndarray:
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(
            costs > 0,
            values / costs,
            np.where(values > 0, np.inf, np.where(values < 0, -np.inf, 0.0)),
        )


def compare_upgrades(
    scenario: Scenario,
    upgrades: Sequence[Upgrade] | None = None,
    *,
    n_samples: int | None = None,
    rng: int | np.random.Generator | None = None,
    method: str | None = None,
    outputs: Sequence[str] | None = None,
    repetition_rate: float | None = None,
    progress: Callable[[int, int], None] | None = None,
    executor: Any = None,
    workers: Workers = None,
) -> xr.Dataset:
    """Compare every named upgrade of a scenario against it, on one shared design.

    Parameters
    ----------
    scenario : Scenario
        The present apparatus.
    upgrades : sequence of Upgrade, optional
        Changes to judge (default the scenario's ``[[upgrades]]``).
    n_samples, rng, method, outputs, repetition_rate, progress
        As for :func:`compare`.
    executor, workers : optional
        Where the model runs, as for :func:`~trapbudget.sensitivity.propagate`.

    Returns
    -------
    xarray.Dataset
        The :func:`compare_samples` variables with an extra leading dim
        ``upgrade``, plus ``cost``, ``benefit`` (summed probability gained over
        the requirements, or the fraction of variance of the first output
        removed when there are no probability requirements),
        ``benefit_per_cost`` (``inf`` for a free improvement),
        ``variance_removed_first`` (fraction of the variance of the first output
        removed) and ``rank`` (1 = best improvement per unit cost; options with equal
        benefit per cost, as when several reach every requirement on every run, are
        ordered by the variance they remove per cost).

    Raises
    ------
    ScenarioError
        When there is no upgrade to compare.
    """
    with running_on(executor, workers):
        from trapbudget.sensitivity.errors import ScenarioError

        upgrades = list(scenario.upgrades if upgrades is None else upgrades)
        if not upgrades:
            raise ScenarioError(
                "no upgrades to compare; add [[upgrades]] tables (name, cost, changes)",
                path=getattr(scenario, "source", None),
                key="upgrades",
            )
        n, m, r, level = _settings(scenario, n_samples, method, rng)
        outs = list(outputs) if outputs is not None else _required_outputs(scenario, None)
        afters = [scenario.apply_upgrade(u) for u in upgrades]
        unit, blocks = replicated_unit(
            n, len(_uncertain_names([scenario, *afters])), method=m, rng=r
        )
        samples = common_random_samples(
            [scenario, *afters],
            n_samples=n,
            method=m,
            unit=unit,
            outputs=outs,
            progress=progress,
            chunk_size=_chunk_size(scenario),
        )
        parts = []
        for upgrade, after in zip(upgrades, samples[1:], strict=True):
            parts.append(
                compare_samples(
                    samples[0],
                    after,
                    outputs=outs,
                    requirements=scenario.requirements,
                    confidence_level=level,
                    repetition_rate=repetition_rate,
                    cost=float(upgrade.cost),
                    n_replicates=blocks,
                )
            )
        names = [str(u.name) for u in upgrades]
        ds = xr.concat(
            parts,
            dim=xr.DataArray(names, dims="upgrade", name="upgrade"),
            data_vars="all",
            coords="minimal",
            compat="override",
            combine_attrs="drop_conflicts",
        )
        for key in ("requirement_output", "kind"):
            if key in ds:
                ds[key] = ds[key].isel(upgrade=0, drop=True)
        costs = np.array([float(u.cost) for u in upgrades])
        benefit, removed, metric = _benefit(parts)
        per_cost = _per_cost(benefit, costs)
        # rank by benefit per cost; options equal there (several reach the same probability,
        # e.g. every run passes) are ordered by the variance they remove per cost
        order = np.lexsort((-_per_cost(removed, costs), -per_cost))
        rank = np.empty(len(names), dtype=int)
        rank[order] = np.arange(1, len(names) + 1)
        ds["cost"] = ("upgrade", costs)
        ds["benefit"] = ("upgrade", benefit)
        ds["benefit_per_cost"] = ("upgrade", per_cost)
        first = str(parts[0]["output"].values[0])
        ds["variance_removed_first"] = ("upgrade", removed)
        ds["variance_removed_first"].attrs["long_name"] = f"fraction of Var({first}) removed"
        ds["rank"] = ("upgrade", rank)
        ds.attrs.pop("cost", None)
        ds.attrs.update(
            title=str(getattr(scenario, "title", "")),
            currency=str(getattr(scenario, "currency", "") or ""),
            method=m,
            seed=r if isinstance(r, int) else "",
            benefit_metric=metric,
            benefit_first_output=first,
        )
        return ds

"""Requirements on outputs, and their evaluation on Monte Carlo samples.

Notes
-----
For ``at_least``, ``at_most`` and ``within`` the probability of meeting the
requirement is estimated by the fraction ``p^ = k / M`` of the M samples that
meet it, with binomial standard error ``sqrt(p^ (1 - p^) / M)``; the
requirement is met when ``p^`` is at least the required probability.

For ``relative_spread_at_most`` the estimate is ``c = s / |ybar|``; its
standard error follows by the delta method with the sample's third and
fourth central moments (m3, m4), which holds for any distribution with finite
fourth moment:
``Var(c)/c^2 = (m4 - s^4) / (4 s^4 M) + s^2 / (ybar^2 M) - m3 / (ybar s^2 M)``
(sign of ybar applied to the last term), giving a normal-theory interval.

References
----------
A. Agresti, "Categorical Data Analysis", Wiley 2013 (binomial standard error);
A. Stuart and J. K. Ord, "Kendall's Advanced Theory of Statistics", vol. 1,
sections 10.5-10.7 (moments of sample moments; delta method).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import xarray as xr
from scipy import stats

from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.scenario.units import did_you_mean, parse_quantity

__all__ = [
    "KINDS",
    "Requirement",
    "RequirementCheck",
    "check_requirements",
    "parse_requirements",
    "requirement_met",
]

KINDS: tuple[str, ...] = ("at_least", "at_most", "within", "relative_spread_at_most")
_KEYS = {"output", "probability", "label", *KINDS}


@dataclass(frozen=True)
class Requirement:
    """A requirement on one output.

    Parameters
    ----------
    output : str
        Output name.
    kind : {"at_least", "at_most", "within", "relative_spread_at_most"}
        What is required.
    limit : float or tuple (low, high)
        SI limit (``within``: the interval; ``relative_spread_at_most``: the
        largest std / |mean|, dimensionless).
    probability : float or None
        Required probability for the threshold kinds; None for the spread.
    label : str
        Human-readable label.
    """

    output: str
    kind: str
    limit: float | tuple[float, float]
    probability: float | None = None
    label: str = ""

    def __post_init__(self) -> None:
        if self.kind not in KINDS:
            raise ScenarioError(
                f"requirement kind {self.kind!r} is not known; use one of {', '.join(KINDS)}"
            )
        if self.kind == "within":
            low, high = self.limit  # type: ignore[misc]
            if not low < high:
                raise ScenarioError(
                    f"within = {list(self.limit)!r} must be [low, high], low < high"
                )  # type: ignore[arg-type]
        if self.kind == "relative_spread_at_most":
            if self.probability is not None:
                raise ScenarioError("relative_spread_at_most takes no probability; remove it")
        elif self.probability is None or not 0 < self.probability <= 1:
            raise ScenarioError(
                f"requirement on {self.output!r}: probability {self.probability!r} must lie in "
                "(0, 1]; add e.g. probability = 0.95"
            )

    @property
    def title(self) -> str:
        """The label, or a description built from the fields."""
        if self.label:
            return self.label
        if self.kind == "within":
            return f"{self.output} within [{self.limit[0]:.4g}, {self.limit[1]:.4g}]"  # type: ignore[index]
        return f"{self.output} {self.kind.replace('_', ' ')} {self.limit:.4g}"

    def satisfied(self, values: np.ndarray) -> np.ndarray:
        """Boolean mask of the samples meeting a threshold requirement."""
        y = np.asarray(values, dtype=float)
        if self.kind == "at_least":
            return y >= self.limit
        if self.kind == "at_most":
            return y <= self.limit
        if self.kind == "within":
            low, high = self.limit  # type: ignore[misc]
            return (y >= low) & (y <= high)
        raise ValueError("relative_spread_at_most is not a per-sample requirement")


@dataclass(frozen=True)
class RequirementCheck:
    """Outcome of one requirement on a set of samples.

    ``probability`` is the fraction of samples meeting a threshold
    requirement (NaN for the spread), ``standard_error`` its binomial standard
    error; for the spread, ``estimate`` is std / |mean| and ``estimate_low`` /
    ``estimate_high`` its 95 % normal-theory interval. ``met`` is the verdict
    on the point estimate; ``margin`` is (probability - required) or
    (limit - estimate), positive when met.
    """

    requirement: Requirement
    probability: float
    standard_error: float
    met: bool
    margin: float
    estimate: float = math.nan
    estimate_low: float = math.nan
    estimate_high: float = math.nan
    n_samples: int = 0


def _spread_interval(y: np.ndarray, level: float = 0.95) -> tuple[float, float, float]:
    m = y.size
    mean = float(np.mean(y))
    s = float(np.std(y, ddof=1))
    if mean == 0 or s == 0 or m < 4:
        estimate = s / abs(mean) if mean else math.inf
        return estimate, estimate, estimate
    centred = y - mean
    m3 = float(np.mean(centred**3))
    m4 = float(np.mean(centred**4))
    c = s / abs(mean)
    rel_var = (m4 - s**4) / (4 * s**4 * m) + s**2 / (mean**2 * m) - m3 / (mean * s**2 * m)
    se = c * math.sqrt(max(rel_var, 0.0))
    z = float(stats.norm.ppf(0.5 * (1 + level)))
    return c, c - z * se, c + z * se


def requirement_met(samples: xr.Dataset, requirement: Requirement) -> RequirementCheck:
    """Evaluate one requirement on Monte Carlo samples.

    Parameters
    ----------
    samples : xarray.Dataset
        From ``propagate`` (dim ``sample``).
    requirement : Requirement

    Returns
    -------
    RequirementCheck
    """
    if requirement.output not in samples:
        raise ScenarioError(
            f"requirement on {requirement.output!r}: no such output in the samples; propagate "
            "it (add it to [outputs] names)",
            key="requirements",
        )
    y = np.asarray(samples[requirement.output].values, dtype=float).ravel()
    m = y.size
    if requirement.kind == "relative_spread_at_most":
        finite = y[np.isfinite(y)]
        c, low, high = _spread_interval(finite)
        limit = float(requirement.limit)  # type: ignore[arg-type]
        return RequirementCheck(
            requirement, math.nan, math.nan, bool(c <= limit), limit - c, c, low, high, m
        )
    hits = requirement.satisfied(y)
    p_hat = float(np.count_nonzero(hits)) / m
    se = math.sqrt(p_hat * (1 - p_hat) / m)
    required = float(requirement.probability)  # type: ignore[arg-type]
    return RequirementCheck(
        requirement, p_hat, se, bool(p_hat >= required), p_hat - required, n_samples=m
    )


def check_requirements(samples: xr.Dataset, requirements: Sequence[Requirement]) -> xr.Dataset:
    """Evaluate requirements on samples.

    Returns
    -------
    xarray.Dataset
        Dim ``requirement`` (coordinate: unique titles): ``output``, ``kind``,
        ``limit_low``, ``limit_high`` (SI; one of them NaN for one-sided
        kinds), ``probability_required``, ``probability``, ``standard_error``,
        ``estimate``, ``estimate_low``, ``estimate_high``, ``margin``, ``met``,
        ``label``; attrs ``n_samples``, ``all_met``.
    """
    checks = [requirement_met(samples, r) for r in requirements]
    titles: list[str] = []
    for check in checks:
        title = check.requirement.title
        while title in titles:
            title += "'"
        titles.append(title)

    def limits(r: Requirement) -> tuple[float, float]:
        if r.kind == "within":
            return float(r.limit[0]), float(r.limit[1])  # type: ignore[index]
        if r.kind == "at_least":
            return float(r.limit), math.nan  # type: ignore[arg-type]
        return math.nan, float(r.limit)  # type: ignore[arg-type]

    bounds = np.array([limits(c.requirement) for c in checks], dtype=float).reshape(-1, 2)
    units = [samples[c.requirement.output].attrs.get("units", "") for c in checks]
    for c, r in enumerate(requirements):
        if r.kind == "relative_spread_at_most":
            units[c] = ""
    ds = xr.Dataset(
        {
            "output": ("requirement", [c.requirement.output for c in checks]),
            "kind": ("requirement", [c.requirement.kind for c in checks]),
            "limit_low": ("requirement", bounds[:, 0]),
            "limit_high": ("requirement", bounds[:, 1]),
            "limit_units": ("requirement", units),
            "probability_required": (
                "requirement",
                [
                    math.nan if c.requirement.probability is None else c.requirement.probability
                    for c in checks
                ],
            ),
            "probability": ("requirement", [c.probability for c in checks]),
            "standard_error": ("requirement", [c.standard_error for c in checks]),
            "estimate": ("requirement", [c.estimate for c in checks]),
            "estimate_low": ("requirement", [c.estimate_low for c in checks]),
            "estimate_high": ("requirement", [c.estimate_high for c in checks]),
            "margin": ("requirement", [c.margin for c in checks]),
            "met": ("requirement", np.array([c.met for c in checks], dtype=bool)),
            "label": ("requirement", [c.requirement.label for c in checks]),
        },
        coords={"requirement": titles},
        attrs={
            "n_samples": int(samples.sizes.get("sample", 0)),
            "all_met": bool(all(c.met for c in checks)),
        },
    )
    return ds


def parse_requirements(
    raw: Sequence[Mapping[str, Any]] | None, *, model: Any, path: object | None = None
) -> tuple[Requirement, ...]:
    """Parse the ``[[requirements]]`` tables of a scenario.

    Parameters
    ----------
    raw : list of tables
        Each with ``output``, exactly one of ``at_least``, ``at_most``,
        ``within = [lo, hi]``, ``relative_spread_at_most``, a ``probability``
        for the first three, and an optional ``label``. Limits carry the
        output's units (``"2e8"``, ``"1.5 s"``, ``"5 %"`` for the spread).
    model : model
        For output names and units.
    path : path-like, optional
        Scenario file, for messages.

    Raises
    ------
    ScenarioError
        Unknown key or output, none or several kinds, bad limit or probability.
    """
    if raw is None:
        return ()
    if not isinstance(raw, Sequence) or isinstance(raw, str | bytes):
        raise ScenarioError(
            "must be an array of tables; write [[requirements]] for each",
            path=path,
            key="requirements",
        )
    out = []
    for index, table in enumerate(raw):
        key = f"requirements[{index}]"
        if not isinstance(table, Mapping):
            raise ScenarioError("must be a table; write [[requirements]]", path=path, key=key)
        unknown = sorted(set(table) - _KEYS)
        if unknown:
            raise ScenarioError(
                f"unknown key {unknown[0]!r}; valid keys are {', '.join(sorted(_KEYS))}",
                path=path,
                key=key,
            )
        output = table.get("output")
        if output not in model.outputs:
            raise ScenarioError(
                f"output {output!r} is not an output of the model"
                f"{did_you_mean(output, model.outputs)}",
                path=path,
                key=f"{key}.output",
            )
        kinds = [k for k in KINDS if k in table]
        if len(kinds) != 1:
            raise ScenarioError(
                f"give exactly one of {', '.join(KINDS)}; found {kinds or 'none'}",
                path=path,
                key=key,
            )
        kind = kinds[0]
        unit = model.outputs[output].unit
        where = f"{key}.{kind}"
        value = table[kind]
        if kind == "within":
            if not isinstance(value, Sequence) or isinstance(value, str) or len(value) != 2:
                raise ScenarioError(
                    f"{value!r} must be [low, high], e.g. ['1e8', '3e8']", path=path, key=where
                )
            limit: Any = tuple(parse_quantity(v, unit=unit, where=where, path=path) for v in value)
        elif kind == "relative_spread_at_most":
            limit = parse_quantity(value, unit="", where=where, path=path)
        else:
            limit = parse_quantity(value, unit=unit, where=where, path=path)
        probability = table.get("probability")
        if probability is not None and not isinstance(probability, int | float):
            raise ScenarioError(
                f"probability {probability!r} must be a number in (0, 1], e.g. 0.95",
                path=path,
                key=f"{key}.probability",
            )
        if kind != "relative_spread_at_most" and probability is None:
            raise ScenarioError(
                "missing probability; add e.g. probability = 0.95", path=path, key=key
            )
        label = str(table.get("label", ""))
        try:
            out.append(Requirement(output, kind, limit, probability, label))
        except ScenarioError as error:
            raise ScenarioError(error.message, path=path, key=key) from None
    return tuple(out)

"""Requirements checked on Monte Carlo samples: the probability each is met, with its interval."""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import xarray as xr
from scipy import stats

from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.scenario.requirements import Requirement

__all__ = ["RequirementCheck", "check_requirements", "probability_interval", "requirement_met"]


def probability_interval(
    hits: int, n: int, *, confidence_level: float = 0.95, method: str = "exact"
) -> tuple[float, float]:
    """Binomial confidence interval of a probability from ``hits`` of ``n`` independent draws.

    Parameters
    ----------
    hits, n : int
        Draws meeting the condition, and all draws (independent).
    confidence_level : float, default 0.95
        Two-sided level, in (0, 1).
    method : {"exact", "wilson"}, default "exact"
        Clopper-Pearson ("exact": coverage at least the level for every n and
        p, hence the default) or the Wilson score interval (shorter; its
        coverage dips a few points below the level where n p (1 - p) is of
        order one, Brown, Cai & DasGupta 2001).

    Returns
    -------
    (low, high) : tuple of float
        NaN for n = 0. Unlike the Wald interval it has a width when every
        draw (or none) passes: with n draws all passing, the Clopper-Pearson
        lower bound is (alpha / 2)^(1/n).

    References
    ----------
    C. J. Clopper, E. S. Pearson, Biometrika 26, 404 (1934);
    E. B. Wilson, J. Am. Stat. Assoc. 22, 209 (1927);
    L. D. Brown, T. T. Cai, A. DasGupta, Stat. Sci. 16, 101 (2001);
    ``scipy.stats.binomtest(...).proportion_ci``.
    """
    if n <= 0:
        return math.nan, math.nan
    ci = stats.binomtest(int(hits), int(n)).proportion_ci(
        confidence_level=confidence_level, method=method
    )
    return float(ci.low), float(ci.high)


@dataclass(frozen=True)
class RequirementCheck:
    """Outcome of one requirement on a set of samples.

    ``probability`` is the fraction of samples meeting a threshold
    requirement (NaN for the spread), ``standard_error`` its binomial standard
    error, ``probability_low`` / ``probability_high`` its 95 % Clopper-Pearson interval
    (valid for independent samples; see :func:`probability_interval`); for the
    spread, ``estimate`` is std / |mean| and ``estimate_low`` /
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
    probability_low: float = math.nan
    probability_high: float = math.nan


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
        From ``propagate`` (dim ``sample``); independent draws
        (``method="random"``) for the binomial interval to hold.
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
    hits = int(np.count_nonzero(requirement.satisfied(y)))
    p_hat = hits / m
    se = math.sqrt(p_hat * (1 - p_hat) / m)
    low, high = probability_interval(hits, m)
    required = float(requirement.probability)  # type: ignore[arg-type]
    return RequirementCheck(
        requirement,
        p_hat,
        se,
        bool(p_hat >= required),
        p_hat - required,
        n_samples=m,
        probability_low=low,
        probability_high=high,
    )


def check_requirements(samples: xr.Dataset, requirements: Sequence[Requirement]) -> xr.Dataset:
    """Evaluate requirements on samples.

    Returns
    -------
    xarray.Dataset
        Dim ``requirement`` (coordinate: unique titles): ``output``, ``kind``,
        ``limit_low``, ``limit_high`` (SI; one of them NaN for one-sided
        kinds), ``probability_required``, ``probability``, ``standard_error``,
        ``probability_low``, ``probability_high`` (95 % Clopper-Pearson interval),
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
            "probability_low": ("requirement", [c.probability_low for c in checks]),
            "probability_high": ("requirement", [c.probability_high for c in checks]),
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
            "probability_interval": "Clopper-Pearson, 95 %, from independent draws",
            "sampling": str(samples.attrs.get("method", "")),
        },
    )
    return ds

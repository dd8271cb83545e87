"""Requirements on outputs, as a scenario states them.

They are checked on samples in :mod:`trapbudget.sensitivity.compliance`.

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
sections 10.5-10.7 (moments of sample moments; delta method)."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.scenario.units import did_you_mean, parse_quantity

__all__ = ["KINDS", "Requirement", "parse_requirements"]

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
                    f"within = {list(self.limit)!r} must be [low, high], low < high"  # type: ignore[arg-type]
                )
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
        if not isinstance(output, str):
            raise ScenarioError(
                f"output must be a string naming an output, got {type(output).__name__}; "
                f'write e.g. output = "{next(iter(model.outputs))}"',
                path=path,
                key=f"{key}.output",
            )
        if "label" in table and not isinstance(table["label"], str):
            raise ScenarioError(
                'label must be a string; write e.g. label = "enough atoms"',
                path=path,
                key=f"{key}.label",
            )
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
            limit: Any = tuple(parse_quantity(v, unit=unit, key=where, path=path) for v in value)
        elif kind == "relative_spread_at_most":
            limit = parse_quantity(value, unit="", key=where, path=path)
        else:
            limit = parse_quantity(value, unit=unit, key=where, path=path)
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
    seen: dict[str, int] = {}
    for index, requirement in enumerate(out):
        if requirement.title in seen:
            first = seen[requirement.title]
            raise ScenarioError(
                f"label {requirement.title!r} is also that of requirements[{first}]; give each "
                "requirement its own label",
                path=path,
                key=f"requirements[{index}].label",
            )
        seen[requirement.title] = index
    return tuple(out)

"""The ``[settings]`` table and the named ``[[upgrades]]`` of a scenario."""

from __future__ import annotations

import dataclasses
import operator
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.sampling import (
    METHODS,
    is_power_of_two,
)
from trapbudget.sensitivity.scenario.tables import _INPUT_KEYS, _check_keys, _close, _table
from trapbudget.sensitivity.scenario.units import parse_quantity, parse_tolerance_text

__all__ = [
    "DEFAULT_CHUNK_SIZE",
    "DEFAULT_MAX_SAMPLES",
    "DEFAULT_N_SAMPLES",
    "RunOptions",
    "Settings",
    "Upgrade",
    "draw_seed",
]

#: Monte Carlo size and Saltelli base size N when a scenario gives none.
DEFAULT_N_SAMPLES = 4096
#: Samples per model call (bounded memory).
DEFAULT_CHUNK_SIZE = 65536
#: Cap of the JCGM 101 adaptive Monte Carlo.
DEFAULT_MAX_SAMPLES = 1_000_000


def draw_seed() -> int:
    """A fresh seed from the operating system's entropy, to be recorded with the results."""
    import numpy as np

    return int(np.random.SeedSequence().entropy % 2**32)  # type: ignore[operator]


@dataclass(frozen=True)
class RunOptions:
    """The sizes and seed a run uses, resolved once from arguments and a scenario's settings.

    Every verb (``run_study``, ``allocate``, ``compare``) resolves its
    options through :meth:`Settings.resolve`, so the defaults live in one place.
    """

    n_samples: int
    method: str
    seed: int | None
    rng: Any
    confidence_level: float
    chunk_size: int
    n_bootstrap: int


_KIND_WORDS = {int: "a whole number", float: "a number", bool: "true or false", str: "a string"}
_KIND_EXAMPLES = {int: "1000", float: "0.95", bool: "false", str: '"sobol"'}
#: Examples for settings where the one of their kind would mislead.
_NAME_EXAMPLES = {"seed": "12", "n_samples": "4096", "chunk_size": "65536"}


@dataclass(frozen=True)
class Settings:
    """How to run a scenario.

    Parameters
    ----------
    n_samples : int
        Monte Carlo samples M (power of 2 for ``"sobol"``); for ``rank`` the base N.
    method : {"random", "latin", "sobol"}
    confidence_level : float
        Coverage probability of intervals.
    seed : int or None
    adaptive : bool
        Use the JCGM 101 adaptive procedure for prediction.
    significant_digits : int
        n_dig for the adaptive procedure and the linear-vs-MC check.
    max_samples : int
        Cap for the adaptive procedure.
    chunk_size : int
        Samples per model call.
    n_bootstrap : int
        Bootstrap resamples for index confidence intervals.
    second_order : bool
        Second-order Sobol' indices in ``rank``.
    """

    n_samples: int = DEFAULT_N_SAMPLES
    method: str = "sobol"
    confidence_level: float = 0.95
    seed: int | None = None
    adaptive: bool = False
    significant_digits: int = 2
    max_samples: int = DEFAULT_MAX_SAMPLES
    chunk_size: int = DEFAULT_CHUNK_SIZE
    n_bootstrap: int = 1000
    second_order: bool = False

    @classmethod
    def from_dict(cls, raw: Mapping[str, Any] | None, *, path=None) -> Settings:
        raw = _table(raw, path=path, key="settings")
        names = [f.name for f in dataclasses.fields(cls)]
        _check_keys(raw, names, path=path, key="settings")
        kinds = {
            "n_samples": int,
            "significant_digits": int,
            "max_samples": int,
            "chunk_size": int,
            "n_bootstrap": int,
            "confidence_level": float,
            "adaptive": bool,
            "second_order": bool,
            "method": str,
            "seed": int,
        }
        values: dict[str, Any] = {}
        for name, value in raw.items():
            kind = kinds[name]
            ok = isinstance(value, kind) and not (kind is not bool and isinstance(value, bool))
            if kind is float and isinstance(value, int) and not isinstance(value, bool):
                ok, value = True, float(value)
            if not ok:
                how = ", written without quotes" if isinstance(value, str) else ""
                raise ScenarioError(
                    f"{value!r} must be {_KIND_WORDS[kind]}{how}, e.g. "
                    f"{name} = {_NAME_EXAMPLES.get(name, _KIND_EXAMPLES[kind])}",
                    path=path,
                    key=f"settings.{name}",
                )
            values[name] = value
        settings = cls(**values)
        settings.validate(path=path)
        return settings

    def resolve(
        self,
        *,
        n_samples: int | None = None,
        method: str | None = None,
        rng: Any = None,
    ) -> RunOptions:
        """Arguments given to a verb, else these settings; a seed is drawn when neither has one.

        ``rng`` is an integer seed (recorded as ``seed``) or a numpy Generator
        (used as given; ``seed`` is then None). ``rng=0`` is a seed.
        """
        given = self.seed if rng is None else rng
        if isinstance(given, bool):
            raise ScenarioError(f"rng={rng!r} is not a seed; give an integer, e.g. rng=1")
        try:
            seed = None if given is None else operator.index(given)
        except TypeError:  # a Generator, SeedSequence or BitGenerator: used as given
            seed = None
        if given is None:
            seed = draw_seed()
        return RunOptions(
            n_samples=int(self.n_samples if n_samples is None else n_samples),
            method=str(self.method if method is None else method),
            seed=seed,
            rng=given if seed is None else seed,
            confidence_level=float(self.confidence_level),
            chunk_size=int(self.chunk_size),
            n_bootstrap=int(self.n_bootstrap),
        )

    def validate(self, *, path=None) -> None:
        """Raise ScenarioError for values that cannot run."""
        if self.method not in METHODS:
            raise ScenarioError(
                f"method {self.method!r} is not known; use one of {', '.join(METHODS)}",
                path=path,
                key="settings.method",
            )
        if self.n_samples < 2:
            raise ScenarioError(
                f"n_samples {self.n_samples} must be at least 2",
                path=path,
                key="settings.n_samples",
            )
        if self.method == "sobol" and not is_power_of_two(self.n_samples):
            better = 1 << (self.n_samples - 1).bit_length()
            raise ScenarioError(
                f"n_samples = {self.n_samples} is not a power of 2, which method = 'sobol' "
                f"requires; use {better}",
                path=path,
                key="settings.n_samples",
            )
        if not 0 < self.confidence_level < 1:
            raise ScenarioError(
                f"confidence_level {self.confidence_level} must lie in (0, 1), e.g. 0.95",
                path=path,
                key="settings.confidence_level",
            )
        if self.seed is not None and self.seed < 0:
            raise ScenarioError(
                f"seed {self.seed} must be a non-negative integer", path=path, key="settings.seed"
            )
        for name in ("significant_digits", "max_samples", "chunk_size", "n_bootstrap"):
            if getattr(self, name) < 1:
                raise ScenarioError(
                    f"{getattr(self, name)} must be >= 1", path=path, key=f"settings.{name}"
                )


@dataclass(frozen=True)
class Upgrade:
    """A named change to a scenario, with its cost.

    ``changes`` maps input name -> the keys of its ``[inputs.<name>]`` table
    to replace (as written, with units: ``{"tolerance": "0.5 %"}``).
    """

    name: str
    cost: float
    changes: Mapping[str, Mapping[str, Any]]


def _check_written_values(change: Mapping[str, Any], unit: str, *, path, key: str) -> None:
    """Parse an upgrade's written values now, so a misspelt unit is named where it is written."""
    if "nominal" in change:
        parse_quantity(change["nominal"], unit=unit, key=f"{key}.nominal", path=path)
    if "tolerance" in change:
        nominal = 1.0  # a stand-in: only the spelling and dimension are checked here
        parse_tolerance_text(
            change["tolerance"],
            unit=unit,
            nominal=nominal,
            key=f"{key}.tolerance",
            path=path,
            nominal_text=change.get("nominal", "1 K"),
        )


def _parse_upgrades(raw: Any, *, model, path) -> tuple[Upgrade, ...]:
    if raw is None:
        return ()
    if not isinstance(raw, list):
        raise ScenarioError(
            "must be an array of tables; write [[upgrades]]", path=path, key="upgrades"
        )
    out = []
    for i, table in enumerate(raw):
        key = f"upgrades[{i}]"
        if not isinstance(table, Mapping):
            raise ScenarioError("must be a table; write [[upgrades]]", path=path, key=key)
        _check_keys(table, ("name", "cost", "changes"), path=path, key=key)
        if not isinstance(table.get("name"), str) or not table["name"]:
            raise ScenarioError('needs a name = "..."', path=path, key=f"{key}.name")
        cost = table.get("cost", 0.0)
        if (
            isinstance(cost, bool)
            or not isinstance(cost, int | float)
            or not 0 <= cost < float("inf")
        ):
            raise ScenarioError(
                f"cost {cost!r} must be a number >= 0", path=path, key=f"{key}.cost"
            )
        changes = _table(table.get("changes"), path=path, key=f"{key}.changes")
        if not changes:
            raise ScenarioError(
                'needs changes = { input = { tolerance = "..." } }',
                path=path,
                key=f"{key}.changes",
            )
        for name, change in changes.items():
            if name not in model.inputs:
                raise ScenarioError(
                    f"{name!r} is not an input of the model{_close(name, model.inputs)}",
                    path=path,
                    key=f"{key}.changes.{name}",
                )
            change = _table(change, path=path, key=f"{key}.changes.{name}")
            _check_keys(change, _INPUT_KEYS, path=path, key=f"{key}.changes.{name}")
            _check_written_values(
                change, model.inputs[name].unit, path=path, key=f"{key}.changes.{name}"
            )
        out.append(Upgrade(table["name"], float(cost), {k: dict(v) for k, v in changes.items()}))
    return tuple(out)

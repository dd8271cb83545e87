"""Scenarios: the model, its inputs with tolerances and correlations, and what is required.

A scenario is read from TOML (:func:`load_scenario`) or built from a mapping
(:meth:`Scenario.from_dict`); units on every value are converted to SI once,
here. See DEVELOPERS.md for the file format.
"""

from __future__ import annotations

import copy
import dataclasses
import hashlib
import json
import math
import re
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

try:
    import tomllib
except ImportError:  # pragma: no cover - Python 3.10
    import tomli as tomllib

from trapbudget.models.protocol import ModelError
from trapbudget.sensitivity.costs import CostModel, SmoothCost, TieredCost, parse_costs
from trapbudget.sensitivity.distributions import MEANINGS, SHAPES, Tolerance
from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.protocol import BoundModel, as_model
from trapbudget.sensitivity.requirements import Requirement, parse_requirements
from trapbudget.sensitivity.sampling import (
    METHODS,
    check_correlation,
    is_power_of_two,
    rank_correlation_to_copula,
)
from trapbudget.sensitivity.testfunctions import GFunction, Ishigami, LinearModel
from trapbudget.sensitivity.units import did_you_mean, parse_quantity, parse_tolerance_text

__all__ = [
    "MODELS",
    "Scenario",
    "Settings",
    "Upgrade",
    "load_scenario",
    "register_model",
    "scenario_to_toml",
    "toml_dumps",
]


def _vapor_cell_mot(species: str, **options: Any) -> Any:
    try:
        from trapbudget.models import VaporCellMOT
    except ImportError:
        from trapbudget.models.trap import VaporCellMOT
    return VaporCellMOT(species, **options)


MODELS: dict[str, Callable[..., Any]] = {
    "VaporCellMOT": _vapor_cell_mot,
    "ishigami": lambda species, **options: Ishigami(**options),
    "linear": lambda species, **options: LinearModel(**options),
    "g-function": lambda species, **options: GFunction(**options),
}
"""Model registry: name -> factory(species, **options)."""


def register_model(name: str, factory: Callable[..., Any]) -> None:
    """Make a model usable by name in scenarios: ``factory(species, **options) -> model``."""
    MODELS[name] = factory


_TOP_KEYS = (
    "scenario",
    "inputs",
    "correlations",
    "outputs",
    "settings",
    "requirements",
    "costs",
    "upgrades",
    "calibration",
    "diagnosis",
)
_SCENARIO_KEYS = ("title", "description", "species", "model", "currency", "options")
_INPUT_KEYS = (
    "nominal",
    "tolerance",
    "meaning",
    "coverage_factor",
    "shape",
    "bounds",
    "group",
    "note",
)


_close = did_you_mean


def _check_keys(table: Mapping[str, Any], valid: Sequence[str], *, path, key) -> None:
    for name in table:
        if name not in valid:
            where = f"{key}.{name}" if key else name
            raise ScenarioError(f"unknown key {name!r}{_close(name, valid)}", path=path, key=where)


def _table(value: Any, *, path, key) -> Mapping[str, Any]:
    if value is None:
        return {}
    if not isinstance(value, Mapping):
        raise ScenarioError(f"must be a table, got {value!r}", path=path, key=key)
    return value


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
    max_trials : int
        Cap for the adaptive procedure.
    chunk_size : int
        Samples per model call.
    n_bootstrap : int
        Bootstrap resamples for index confidence intervals.
    second_order : bool
        Second-order Sobol' indices in ``rank``.
    """

    n_samples: int = 4096
    method: str = "sobol"
    confidence_level: float = 0.95
    seed: int | None = None
    adaptive: bool = False
    significant_digits: int = 2
    max_trials: int = 1_000_000
    chunk_size: int = 65536
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
            "max_trials": int,
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
                raise ScenarioError(
                    f"{value!r} must be {kind.__name__}", path=path, key=f"settings.{name}"
                )
            values[name] = value
        settings = cls(**values)
        settings.validate(path=path)
        return settings

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
        for name in ("significant_digits", "max_trials", "chunk_size", "n_bootstrap"):
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
        if isinstance(cost, bool) or not isinstance(cost, int | float) or not cost >= 0:
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
        out.append(Upgrade(table["name"], float(cost), {k: dict(v) for k, v in changes.items()}))
    return tuple(out)


def _canonical(value: Any) -> Any:
    """A hashable, float-rounded form for comparing scenarios."""
    if isinstance(value, float):
        return float(f"{value:.12g}") if math.isfinite(value) else repr(value)
    if isinstance(value, np.ndarray):
        return _canonical(value.tolist())
    if isinstance(value, Mapping):
        return tuple(sorted((str(k), _canonical(v)) for k, v in value.items()))
    if isinstance(value, list | tuple):
        return tuple(_canonical(v) for v in value)
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return (
            type(value).__name__,
            *(_canonical(getattr(value, f.name)) for f in dataclasses.fields(value) if f.compare),
        )
    return value


@dataclass(frozen=True, eq=False)
class Scenario:
    """A fully parsed scenario, all quantities in SI.

    Attributes
    ----------
    title, description, species : str
    model : BoundModel
        The model with the scenario's nominal values bound as defaults.
    inputs : dict name -> frozen scipy.stats distribution
        The uncertain inputs (SI).
    nominal : dict name -> float
        Every input the scenario sets, fixed or uncertain (SI).
    tolerances : dict name -> Tolerance
        Parsed tolerance records of the uncertain inputs.
    correlation : numpy.ndarray or None
        Gaussian-copula correlation in the order of ``inputs``.
    outputs : tuple of str
    settings : Settings
    requirements : tuple of Requirement
    costs : dict name -> CostModel
    upgrades : tuple of Upgrade
    calibration : dict
        The ``[calibration]`` table (``free``: constants to fit; other keys as written).
    diagnosis : dict
        The ``[diagnosis]`` table as written (log-column mapping, read by diagnose).
    groups : dict name -> str
    source : Path or None
    sha256 : str
        Of the file bytes (loaded) or of the canonical mapping (built).
    model_name : str
        Registry name of the model.
    model_options : dict
        Options passed to the model factory.
    fixed : dict name -> float
        Inputs held fixed (set without tolerance).
    currency : str
    notes : dict name -> str
    units : dict name -> str
        SI unit of each input set.
    """

    title: str
    description: str
    species: str
    model: Any
    inputs: dict[str, Any]
    nominal: dict[str, float]
    tolerances: dict[str, Tolerance]
    correlation: np.ndarray | None
    outputs: tuple[str, ...]
    settings: Settings
    requirements: tuple[Requirement, ...] = ()
    costs: dict[str, CostModel] = field(default_factory=dict)
    upgrades: tuple[Upgrade, ...] = ()
    calibration: dict[str, Any] = field(default_factory=dict)
    diagnosis: dict[str, Any] = field(default_factory=dict)
    groups: dict[str, str] = field(default_factory=dict)
    source: Path | None = None
    sha256: str = ""
    model_name: str = ""
    model_options: dict[str, Any] = field(default_factory=dict)
    fixed: dict[str, float] = field(default_factory=dict)
    currency: str = "EUR"
    notes: dict[str, str] = field(default_factory=dict)
    units: dict[str, str] = field(default_factory=dict)

    # -- comparison ---------------------------------------------------------------
    def _signature(self) -> tuple:
        return _canonical(
            {
                "title": self.title,
                "description": self.description,
                "species": self.species,
                "model_name": self.model_name,
                "model_options": self.model_options,
                "nominal": self.nominal,
                "tolerances": self.tolerances,
                "correlation": self.correlation,
                "outputs": self.outputs,
                "settings": self.settings,
                "requirements": self.requirements,
                "costs": self.costs,
                "upgrades": self.upgrades,
                "calibration": self.calibration,
                "diagnosis": self.diagnosis,
                "groups": self.groups,
                "fixed": self.fixed,
                "currency": self.currency,
                "notes": self.notes,
            }
        )

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Scenario):
            return NotImplemented
        return self._signature() == other._signature()

    __hash__ = None  # type: ignore[assignment]

    # -- construction -------------------------------------------------------------
    @classmethod
    def from_dict(
        cls,
        data: Mapping[str, Any],
        *,
        path: str | Path | None = None,
        model: Any = None,
        sha256: str | None = None,
    ) -> Scenario:
        """Build a scenario from a mapping laid out like the TOML file.

        Parameters
        ----------
        data : mapping
            ``scenario``, ``inputs``, ``correlations``, ``outputs``, ``settings``,
            ``requirements``, ``costs``, ``upgrades``, ``calibration``.
        path : path-like, optional
            File it came from (for messages and ``source``).
        model : model, optional
            A model object to use instead of the registry entry named in
            ``scenario.model`` (e.g. a custom model or callable).
        sha256 : str, optional
            Hash to record (default: of the canonical mapping).

        Raises
        ------
        ScenarioError
            With a one-line message naming file, key, value and fix.
        """
        if not isinstance(data, Mapping):
            raise ScenarioError("a scenario must be a table", path=path)
        _check_keys(data, _TOP_KEYS, path=path, key="")
        head = _table(data.get("scenario"), path=path, key="scenario")
        _check_keys(head, _SCENARIO_KEYS, path=path, key="scenario")
        species = str(head.get("species", "Rb87"))
        options = dict(_table(head.get("options"), path=path, key="scenario.options"))
        if model is None:
            name = head.get("model", "VaporCellMOT")
            base = _make_model(name, species, options, path=path)
        else:
            name = str(head.get("model", "")) or _model_label(model)
            base = model.base if isinstance(model, BoundModel) else model
            base = as_model(base, input_names=_table(data.get("inputs"), path=path, key="inputs"))
        raw_inputs = _table(data.get("inputs"), path=path, key="inputs")
        parsed = _parse_inputs(raw_inputs, model=base, path=path)
        nominal, fixed, tolerances, groups, notes, units = parsed
        correlation = _parse_correlations(
            data.get("correlations"),
            tolerances=tolerances,
            known=nominal,
            model=base,
            path=path,
        )
        outputs_table = _table(data.get("outputs"), path=path, key="outputs")
        _check_keys(outputs_table, ("names",), path=path, key="outputs")
        outputs = _parse_outputs(outputs_table.get("names"), model=base, path=path)
        settings = Settings.from_dict(data.get("settings"), path=path)
        requirements = parse_requirements(data.get("requirements"), model=base, path=path)
        costs = parse_costs(data.get("costs"), tolerances=tolerances, path=path)
        upgrades = _parse_upgrades(data.get("upgrades"), model=base, path=path)
        calibration = dict(_table(data.get("calibration"), path=path, key="calibration"))
        free = calibration.get("free", [])
        if not isinstance(free, list) or not all(isinstance(f, str) for f in free):
            raise ScenarioError(
                f"free = {free!r} must be a list of input names",
                path=path,
                key="calibration.free",
            )
        for f in free:
            if f not in base.inputs:
                raise ScenarioError(
                    f"{f!r} is not an input of the model{_close(f, base.inputs)}",
                    path=path,
                    key="calibration.free",
                )
        if sha256 is None:
            sha256 = hashlib.sha256(
                json.dumps(data, sort_keys=True, default=str).encode("utf-8")
            ).hexdigest()
        return cls(
            title=str(head.get("title", "")),
            description=str(head.get("description", "")),
            species=species,
            model=BoundModel(base, nominal),
            inputs={k: t.distribution() for k, t in tolerances.items()},
            nominal=nominal,
            tolerances=tolerances,
            correlation=correlation,
            outputs=outputs,
            settings=settings,
            requirements=requirements,
            costs=costs,
            upgrades=upgrades,
            calibration=calibration,
            diagnosis=dict(_table(data.get("diagnosis"), path=path, key="diagnosis")),
            groups=groups,
            source=None if path is None else Path(path),
            sha256=sha256,
            model_name=str(name),
            model_options=options,
            fixed=fixed,
            currency=str(head.get("currency", "EUR")),
            notes=notes,
            units=units,
        )

    # -- derived scenarios --------------------------------------------------------
    def to_dict(self) -> dict[str, Any]:
        """The scenario as a mapping laid out like the TOML file (values with units)."""
        head: dict[str, Any] = {
            "title": self.title,
            "description": self.description,
            "species": self.species,
            "model": self.model_name,
            "currency": self.currency,
        }
        if self.model_options:
            head["options"] = dict(self.model_options)
        inputs: dict[str, dict[str, Any]] = {}
        for name, value in self.nominal.items():
            unit = self.units.get(name, "")
            table: dict[str, Any] = {"nominal": _written(value, unit)}
            tol = self.tolerances.get(name)
            if tol is not None:
                table["tolerance"] = _written_tolerance(tol)
                if tol.meaning != "standard":
                    table["meaning"] = tol.meaning
                if tol.coverage_factor is not None:
                    table["coverage_factor"] = tol.coverage_factor
                if tol.shape != "normal":
                    table["shape"] = tol.shape
                if tol.bounds is not None:
                    table["bounds"] = [_written(b, unit) for b in tol.bounds]
            if name in self.groups:
                table["group"] = self.groups[name]
            if name in self.notes:
                table["note"] = self.notes[name]
            inputs[name] = table
        data: dict[str, Any] = {"scenario": head, "inputs": inputs}
        if self.correlation is not None:
            names = list(self.inputs)
            data["correlations"] = [
                {"inputs": [names[i], names[j]], "coefficient": float(self.correlation[i, j])}
                for i in range(len(names))
                for j in range(i + 1, len(names))
                if self.correlation[i, j] != 0
            ]
        data["outputs"] = {"names": list(self.outputs)}
        settings = {
            f.name: getattr(self.settings, f.name)
            for f in dataclasses.fields(Settings)
            if getattr(self.settings, f.name) is not None
        }
        data["settings"] = settings
        if self.requirements:
            data["requirements"] = [self._written_requirement(r) for r in self.requirements]
        if self.costs:
            data["costs"] = {name: _written_cost(c) for name, c in self.costs.items()}
        if self.upgrades:
            data["upgrades"] = [
                {
                    "name": u.name,
                    "cost": u.cost,
                    "changes": {k: dict(v) for k, v in u.changes.items()},
                }
                for u in self.upgrades
            ]
        if self.calibration:
            data["calibration"] = copy.deepcopy(self.calibration)
        if self.diagnosis:
            data["diagnosis"] = copy.deepcopy(self.diagnosis)
        return data

    def _written_requirement(self, req: Requirement) -> dict[str, Any]:
        spec = self.model.outputs.get(req.output)
        unit = getattr(spec, "unit", "")
        table: dict[str, Any] = {"output": req.output}
        if req.kind == "within":
            table["within"] = [_written(v, unit) for v in req.limit]  # type: ignore[union-attr]
        elif req.kind == "relative_spread_at_most":
            table[req.kind] = repr(float(req.limit))  # type: ignore[arg-type]
        else:
            table[req.kind] = _written(float(req.limit), unit)  # type: ignore[arg-type]
        if req.probability is not None:
            table["probability"] = req.probability
        if req.label:
            table["label"] = req.label
        return table

    def _rebuild(self, data: Mapping[str, Any]) -> Scenario:
        return Scenario.from_dict(data, path=self.source, model=self._base_for_rebuild())

    def _base_for_rebuild(self) -> Any:
        base = self.model.base if isinstance(self.model, BoundModel) else self.model
        return None if self.model_name in MODELS else base

    def with_tolerances(self, tolerances: Mapping[str, Tolerance]) -> Scenario:
        """A new scenario with these tolerances replaced (or added to fixed inputs).

        A tolerance with ``value == 0`` holds the input fixed at its nominal.
        """
        for name in tolerances:
            if name not in self.model.inputs:
                raise ScenarioError(
                    f"{name!r} is not an input of the model{_close(name, self.model.inputs)}",
                    key=f"inputs.{name}",
                )
        new_tol = dict(self.tolerances)
        new_nominal = dict(self.nominal)
        units = dict(self.units)
        for name, tol in tolerances.items():
            new_nominal[name] = tol.nominal
            units.setdefault(name, self.model.inputs[name].unit)
            if tol.value == 0:
                new_tol.pop(name, None)
            else:
                new_tol[name] = tol
        return self._replace_inputs(new_nominal, new_tol, units)

    def with_nominal(self, nominal: Mapping[str, float]) -> Scenario:
        """A new scenario with these nominal values (SI); relative tolerances follow."""
        new_nominal = dict(self.nominal)
        new_tol = dict(self.tolerances)
        units = dict(self.units)
        for name, value in nominal.items():
            if name not in self.model.inputs:
                raise ScenarioError(
                    f"{name!r} is not an input of the model{_close(name, self.model.inputs)}",
                    key=f"inputs.{name}",
                )
            _check_range(
                self.model.inputs[name],
                float(value),
                path=self.source,
                key=f"inputs.{name}.nominal",
            )
            new_nominal[name] = float(value)
            units.setdefault(name, self.model.inputs[name].unit)
            if name in new_tol:
                new_tol[name] = new_tol[name].with_nominal(float(value))
        return self._replace_inputs(new_nominal, new_tol, units)

    def _replace_inputs(self, nominal, tolerances, units) -> Scenario:
        old_names = list(self.inputs)
        new_names = list(tolerances)
        correlation = None
        if self.correlation is not None:
            correlation = np.eye(len(new_names))
            for i, a in enumerate(new_names):
                for j, b in enumerate(new_names):
                    if a in old_names and b in old_names:
                        correlation[i, j] = self.correlation[
                            old_names.index(a), old_names.index(b)
                        ]
            if np.allclose(correlation, np.eye(len(new_names))):
                correlation = None
            else:
                correlation = check_correlation(correlation, new_names, path=self.source)
        base = self.model.base if isinstance(self.model, BoundModel) else self.model
        costs = {k: v for k, v in self.costs.items() if k in tolerances}
        return dataclasses.replace(
            self,
            model=BoundModel(base, nominal),
            inputs={k: t.distribution() for k, t in tolerances.items()},
            nominal=dict(nominal),
            tolerances=dict(tolerances),
            fixed={k: v for k, v in nominal.items() if k not in tolerances},
            correlation=correlation,
            costs=costs,
            units=units,
            sha256="",
        )

    def apply_upgrade(self, upgrade: Upgrade) -> Scenario:
        """A new scenario with the upgrade's changes to the input tables applied."""
        data = self.to_dict()
        for name, change in upgrade.changes.items():
            table = dict(data["inputs"].get(name, {}))
            table.update(change)
            data["inputs"][name] = table
        scenario = self._rebuild(data)
        return dataclasses.replace(
            scenario,
            title=f"{self.title} + {upgrade.name}".strip(" +"),
            upgrades=self.upgrades,
            source=self.source,
        )

    def run_options(self) -> dict[str, Any]:
        """Keyword arguments for ``propagate`` from this scenario and its settings."""
        return {
            "n_samples": self.settings.n_samples,
            "method": self.settings.method,
            "correlation": self.correlation,
            "rng": self.settings.seed,
            "outputs": list(self.outputs),
            "chunk_size": self.settings.chunk_size,
            "nominal": dict(self.nominal),
        }


def _model_label(model: Any) -> str:
    base = model.base if isinstance(model, BoundModel) else model
    return type(base).__name__


def _make_model(name: Any, species: str, options: Mapping[str, Any], *, path) -> Any:
    if name not in MODELS:
        raise ScenarioError(
            f"model {name!r} is not known{_close(name, MODELS)}", path=path, key="scenario.model"
        )
    try:
        return as_model(MODELS[name](species, **options))
    except TypeError as error:
        match = re.search(r"unexpected keyword argument '(\w+)'", str(error))
        what = f"unknown option {match.group(1)!r}" if match else f"options {dict(options)!r}"
        raise ScenarioError(
            f"{what} for model {name!r}; remove it or check its spelling",
            path=path,
            key="scenario.options",
        ) from None
    except ModelError as error:
        key = "scenario.species" if "species" in str(error) else "scenario.options"
        raise ScenarioError(f"{error}", path=path, key=key) from None
    except ImportError as error:  # pragma: no cover - while the physics is being written
        raise ScenarioError(
            f"model {name!r} is not available ({error})", path=path, key="scenario.model"
        ) from None


def _check_range(spec: Any, value: float, *, path, key) -> None:
    if not math.isfinite(value) or not spec.low <= value <= spec.high:
        raise ScenarioError(
            f"nominal {value:g} {spec.unit} lies outside the model's valid range "
            f"[{spec.low:g}, {spec.high:g}] {spec.unit}; choose a value inside it".replace(
                "  ", " "
            ),
            path=path,
            key=key,
        )


def _parse_inputs(raw: Mapping[str, Any], *, model, path):
    nominal: dict[str, float] = {}
    fixed: dict[str, float] = {}
    tolerances: dict[str, Tolerance] = {}
    groups: dict[str, str] = {}
    notes: dict[str, str] = {}
    units: dict[str, str] = {}
    for name, table in raw.items():
        key = f"inputs.{name}"
        if name not in model.inputs:
            raise ScenarioError(
                f"{name!r} is not an input of the model{_close(name, model.inputs)}",
                path=path,
                key=key,
            )
        if not isinstance(table, Mapping):
            table = {"nominal": table}
        _check_keys(table, _INPUT_KEYS, path=path, key=key)
        spec = model.inputs[name]
        unit = spec.unit
        units[name] = unit
        if "nominal" in table:
            value = parse_quantity(table["nominal"], unit=unit, where=f"{key}.nominal", path=path)
        elif math.isfinite(spec.default):
            value = float(spec.default)
        else:
            raise ScenarioError("needs a nominal value", path=path, key=f"{key}.nominal")
        _check_range(spec, value, path=path, key=f"{key}.nominal")
        nominal[name] = value
        for text_key in ("group", "note"):
            if text_key in table and not isinstance(table[text_key], str):
                raise ScenarioError(
                    f"{table[text_key]!r} must be a string", path=path, key=f"{key}.{text_key}"
                )
        if "group" in table:
            groups[name] = table["group"]
        if "note" in table:
            notes[name] = table["note"]
        meaning = table.get("meaning", "standard")
        shape = table.get("shape", "normal")
        if meaning not in MEANINGS:
            raise ScenarioError(
                f"meaning {meaning!r} is not known; use one of {', '.join(MEANINGS)}",
                path=path,
                key=f"{key}.meaning",
            )
        if shape not in SHAPES:
            raise ScenarioError(
                f"shape {shape!r} is not known; use one of {', '.join(SHAPES)}",
                path=path,
                key=f"{key}.shape",
            )
        if "tolerance" not in table:
            extra = [k for k in ("meaning", "coverage_factor", "shape") if k in table]
            if extra:
                raise ScenarioError(
                    f'{extra[0]!r} given without a tolerance; add tolerance = "..." or '
                    f"remove {extra[0]!r}",
                    path=path,
                    key=f"{key}.{extra[0]}",
                )
            fixed[name] = value
            continue
        amount, relative = parse_tolerance_text(
            table["tolerance"],
            unit=unit,
            nominal=value,
            where=f"{key}.tolerance",
            path=path,
            nominal_text=table.get("nominal"),
        )
        coverage = table.get("coverage_factor")
        if coverage is not None and (
            isinstance(coverage, bool) or not isinstance(coverage, int | float)
        ):
            raise ScenarioError(
                f"{coverage!r} must be a number, e.g. 2", path=path, key=f"{key}.coverage_factor"
            )
        bounds = None
        if "bounds" in table:
            b = table["bounds"]
            if not isinstance(b, list) or len(b) != 2:
                raise ScenarioError(
                    f'{b!r} must be [low, high] with units, e.g. ["0 mW", "10 mW"]',
                    path=path,
                    key=f"{key}.bounds",
                )
            bounds = tuple(
                parse_quantity(v, unit=unit, where=f"{key}.bounds", path=path) for v in b
            )
        try:
            tol = Tolerance(
                nominal=value,
                value=amount,
                meaning=meaning,
                coverage_factor=None if coverage is None else float(coverage),
                shape=shape,
                relative=relative,
                text=str(table["tolerance"]),
                bounds=bounds,
                unit=unit,
                where=key,
            )
        except ScenarioError as error:
            raise ScenarioError(error.message, path=path, key=key) from None
        if amount == 0:
            fixed[name] = value
            continue
        tolerances[name] = tol
    return nominal, fixed, tolerances, groups, notes, units


def _parse_correlations(raw, *, tolerances, known, model, path) -> np.ndarray | None:
    if raw is None:
        return None
    if not isinstance(raw, list):
        raise ScenarioError(
            "must be an array of tables; write [[correlations]]", path=path, key="correlations"
        )
    names = list(tolerances)
    matrix = np.eye(len(names))
    seen: set[frozenset[str]] = set()
    for i, table in enumerate(raw):
        key = f"correlations[{i}]"
        if not isinstance(table, Mapping):
            raise ScenarioError("must be a table; write [[correlations]]", path=path, key=key)
        _check_keys(table, ("inputs", "coefficient", "rank_coefficient"), path=path, key=key)
        pair = table.get("inputs")
        if not isinstance(pair, list) or len(pair) != 2 or pair[0] == pair[1]:
            raise ScenarioError(
                f"inputs = {pair!r} must name two different inputs", path=path, key=f"{key}.inputs"
            )
        for name in pair:
            if name not in model.inputs:
                raise ScenarioError(
                    f"{name!r} is not an input of the model{_close(name, model.inputs)}",
                    path=path,
                    key=f"{key}.inputs",
                )
            if name not in tolerances:
                state = "is fixed (no tolerance)" if name in known else "is not set"
                raise ScenarioError(
                    f"input {name!r} {state}; give it a tolerance in [inputs.{name}] or remove "
                    "the correlation",
                    path=path,
                    key=f"{key}.inputs",
                )
        if frozenset(pair) in seen:
            raise ScenarioError(
                f"the pair {pair!r} is correlated twice; keep one", path=path, key=key
            )
        seen.add(frozenset(pair))
        kinds = [k for k in ("coefficient", "rank_coefficient") if k in table]
        if len(kinds) != 1:
            raise ScenarioError(
                "give exactly one of coefficient or rank_coefficient", path=path, key=key
            )
        value = table[kinds[0]]
        if isinstance(value, bool) or not isinstance(value, int | float) or not -1 < value < 1:
            raise ScenarioError(
                f"{kinds[0]} = {value!r} must be a number strictly between -1 and 1",
                path=path,
                key=f"{key}.{kinds[0]}",
            )
        if kinds[0] == "rank_coefficient":
            value = float(rank_correlation_to_copula(value))
        a, b = names.index(pair[0]), names.index(pair[1])
        matrix[a, b] = matrix[b, a] = float(value)
    if not seen:
        return None
    return check_correlation(matrix, names, path=path, key="correlations")


def _parse_outputs(raw, *, model, path) -> tuple[str, ...]:
    if raw is None:
        return tuple(name for name in model.outputs if name != "validity")
    if not isinstance(raw, list) or not raw or not all(isinstance(n, str) for n in raw):
        raise ScenarioError(
            f"names = {raw!r} must be a non-empty list of output names",
            path=path,
            key="outputs.names",
        )
    for name in raw:
        if model.outputs and name not in model.outputs:
            raise ScenarioError(
                f"{name!r} is not an output of the model{_close(name, model.outputs)}",
                path=path,
                key="outputs.names",
            )
    return tuple(raw)


def _written(value: float, unit: str) -> str | float:
    if unit in ("", "1"):
        return float(value)
    return f"{float(value)!r} {unit}"


def _written_tolerance(tol: Tolerance) -> str | float:
    if tol.relative:
        try:
            value, relative = parse_tolerance_text(
                tol.text,
                unit=tol.unit,
                nominal=tol.nominal,
                where="",
                nominal_text=(_written(tol.nominal, tol.unit)),
            )
            if relative and value == tol.value:
                return tol.text
        except ScenarioError:
            pass
        if tol.nominal != 0:
            return f"{100.0 * tol.value / abs(tol.nominal)!r} %"
    if tol.unit in ("", "1"):
        return float(tol.value)
    return f"{float(tol.value)!r} {tol.unit}"


def _written_cost(cost: CostModel) -> dict[str, Any]:
    if isinstance(cost, TieredCost):
        return {
            "tiers": [
                {"name": t.name, "tolerance": _written_tolerance(t.tolerance), "cost": t.cost}
                for t in cost.tiers
            ]
        }
    assert isinstance(cost, SmoothCost)
    return {
        "smooth": {
            "tolerance": _written_tolerance(cost.tolerance),
            "cost": cost.reference_cost,
            "exponent": cost.exponent,
        }
    }


def load_scenario(path: str | Path, *, model: Any = None) -> Scenario:
    """Read a scenario TOML file.

    Parameters
    ----------
    path : path-like
        The file.
    model : model, optional
        Use this model object instead of the registry entry.

    Raises
    ------
    ScenarioError
        Unreadable file, TOML syntax error, or any content error.
    """
    path = Path(path)
    try:
        data_bytes = path.read_bytes()
    except OSError as error:
        raise ScenarioError(
            f"cannot read the file ({error.strerror}); check the path", path=path
        ) from None
    try:
        data = tomllib.loads(data_bytes.decode("utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as error:
        raise ScenarioError(f"not valid TOML: {error}", path=path) from None
    return Scenario.from_dict(
        data, path=path, model=model, sha256=hashlib.sha256(data_bytes).hexdigest()
    )


# -- a small TOML writer ------------------------------------------------------------

_BARE_KEY = re.compile(r"^[A-Za-z0-9_-]+$")


def _key(name: str) -> str:
    return name if _BARE_KEY.match(name) else json.dumps(name)


def _scalar(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, int | np.integer):
        return str(int(value))
    if isinstance(value, float | np.floating):
        v = float(value)
        if math.isnan(v):
            return "nan"
        if math.isinf(v):
            return "inf" if v > 0 else "-inf"
        return repr(v)
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)
    if isinstance(value, Mapping):
        return "{ " + ", ".join(f"{_key(k)} = {_scalar(v)}" for k, v in value.items()) + " }"
    if isinstance(value, list | tuple):
        return "[" + ", ".join(_scalar(v) for v in value) + "]"
    raise TypeError(f"cannot write {type(value).__name__} to TOML")


def _is_table_array(value: Any) -> bool:
    return isinstance(value, list) and bool(value) and all(isinstance(v, Mapping) for v in value)


def _write_table(lines: list[str], prefix: str, table: Mapping[str, Any]) -> None:
    plain = {
        k: v for k, v in table.items() if not isinstance(v, Mapping) and not _is_table_array(v)
    }
    for k, v in plain.items():
        lines.append(f"{_key(k)} = {_scalar(v)}")
    for k, v in table.items():
        name = f"{prefix}.{_key(k)}" if prefix else _key(k)
        if isinstance(v, Mapping):
            has_plain = any(
                not isinstance(x, Mapping) and not _is_table_array(x) for x in v.values()
            )
            if has_plain or not v:
                lines.extend(["", f"[{name}]"])
            _write_table(lines, name, v)
        elif _is_table_array(v):
            for item in v:
                lines.extend(["", f"[[{name}]]"])
                # nested tables inside an array item are written inline
                for ik, iv in item.items():
                    lines.append(f"{_key(ik)} = {_scalar(iv)}")


def toml_dumps(data: Mapping[str, Any]) -> str:
    """Write a mapping as TOML (tables, arrays of tables, inline tables in arrays)."""
    lines: list[str] = []
    _write_table(lines, "", data)
    return "\n".join(lines).lstrip("\n") + "\n"


def scenario_to_toml(scenario: Scenario) -> str:
    """The scenario as TOML text that :func:`load_scenario` reads back to an equal scenario."""
    header = (
        "# trapbudget scenario (SI values written out in full).\n"
        "# Lasers, coil currents, alkali metals and vacuum glass can hurt people: follow the\n"
        "# local laser-safety officer, local codes and licensed practice.\n"
    )
    return header + toml_dumps(scenario.to_dict())

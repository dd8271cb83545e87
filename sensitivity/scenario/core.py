"""The :class:`Scenario`: a study's inputs, tolerances, requirements and costs, in SI."""

from __future__ import annotations

import copy
import dataclasses
import hashlib
import json
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.protocol import BoundModel, as_model
from trapbudget.sensitivity.sampling import (
    check_correlation,
)
from trapbudget.sensitivity.scenario.costs import CostModel, parse_costs
from trapbudget.sensitivity.scenario.distributions import Tolerance
from trapbudget.sensitivity.scenario.parsing import (
    _parse_correlations,
    _parse_inputs,
    _parse_outputs,
)
from trapbudget.sensitivity.scenario.registry import MODELS, _make_model, _model_label
from trapbudget.sensitivity.scenario.requirements import Requirement, parse_requirements
from trapbudget.sensitivity.scenario.settings import Settings, Upgrade, _parse_upgrades
from trapbudget.sensitivity.scenario.tables import (
    _SCENARIO_KEYS,
    _TOP_KEYS,
    _canonical,
    _check_keys,
    _check_range,
    _close,
    _table,
    _text,
)
from trapbudget.sensitivity.scenario.writer import _written, _written_cost, _written_tolerance

__all__ = ["Scenario"]


_SCENARIO_EXAMPLES = {
    "title": 'title = "Rb MOT, lab 2"',
    "description": 'description = "..."',
    "species": 'species = "Rb87"',
    "model": 'model = "VaporCellMOT"',
    "currency": 'currency = "EUR"',
}


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

    def __repr__(self) -> str:
        source = f", source={self.source.name!r}" if self.source is not None else ""
        return (
            f"Scenario({self.title!r}, model={self.model_name}, species={self.species}, "
            f"{len(self.inputs)} uncertain inputs, {len(self.requirements)} requirements"
            f"{source})"
        )

    def _repr_html_(self) -> str:
        import html

        rows = "".join(
            f"<tr><td>{html.escape(n)}</td><td>{html.escape(str(t.text))}</td></tr>"
            for n, t in self.tolerances.items()
        )
        return (
            f"<p><b>{html.escape(self.title)}</b> ({html.escape(self.model_name)}, "
            f"{html.escape(self.species)})</p><table><tr><th>input</th><th>tolerance</th></tr>"
            f"{rows}</table>"
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
        for name, example in _SCENARIO_EXAMPLES.items():
            if name in head:
                _text(head[name], path=path, key=f"scenario.{name}", example=example)
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

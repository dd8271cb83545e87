"""The model registry: scenario files name a model, this table builds it."""

from __future__ import annotations

import re
from collections.abc import Callable, Mapping
from typing import Any

from trapbudget.models.protocol import ModelError
from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.protocol import BoundModel, as_model
from trapbudget.sensitivity.scenario.tables import _close
from trapbudget.sensitivity.testfunctions import GFunction, Ishigami, LinearModel

__all__ = ["MODELS", "register_model"]


def _vapor_cell_mot(species: str, **options: Any) -> Any:
    try:
        from trapbudget.models import VaporCellMOT
    except ImportError:
        from trapbudget.models.trap import VaporCellMOT
    return VaporCellMOT(species, **options)


def _beam_loaded_mot(species: str, **options: Any) -> Any:
    from trapbudget.models import BeamLoadedMOT

    return BeamLoadedMOT(species, **options)


def _narrow_line_mot(species: str, **options: Any) -> Any:
    from trapbudget.models import NarrowLineMOT

    return NarrowLineMOT(species or "Sr88-689", **options)


MODELS: dict[str, Callable[..., Any]] = {
    "VaporCellMOT": _vapor_cell_mot,
    "BeamLoadedMOT": _beam_loaded_mot,
    "NarrowLineMOT": _narrow_line_mot,
    "ishigami": lambda species, **options: Ishigami(**options),
    "linear": lambda species, **options: LinearModel(**options),
    "g-function": lambda species, **options: GFunction(**options),
}
"""Model registry: name -> factory(species, **options)."""


def register_model(name: str, factory: Callable[..., Any]) -> None:
    """Make a model usable by name in scenarios: ``factory(species, **options) -> model``."""
    MODELS[name] = factory


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

"""Physics of laser-cooled atom sources: pure, vectorized NumPy functions in SI.

The composed model is :class:`VaporCellMOT`; the kernel modules (``species``,
``light``, ``field``, ``vapor``, ``capture``, ``cooling``, ``mot``, ``cloud``,
``observables``; the slow 3-D reference in ``capture_reference``) hold the published
formulas it is built from, each usable on its own.

Names are imported on first use (PEP 562): reading a model's input list or the
species table does not compile the capture kernels.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING, Any

_LOCATIONS: dict[str, str] = {
    "InputSpec": "trapbudget.models.protocol",
    "ModelError": "trapbudget.models.protocol",
    "OutputSpec": "trapbudget.models.protocol",
    "SPECIES": "trapbudget.models.species",
    "Species": "trapbudget.models.species",
    "VaporPressure": "trapbudget.models.vapor_pressure",
    "Validity": "trapbudget.models.trap",
    "VaporCellMOT": "trapbudget.models.trap",
}
# The lookup function shadows the module of the same name, so it is bound eagerly (after
# the module itself has been imported by catalog) and stays bound.
from trapbudget.models.catalog import species, species_table  # noqa: E402

_SUBMODULES = (
    "capture",
    "cloud",
    "cooling",
    "field",
    "light",
    "mot",
    "observables",
    "vapor",
)

__all__ = [
    "SPECIES",
    "InputSpec",
    "ModelError",
    "OutputSpec",
    "Species",
    "Validity",
    "VaporCellMOT",
    "VaporPressure",
    "capture",
    "cloud",
    "cooling",
    "field",
    "light",
    "mot",
    "observables",
    "species",
    "species_table",
    "vapor",
]


def __getattr__(name: str) -> Any:
    if name in _SUBMODULES:
        value = importlib.import_module(f"{__name__}.{name}")
    elif name in _LOCATIONS:
        value = getattr(importlib.import_module(_LOCATIONS[name]), name)
    else:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))


if TYPE_CHECKING:  # the same names, eagerly, for type checkers and IDEs
    from trapbudget.models import capture, cloud, cooling, field, light, mot, observables, vapor
    from trapbudget.models.protocol import InputSpec, ModelError, OutputSpec
    from trapbudget.models.species import SPECIES, Species
    from trapbudget.models.trap import Validity, VaporCellMOT
    from trapbudget.models.vapor_pressure import VaporPressure

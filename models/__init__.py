"""Physics of laser-cooled atom sources: pure, vectorized NumPy functions in SI.

The composed models are :class:`VaporCellMOT`, :class:`BeamLoadedMOT` and
:class:`NarrowLineMOT`; the kernel modules (``species``,
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
    "BeamLoadedMOT": "trapbudget.models.beam_mot",
    "NarrowLineMOT": "trapbudget.models.narrow",
    "InputSpec": "trapbudget.models.protocol",
    "ModelError": "trapbudget.models.protocol",
    "OutputSpec": "trapbudget.models.protocol",
    "SPECIES": "trapbudget.models.species",
    "Species": "trapbudget.models.species",
    "VaporPressure": "trapbudget.models.vapor_pressure",
    "Validity": "trapbudget.models.validity",
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
    "sources",
    "strontium",
    "vapor",
)

__all__ = [
    "SPECIES",
    "BeamLoadedMOT",
    "InputSpec",
    "ModelError",
    "NarrowLineMOT",
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
    "sources",
    "species",
    "species_table",
    "strontium",
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
    from trapbudget.models import (
        capture,
        cloud,
        cooling,
        field,
        light,
        mot,
        observables,
        sources,
        strontium,
        vapor,
    )
    from trapbudget.models.beam_mot import BeamLoadedMOT
    from trapbudget.models.narrow import NarrowLineMOT
    from trapbudget.models.protocol import InputSpec, ModelError, OutputSpec
    from trapbudget.models.species import SPECIES, Species
    from trapbudget.models.trap import VaporCellMOT
    from trapbudget.models.validity import Validity
    from trapbudget.models.vapor_pressure import VaporPressure

"""Physics of a vapor-cell magneto-optical trap: pure, vectorized NumPy functions in SI.

The composed model is :class:`VaporCellMOT`; the kernel modules (``species``,
``light``, ``field``, ``vapor``, ``capture``, ``cooling``, ``mot``, ``cloud``; the slow
3-D reference in ``capture_reference``) hold the
published formulas it is built from, each usable on its own.
"""

from trapbudget.models import capture, cloud, cooling, field, light, mot, vapor
from trapbudget.models import species as species_data
from trapbudget.models.protocol import InputSpec, ModelError, OutputSpec
from trapbudget.models.species import SPECIES, Species, VaporPressure, species, species_table
from trapbudget.models.trap import Validity, VaporCellMOT

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
    "species",
    "species_data",
    "species_table",
    "vapor",
]

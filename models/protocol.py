"""The model protocol: descriptions of a model's inputs and outputs.

Any object with ``inputs``, ``outputs`` and ``evaluate`` is a model to the
engine. The two records here are what ``inputs`` and ``outputs`` map names to.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

__all__ = ["InputSpec", "ModelError", "OutputSpec"]


class ModelError(ValueError):
    """A model was called with an argument it cannot accept (unknown input, species...)."""


@dataclass(frozen=True)
class InputSpec:
    """One model input.

    Parameters
    ----------
    name : str
        Identifier used in scenarios and results.
    unit : str
        SI unit as pint spells it (``"W"``, ``"T/m"``, ``""`` for dimensionless).
    default : float
        Value taken when the input is not given, in ``unit``.
    low, high : float
        Inclusive range of validity, in ``unit`` (may be infinite).
    description : str
        One-line meaning.
    constant : bool
        True for a model constant that calibration may adjust.
    """

    name: str
    unit: str
    default: float
    low: float
    high: float
    description: str
    constant: bool = False

    def __post_init__(self) -> None:
        if not (self.low <= self.default <= self.high) and not math.isnan(self.default):
            raise ModelError(
                f"input {self.name!r}: default {self.default} outside [{self.low}, {self.high}]"
            )


@dataclass(frozen=True)
class OutputSpec:
    """One model output: name, SI unit and one-line meaning."""

    name: str
    unit: str
    description: str

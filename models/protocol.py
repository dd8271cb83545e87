"""The model protocol: descriptions of a model's inputs and outputs.

Any object with ``inputs``, ``outputs`` and ``evaluate`` is a model to the
engine. The two records here are what ``inputs`` and ``outputs`` map names to.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

__all__ = ["InputSpec", "ModelError", "OutputSpec", "is_quantity", "to_si", "values_in_si"]


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


def is_quantity(value: Any) -> bool:
    """True for a pint Quantity (duck-typed, so that pint need not be imported here)."""
    return hasattr(value, "magnitude") and hasattr(value, "units") and hasattr(value, "to")


_TWO_PI = 2.0 * math.pi


def to_si(name: str, value: Any, unit: str) -> Any:
    """``value`` in the SI ``unit`` of input ``name``; a plain number or array is taken as SI.

    A pint Quantity is converted (``20 mW`` -> ``0.02`` for ``unit="W"``), or
    refused with a :class:`ModelError` naming the input and the dimension
    expected. Two conversions pint gets wrong for this trade are made
    explicit:

    * an angular frequency (``rad/s``) given to a cyclic-frequency input
      (``unit="Hz"``, e.g. a detuning) is divided by 2 pi;
    * an offset temperature unit (``degC``, ``degF``) given as a *difference*
      is the caller's to mark: use ``delta_degC`` for a tolerance; a plain
      ``degC`` value here is an absolute temperature (``20 degC`` -> 293.15 K).
    """
    if not is_quantity(value):
        return value
    target = unit or "dimensionless"
    angular = "radian" in str(value.units) and unit == "Hz"
    try:
        if angular:
            return value.to("radian/second").magnitude / _TWO_PI
        return value.to(target).magnitude
    except Exception:  # pint's DimensionalityError or an undefined unit
        try:
            expected = value._REGISTRY.get_dimensionality(target)
        except Exception:  # an SI unit this registry does not know
            expected = target
        raise ModelError(
            f"input {name!r}: {value:~} has dimension {value.dimensionality}, expected "
            f"{expected}; give it in {target} or a unit of that dimension"
        ) from None


def values_in_si(values: Mapping[str, Any], inputs: Mapping[str, InputSpec]) -> dict[str, Any]:
    """``values`` with every pint Quantity converted to its input's SI unit (:func:`to_si`).

    Names the model does not have are passed through unchanged (the model
    reports them).
    """
    return {
        name: to_si(name, value, inputs[name].unit) if name in inputs else value
        for name, value in values.items()
    }

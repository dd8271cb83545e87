"""The model protocol: descriptions of a model's inputs and outputs.

Any object with ``inputs``, ``outputs`` and ``evaluate`` is a model to the
engine. The two records here are what ``inputs`` and ``outputs`` map names to.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np

__all__ = [
    "InputSpec",
    "ModelError",
    "OutputSpec",
    "evaluate_flat_in_chunks",
    "is_quantity",
    "to_si",
    "values_in_si",
]


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


def evaluate_flat_in_chunks(
    model: Any,
    values: Mapping[str, Any],
    kernel: Callable[[Mapping[str, np.ndarray]], Mapping[str, np.ndarray]],
    *,
    chunk: int = 1 << 14,
) -> dict[str, np.ndarray]:
    """The shared ``evaluate`` of the trap models: check names, convert, broadcast, chunk.

    ``model`` has ``inputs`` and ``outputs`` (with an int ``validity`` output);
    ``kernel(flat_inputs) -> outputs`` works on 1-D arrays of one chunk. Extreme but valid
    inputs may overflow to inf inside a kernel; the kernels handle every such inf as a
    limit, so floating-point warnings are silenced here.
    """
    unknown = [name for name in values if name not in model.inputs]
    if unknown:
        raise ModelError(
            f"{type(model).__name__}: unknown input {unknown[0]!r}; valid inputs: "
            + ", ".join(model.inputs)
        )
    values = values_in_si(values, model.inputs)
    arrays = {
        name: np.asarray(values.get(name, spec.default), dtype=float)
        for name, spec in model.inputs.items()
    }
    shape = np.broadcast_shapes(*(a.shape for a in arrays.values()))
    n = math.prod(shape)
    flat = {k: np.broadcast_to(a, shape).reshape(-1) for k, a in arrays.items()}
    out = {name: np.empty(n, dtype=float) for name in model.outputs if name != "validity"}
    out["validity"] = np.empty(n, dtype=np.int64)
    for start in range(0, n, chunk):
        stop = min(n, start + chunk)
        with np.errstate(over="ignore", under="ignore", divide="ignore", invalid="ignore"):
            part = kernel({k: a[start:stop] for k, a in flat.items()})
        for key, value in part.items():
            out[key][start:stop] = value
    return {key: value.reshape(shape) for key, value in out.items()}

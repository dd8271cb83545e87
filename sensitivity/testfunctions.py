"""Analytic test models with closed-form answers, following the model protocol.

They run through exactly the same engine as the trap model, so the engine's
estimators can be checked against exact values.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence

import numpy as np
from numpy.typing import ArrayLike

from trapbudget.models.protocol import InputSpec, ModelError, OutputSpec

__all__ = [
    "GFunction",
    "Ishigami",
    "LinearModel",
    "MassCalibration",
    "g_function_indices",
    "ishigami_indices",
    "linear_indices",
]


class _AnalyticModel:
    """Shared evaluate(): fill defaults, refuse unknown names, broadcast."""

    inputs: dict[str, InputSpec]
    outputs: dict[str, OutputSpec]

    def _values(self, values: Mapping[str, ArrayLike]) -> list[np.ndarray]:
        unknown = sorted(set(values) - set(self.inputs))
        if unknown:
            raise ModelError(
                f"{type(self).__name__}: unknown input {unknown[0]!r}; "
                f"inputs are {', '.join(self.inputs)}"
            )
        arrays = [
            np.asarray(values.get(name, spec.default), dtype=float)
            for name, spec in self.inputs.items()
        ]
        return list(np.broadcast_arrays(*arrays))

    def evaluate(self, values: Mapping[str, ArrayLike]) -> dict[str, np.ndarray]:
        return {"y": np.asarray(self._function(*self._values(values)), dtype=float)}

    def _function(self, *x: np.ndarray) -> np.ndarray:  # pragma: no cover - abstract
        raise NotImplementedError


def _dimensionless_inputs(count: int, low: float, high: float, default: float):
    return {
        f"x{i}": InputSpec(f"x{i}", "", default, low, high, f"input {i} of the test function")
        for i in range(1, count + 1)
    }


class Ishigami(_AnalyticModel):
    """The Ishigami function ``y = sin x1 + a sin^2 x2 + b x3^4 sin x1``.

    Parameters
    ----------
    a, b : float
        Coefficients (dimensionless); the usual choice is a = 7, b = 0.1.

    Notes
    -----
    Inputs x1, x2, x3 are taken uniform on [-pi, pi] for the indices of
    :func:`ishigami_indices`.

    References
    ----------
    T. Ishigami and T. Homma, "An importance quantification technique in
    uncertainty analysis for computer models", ISUMA 1990.
    """

    def __init__(self, a: float = 7.0, b: float = 0.1) -> None:
        self.a = float(a)
        self.b = float(b)
        self.inputs = _dimensionless_inputs(3, -math.pi, math.pi, 0.0)
        self.outputs = {"y": OutputSpec("y", "", "Ishigami function value")}

    def _function(self, x1, x2, x3):
        return np.sin(x1) + self.a * np.sin(x2) ** 2 + self.b * x3**4 * np.sin(x1)


class GFunction(_AnalyticModel):
    """Sobol' G-function ``y = prod_i (|4 x_i - 2| + a_i) / (1 + a_i)``, x_i in [0, 1].

    References
    ----------
    A. Saltelli and I. M. Sobol', "About the use of rank transformation in
    sensitivity analysis of model output", Reliab. Eng. Syst. Saf. 50, 225 (1995).
    """

    def __init__(self, coefficients: Sequence[float] = (0.0, 1.0, 4.5, 9.0, 99.0, 99.0)) -> None:
        self.coefficients = np.asarray(coefficients, dtype=float)
        if self.coefficients.ndim != 1 or np.any(self.coefficients < 0):
            raise ModelError("GFunction: coefficients must be a 1-D sequence of values >= 0")
        self.inputs = _dimensionless_inputs(self.coefficients.size, 0.0, 1.0, 0.5)
        self.outputs = {"y": OutputSpec("y", "", "G-function value")}

    def _function(self, *x):
        y = np.ones_like(x[0])
        for xi, ai in zip(x, self.coefficients, strict=True):
            y = y * (np.abs(4.0 * xi - 2.0) + ai) / (1.0 + ai)
        return y


class LinearModel(_AnalyticModel):
    """Linear model ``y = offset + sum_i b_i x_i`` (dimensionless unless units given).

    Parameters
    ----------
    coefficients : sequence of float or mapping name -> float
        The b_i; with a sequence the inputs are named x1, x2, ...
    offset : float
        Constant term.
    """

    def __init__(
        self, coefficients: Sequence[float] | Mapping[str, float] = (1.0, 1.0), *, offset=0.0
    ) -> None:
        if isinstance(coefficients, Mapping):
            names = list(coefficients)
            values = [float(coefficients[n]) for n in names]
        else:
            values = [float(c) for c in coefficients]
            names = [f"x{i}" for i in range(1, len(values) + 1)]
        if not values:
            raise ModelError("LinearModel: give at least one coefficient")
        self.coefficients = np.asarray(values)
        self.offset = float(offset)
        self.inputs = {
            n: InputSpec(n, "", 0.0, -math.inf, math.inf, f"input {n} of the linear model")
            for n in names
        }
        self.outputs = {"y": OutputSpec("y", "", "linear combination of the inputs")}

    def _function(self, *x):
        y = np.full_like(x[0], self.offset)
        for xi, bi in zip(x, self.coefficients, strict=True):
            y = y + bi * xi
        return y


class MassCalibration(_AnalyticModel):
    """Mass calibration with air-buoyancy correction (JCGM 101:2008, example 9.3).

    ``dm = (m_Rc + dm_Rc) (1 + (rho_a - rho_a0) (1/rho_W - 1/rho_R)) - m_nom``,
    all in SI (kg, kg/m^3); output ``dm`` in kg.

    References
    ----------
    JCGM 101:2008, "Evaluation of measurement data - Supplement 1 to the GUM -
    Propagation of distributions using a Monte Carlo method", section 9.3.
    """

    def __init__(self, *, air_density_reference: float = 1.2, nominal_mass: float = 0.1):
        self.air_density_reference = float(air_density_reference)
        self.nominal_mass = float(nominal_mass)
        self.inputs = {
            "reference_mass": InputSpec(
                "reference_mass", "kg", 0.1, 0.0, math.inf, "conventional mass of the reference"
            ),
            "reference_mass_difference": InputSpec(
                "reference_mass_difference",
                "kg",
                1.234e-6,
                -math.inf,
                math.inf,
                "measured difference between the weight and the reference",
            ),
            "air_density": InputSpec(
                "air_density", "kg/m**3", 1.2, 0.0, math.inf, "density of the air"
            ),
            "weight_density": InputSpec(
                "weight_density", "kg/m**3", 8000.0, 0.0, math.inf, "density of the weight"
            ),
            "reference_density": InputSpec(
                "reference_density",
                "kg/m**3",
                8000.0,
                0.0,
                math.inf,
                "density of the reference",
            ),
        }
        self.outputs = {"y": OutputSpec("y", "kg", "deviation of the conventional mass")}

    def _function(self, m_rc, dm_rc, rho_a, rho_w, rho_r):
        rho_a0 = self.air_density_reference
        return (m_rc + dm_rc) * (1.0 + (rho_a - rho_a0) * (1.0 / rho_w - 1.0 / rho_r)) - (
            self.nominal_mass
        )


def ishigami_indices(a: float = 7.0, b: float = 0.1) -> dict[str, np.ndarray | float]:
    """Exact Sobol' indices of :class:`Ishigami` with x_i ~ U(-pi, pi).

    Returns
    -------
    dict
        ``first_order`` and ``total_order`` (arrays of 3), ``variance``,
        ``second_order_13`` (S13).

    Notes
    -----
    ``V = 1/2 + a^2/8 + b pi^4/5 + b^2 pi^8/18``, ``V1 = (1 + b pi^4/5)^2 / 2``,
    ``V2 = a^2/8``, ``V3 = 0``, ``V13 = 8 b^2 pi^8 / 225``.

    References
    ----------
    A. Saltelli et al., "Global Sensitivity Analysis: The Primer", Wiley 2008.
    """
    pi = math.pi
    variance = 0.5 + a * a / 8 + b * pi**4 / 5 + b * b * pi**8 / 18
    v1 = (1 + b * pi**4 / 5) ** 2 / 2
    v2 = a * a / 8
    v13 = 8 * b * b * pi**8 / 225
    first = np.array([v1, v2, 0.0]) / variance
    total = np.array([v1 + v13, v2, v13]) / variance
    return {
        "first_order": first,
        "total_order": total,
        "variance": variance,
        "second_order_13": v13 / variance,
    }


def g_function_indices(a: Sequence[float]) -> dict[str, np.ndarray | float]:
    """Exact first- and total-order indices of :class:`GFunction`.

    Notes
    -----
    ``V_i = 1 / (3 (1 + a_i)^2)``, ``V = prod(1 + V_i) - 1``, ``S_i = V_i / V``,
    ``ST_i = V_i prod_{j != i} (1 + V_j) / V``.

    References
    ----------
    A. Saltelli et al., "Global Sensitivity Analysis: The Primer", Wiley 2008.
    """
    coefficients = np.asarray(a, dtype=float)
    partial = 1.0 / (3.0 * (1.0 + coefficients) ** 2)
    variance = float(np.prod(1.0 + partial) - 1.0)
    total = partial * np.prod(1.0 + partial) / (1.0 + partial) / variance
    return {"first_order": partial / variance, "total_order": total, "variance": variance}


def linear_indices(
    coefficients: Sequence[float], standard_deviations: Sequence[float]
) -> dict[str, np.ndarray | float]:
    """Exact indices of an independent linear model: ``S_i = ST_i = b_i^2 s_i^2 / V``."""
    b = np.asarray(coefficients, dtype=float)
    s = np.asarray(standard_deviations, dtype=float)
    parts = (b * s) ** 2
    variance = float(parts.sum())
    return {"first_order": parts / variance, "total_order": parts / variance, "variance": variance}

"""First-order (GUM) propagation, against `uncertainties`, closed forms and JCGM 101 section 9."""

from __future__ import annotations

import math

import numpy as np
import pytest
import uncertainties
from scipy import stats
from uncertainties import umath

from trapbudget.models.protocol import InputSpec, OutputSpec
from trapbudget.sensitivity.linear import compare_linear_monte_carlo, linear_propagation
from trapbudget.sensitivity.propagation import propagate
from trapbudget.sensitivity.summary import summarize
from trapbudget.sensitivity.testfunctions import LinearModel, MassCalibration

SQRT3 = math.sqrt(3.0)


class _Closed:
    """y = x1 x2 + sin(x3), z = x1 / x3: closed-form derivatives."""

    def __init__(self):
        self.inputs = {n: InputSpec(n, "", 1.0, -10, 10, n) for n in ("x1", "x2", "x3")}
        self.outputs = {"y": OutputSpec("y", "", "y"), "z": OutputSpec("z", "", "z")}

    def evaluate(self, values):
        x1, x2, x3 = (np.asarray(values.get(n, 1.0), dtype=float) for n in ("x1", "x2", "x3"))
        return {"y": x1 * x2 + np.sin(x3), "z": x1 / x3}


NOMINAL = {"x1": 2.0, "x2": -1.5, "x3": 0.7}
U = {"x1": 0.05, "x2": 0.1, "x3": 0.02}
R = np.array([[1.0, 0.5, -0.3], [0.5, 1.0, 0.2], [-0.3, 0.2, 1.0]])


def _inputs():
    return {n: stats.norm(NOMINAL[n], U[n]) for n in NOMINAL}


def test_against_uncertainties_with_correlations():
    ds = linear_propagation(_Closed(), _inputs(), correlation=R)
    # reference: the `uncertainties` package on the closed form, same correlations
    cov = R * np.outer(list(U.values()), list(U.values()))
    x1, x2, x3 = uncertainties.correlated_values(list(NOMINAL.values()), cov)
    y = x1 * x2 + umath.sin(x3)
    z = x1 / x3
    assert float(ds["output_std_linear"].sel(output="y")) == pytest.approx(y.std_dev, rel=1e-6)
    assert float(ds["output_std_linear"].sel(output="z")) == pytest.approx(z.std_dev, rel=1e-6)
    assert float(ds["output_nominal"].sel(output="y")) == pytest.approx(y.nominal_value)
    corr = uncertainties.correlation_matrix([y, z])[0, 1]
    assert float(ds["output_correlation"].sel(output="y", output_b="z")) == pytest.approx(
        corr, rel=1e-6
    )


def test_sensitivity_coefficients_vs_analytic_derivatives():
    ds = linear_propagation(_Closed(), _inputs())
    x1, x2, x3 = NOMINAL.values()
    # dy/dx = (x2, x1, cos x3); dz/dx = (1/x3, 0, -x1/x3^2)
    expected = np.array([[x2, x1, math.cos(x3)], [1 / x3, 0.0, -x1 / x3**2]])
    np.testing.assert_allclose(
        ds["sensitivity_coefficient"].values, expected, rtol=1e-6, atol=1e-9
    )
    contribution = np.abs(expected) * np.array(list(U.values()))
    np.testing.assert_allclose(ds["uncertainty_contribution"].values, contribution, rtol=1e-6)
    # without correlation: root sum of squares of the contributions (JCGM 100:2008, 5.1.2)
    np.testing.assert_allclose(
        ds["output_std_linear"].values, np.sqrt((contribution**2).sum(axis=1)), rtol=1e-9
    )


def test_jcgm101_example_9_2_linear_is_validated():
    inputs = {f"x{i}": stats.norm(0.0, 1.0) for i in range(1, 5)}
    model = LinearModel([1.0, 1.0, 1.0, 1.0])
    lin = linear_propagation(model, inputs)
    # JCGM 101:2008, 9.2.2: GUF u(y) = 2.00, 95 % interval [-3.92, 3.92]
    assert float(lin["output_std_linear"][0]) == pytest.approx(2.0, rel=1e-9)
    assert float(lin["interval_high"][0]) == pytest.approx(3.92, abs=0.005)
    mc = summarize(propagate(model, inputs, n_samples=2**16, rng=20, method="sobol"))
    check = compare_linear_monte_carlo(lin, mc)
    assert float(check["numerical_tolerance"][0]) == pytest.approx(0.05)
    assert bool(check["validated"][0])
    assert int(check["validated_digits"][0]) == 2


def _mass_inputs():
    # JCGM 101:2008, 9.3, Table 9, converted to SI (kg, kg/m^3)
    return {
        "reference_mass": stats.norm(0.1, 0.050e-6),
        "reference_mass_difference": stats.norm(1.234e-6, 0.020e-6),
        "air_density": stats.uniform(1.10, 0.20),
        "weight_density": stats.uniform(7000.0, 2000.0),
        "reference_density": stats.uniform(7950.0, 100.0),
    }


def test_jcgm101_example_9_3_linear_fails_validation():
    model = MassCalibration()
    lin = linear_propagation(model, _mass_inputs())
    # JCGM 101:2008, 9.3.2, Table 10: first-order GUF u = 0.0539 mg, estimate 1.2340 mg
    assert float(lin["output_std_linear"][0]) * 1e6 == pytest.approx(0.0539, abs=5e-5)
    assert float(lin["output_nominal"][0]) * 1e6 == pytest.approx(1.2340, abs=5e-5)
    n = 2**17
    mc = summarize(propagate(model, _mass_inputs(), n_samples=n, rng=93, method="sobol"))
    u_mc = float(mc["std"][0]) * 1e6
    # JCGM 101:2008, Table 10: MCM u = 0.0754 mg; tolerance 5 std errors of a sample std
    # (kurtosis of the output below 4, so se(s) < u sqrt(3 / (4 n)))
    assert abs(u_mc - 0.0754) < 5 * 0.0754 * math.sqrt(3 / (4 * n)) + 5e-5
    check = compare_linear_monte_carlo(lin, mc)
    assert not bool(check["validated"][0])
    assert not bool(check["std_agrees"][0]) and not bool(check["interval_agrees"][0])
    # JCGM 101:2008 9.3.2 (from memory): the GUF interval misses the MCM one by several
    # hundredths of a mg at either end, more than delta = 0.005 mg even at one digit
    assert int(check["validated_digits"][0]) == 0
    assert float(check["d_high"][0]) * 1e6 > 0.005
    assert float(check["std_ratio"][0]) == pytest.approx(0.0539 / 0.0754, rel=0.02)


def test_fixed_inputs_and_no_uncertain_inputs():
    ds = linear_propagation(LinearModel([2.0, 5.0]), {"x1": stats.norm(1, 0.1), "x2": 3.0})
    assert list(ds["input"].values) == ["x1"]
    assert float(ds["output_nominal"][0]) == pytest.approx(17.0)
    assert float(ds["output_std_linear"][0]) == pytest.approx(0.2)
    empty = linear_propagation(LinearModel([2.0]), {"x1": 1.0})
    assert float(empty["output_std_linear"][0]) == 0.0


def test_copula_correlation_converted_for_linear_model():
    # Y = X1 + X2 with correlated rectangular inputs is linear: first order is exact once the
    # copula coefficient is turned into the inputs' Pearson correlation (6/pi) arcsin(r/2)
    # (Pearson 1907; Kruskal 1958); Monte Carlo must agree within its standard error.
    r = 0.7
    inputs = {"x1": stats.uniform(-1, 2), "x2": stats.uniform(0, 4)}
    model = LinearModel([1.0, 1.0])
    lin = linear_propagation(model, inputs, correlation=[[1, r], [r, 1]])
    s1, s2 = inputs["x1"].std(), inputs["x2"].std()
    rho = (6 / math.pi) * math.asin(r / 2)
    exact = math.sqrt(s1**2 + s2**2 + 2 * rho * s1 * s2)
    assert float(lin["output_std_linear"][0]) == pytest.approx(exact, rel=1e-8)
    n = 2**15
    mc = summarize(
        propagate(model, inputs, n_samples=n, method="random", rng=4, correlation=[[1, r], [r, 1]])
    )
    # se of a sample std is below u sqrt(2 / (4 n)) for a platykurtic output (kurtosis < 3)
    assert abs(float(mc["std"][0]) - exact) < 5 * exact * math.sqrt(2 / (4 * n))
    raw = linear_propagation(model, inputs, correlation=[[1, r], [r, 1]], copula=False)
    assert float(raw["output_std_linear"][0]) > exact  # r itself overstates the correlation

"""Units honoured at the Python boundary: pint Quantities are converted to SI or refused.

Reference for the conversions: the SI Brochure (BIPM, 9th ed. 2019): the prefix
milli is 1e-3; the radian is dimensionless, and an angular frequency is
omega = 2 pi f (section 2.3.3 and Table 4); a temperature interval of 1 degC is
one of 1 K.
"""

from __future__ import annotations

import math

import numpy as np
import pint
import pytest
import scipy.stats as st

from trapbudget.models import ModelError, VaporCellMOT
from trapbudget.sensitivity import Scenario, ScenarioError, propagate, rank
from trapbudget.sensitivity.scenario.units import parse_quantity, ureg

Q_ = ureg.Quantity


@pytest.fixture(scope="module")
def trap():
    return VaporCellMOT()


def test_a_quantity_is_converted_to_the_inputs_si_unit(trap):
    with_units = trap.evaluate({"beam_power": Q_(20, "mW"), "beam_waist": Q_(0.6, "cm")})
    plain = trap.evaluate({"beam_power": 0.020, "beam_waist": 0.006})
    for name in ("atom_number", "loading_time", "temperature"):
        np.testing.assert_array_equal(with_units[name], plain[name])


def test_a_quantity_of_another_registry_is_converted_too(trap):
    other = pint.UnitRegistry()
    np.testing.assert_array_equal(
        trap.evaluate({"beam_power": other.Quantity(20, "mW")})["atom_number"],
        trap.evaluate({"beam_power": 0.020})["atom_number"],
    )


def test_a_wrong_dimension_is_refused_with_the_input_named(trap):
    with pytest.raises(ModelError, match=r"input 'beam_power': 20 mm has dimension \[length\]"):
        trap.evaluate({"beam_power": Q_(20, "mm")})


def test_angular_frequency_on_a_cyclic_detuning_takes_its_two_pi(trap):
    # SI Brochure: omega = 2 pi f, so -2 pi x 12 MHz in rad/s is a detuning of -12 MHz.
    angular = trap.evaluate({"detuning": Q_(-2 * math.pi * 12e6, "rad/s")})
    cyclic = trap.evaluate({"detuning": -12e6})
    np.testing.assert_allclose(angular["atom_number"], cyclic["atom_number"], rtol=1e-12)
    assert parse_quantity("-75.398 Mrad/s", unit="Hz", key="x") == pytest.approx(
        -75.398e6 / (2 * math.pi), rel=1e-12
    )


def test_propagate_converts_fixed_quantities_and_refuses_wrong_ones(trap):
    ds = propagate(
        trap,
        {"beam_power": st.norm(0.01, 1e-4), "beam_waist": Q_(6, "mm")},
        n_samples=64,
        rng=1,
    )
    assert ds.attrs["fixed_inputs"]["beam_waist"] == pytest.approx(6e-3, rel=1e-15)
    with pytest.raises(ScenarioError, match=r"inputs.beam_waist: 6 mW has dimension"):
        propagate(
            trap, {"beam_power": st.norm(0.01, 1e-4), "beam_waist": Q_(6, "mW")}, n_samples=64
        )


def test_rank_converts_fixed_quantities(trap):
    inputs = {"beam_power": st.norm(0.01, 1e-4), "detuning": st.norm(-12e6, 2e5)}
    a = rank(trap, {**inputs, "beam_waist": Q_(6, "mm")}, n_samples=64, rng=2, dummy=False)
    b = rank(trap, {**inputs, "beam_waist": 6e-3}, n_samples=64, rng=2, dummy=False)
    np.testing.assert_array_equal(a["total_order"].values, b["total_order"].values)


def test_a_scenario_built_in_python_takes_quantities_and_a_degc_tolerance_is_a_difference():
    raw = {
        "scenario": {"title": "built in code", "species": "Rb87", "model": "VaporCellMOT"},
        "inputs": {
            "beam_power": {"nominal": Q_(6, "mW"), "tolerance": Q_(0.1, "mW")},
            "cell_temperature": {"nominal": Q_(22, "degC"), "tolerance": Q_(1, "degC")},
        },
    }
    scenario = Scenario.from_dict(raw)
    assert scenario.nominal["beam_power"] == pytest.approx(6e-3, rel=1e-15)
    assert scenario.nominal["cell_temperature"] == pytest.approx(295.15, rel=1e-15)
    # A tolerance is an interval: 1 degC is 1 K, not 274.15 K.
    assert scenario.inputs["cell_temperature"].std() == pytest.approx(1.0, rel=1e-12)
    assert scenario.inputs["beam_power"].std() == pytest.approx(1e-4, rel=1e-12)

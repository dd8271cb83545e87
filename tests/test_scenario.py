"""Scenario loading: units to SI, validation messages, round trips and derived scenarios.

The apparatus below is invented for the tests.
"""

from __future__ import annotations

import math
import textwrap

import numpy as np
import pytest

try:
    import tomllib
except ImportError:  # Python 3.10
    import tomli as tomllib

from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.protocol import BoundModel
from trapbudget.sensitivity.scenario.core import Scenario
from trapbudget.sensitivity.scenario.costs import SmoothCost, TieredCost
from trapbudget.sensitivity.scenario.distributions import Tolerance
from trapbudget.sensitivity.scenario.reader import load_scenario
from trapbudget.sensitivity.scenario.registry import MODELS
from trapbudget.sensitivity.scenario.settings import Settings
from trapbudget.sensitivity.scenario.writer import scenario_to_toml

TOML = textwrap.dedent(
    """
    [scenario]
    title = "Invented test cell"
    description = "an invented apparatus for the tests"
    species = "Rb87"
    model = "VaporCellMOT"
    [scenario.options]
    gradient_source = "direct"

    [inputs.beam_power]
    nominal = "8 mW"
    tolerance = "2 %"
    group = "light"
    [inputs.repump_power]
    nominal = "1 mW"
    tolerance = "0.05 mW"
    group = "light"
    [inputs.detuning]
    nominal = "-12 MHz"
    tolerance = "0.5 MHz"
    meaning = "half-width"
    shape = "rectangular"
    [inputs.gradient]
    nominal = "12 G/cm"
    [inputs.cell_temperature]
    nominal = "22 degC"
    tolerance = "0.2 K"
    shape = "arcsine"
    meaning = "half-width"
    note = "daily drift of the lab"
    [inputs.background_pressure]
    nominal = "2e-9 mbar"
    tolerance = "40 %"
    meaning = "expanded"
    coverage_factor = 2
    shape = "lognormal"

    [[correlations]]
    inputs = ["beam_power", "repump_power"]
    coefficient = 0.6

    [outputs]
    names = ["atom_number", "loading_time", "temperature"]

    [settings]
    n_samples = 1024
    method = "sobol"
    seed = 7

    [[requirements]]
    output = "atom_number"
    at_least = "1e7"
    probability = 0.95
    label = "enough atoms"

    [costs.beam_power]
    tiers = [
      { name = "free-running", tolerance = "5 %", cost = 0 },
      { name = "noise eater", tolerance = "0.5 %", cost = 3000 },
    ]
    [costs.detuning]
    smooth = { tolerance = "1 MHz", cost = 1000, exponent = 1 }

    [[upgrades]]
    name = "noise eater"
    cost = 3000
    changes = { beam_power = { tolerance = "0.5 %" } }

    [calibration]
    free = ["loading_prefactor"]
    """
)


@pytest.fixture
def path(tmp_path):
    file = tmp_path / "scenario.toml"
    file.write_text(TOML)
    return file


@pytest.fixture
def scenario(path):
    return load_scenario(path)


def test_units_to_si(scenario):
    nominal = scenario.nominal
    assert nominal["beam_power"] == pytest.approx(8e-3)  # 8 mW
    assert nominal["detuning"] == pytest.approx(-12e6)  # -12 MHz, Hz of cyclic frequency
    assert nominal["gradient"] == pytest.approx(0.12)  # 12 G/cm; 1 G = 1e-4 T (BIPM SI Brochure)
    assert nominal["cell_temperature"] == pytest.approx(295.15)  # 22 degC (BIPM SI Brochure)
    assert nominal["background_pressure"] == pytest.approx(2e-7)  # 2e-9 mbar; 1 mbar = 100 Pa
    assert scenario.fixed == {"gradient": pytest.approx(0.12)}
    assert list(scenario.inputs) == [
        "beam_power", "repump_power", "detuning", "cell_temperature", "background_pressure",
    ]  # fmt: skip


def test_distributions_follow_tolerances(scenario):
    tol = scenario.tolerances
    assert tol["beam_power"].standard_uncertainty == pytest.approx(1.6e-4)  # 2 % of 8 mW
    # JCGM 100:2008, 4.3.7: rectangular half-width a -> a / sqrt(3)
    assert scenario.inputs["detuning"].std() == pytest.approx(0.5e6 / math.sqrt(3))
    # arcsine half-width a -> a / sqrt(2) (JCGM 101:2008, 6.4.6)
    assert scenario.inputs["cell_temperature"].std() == pytest.approx(0.2 / math.sqrt(2))
    # expanded, k = 2: u = 40 % / 2 of 2e-7 Pa; log-normal median at the nominal
    assert scenario.inputs["background_pressure"].std() == pytest.approx(0.2 * 2e-7)
    assert scenario.inputs["background_pressure"].median() == pytest.approx(2e-7)


def test_parts(scenario, path):
    assert isinstance(scenario.model, BoundModel)
    assert scenario.model.inputs["gradient"].default == pytest.approx(0.12)
    assert scenario.correlation.shape == (5, 5) and scenario.correlation[0, 1] == 0.6
    assert scenario.outputs == ("atom_number", "loading_time", "temperature")
    assert scenario.settings == Settings(n_samples=1024, method="sobol", seed=7)
    assert scenario.requirements[0].limit == pytest.approx(1e7)
    assert isinstance(scenario.costs["beam_power"], TieredCost)
    assert isinstance(scenario.costs["detuning"], SmoothCost)
    assert scenario.costs["beam_power"].cost(0.01 * 8e-3) == 3000.0
    assert scenario.groups == {"beam_power": "light", "repump_power": "light"}
    assert scenario.notes == {"cell_temperature": "daily drift of the lab"}
    assert scenario.calibration == {"free": ["loading_prefactor"]}
    assert scenario.source == path and len(scenario.sha256) == 64
    assert scenario.model_name == "VaporCellMOT"
    assert scenario.model_options == {"gradient_source": "direct"}


def test_python_built_equals_toml_loaded(scenario):
    data = tomllib.loads(TOML)
    assert Scenario.from_dict(data) == scenario


def test_toml_round_trip(scenario, tmp_path):
    text = scenario_to_toml(scenario)
    assert "laser-safety officer" in text
    again = tmp_path / "again.toml"
    again.write_text(text)
    assert load_scenario(again) == scenario


def test_with_tolerances_and_nominal(scenario):
    tighter = scenario.tolerances["beam_power"].with_value(4e-5)
    changed = scenario.with_tolerances({"beam_power": tighter})
    assert changed.inputs["beam_power"].std() == pytest.approx(4e-5)
    assert scenario.inputs["beam_power"].std() == pytest.approx(1.6e-4)  # original untouched
    assert changed != scenario
    fixed = scenario.with_tolerances(
        {"repump_power": scenario.tolerances["repump_power"].scaled(0)}
    )
    assert "repump_power" not in fixed.inputs and fixed.fixed["repump_power"] == 1e-3
    assert fixed.correlation is None  # the only correlated pair lost a member
    moved = scenario.with_nominal({"beam_power": 4e-3, "gradient": 0.15})
    assert moved.tolerances["beam_power"].value == pytest.approx(8e-5)  # 2 % follows
    assert moved.model.nominal["gradient"] == 0.15
    with pytest.raises(ScenarioError, match=r"outside the model's valid range"):
        scenario.with_nominal({"beam_power": 5.0})


def test_apply_upgrade(scenario):
    upgraded = scenario.apply_upgrade(scenario.upgrades[0])
    assert upgraded.tolerances["beam_power"].value == pytest.approx(0.005 * 8e-3)
    assert upgraded.tolerances["detuning"] == scenario.tolerances["detuning"]
    assert upgraded.title == "Invented test cell + noise eater"


def test_analytic_models_in_registry():
    assert {"VaporCellMOT", "ishigami", "linear", "g-function"} <= set(MODELS)
    s = Scenario.from_dict(
        {
            "scenario": {"model": "ishigami", "options": {"a": 7, "b": 0.1}},
            "inputs": {
                f"x{i}": {
                    "nominal": 0,
                    "tolerance": math.pi,
                    "meaning": "half-width",
                    "shape": "rectangular",
                }
                for i in (1, 2, 3)
            },
            "settings": {"n_samples": 256},
        }
    )
    assert s.outputs == ("y",) and s.inputs["x1"].support() == pytest.approx((-math.pi, math.pi))


def _broken(old: str, new: str) -> str:
    assert old in TOML
    return TOML.replace(old, new, 1)


@pytest.mark.parametrize(
    ("old", "new", "message"),
    [
        ("[outputs]", "[output]", r"unknown key 'output'; did you mean 'outputs'\?"),
        ("[inputs.gradient]", "[inputs.gradiant]", r"'gradiant' is not an input of the model; "
         r"did you mean 'gradient'\?"),
        ('names = ["atom_number"', 'names = ["atom_numbr"', r"did you mean 'atom_number'"),
        ('shape = "arcsine"', 'shape = "sine"', r"shape 'sine' is not known; use one of normal"),
        ('meaning = "expanded"', 'meaning = "k2"', r"meaning 'k2' is not known; use one of"),
        ('nominal = "8 mW"', 'nominal = "8 mQ"', r"inputs\.beam_power\.nominal: '8 mQ': 'mQ' is "
         r"not a unit; did you mean 'mW'\?"),
        ('nominal = "8 mW"', 'nominal = "8"', r"'8' has no unit"),
        ('nominal = "12 G/cm"', 'nominal = "200 G/cm"', r"inputs\.gradient\.nominal: nominal 2 "
         r"T/m lies outside the model's valid range \[0, 1\] T/m"),
        ("coefficient = 0.6", "coefficient = 1.5", r"strictly between -1 and 1"),
        ('inputs = ["beam_power", "repump_power"]', 'inputs = ["beam_power", "gradient"]',
         r"input 'gradient' is fixed \(no tolerance\); give it a tolerance"),
        ("n_samples = 1024", "n_samples = 1000", r"settings\.n_samples: n_samples = 1000 is not "
         r"a power of 2, which method = 'sobol' requires; use 1024"),
        ('method = "sobol"', 'method = "mc"', r"method 'mc' is not known; use one of random"),
        ('model = "VaporCellMOT"', 'model = "VaporCell"', r"model 'VaporCell' is not known; did "
         r"you mean 'VaporCellMOT'\?"),
        ('tolerance = "0.2 K"', 'tolerance = "1 %"', r"ambiguous; write it absolute"),
        ('coverage_factor = 2', 'coverage_factr = 2', r"unknown key 'coverage_factr'; did you "
         r"mean 'coverage_factor'\?"),
        ('free = ["loading_prefactor"]', 'free = ["loading_prefactr"]', r"calibration\.free: "
         r"'loading_prefactr' is not an input"),
        ('changes = { beam_power', 'changes = { beam_powr', r"'beam_powr' is not an input"),
        ("seed = 7", "seed = 7.5", r"settings\.seed: 7\.5 must be a whole number, e\.g\. "
         r"seed = 12"),
        ("seed = 7", 'seed = "7"', r"settings\.seed: '7' must be a whole number, written "
         r"without quotes, e\.g\. seed = 12"),
    ],
)  # fmt: skip
def test_validation_messages(tmp_path, old, new, message):
    file = tmp_path / "bad.toml"
    file.write_text(_broken(old, new))
    with pytest.raises(ScenarioError, match=message) as info:
        load_scenario(file)
    text = str(info.value)
    assert "\n" not in text and text.startswith(str(file))


def test_correlation_not_positive_definite_names_inputs(tmp_path):
    extra = textwrap.dedent(
        """
        [[correlations]]
        inputs = ["beam_power", "detuning"]
        coefficient = 0.9
        [[correlations]]
        inputs = ["repump_power", "detuning"]
        coefficient = -0.9
        """
    )
    file = tmp_path / "pd.toml"
    file.write_text(TOML.replace("[outputs]", extra + "\n[outputs]"))
    with pytest.raises(
        ScenarioError,
        match=r"correlations: correlation matrix is not positive definite .*"
        r"'detuning'",
    ):
        load_scenario(file)


def test_file_errors(tmp_path):
    with pytest.raises(ScenarioError, match=r"the scenario file does not exist; check the path"):
        load_scenario(tmp_path / "missing.toml")
    bad = tmp_path / "syntax.toml"
    bad.write_text("[scenario\n")
    with pytest.raises(ScenarioError, match=r"not valid TOML"):
        load_scenario(bad)


def test_custom_model_object():
    from trapbudget.sensitivity.testfunctions import LinearModel

    s = Scenario.from_dict(
        {"inputs": {"a": {"nominal": 1.0, "tolerance": 0.1}, "b": 2.0}},
        model=LinearModel({"a": 1.0, "b": 3.0}),
    )
    assert s.model.evaluate({})["y"] == pytest.approx(7.0)
    assert s.fixed == {"b": 2.0}
    np.testing.assert_allclose(s.inputs["a"].std(), 0.1)
    assert s.with_tolerances({"a": Tolerance(nominal=1.0, value=0.2)}).inputs["a"].std() == 0.2


def test_diagnosis_table_is_kept_and_written_back(tmp_path):
    extra = textwrap.dedent(
        """
        [diagnosis]
        output = "atom_number"
        [diagnosis.columns.coil_current]
        input = "gradient"
        scale = "4 G/cm/A"
        """
    )
    file = tmp_path / "diag.toml"
    file.write_text(TOML + extra)
    s = load_scenario(file)
    assert s.diagnosis["columns"]["coil_current"] == {"input": "gradient", "scale": "4 G/cm/A"}
    again = tmp_path / "again.toml"
    again.write_text(scenario_to_toml(s))
    assert load_scenario(again) == s and load_scenario(again).diagnosis == s.diagnosis


def test_python_built_mapping_equals_toml_text(tmp_path):
    text = textwrap.dedent(
        """
        [scenario]
        title = "Invented bench"
        [inputs]
        detuning = "-12 MHz"
        [inputs.beam_power]
        nominal = "4 mW"
        tolerance = "1 %"
        [inputs.beam_imbalance]
        nominal = 0.05
        tolerance = 0.02
        shape = "truncated-normal"
        bounds = [0, 0.9]
        [inputs.repump_power]
        tolerance = "0.1 mW"
        [[correlations]]
        inputs = ["beam_power", "repump_power"]
        rank_coefficient = 0.5
        [settings]
        n_samples = 64
        method = "latin"
        """
    )
    file = tmp_path / "bench.toml"
    file.write_text(text)
    built = Scenario.from_dict(
        {
            "scenario": {"title": "Invented bench"},
            "inputs": {
                "detuning": "-12 MHz",
                "beam_power": {"nominal": "4 mW", "tolerance": "1 %"},
                "beam_imbalance": {
                    "nominal": 0.05,
                    "tolerance": 0.02,
                    "shape": "truncated-normal",
                    "bounds": [0, 0.9],
                },
                "repump_power": {"tolerance": "0.1 mW"},
            },
            "correlations": [{"inputs": ["beam_power", "repump_power"], "rank_coefficient": 0.5}],
            "settings": {"n_samples": 64, "method": "latin"},
        }
    )
    loaded = load_scenario(file)
    assert built == loaded
    assert loaded.fixed == {"detuning": -12e6}  # shorthand: nominal only
    # the nominal of repump_power is the model's default when not written
    assert loaded.nominal["repump_power"] == loaded.model.base.inputs["repump_power"].default
    # truncated normal on [0, 0.9] (scipy.stats.truncnorm)
    assert loaded.inputs["beam_imbalance"].support() == pytest.approx((0.0, 0.9))
    # Spearman 0.5 -> copula 2 sin(pi/12) (Kruskal 1958)
    assert loaded.correlation[0, 2] == pytest.approx(2 * math.sin(math.pi * 0.5 / 6))
    assert loaded == Scenario.from_dict(tomllib.loads(scenario_to_toml(loaded)))


def test_scenario_pickles(scenario):
    import pickle

    again = pickle.loads(pickle.dumps(scenario))
    assert again == scenario
    assert again.model.evaluate({})["atom_number"] == scenario.model.evaluate({})["atom_number"]


def test_negative_seed_refused(tmp_path):
    file = tmp_path / "seed.toml"
    file.write_text(_broken("seed = 7", "seed = -7"))
    with pytest.raises(ScenarioError, match=r"settings\.seed: seed -7 must be a non-negative"):
        load_scenario(file)


@pytest.mark.parametrize(
    ("head", "message"),
    [
        ({"species": "Rb88"}, r"scenario\.species: .*'Rb88'"),
        ({"options": {"foo": 1}}, r"scenario\.options: unknown option 'foo' for model"),
        ({"titel": "x"}, r"scenario\.titel: unknown key 'titel'; did you mean 'title'\?"),
    ],
)
def test_head_errors(head, message):
    with pytest.raises(ScenarioError, match=message):
        Scenario.from_dict({"scenario": head}, path="x.toml")


def test_scenario_nominal_reaches_propagation(scenario):
    from trapbudget.sensitivity.linear import linear_propagation
    from trapbudget.sensitivity.propagation import propagate
    from trapbudget.sensitivity.summary import summarize

    ds = propagate(scenario.model, scenario.inputs, n_samples=256, rng=1)
    at_nominal = scenario.model.evaluate({})
    for name in scenario.inputs:
        assert ds.attrs["nominal_inputs"][name] == scenario.nominal[name]
    summary = summarize(ds, outputs=["atom_number"])
    assert float(summary["nominal"][0]) == pytest.approx(float(at_nominal["atom_number"]))
    lin = linear_propagation(scenario.model, scenario.inputs, outputs=["atom_number"])
    assert float(lin["output_nominal"][0]) == pytest.approx(float(at_nominal["atom_number"]))

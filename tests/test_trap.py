"""The composed VaporCellMOT: protocol, validity, nominal values, properties and scaling laws."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import trapbudget.models as models
from trapbudget.models import ModelError, Validity, VaporCellMOT
from trapbudget.models.field import coil_gradient
from trapbudget.models.vapor import saturated_density

MODEL = VaporCellMOT()
COILS = VaporCellMOT(gradient_source="coils")
DENSITY = VaporCellMOT(vapor_source="density")


def test_package_all_names_exist():
    for name in models.__all__:
        assert hasattr(models, name), name
    assert callable(models.species)
    assert models.SPECIES["Rb87"] is models.species("Rb87")


def test_protocol_records_match_the_contract():
    # DEVELOPERS.md: the inputs and outputs tables
    expected_outputs = [
        "atom_number",
        "loading_time",
        "temperature",
        "capture_velocity",
        "loading_rate",
        "cloud_radius",
        "peak_density",
        "scattering_rate",
        "fluorescence",
        "loss_rate",
        "saturation_parameter",
        "bright_fraction",
        "validity",
    ]
    assert list(MODEL.outputs) == expected_outputs
    constants = {name for name, spec in MODEL.inputs.items() if spec.constant}
    assert constants == {
        "loading_prefactor",
        "vapor_loss_coefficient",
        "background_loss_coefficient",
        "two_body_coefficient",
        "saturation_scale",
        "density_limit",
        "detector_solid_angle",
        "detector_efficiency",
        "sub_doppler_coefficient",
    }
    assert MODEL.cooling == "sub-doppler"  # the default
    doppler = VaporCellMOT("Rb87", cooling="doppler")
    assert {n for n, spec in doppler.inputs.items() if spec.constant} == constants - {
        "sub_doppler_coefficient"
    }
    assert {"coil_current", "coil_turns", "coil_radius", "coil_separation"} <= set(COILS.inputs)
    assert "gradient" not in COILS.inputs
    assert "vapor_density" in DENSITY.inputs and "vapor_fraction" not in DENSITY.inputs
    for spec in MODEL.inputs.values():
        assert spec.low <= spec.default <= spec.high
        assert spec.description


def test_evaluate_returns_every_output_with_the_broadcast_shape():
    result = MODEL.evaluate({"beam_power": np.full((3, 1), 3e-3), "detuning": [-8e6, -12e6]})
    assert set(result) == set(MODEL.outputs)
    for name, value in result.items():
        assert value.shape == (3, 2), name
    assert result["validity"].dtype.kind == "i"
    scalar = MODEL.evaluate({})
    assert scalar["atom_number"].shape == ()


def test_unknown_input_names_the_valid_ones():
    with pytest.raises(ModelError, match="unknown input 'beam_powr'; valid inputs: beam_power"):
        MODEL.evaluate({"beam_powr": 1e-3})


def test_bad_options_raise():
    with pytest.raises(ModelError, match="gradient_source='current' is not valid"):
        VaporCellMOT(gradient_source="current")
    with pytest.raises(ModelError, match="vapor_source='pressure' is not valid"):
        VaporCellMOT(vapor_source="pressure")
    with pytest.raises(ModelError, match="repump='707' is not valid"):
        VaporCellMOT("Sr88", repump="707")  # type: ignore[arg-type]
    with pytest.raises(ModelError, match="applies to species with a 1D2-type leak"):
        VaporCellMOT("Rb87", repump="none")
    with pytest.raises(ModelError, match="is not known; use one of: Rb87"):
        VaporCellMOT("Xx99")


def test_validity_flags_are_documented_and_explained():
    assert MODEL.validity_flags is Validity
    for flag in Validity:
        assert flag.__doc__ and flag.__doc__ != Validity.__doc__, flag.name
    result = MODEL.evaluate(
        {"beam_power": [3e-3, 0.0, 3e-3, 3e-3], "detuning": [-12e6] * 3 + [5e6]}
    )
    counts = MODEL.explain(result["validity"])
    assert counts["OK"] == 2
    assert counts["NO_POWER"] == 1
    assert counts["BLUE_DETUNING"] == 1
    assert counts["NO_GRADIENT"] == 0


def test_nominal_cell():
    # common practice for a room-temperature Rb vapor-cell MOT with a few mW per beam, ~1 cm beams,
    # ~-12 MHz, ~10 G/cm: 1e6-1e9 atoms; loading time tens of ms (saturated vapor) to seconds
    # (thin vapor); sub-Doppler temperatures of 100-600 uK at s0 ~ 4.6 per beam (Townsend et al.
    # 1995, from memory: MOTs at several I_sat per beam run hotter than molasses)
    result = MODEL.evaluate({"vapor_fraction": [1.0, 0.1, 0.01, 0.001]})
    assert np.all(result["validity"] == 0)
    assert np.all((result["atom_number"] > 1e6) & (result["atom_number"] < 1e9))
    assert 0.01 < result["loading_time"][0] < 0.1
    # thin vapor: about a second; the dense cloud's two-body loss (beta n of about 1/s at the
    # default beta = 1e-11 cm^3/s and ~1e11 cm^-3) keeps it below the one-body time
    assert 0.5 < result["loading_time"][-1] < 10.0
    assert np.all((result["temperature"] > 100e-6) & (result["temperature"] < 600e-6))
    # common practice: millions of photons per second per atom, bright fraction near 1
    assert 1e6 < float(result["scattering_rate"][0]) < 2e7
    assert float(result["bright_fraction"][0]) > 0.95


def test_construction_does_not_import_numba():
    # the command line lists inputs without compiling anything: numba loads on first evaluate
    import subprocess
    import sys

    code = (
        "import sys; import trapbudget.models as m; model = m.VaporCellMOT(); "
        "list(model.inputs); list(model.outputs); print('numba' in sys.modules)"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


def test_assumptions_are_plain_sentences():
    assert isinstance(MODEL.assumptions, tuple) and len(MODEL.assumptions) >= 5
    for sentence in MODEL.assumptions:
        assert isinstance(sentence, str) and sentence[0].isupper() and sentence.endswith(".")


def test_zero_power_and_blue_detuning_give_no_atoms_and_say_why():
    result = MODEL.evaluate({"beam_power": [0.0, 3e-3], "detuning": [-12e6, 10e6]})
    np.testing.assert_array_equal(result["atom_number"], 0.0)
    np.testing.assert_array_equal(result["fluorescence"], 0.0)
    assert result["validity"][0] & Validity.NO_POWER
    assert result["validity"][1] & Validity.BLUE_DETUNING
    assert math.isinf(result["temperature"][1])
    assert np.all(np.isfinite(result["loading_time"]))  # the loss-limited time of an empty trap


def test_zero_gradient_is_no_trap_but_molasses_still_slows():
    # balanced beams: with an imbalance the net push keeps atoms drifting above the stop speed
    result = MODEL.evaluate({"gradient": 0.0, "beam_imbalance": 0.0})
    assert result["validity"] & Validity.NO_GRADIENT
    assert float(result["atom_number"]) == 0.0
    assert float(result["capture_velocity"]) > 0.0  # the molasses capture velocity


def test_no_repumper_and_large_offset_are_flagged():
    result = MODEL.evaluate({"repump_power": 0.0})
    assert result["validity"] & Validity.NO_REPUMP
    assert float(result["atom_number"]) == 0.0
    far = MODEL.evaluate({"beam_offset": 0.015})  # beyond the 12.7 mm aperture
    assert far["validity"] & Validity.CENTRE_IN_DARK
    assert float(far["atom_number"]) == 0.0


def test_narrow_line_cannot_capture_from_a_thermal_vapor():
    # common practice: a 689 nm Sr-88 MOT (7.5 kHz line) is loaded from a precooled blue MOT,
    # not from the vapor: its capture velocity is far below the vapor's speeds
    red = VaporCellMOT("Sr88-689", vapor_source="density")
    result = red.evaluate({})
    assert float(result["capture_velocity"]) < 1.0  # m/s, against a most probable speed ~240 m/s
    assert float(result["atom_number"]) < 10.0  # against ~1e8 in a Rb cell
    assert red.inputs["detuning"].default == pytest.approx(-15e3)  # -2 Gamma, 2 digits


def test_outside_range_is_flagged_not_refused():
    result = MODEL.evaluate({"cell_temperature": [295.0, 500.0]})
    assert not result["validity"][0] & Validity.OUTSIDE_RANGE
    assert result["validity"][1] & Validity.OUTSIDE_RANGE
    assert np.isfinite(result["atom_number"][1])


def test_coil_geometry_matches_direct_gradient():
    # references.md [F]: R = 5 cm, N = 100, I = 1 A, 2a = R gives 4.3160 G/cm
    via_coils = COILS.evaluate(
        {"coil_current": 1.0, "coil_turns": 100, "coil_radius": 0.05, "coil_separation": 0.05}
    )
    direct = MODEL.evaluate({"gradient": 0.043160})
    assert float(coil_gradient(1.0, turns=100, radius=0.05, separation=0.05)) == pytest.approx(
        0.043160, rel=1e-4
    )
    for name in ("atom_number", "capture_velocity", "cloud_radius"):
        assert float(via_coils[name]) == pytest.approx(float(direct[name]), rel=1e-3), name


def test_density_source_matches_fraction_source():
    rb = models.species("Rb87")
    density = 0.1 * float(saturated_density(rb.vapor, MODEL.inputs["cell_temperature"].default))
    a = DENSITY.evaluate({"vapor_density": density})
    b = MODEL.evaluate({"vapor_fraction": 0.1})
    for name in ("atom_number", "loading_time"):
        assert float(a[name]) == pytest.approx(float(b[name]), rel=1e-12)


def test_chunked_evaluation_agrees_with_single_samples():
    rng = np.random.default_rng(8)
    n = 20000  # more than one internal chunk
    values = {
        "beam_power": rng.uniform(1e-3, 10e-3, n),
        "detuning": rng.uniform(-25e6, -5e6, n),
        "cell_temperature": rng.uniform(290, 310, n),
    }
    whole = MODEL.evaluate(values)
    for i in (0, 16383, 16384, n - 1):
        one = MODEL.evaluate({k: v[i] for k, v in values.items()})
        for name in ("atom_number", "loading_time", "temperature"):
            assert float(one[name]) == pytest.approx(whole[name][i], rel=1e-12)


def _valid_inputs(model):
    def bounded(spec):
        low = spec.low
        high = spec.high
        return st.floats(low, high, allow_nan=False, allow_infinity=False)

    return st.fixed_dictionaries({name: bounded(spec) for name, spec in model.inputs.items()})


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(_valid_inputs(MODEL))
def test_never_nan_across_valid_ranges(values):
    result = MODEL.evaluate(values)
    flags = Validity(int(result["validity"]))
    assert not flags & Validity.OUTSIDE_RANGE
    for name, value in result.items():
        assert not np.isnan(value), name
        assert value >= 0, name
    if math.isinf(result["temperature"]):
        assert flags & Validity.BLUE_DETUNING
    if math.isinf(result["atom_number"]):
        assert flags & Validity.NO_LOSS
    if result["atom_number"] == 0:  # no atoms: a reason is flagged, or nothing is loaded
        assert (flags & ~Validity.OUTSIDE_RANGE) or result["loading_rate"] == 0


@settings(max_examples=60, deadline=None)
@given(_valid_inputs(COILS))
def test_coil_model_never_nan(values):
    result = COILS.evaluate(values)
    for name, value in result.items():
        assert not np.isnan(value), name


def _near_nominal():
    return st.fixed_dictionaries(
        {
            "beam_power": st.floats(1e-3, 20e-3),
            "beam_waist": st.floats(2e-3, 10e-3),
            "detuning": st.floats(-30e6, -5e6),
            "gradient": st.floats(0.03, 0.3),
            "cell_temperature": st.floats(285, 320),
            "vapor_fraction": st.floats(1e-3, 1.0),
            "background_pressure": st.floats(1e-9, 1e-5),
        }
    )


@settings(max_examples=60, deadline=None)
@given(_near_nominal(), st.floats(1.2, 10.0))
def test_denser_vapor_loads_faster(values, factor):
    # without light-assisted loss (with it, a density-limited cloud's loading time is set by
    # beta n_lim and barely depends on the vapor)
    values = {**values, "two_body_coefficient": 0.0}
    dense = MODEL.evaluate(values)
    thin = MODEL.evaluate({**values, "vapor_fraction": values["vapor_fraction"] / factor})
    # cold cells are extrapolated and hot saturated ones optically thick: flags only
    assert not dense["validity"] & ~int(Validity.EXTRAPOLATING | Validity.OPTICALLY_THICK)
    assert dense["loading_time"] < thin["loading_time"]


@settings(max_examples=60, deadline=None)
@given(_near_nominal(), st.floats(1.2, 10.0))
def test_more_background_gas_loads_faster_and_holds_fewer_atoms(values, factor):
    clean = MODEL.evaluate(values)
    dirty = MODEL.evaluate(
        {**values, "background_pressure": values["background_pressure"] * factor}
    )
    assert dirty["loading_time"] < clean["loading_time"]
    assert dirty["atom_number"] < clean["atom_number"]


def test_sub_doppler_cooling_is_colder_and_continuous_in_its_coefficient():
    # Dalibard & Cohen-Tannoudji, JOSA B 6, 2023 (1989): T ~ I/|delta| below the Doppler value
    doppler = float(VaporCellMOT("Rb87", cooling="doppler").evaluate({})["temperature"])
    c = np.array([0.0, 1e-9, 0.1, 0.3, 1.0, 100.0])
    t = MODEL.evaluate({"sub_doppler_coefficient": c})["temperature"]
    assert np.all(np.diff(t) >= 0)
    assert t[0] == pytest.approx(4 * models.species("Rb87").recoil_temperature)  # T_min
    assert t[0] == pytest.approx(t[1], rel=1e-5)  # no jump at zero
    assert t[-1] == pytest.approx(doppler)  # large coefficient: Doppler theory caps it
    with pytest.raises(ModelError, match="cooling='laser' is not valid"):
        VaporCellMOT("Rb87", cooling="laser")

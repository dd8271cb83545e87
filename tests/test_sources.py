"""Tests of the slow-atom sources (models/sources.py) and BeamLoadedMOT (models/beam_mot.py)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants, integrate

from trapbudget.models import BeamLoadedMOT, Validity, VaporCellMOT, sources, species, vapor
from trapbudget.models.protocol import ModelError

RB = species("Rb87")


# --------------------------------------------------------------- Clausing factor


def _tube_transmission(length_over_radius: float, n: int, rng: np.random.Generator) -> float:
    """Monte Carlo of free-molecular flow through a tube with diffuse (cosine-law) walls.

    An independent oracle: molecules enter with the cosine law, fly straight, and are
    re-emitted from the wall with the cosine law about the local normal until they leave
    through either end (Clausing's problem, solved here by sampling, not by his formula).
    """
    length = length_over_radius
    passed = 0
    # entry: uniform on the unit disk at z = 0, cosine-law direction into +z
    r = np.sqrt(rng.random(n))
    phi = 2 * np.pi * rng.random(n)
    pos = np.stack([r * np.cos(phi), r * np.sin(phi), np.zeros(n)], axis=1)
    cos_t = np.sqrt(rng.random(n))
    psi = 2 * np.pi * rng.random(n)
    sin_t = np.sqrt(1 - cos_t**2)
    vel = np.stack([sin_t * np.cos(psi), sin_t * np.sin(psi), cos_t], axis=1)
    alive = np.ones(n, dtype=bool)
    for _ in range(10_000):
        if not alive.any():
            break
        p, v = pos[alive], vel[alive]
        # distance to the wall x^2 + y^2 = 1 along v
        a = v[:, 0] ** 2 + v[:, 1] ** 2
        b = 2 * (p[:, 0] * v[:, 0] + p[:, 1] * v[:, 1])
        c = p[:, 0] ** 2 + p[:, 1] ** 2 - 1
        with np.errstate(divide="ignore", invalid="ignore"):
            t_wall = np.where(
                a > 0, (-b + np.sqrt(np.maximum(b * b - 4 * a * c, 0))) / (2 * a), 1e30
            )
        z_hit = p[:, 2] + t_wall * v[:, 2]
        out_far = z_hit >= length
        out_back = z_hit <= 0
        idx = np.flatnonzero(alive)
        passed += int(np.count_nonzero(out_far))
        alive[idx[out_far | out_back]] = False
        stay = ~(out_far | out_back)
        hit = p[stay] + t_wall[stay, None] * v[stay]
        normal = -np.stack([hit[:, 0], hit[:, 1], np.zeros(len(hit))], axis=1)
        normal /= np.linalg.norm(normal, axis=1, keepdims=True)
        m = len(hit)
        ct = np.sqrt(rng.random(m))
        ang = 2 * np.pi * rng.random(m)
        st = np.sqrt(1 - ct**2)
        e1 = np.stack([np.zeros(m), np.zeros(m), np.ones(m)], axis=1)
        e2 = np.cross(normal, e1)
        new_v = ct[:, None] * normal + st[:, None] * (
            np.cos(ang)[:, None] * e1 + np.sin(ang)[:, None] * e2
        )
        pos[idx[stay]] = hit
        vel[idx[stay]] = new_v
    return passed / n


@pytest.mark.parametrize("ratio", [0.5, 2.0, 6.0])
def test_clausing_factor_matches_an_independent_monte_carlo_of_the_tube(ratio):
    n = 20_000
    rng = np.random.default_rng(20261203)
    measured = _tube_transmission(ratio, n, rng)
    expected = float(sources.clausing_factor(ratio, 1.0))
    # binomial standard error of the Monte Carlo, 4 sigma; Santeler's formula is quoted
    # to about 1 % of Clausing's values, added to the window
    tolerance = 4 * math.sqrt(expected * (1 - expected) / n) + 0.01 * expected
    assert measured == pytest.approx(expected, abs=tolerance)


def test_clausing_factor_limits_and_tabulated_values():
    assert float(sources.clausing_factor(0.0, 1e-3)) == 1.0  # a thin orifice
    # Knudsen long-tube limit 8R/3L (Ramsey, "Molecular Beams", ch. 2)
    assert float(sources.clausing_factor(1000.0, 1.0)) == pytest.approx(8 / 3000, rel=0.01)
    # Clausing's tabulated transmission probabilities (from memory): L/R = 1: 0.6720,
    # 2: 0.5136, 10: 0.1909; Santeler's approximation is within 1 % of them
    for ratio, table in ((1.0, 0.6720), (2.0, 0.5136), (10.0, 0.1909)):
        assert float(sources.clausing_factor(ratio, 1.0)) == pytest.approx(table, rel=0.01)


# --------------------------------------------------------------- effusive beam


def test_beam_speed_distribution_against_numerical_integrals():
    # Ramsey, "Molecular Beams" ch. 2: f(v) ~ v^3 exp(-v^2/vp^2); scipy.integrate as oracle
    vp = float(vapor.most_probable_speed(RB.mass, 400.0))
    norm, _ = integrate.quad(lambda v: float(sources.beam_speed_density(v, vp)), 0, 20 * vp)
    assert norm == pytest.approx(1.0, rel=1e-9)
    mean, _ = integrate.quad(lambda v: v * float(sources.beam_speed_density(v, vp)), 0, 20 * vp)
    assert float(sources.beam_mean_speed(vp)) == pytest.approx(mean, rel=1e-9)
    # most probable speed of the beam sqrt(3/2) vp (derivative of v^3 exp(-v^2/vp^2))
    grid = np.linspace(0.5 * vp, 2 * vp, 200_001)
    peak = grid[np.argmax(sources.beam_speed_density(grid, vp))]
    assert peak == pytest.approx(math.sqrt(1.5) * vp, rel=1e-4)
    # the slow part of the beam: P(2, x^2) = 1 - (1 + x^2) exp(-x^2)
    for vc in (20.0, 60.0, 200.0):
        slow, _ = integrate.quad(lambda v: float(sources.beam_speed_density(v, vp)), 0, vc)
        assert float(vapor.flux_fraction_slower(vc, vp)) == pytest.approx(slow, rel=1e-8)


def test_effusive_flux_is_the_hertz_knudsen_rate():
    # Hertz-Knudsen (kinetic theory, Reif ch. 7): flux per area P / sqrt(2 pi m k T), with the
    # pressure of Rb at 400 K from the arc library (Alcock et al. 1984) as an independent value
    arc = pytest.importorskip("arc")
    t, area = 400.0, 1e-6
    pressure = arc.Rubidium87().getPressure(t)
    density = pressure / (constants.k * t)
    expected = pressure * area / math.sqrt(2 * math.pi * RB.mass * constants.k * t)
    assert float(sources.effusive_flux(density, t, RB.mass, area)) == pytest.approx(
        expected, rel=1e-12
    )
    # our Alcock coefficients against arc's, within Alcock's quoted +-5 %
    ours = float(vapor.saturated_density(RB.vapor, t))
    assert ours == pytest.approx(density, rel=0.05)


def test_beam_cone_conserves_flux_and_gives_the_solid_angle_law():
    w = float(sources.clausing_factor(6.0, 1.0))
    # the whole cone: integral of j0 exp(-theta^2/W) 2 pi theta dtheta = W (in units of the
    # orifice total n vbar A / 4, with j0 = total / pi)
    whole, _ = integrate.quad(lambda th: math.exp(-th * th / w) * 2 * th, 0, 50)
    assert whole == pytest.approx(w, rel=1e-9)
    # a small disk at distance d receives j0 x pi R^2 / d^2 (on-axis solid angle, Ramsey)
    frac = float(sources.beam_fraction_into(w, 1e-3, 1.0))
    assert frac * w == pytest.approx(1e-6, rel=1e-5)


# --------------------------------------------------------------- Zeeman slower


def test_slower_capture_velocity_closed_form():
    # Phillips & Metcalf, PRL 48, 596 (1982): v_c = sqrt(v_f^2 + 2 eta a_max L)
    a_max = RB.max_acceleration
    # a_max = hbar k Gamma / 2m = 1.1e5 m/s^2 for Rb-87 (Steck's v_r Gamma / 2, [F])
    assert a_max == pytest.approx(
        0.5 * constants.hbar * 2 * math.pi / 780.241209686e-9 / RB.mass * 2 * math.pi * 6.0666e6,
        rel=1e-6,
    )
    v = sources.slower_capture_velocity(
        length=0.5, design_fraction=0.5, final_velocity=20.0, max_acceleration=a_max
    )
    assert float(v) == pytest.approx(math.sqrt(400 + a_max * 0.5), rel=1e-12)
    # a field that reaches far beyond the design changes it by under 1e-3; a low field limits
    far = sources.slower_capture_velocity(
        length=0.5,
        design_fraction=0.5,
        final_velocity=20.0,
        max_acceleration=a_max,
        field_velocity=10 * float(v),
    )
    assert float(far) == pytest.approx(float(v), rel=1e-3)
    low = sources.slower_capture_velocity(
        length=0.5,
        design_fraction=0.5,
        final_velocity=20.0,
        max_acceleration=a_max,
        field_velocity=100.0,
    )
    assert 90.0 < float(low) <= 100.0


def test_slower_light_fraction_is_the_profile_average_without_knife_edge():
    eta, w, sigma = 0.6, 5e-3, 2e-3
    threshold = eta / (1 - eta)  # a_max s/(1+s) = eta a_max
    for s0 in (1.6, 3.0, 20.0):
        # oracle: the Gaussian atomic beam's share where the local s(r) suffices (quadrature)
        def weight(r, s0=s0):
            s = s0 * math.exp(-2 * r * r / w**2)
            ok = 1.0 if s / (1 + s) >= eta else 0.0
            return ok * r * math.exp(-r * r / (2 * sigma**2)) / sigma**2

        edge = math.sqrt(0.5 * w**2 * math.log(s0 * (1 - eta) / eta)) if s0 > threshold else 0
        expected, _ = integrate.quad(weight, 0, 20 * sigma, points=[edge] if edge else None)
        got = float(sources.slower_light_fraction(s0, eta, w, sigma))
        assert got == pytest.approx(expected, abs=1e-7)
    # continuous at the threshold: zero there and a finite slope just above
    at = float(sources.slower_light_fraction(threshold, eta, w, sigma))
    above = float(sources.slower_light_fraction(threshold * (1 + 1e-6), eta, w, sigma))
    assert at == 0.0
    assert 0.0 < above < 1e-5


# --------------------------------------------------------------- 2D-MOT source


def _flux(density, length=0.03):
    return sources.transverse_source_flux(
        density,
        most_probable_speed=240.0,
        capture_velocity=30.0,
        waist=5e-3,
        cooling_length=length,
        output_velocity=12.0,
        loss_coefficient=3e-15,
        transverse_acceleration=5e4,
    )


def test_two_d_flux_saturates_with_density_and_length():
    # Dieckmann et al. 1998, Schoser et al. 2002: linear at low vapor density, saturating at
    # high; the model's closed form: Phi(2n) / Phi(n) = 1 + exp(-n K L / v_out)
    n = np.array([1e13, 1e15, 1e16, 1e17, 1e18])
    flux, lc = _flux(n)
    doubled, _ = _flux(2 * n)
    expected = 1 + np.exp(-n * 3e-15 * 0.03 / 12.0)
    np.testing.assert_allclose(doubled / flux, expected, rtol=1e-10)
    assert doubled[0] / flux[0] > 1.999  # linear
    assert doubled[-1] / flux[-1] < 1.001  # saturated
    np.testing.assert_allclose(lc, 12.0 / (n * 3e-15), rtol=1e-12)
    # along the length at a high density: the flux saturates once L exceeds L_c = 4 mm
    short, _ = _flux(1e18, 1e-3)
    long, _ = _flux(1e18, 0.1)
    longer, _ = _flux(1e18, 0.2)
    assert float(longer / long) < 2.1 and float(long / short) > 20


def test_rb_two_d_mot_flux_in_the_usual_range():
    # common practice (references.md, Dieckmann 1998 / Schoser 2002 order [M]): 1e9-1e10 Rb
    # atoms/s from a 2D-MOT source near room temperature
    model = BeamLoadedMOT("Rb87", source="2d-mot")
    result = model.evaluate({})
    assert 1e9 <= float(result["source_flux"]) <= 1e10
    assert int(result["validity"]) == 0
    # more vapor gives more flux, with diminishing returns (saturation)
    fractions = np.array([0.01, 0.02, 0.5, 1.0])
    flux = model.evaluate({"source_vapor_fraction": fractions})["source_flux"]
    assert np.all(np.diff(flux) > 0)
    # linear at low vapor, diminishing returns at high (the closed-form saturation is tested
    # above; its onset depends on the exit speed the push beam sets)
    assert flux[1] / flux[0] > 1.9 and flux[3] / flux[2] < 1.85


# --------------------------------------------------------------- BeamLoadedMOT


@pytest.mark.parametrize("source", ["oven", "zeeman-slower", "2d-mot"])
def test_beam_loaded_mot_protocol_and_shared_outputs(source):
    model = BeamLoadedMOT("Rb87", source=source)
    vapor_cell = VaporCellMOT("Rb87")
    assert set(vapor_cell.outputs) <= set(model.outputs)
    assert {"source_flux", "captured_flux"} <= set(model.outputs)
    for name in ("beam_power", "detuning", "gradient", "background_pressure"):
        assert name in model.inputs
    assert "vapor_fraction" not in model.inputs
    result = model.evaluate({"beam_power": np.full((3, 2), 0.012)})
    assert result["atom_number"].shape == (3, 2)
    # the loading rate is what the trap captures of the source (prefactor 1, fully held)
    np.testing.assert_allclose(result["loading_rate"], result["captured_flux"], rtol=1e-3)
    assert np.all(result["captured_flux"] <= result["source_flux"] + 1e-9)
    with pytest.raises(ModelError, match="unknown input 'vapor_fraction'"):
        model.evaluate({"vapor_fraction": 0.1})


def test_oven_source_flux_from_kinetic_theory():
    model = BeamLoadedMOT("Rb87", source="oven")
    x = {"oven_temperature": 400.0, "nozzle_radius": 1e-3, "nozzle_length": 5e-3}
    result = model.evaluate(x)
    # independent recomputation (Ramsey ch. 2, arc's Alcock pressure): W n vbar A / 4 x
    # (1 - exp(-theta^2 / W)), theta = waist / distance
    arc = pytest.importorskip("arc")
    n = arc.Rubidium87().getPressure(400.0) / (constants.k * 400.0)
    vbar = math.sqrt(8 * constants.k * 400.0 / (math.pi * RB.mass))
    ratio = 5.0
    w = 1 / (1 + 0.375 * ratio * (1 + 1 / (3 * (1 + ratio / 7))))  # Santeler 1986
    theta2 = (model.inputs["beam_waist"].default / model.inputs["oven_distance"].default) ** 2
    expected = w * n * vbar * math.pi * 1e-6 / 4 * (1 - math.exp(-theta2 / w))
    # arc's Rb coefficients differ from ours by 2 % at 400 K: Alcock's quoted +-5 %
    assert float(result["source_flux"]) == pytest.approx(expected, rel=0.05)
    # captured: the beam's flux below the trap's capture velocity, P(2, (vc/vp)^2)
    vp = math.sqrt(2 * constants.k * 400.0 / RB.mass)
    x2 = (float(result["capture_velocity"]) / vp) ** 2
    slow = 1 - (1 + x2) * math.exp(-x2)
    assert float(result["captured_flux"]) == pytest.approx(expected * slow, rel=0.05)
    # a colder oven gives fewer atoms; a cold oven none, flagged
    cold = model.evaluate({"oven_temperature": [350.0, 250.0]})
    assert cold["atom_number"][0] < float(result["atom_number"])
    # below Alcock's 298 K the pressure is extrapolated: flagged, still computed
    assert cold["validity"][1] & Validity.EXTRAPOLATING
    assert not cold["validity"][0] & Validity.EXTRAPOLATING


def test_slower_power_enters_smoothly_and_saturates():
    model = BeamLoadedMOT("Rb87", source="zeeman-slower")
    # threshold of the design deceleration eta = 0.5: s0 = 1 on axis
    p_threshold = RB.saturation_intensity * math.pi * 5e-3**2 / 2
    powers = p_threshold * np.array([0.5, 1.0, 1.0 + 1e-6, 1.1, 3.0, 30.0, 300.0])
    flux = model.evaluate({"slower_beam_power": powers})["captured_flux"]
    direct = flux[0]  # below threshold only the oven's slow tail arrives, and loads the trap
    dark = model.evaluate({"slower_beam_power": 0.0})
    assert float(dark["atom_number"]) > 0 and not dark["validity"] & Validity.NO_SOURCE
    assert flux[1] == pytest.approx(direct, rel=1e-12)
    assert flux[2] - direct < 1e-4 * (flux[-1] - direct)  # no knife edge at the threshold
    assert np.all(np.diff(flux[:6]) >= 0)
    assert flux[5] / flux[4] < 1.2  # saturates: the whole beam follows the field
    # far above, power broadening widens the exit velocities: the trap takes fewer
    assert flux[6] < flux[5]


def test_slower_capture_velocity_reaches_the_trap():
    # the slowed atoms arrive at v_f; a trap whose capture velocity lies far below v_f
    # captures almost none of them (exit spread Gamma sqrt(1+s)/2k)
    model = BeamLoadedMOT("Rb87", source="zeeman-slower")
    fast = model.evaluate({"slower_final_velocity": [15.0, 80.0]})
    assert fast["captured_flux"][1] < 0.05 * fast["captured_flux"][0]


def test_bad_source_and_scenario_registry(tmp_path):
    with pytest.raises(ModelError, match="source='slower' is not valid"):
        BeamLoadedMOT("Rb87", source="slower")  # type: ignore[arg-type]
    from trapbudget.sensitivity import load_scenario
    from trapbudget.sensitivity.errors import ScenarioError

    path = tmp_path / "s.toml"
    text = """
[scenario]
title = "test"
species = "Rb87"
model = "BeamLoadedMOT"
[scenario.options]
source = "{source}"
[inputs.slower_beam_power]
nominal = "30 mW"
tolerance = "10 %"
"""
    path.write_text(text.format(source="zeeman-slower"), encoding="utf-8")
    scenario = load_scenario(path)
    assert "slower_beam_power" in scenario.inputs
    path.write_text(text.format(source="slow"), encoding="utf-8")
    with pytest.raises(ScenarioError, match="source='slow' is not valid"):
        load_scenario(path)


# --------------------------------------------------------------- impossible vapor, gravity


def test_impossible_vapor_is_capped_and_flagged_heated_cells_are_not():
    # Alcock et al. 1984 via arc: Sr at 298 K has a vapor pressure near 1e-18 Pa, far below
    # a 1e8 cm^-3 vapor; Li at room temperature likewise
    for name in ("Sr88", "Li7"):
        model = VaporCellMOT(name, vapor_source="density")
        result = model.evaluate({"vapor_density": 1e14, "cell_temperature": 298.15})
        assert result["validity"] & Validity.SUPERSATURATED
        assert float(result["atom_number"]) < 1.0
        assert "cell_temperature" in Validity.SUPERSATURATED.__doc__  # the fix is named
    # a heated Rb cell (350 K) at half its saturated density is legitimate
    rb = VaporCellMOT("Rb87", vapor_source="density")
    n_sat = float(vapor.saturated_density(RB.vapor, 350.0))
    ok = rb.evaluate({"vapor_density": 0.5 * n_sat, "cell_temperature": 350.0})
    assert not ok["validity"] & Validity.SUPERSATURATED


def test_weak_light_force_and_recoil_flags():
    rb = VaporCellMOT("Rb87").evaluate({})
    assert not rb["validity"] & (Validity.WEAK_LIGHT_FORCE | Validity.RECOIL_LIMITED)
    red = VaporCellMOT("Sr88-689", vapor_source="density")
    # a_max = hbar k Gamma / 2m is about 16 g on the 689 nm line (issue, [F]); s = 1 gives 8 g
    assert red.species.max_acceleration / constants.g == pytest.approx(15.8, abs=0.2)
    p_s1 = red.species.saturation_intensity * math.pi * 5e-3**2 / 2
    low = red.evaluate({"beam_power": p_s1, "vapor_density": 0.0})
    assert low["validity"] & Validity.WEAK_LIGHT_FORCE
    assert low["validity"] & Validity.RECOIL_LIMITED  # recoil shift 0.64 linewidths


# --------------------------------------------------------------- the engine, unchanged


def _scenario(model, options, name, inputs, output, limit):
    from trapbudget.sensitivity.scenario.core import Scenario

    return Scenario.from_dict(
        {
            "scenario": {"title": "t", "model": model, "options": options, "species": name},
            "inputs": inputs,
            "outputs": {"names": [output]},
            "settings": {"n_samples": 256, "method": "sobol", "seed": 3},
            "requirements": [{"output": output, "at_least": limit, "probability": 0.9}],
            "costs": {
                k: {"smooth": {"tolerance": v["tolerance"], "cost": 100.0, "exponent": 1.0}}
                for k, v in inputs.items()
            },
        }
    )


ENGINE_CASES = [
    ("BeamLoadedMOT", {"source": "oven"}, "Sr88", "oven_temperature", "10 K"),
    ("BeamLoadedMOT", {"source": "zeeman-slower"}, "Rb87", "slower_beam_power", "10 %"),
    ("BeamLoadedMOT", {"source": "2d-mot"}, "Rb87", "source_beam_power", "10 %"),
    ("NarrowLineMOT", {}, "Sr88-689", "capture_power", "10 %"),
]


@pytest.mark.parametrize(("model", "options", "name", "driver", "tolerance"), ENGINE_CASES)
def test_rank_spec_and_compare_run_on_the_new_models(model, options, name, driver, tolerance):
    from trapbudget.sensitivity import allocate, compare, rank
    from trapbudget.sensitivity.scenario.registry import MODELS

    base = MODELS[model](name, **options)

    def written(key):
        spec = base.inputs[key]
        return f"{spec.default!r} {spec.unit}".strip()

    inputs = {
        "detuning": {"nominal": written("detuning"), "tolerance": "1 %"},
        driver: {"nominal": written(driver), "tolerance": tolerance},
    }
    scenario = _scenario(model, options, name, inputs, "atom_number", 1.0)
    budget = rank(scenario.model, scenario.inputs, n_samples=64, rng=1)
    first = budget["first_order"].sel(output="atom_number").values
    assert np.all(np.isfinite(first)) and first.sum() < 1.2
    allocation = allocate(scenario, n_samples=256, rng=1)
    assert allocation.feasible
    same = compare(scenario, scenario, n_samples=256, rng=1)
    assert float(same["mean_change"].sel(output="atom_number")) == 0.0


# --------------------------------------------------------------- demo and cross-source compare


@pytest.mark.parametrize(
    "name", ["harrier-rb87-2dmot.toml", "harrier-sr88-blue.toml", "harrier-sr88-red.toml"]
)
def test_invented_demo_scenarios_load_and_predict(name):
    from importlib import resources

    from trapbudget.sensitivity import load_scenario

    path = resources.files("trapbudget.examples") / name
    text = path.read_text(encoding="utf-8")
    assert "INVENTED DEMO" in text  # demo data is labelled as invented (house rules)
    scenario = load_scenario(path)
    result = scenario.model.evaluate({})
    assert float(result["atom_number"]) > 0
    assert int(result["validity"]) & ~int(scenario.model.advisory_flags) == 0


def test_compare_across_sources_keeps_the_shared_outputs_and_names_the_rest():
    from importlib import resources

    from trapbudget.reports.compare import comparison_rich_tables, plain_summary
    from trapbudget.sensitivity import compare, load_scenario

    folder = resources.files("trapbudget.examples")
    cell = load_scenario(folder / "harrier-rb87.toml")
    source = load_scenario(folder / "harrier-rb87-2dmot.toml")
    ds = compare(cell, source, n_samples=256, rng=2)
    assert list(ds["output"].values) == list(cell.outputs)
    assert ds.attrs["model_before"] == "VaporCellMOT"
    assert ds.attrs["model_after"] == "BeamLoadedMOT"
    assert ds.attrs["outputs_left_out"] == ""
    # the other way round, the source's own output has no counterpart in the vapor cell
    back = compare(source, cell, n_samples=256, rng=2)
    assert back.attrs["outputs_left_out"] == "source_flux"
    assert "source_flux" not in list(back["output"].values)
    summary = plain_summary(back)
    assert "different models" in summary and "source_flux" in summary
    assert "left out" in str(comparison_rich_tables(back)[0].caption)
    # UHV and a 2D-MOT: more atoms, a longer loading time (background loss a hundredfold lower)
    change = ds["mean_change"]
    assert float(change.sel(output="atom_number")) > 0
    assert float(change.sel(output="loading_time")) > 0


def _slower_exit_speeds(v0, s, eta, length, v_f, steps=4000):
    """Exit speeds through an ideal slower, by RK4 on the local force law (independent oracle).

    The field is designed for the deceleration eta a_max: an atom at v, z sees the detuning
    k (v - v_res(z)), v_res = sqrt(v_c^2 - 2 eta a_max z), and decelerates by
    a_max s / (1 + s + (2 k (v - v_res) / Gamma)^2) (Metcalf & van der Straten ch. 6).
    """
    a_max, k, gamma = RB.max_acceleration, RB.wavenumber, RB.linewidth
    v_c2 = v_f**2 + 2 * eta * a_max * length

    def slope(z, v):
        v_res = np.sqrt(np.maximum(v_c2 - 2 * eta * a_max * z, 0.0))
        x = 2 * k * (v - v_res) / gamma
        return -a_max * s / (1 + s + x * x) / np.maximum(v, 1.0)

    v, h = np.array(v0, dtype=float), length / steps
    for i in range(steps):
        z = i * h
        k1 = slope(z, v)
        k2 = slope(z + h / 2, v + h / 2 * k1)
        k3 = slope(z + h / 2, v + h / 2 * k2)
        k4 = slope(z + h, v + h * k3)
        v = v + h / 6 * (k1 + 2 * k2 + 2 * k3 + k4)
    return v


def test_slower_capture_velocity_against_trajectories():
    # Phillips & Metcalf 1982: atoms below sqrt(v_f^2 + 2 eta a_max L) follow the field to v_f;
    # checked by integrating the force law (RK4), capture within the resonance width
    # Gamma sqrt(1 + s) / k of the closed form
    eta, length, v_f = 0.5, 0.5, 20.0
    v0 = np.arange(100.0, 320.0, 0.5)
    for s in (3.0, 10.0):
        exits = _slower_exit_speeds(v0, s, eta, length, v_f)
        width = RB.linewidth * math.sqrt(1 + s) / RB.wavenumber
        followed = v0[np.abs(exits - v_f) < width]
        closed = float(
            sources.slower_capture_velocity(
                length=length,
                design_fraction=eta,
                final_velocity=v_f,
                max_acceleration=RB.max_acceleration,
            )
        )
        assert abs(followed.max() - closed) < width
    # below the threshold s / (1 + s) = eta the atoms cannot follow the designed field
    weak = _slower_exit_speeds(v0, 0.6, eta, length, v_f)
    assert not np.any(np.abs(weak - v_f) < 2 * RB.linewidth / RB.wavenumber)


# --------------------------------------------------------------- 2D-MOT push beam


def _push_kwargs(sp, saturation, detuning, other=0.0):
    return {
        "saturation": saturation,
        "detuning": detuning,
        "other_saturation": other,
        "max_acceleration": sp.max_acceleration,
        "wavenumber": sp.wavenumber,
        "linewidth": sp.linewidth,
    }


@pytest.mark.parametrize(
    ("saturation", "detuning", "start"),
    [(0.5, 0.0, 0.0), (5.0, -6e6, 3.0), (2.0, 6e6, 20.0), (0.1, -12e6, 10.0)],
)
def test_push_exit_velocity_against_scipy_trajectories(saturation, detuning, start):
    # independent integration in time of dv/dt = a(v), dz/dt = v (scipy solve_ivp, an event
    # at the end of the path), with the rate-equation force written out here
    # (Metcalf & van der Straten 1999, ch. 7: a_max s L / (1 + s L + s_other))
    from scipy.integrate import solve_ivp

    from trapbudget.models import species

    sp = species("Rb87")
    distance, other = 0.015, 1.0
    kw = _push_kwargs(sp, saturation, detuning, other)
    got = float(sources.push_exit_velocity(distance, start_velocity=start, **kw))

    def accel(v):
        delta = 2 * math.pi * detuning - sp.wavenumber * v
        lorentz = 1 / (1 + 4 * delta**2 / sp.linewidth**2)
        return sp.max_acceleration * saturation * lorentz / (1 + saturation * lorentz + other)

    def rhs(t, y):
        return [y[1], accel(y[1])]

    def end(t, y):
        return y[0] - distance

    end.terminal = True
    sol = solve_ivp(rhs, (0, 10.0), [0.0, start], events=end, rtol=1e-10, atol=1e-12)
    assert got == pytest.approx(float(sol.y_events[0][0][1]), rel=2e-4)


def test_push_far_wing_speed_grows_as_the_fourth_root_of_the_path():
    # far in the wing (k v >> Gamma sqrt(1 + s)) a = C / v^2, C = a_max s Gamma^2 / (4 k^2);
    # v dv = a dz gives v^4 - v0^4 = 4 C z (closed form derived from the force law)
    from trapbudget.models import species

    sp = species("Rb87")
    s, z, v0 = 0.05, 0.2, 25.0
    got = float(sources.push_exit_velocity(z, start_velocity=v0, **_push_kwargs(sp, s, 0.0)))
    c = sp.max_acceleration * s * sp.linewidth**2 / (4 * sp.wavenumber**2)
    expected = (v0**4 + 4 * c * z) ** 0.25
    # the neglected 1 beside 4 k^2 v^2 / Gamma^2 (about 112 here) shifts v^4 - v0^4 by 1 %
    assert got**4 - v0**4 == pytest.approx(expected**4 - v0**4, rel=0.02)
    assert got > v0


def test_push_beam_turns_round_backward_atoms_and_raises_the_flux():
    # no push beam: half the cooled atoms leave (the other half towards the back); a push
    # beam that stops every backward atom doubles the rate of atoms sent to the exit
    assert float(sources.push_stopped_fraction(0.0, 50.0, 240.0)) == 0.0
    assert float(sources.push_stopped_fraction(1e4, 50.0, 240.0)) == pytest.approx(1.0, rel=1e-3)
    common = {
        "most_probable_speed": 240.0,
        "capture_velocity": 30.0,
        "waist": 5e-3,
        "cooling_length": 0.03,
        "output_velocity": 12.0,
        "loss_coefficient": 0.0,
        "transverse_acceleration": 5e4,
    }
    alone, _ = sources.transverse_source_flux(1e15, **common)
    pushed, _ = sources.transverse_source_flux(1e15, turned_fraction=1.0, **common)
    assert float(pushed / alone) == pytest.approx(2.0, rel=1e-12)
    # in the model: flux and exit speed rise with push power, smoothly and saturating
    model = BeamLoadedMOT("Rb87", source="2d-mot")
    power = np.array([0.0, 1e-4, 3e-4, 1e-3, 3e-3])
    out = model.evaluate({"push_power": power})
    flux, speed = out["source_flux"], out["source_velocity"]
    assert np.all(np.diff(flux) > 0) and np.all(np.diff(speed) >= 0)
    assert flux[-1] / flux[0] < 2.0
    assert np.all(np.diff(np.diff(flux)) < 0) or flux[-1] / flux[-2] < 1.1

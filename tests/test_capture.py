"""Capture velocity: the vectorized backward solver against a per-sample scipy integrator,
the force against the molasses and MOT closed forms, and the trade's rules of thumb."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import constants, optimize

from trapbudget.models import ModelError
from trapbudget.models.capture import (
    STOP_SPEED,
    capture_radius,
    capture_velocity,
    capture_velocity_bound,
    capture_velocity_reference,
    mirrored_path,
    scattering_acceleration,
)
from trapbudget.models.catalog import species
from trapbudget.models.cooling import damping_coefficient, spring_constant
from trapbudget.models.light import peak_intensity

RB = species("Rb87")
CS = species("Cs133")


def _atom(sp):
    return {
        "wavenumber": sp.wavenumber,
        "linewidth": sp.linewidth,
        "mass": sp.mass,
        "zeeman_coefficient": sp.zeeman_coefficient,
    }


def _draws(n, rng, sp=RB):
    """Seeded spread of realistic cells: power, waist, detuning, gradient, offset, imbalance."""
    waist = rng.uniform(2e-3, 10e-3, n)
    power = 10 ** rng.uniform(-3, -1.5, n)
    cases = []
    for i in range(n):
        cases.append(
            {
                "saturation": float(peak_intensity(power[i], waist[i]) / sp.saturation_intensity),
                "detuning": float(-rng.uniform(0.7, 5.0) * sp.linewidth_hz),
                "waist": float(waist[i]),
                "capture_radius": float(capture_radius(waist[i], waist[i] * rng.uniform(1.2, 3))),
                "gradient": float(rng.uniform(0.025, 0.15)),
                "beam_offset": float(rng.uniform(-0.3, 0.3) * waist[i]),
                "imbalance": float(rng.uniform(0.0, 0.2)),
                "bias_field": float(rng.normal(0.0, 2e-6)),
                "bright_fraction": float(rng.uniform(0.8, 1.0)),
                **_atom(sp),
            }
        )
    return cases


@pytest.mark.slow
@pytest.mark.parametrize(("sp", "seed", "n"), [(RB, 20261201, 18), (CS, 7, 6)])
def test_vectorized_matches_reference_integrator(sp, seed, n):
    # reference: scipy.integrate.solve_ivp (DOP853) forward trajectories + scipy.optimize.brentq
    # half of the cases enter from the other side (slowed by the incoming beam)
    cases = _draws(n, np.random.default_rng(seed), sp)
    directions = [1 if i % 2 else -1 for i in range(n)]
    reference = np.array(
        [
            capture_velocity_reference(**c, rtol=1e-8, direction=d)
            for c, d in zip(cases, directions, strict=True)
        ]
    )
    fast = np.array(
        [
            float(capture_velocity(c["saturation"], c["detuning"], direction=d, **_rest(c)))
            for c, d in zip(cases, directions, strict=True)
        ]
    )
    assert np.all(reference > 1.0)  # these draws all capture
    np.testing.assert_allclose(fast, reference, rtol=0.01)


def _rest(case):
    return {k: v for k, v in case.items() if k not in ("saturation", "detuning")}


def test_mirrored_path_is_the_mirror_image_of_the_force():
    # x -> -x swaps the incoming and returning beams: a(x, v) = -a'(-x, -v) (parity of the
    # Metcalf & van der Straten two-beam force)
    rng = np.random.default_rng(4)
    n = 200
    args = {
        "saturation": rng.uniform(0.5, 10, n),
        "beam_offset": rng.uniform(-2e-3, 2e-3, n),
        "imbalance": rng.uniform(0, 0.5, n),
        "bias_field": rng.normal(0, 1e-5, n),
    }
    names = ("saturation", "beam_offset", "imbalance", "bias_field")
    mirrored = dict(zip(names, mirrored_path(**args), strict=True))
    x = rng.uniform(-1e-2, 1e-2, n)
    v = rng.uniform(-40, 40, n)
    common = {"waist": 5e-3, "detuning": -12e6, "gradient": 0.1, **_atom(RB)}
    direct = scattering_acceleration(x, v, **args, **common)
    image = scattering_acceleration(-x, -v, **mirrored, **common)
    np.testing.assert_allclose(direct, -image, rtol=1e-12, atol=1e-9)


def test_both_directions_agree_for_a_symmetric_pair():
    kw = {"waist": 5e-3, "capture_radius": 1e-2, "gradient": 0.05, **_atom(RB)}
    one = capture_velocity(5.0, -12e6, **kw)
    other = capture_velocity(5.0, -12e6, direction=-1, **kw)
    assert float(one) == pytest.approx(float(other), rel=1e-9)
    # with an imbalance the atom slowed by the stronger (incoming) beam is captured faster
    weak = capture_velocity(5.0, -12e6, imbalance=0.2, **kw)
    strong = capture_velocity(5.0, -12e6, imbalance=0.2, direction=-1, **kw)
    assert float(strong) > float(weak)
    with pytest.raises(ModelError, match="direction=0 is not valid"):
        capture_velocity(5.0, -12e6, direction=0, **kw)


def test_zero_gradient_molasses_matches_reference():
    # molasses (no gradient): atoms are still slowed; same criterion in both solvers (scipy check)
    case = {
        "saturation": 3.0,
        "detuning": -12e6,
        "waist": 5e-3,
        "capture_radius": 1e-2,
        "gradient": 0.0,
        **_atom(RB),
    }
    reference = capture_velocity_reference(**case)
    fast = capture_velocity(case.pop("saturation"), case.pop("detuning"), **case)
    assert reference > 1.0
    assert float(fast) == pytest.approx(reference, rel=0.01)


def test_never_exceeds_the_maximum_deceleration_bound():
    # Metcalf & van der Straten 1999 ch. 3: |F| <= hbar k Gamma / 2, so vc^2 <= 2 a_max r + vs^2
    rng = np.random.default_rng(3)
    n = 4000
    waist = rng.uniform(1e-3, 2e-2, n)
    radius = capture_radius(waist, rng.uniform(1, 3, n) * waist)
    vc = capture_velocity(
        10 ** rng.uniform(-1, 3, n),
        -(10 ** rng.uniform(5.5, 8.0, n)),
        waist=waist,
        capture_radius=radius,
        gradient=10 ** rng.uniform(-3, 0, n),
        beam_offset=rng.uniform(-0.5, 0.5, n) * waist,
        imbalance=rng.uniform(0, 0.5, n),
        **_atom(RB),
    )
    bound = capture_velocity_bound(
        radius, wavenumber=RB.wavenumber, linewidth=RB.linewidth, mass=RB.mass
    )
    assert np.all(np.isfinite(vc))
    assert np.all(vc <= bound)
    # the bound is the formula: sqrt(2 a_max 2R + v_stop^2) with a_max from the species record
    assert bound[0] == pytest.approx(np.sqrt(4 * RB.max_acceleration * radius[0] + STOP_SPEED**2))


def test_honest_limits():
    # zero power and blue detuning: no slowing at all (exactly 0); zero gradient: molasses only
    kw = {"waist": 5e-3, "capture_radius": 1e-2, **_atom(RB)}
    assert float(capture_velocity(0.0, -12e6, gradient=0.1, **kw)) == 0.0
    assert float(capture_velocity(5.0, 0.0, gradient=0.1, **kw)) == 0.0
    assert float(capture_velocity(5.0, +12e6, gradient=0.1, **kw)) == 0.0
    assert float(capture_velocity(5.0, -12e6, gradient=0.1, bright_fraction=0.0, **kw)) == 0.0
    molasses = float(capture_velocity(5.0, -12e6, gradient=0.0, **kw))
    trap = float(capture_velocity(5.0, -12e6, gradient=0.05, **kw))
    assert 0.0 < molasses < trap


def test_rubidium_centimetre_beams_rule_of_thumb():
    # common practice: a Rb MOT with ~1 cm beams captures atoms up to about 30-40 m/s;
    # beam-size convention: 1/e^2 diameter 1 cm (waist 5 mm); best detuning and power on a grid
    waist = 5e-3
    detuning = np.linspace(-60e6, -3e6, 58)[:, None]
    power = np.array([1e-3, 3e-3, 10e-3, 30e-3])[None, :]
    vc = capture_velocity(
        peak_intensity(power, waist) / RB.saturation_intensity,
        detuning,
        waist=waist,
        capture_radius=capture_radius(waist),
        gradient=0.05,  # radial gradient of a 10 G/cm quadrupole
        **_atom(RB),
    )
    assert 15.0 <= vc.max() <= 80.0  # within a factor two of 30-40 m/s
    # Foot, "Atomic Physics" (2005) ch. 9: D = 2 cm beams give about 25 m/s for Rb: same order
    big = capture_velocity(
        peak_intensity(10e-3, 1e-2) / RB.saturation_intensity,
        -12e6,
        waist=1e-2,
        capture_radius=capture_radius(1e-2),
        gradient=0.05,
        **_atom(RB),
    )
    assert 12.5 <= float(big) <= 50.0


def test_low_velocity_force_gives_the_molasses_damping_and_spring_constants():
    # Metcalf & van der Straten 1999 (references.md): Rb-87, s0 = 1, delta = -Gamma/2:
    # beta = 3.04e-21 kg/s; kappa = mu' A beta / (hbar k); the two-beam force expands to both
    det = -RB.linewidth_hz / 2
    kw = {
        "saturation": 1.0,
        "waist": 1.0,  # wide beam: uniform intensity near the centre
        "detuning": det,
        "gradient": 0.1,
        **_atom(RB),
    }
    h = 1e-4
    dv = (scattering_acceleration(0.0, h, **kw) - scattering_acceleration(0.0, -h, **kw)) / (2 * h)
    damping = -RB.mass * float(dv)
    assert damping == pytest.approx(3.04e-21, rel=5e-3)
    assert damping == pytest.approx(
        float(damping_coefficient(1.0, det, RB.linewidth, RB.wavenumber)), rel=1e-6
    )
    hx = 1e-7
    dx = (scattering_acceleration(hx, 0.0, **kw) - scattering_acceleration(-hx, 0.0, **kw)) / (
        2 * hx
    )
    kappa = -RB.mass * float(dx)
    expected = spring_constant(damping, RB.zeeman_coefficient, 0.1, RB.wavenumber)
    assert kappa == pytest.approx(float(expected), rel=1e-4)


def test_force_saturates_at_hbar_k_gamma_over_two():
    # Metcalf & van der Straten 1999 ch. 3: F -> hbar k Gamma / 2 for one saturated resonant beam
    # (backward beam removed, imbalance = 1)
    acc = scattering_acceleration(
        0.0, 0.0, saturation=1e6, waist=1.0, detuning=0.0, gradient=0.0, imbalance=1.0, **_atom(RB)
    )
    assert float(acc) == pytest.approx(constants.hbar * RB.wavenumber * RB.linewidth / 2 / RB.mass)
    assert float(acc) == pytest.approx(RB.max_acceleration, rel=1e-5)


def test_clipping_removes_light_beyond_the_aperture():
    kw = {"saturation": 5.0, "waist": 5e-3, "detuning": -12e6, "gradient": 0.1, **_atom(RB)}
    inside = scattering_acceleration(3e-3, 10.0, aperture_radius=4e-3, **kw)
    outside = scattering_acceleration(5e-3, 10.0, aperture_radius=4e-3, **kw)
    assert float(inside) != 0.0
    assert float(outside) == 0.0


def test_broadcasting_and_chunking_agree_with_elementwise():
    rng = np.random.default_rng(11)
    n = 5000  # above the internal chunk size
    sat = rng.uniform(1, 10, n)
    det = -rng.uniform(5e6, 25e6, n)
    kw = {"waist": 5e-3, "capture_radius": 1e-2, "gradient": 0.05, **_atom(RB)}
    whole = capture_velocity(sat, det, **kw)
    picks = rng.integers(0, n, 5)
    for i in picks:
        assert float(capture_velocity(sat[i], det[i], **kw)) == pytest.approx(whole[i], rel=1e-12)
    grid = capture_velocity(sat[:3, None], det[None, :4], **kw)
    assert grid.shape == (3, 4)
    assert grid[2, 1] == pytest.approx(float(capture_velocity(sat[2], det[1], **kw)), rel=1e-12)


def test_step_count_is_converged():
    # fixed-step RK4 at the default step count vs a 40x finer grid (same equation)
    rng = np.random.default_rng(5)
    n = 500
    waist = rng.uniform(2e-3, 12e-3, n)
    kw = {
        "waist": waist,
        "capture_radius": capture_radius(waist),
        "gradient": rng.uniform(0.025, 0.15, n),
        "beam_offset": rng.uniform(-0.2, 0.2, n) * waist,
        "imbalance": rng.uniform(0, 0.1, n),
        **_atom(RB),
    }
    sat = 10 ** rng.uniform(-0.5, 1.5, n)
    det = -rng.uniform(1, 4, n) * RB.linewidth_hz
    coarse = capture_velocity(sat, det, **kw)
    fine = capture_velocity(sat, det, n_steps=2000, **kw)
    np.testing.assert_allclose(coarse, fine, rtol=2e-3)


def test_optimum_detuning_is_red_of_a_linewidth():
    # common practice: the capture velocity peaks at a red detuning of one to several linewidths
    waist = 5e-3
    kw = {"waist": waist, "capture_radius": capture_radius(waist), "gradient": 0.05, **_atom(RB)}

    def minus_vc(x):
        return -float(capture_velocity(5.0, x * 1e6, **kw))

    best = optimize.minimize_scalar(minus_vc, bounds=(-80, -0.5), method="bounded").x
    assert -8 * RB.linewidth_hz / 1e6 < best < -1 * RB.linewidth_hz / 1e6


def test_rejects_too_few_steps():
    with pytest.raises(ModelError, match="n_steps=2 is too small"):
        capture_velocity(
            1.0, -1e7, waist=5e-3, capture_radius=1e-2, gradient=0.1, n_steps=2, **_atom(RB)
        )

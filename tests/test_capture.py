"""Capture: the line kernel against an independent 3-D reference, closed forms and bounds;
the shipped table and its corrections against the line integrals they stand for."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants

from trapbudget.models import _kernels, capture, capture_reference, curved_paths, mot
from trapbudget.models.capture import (
    aligned_moments,
    dimensionless,
    line_average,
    line_quadrature,
)
from trapbudget.models.catalog import species
from trapbudget.models.cooling import shared_damping_coefficient, spring_constant
from trapbudget.models.vapor import most_probable_speed

RB = species("Rb87")
CS = species("Cs133")
BASE = (25.0, 4.6, 2.0, 2.3)  # eta, s0, -delta/Gamma, zeta: Rb-87, 5 mm waist, 10 G/cm
FULL = line_quadrature(20, 32, 5, 8, symmetric=False)


def _atom(sp):
    return {
        "wavenumber": sp.wavenumber,
        "linewidth": sp.linewidth,
        "mass": sp.mass,
        "zeeman_coefficient": sp.zeeman_coefficient,
    }


def test_constants_agree_between_the_modules():
    # one stated capture criterion: stop speed, trap radius, extent of the light
    for name in ("LIGHT_RADIUS", "TRAP_RADIUS"):
        assert (
            getattr(capture, name) == getattr(_kernels, name) == getattr(capture_reference, name)
        )
    assert capture.STOP_SPEED == _kernels.STOP_SPEED


def test_reference_force_is_bounded_by_hbar_k_gamma_over_two():
    # Metcalf & van der Straten 1999 ch. 2-3: excited population <= 1/2, so for any light
    # |F| <= hbar k Gamma / 2 (in units of eta: |a| <= eta); one beam saturated on resonance
    # approaches it
    rng = np.random.default_rng(2)
    pos = rng.uniform(-3, 3, (5000, 3))
    vel = rng.uniform(-20, 20, (5000, 3))
    for s0 in (1.0, 100.0, 1e5):
        a = capture_reference.acceleration(
            pos, vel, eta=1.0, saturation=s0, red_detuning=1.0, zeta=2.0
        )
        assert np.all(np.linalg.norm(a, axis=1) <= 1.0 + 1e-12)
    one = capture_reference.acceleration(
        np.zeros(3),
        np.zeros(3),
        eta=1.0,
        saturation=1e8,
        red_detuning=0.0,
        zeta=0.0,
        imbalance=1.0,
    )
    assert one[0] == pytest.approx(1.0 / 3.0, rel=1e-6)  # three saturated beams share it


def test_reference_force_expands_to_the_damping_and_spring_constants():
    # the 3-D reference force, linearized at the centre, against the closed forms of
    # cooling.shared_damping_coefficient and spring_constant (Metcalf & van der Straten ch. 7)
    s0, red, zeta = 1.5, 1.2, 3.0
    eta = 1.0
    h = 1e-6
    kw = {"eta": eta, "saturation": s0, "red_detuning": red, "zeta": zeta}
    # wide-beam limit near the centre: positions of 1e-6 waists
    ax = capture_reference.acceleration(np.array([0.0, 0, 0]), np.array([h, 0, 0]), **kw)
    dv = -ax[0] / h  # units eta (Gamma/k)^2 / w per (Gamma/k)
    det = -red * RB.linewidth_hz
    beta = shared_damping_coefficient(s0, 6 * s0, det, RB.linewidth, RB.wavenumber)
    a_max = RB.max_acceleration
    # convert: a = eta g; physical slope = m a_max g' k / Gamma with g' per (Gamma/k)
    assert dv * RB.mass * a_max * RB.wavenumber / RB.linewidth == pytest.approx(
        float(beta), rel=1e-5
    )
    az = capture_reference.acceleration(np.array([0.0, 0, h]), np.zeros(3), **kw)
    w = 1.0  # one waist, in metres: zeta fixes the gradient
    gradient = zeta * constants.hbar * RB.linewidth / (2 * abs(RB.zeeman_coefficient) * w)
    kappa = spring_constant(beta, abs(RB.zeeman_coefficient), gradient, RB.wavenumber)
    assert -az[2] / h * RB.mass * a_max / w == pytest.approx(float(kappa), rel=1e-5)


@pytest.mark.slow
@pytest.mark.parametrize(
    ("params", "low", "high"),
    [(BASE, 0.93, 1.03), ((15.0, 2.0, 1.6, 1.5), 0.90, 1.05)],
)
def test_straight_lines_against_3d_trajectories(params, low, high):
    # independent reference: curved 3-D trajectories (scipy solve_ivp) on the same lines,
    # impact parameters out to 1.5 trap radii (curved paths from outside the trap disk are
    # captured too; straight lines there never are). Measured 3-D / straight = 0.98 on the Rb
    # default; window from that measurement. These 48 directions are coarse for curved paths
    # (the ratio is a check of the two solvers on the same lines, not the physics' ratio:
    # test_model_capture_against_3d_trajectories uses the symmetric set)
    lines = capture_reference.reference_lines(6, 8, 4, 6, reach=1.5)
    ref4, _ = capture_reference.reference_moments(*params, lines=lines, n_bisect=12)
    line4, _ = line_average(*params, quadrature=lines)
    assert low < ref4 / line4 < high


@pytest.mark.slow
@pytest.mark.parametrize(
    "params",
    # off the correction's nodes; the straight-line table alone is 45 % low on the first
    # and 55 % high on the second (measured 2026-12-03)
    [(10.7, 4.12, 2.40, 2.29), (47.9, 7.52, 1.39, 9.61)],
)
def test_model_capture_against_3d_trajectories(params):
    # independent reference: curved 3-D trajectories (scipy solve_ivp, the reference's own
    # force code) over the aligned trap's symmetric directions with impact parameters to
    # 1.5 trap radii, against the model's aligned means (table times curved-path factor).
    # Measured model / reference 1.020 and 1.033 on these 288 lines (1.013 and 1.004 on 480);
    # the window allows for this quadrature (3 %) and the factor's interpolation
    d, i, w = line_quadrature(4, 3, 4, 6)
    ref4, _ = capture_reference.reference_moments(
        *params, lines=(d, i * 1.5, w * 2.25), n_bisect=12
    )
    table4 = float(aligned_moments(*params)[0])
    model4 = table4 * float(curved_paths.curved_path_factor(*params))
    assert model4 / ref4 == pytest.approx(1.0, abs=0.08)
    assert abs(table4 / ref4 - 1.0) > 0.3  # what the factor corrects here


def test_curved_path_factor_is_finite_and_bounded_over_the_inputs():
    # every combination, inside and beyond the correction grid, gives a finite factor within
    # the range of the stored nodes (linear interpolation, edges held)
    rng = np.random.default_rng(3)
    n = 20000
    eta = np.exp(rng.uniform(math.log(0.1), math.log(3000.0), n))
    s0 = np.exp(rng.uniform(math.log(0.01), math.log(1000.0), n))
    red = rng.uniform(0.0, 20.0, n)
    zeta = np.exp(rng.uniform(math.log(1e-3), math.log(300.0), n))
    zeta[:100] = 0.0
    f = curved_paths.curved_path_factor(eta, s0, red, zeta)
    stored = np.exp(curved_paths._correction()[0])
    assert np.all(np.isfinite(f))
    assert np.all((f >= stored.min() * (1 - 1e-12)) & (f <= stored.max() * (1 + 1e-12)))


def test_line_quadrature_is_converged():
    # the table's symmetric quadrature against a four times finer one, and the symmetric
    # reduction against the whole sphere (the aligned trap is symmetric under the cube's
    # rotations that keep z: 16 elements)
    coarse, _ = line_average(*BASE, quadrature=line_quadrature(*capture.TABLE_QUADRATURE))
    fine, _ = line_average(*BASE, quadrature=line_quadrature(16, 12, 8, 12))
    whole, _ = line_average(*BASE, quadrature=FULL)
    assert coarse == pytest.approx(fine, rel=0.012)
    assert fine == pytest.approx(whole, rel=0.005)


def test_step_count_is_converged():
    fine, _ = line_average(*BASE, n_steps=400)
    assert line_average(*BASE)[0] == pytest.approx(fine, rel=2e-3)


def test_table_reproduces_the_line_integrals():
    # interpolation error of the shipped table at random points of a broad range; measured
    # (2026-12-03, finer saturation, detuning and gradient axes): 5.7 % RMS, 33 % max
    # overall, 1.7 % RMS where the capture is strong (m4^(1/4) > 4, i.e. vc above 4 Gamma / k;
    # the previous table: 7.8 %, 42 %, 2.5 %); the weak-capture edges (where the capture
    # collapses and the 480-line quadrature is rough) dominate the error
    rng = np.random.default_rng(20261202)
    q = line_quadrature(*capture.TABLE_QUADRATURE)
    steps = capture.TABLE_STEPS
    direct, table = [], []
    for _ in range(60):
        p = (
            math.exp(rng.uniform(math.log(3), math.log(300))),
            math.exp(rng.uniform(math.log(0.5), math.log(100))),
            rng.uniform(0.7, 5.0),
            math.exp(rng.uniform(math.log(0.3), math.log(30))),
        )
        direct.append(line_average(*p, quadrature=q, n_steps=steps)[0])
        m4, _, outside = aligned_moments(*p)
        assert not outside
        table.append(float(m4))
    errors = np.array(table) / np.array(direct) - 1
    strong = np.array(direct) ** 0.25 > 4
    assert np.sqrt(np.mean(errors**2)) < 0.07
    assert np.max(np.abs(errors)) < 0.4
    assert np.sqrt(np.mean(errors[strong] ** 2)) < 0.022


def _model_ratio(**geometry):
    _, s0, red, zeta = BASE
    w = 5e-3
    common = {
        "waist": w,
        "gradient": zeta * constants.hbar * RB.linewidth / (2 * abs(RB.zeeman_coefficient) * w),
        "density": 1e15,
        "most_probable_speed": 240.0,
        **_atom(RB),
    }
    det = -red * RB.linewidth_hz
    base = capture.capture(s0, det, **common).loading_rate
    geometry = {k: v * w if k in ("centre", "aperture_radius") else v for k, v in geometry.items()}
    return float(capture.capture(s0, det, **common, **geometry).loading_rate / base)


@pytest.mark.parametrize(
    ("name", "value", "key", "tolerance"),
    [
        ("imbalance", 0.1, "imbalance", 0.01),
        ("aperture", 1.52, "aperture_radius", 0.012),  # a 1 % power clip
        ("aperture", 1.0, "aperture_radius", 0.03),
        ("centre", 0.5, "centre", 0.06),
        ("centre", 1.0, "centre", 0.25),
    ],
)
def test_corrections_against_the_line_integrals_of_the_real_geometry(name, value, key, tolerance):
    # the smooth corrections stand for line integrals over the displaced, imbalanced or
    # clipped light; tolerances as documented in capture.capture
    aligned, _ = line_average(*BASE, quadrature=FULL)
    real, _ = line_average(*BASE, **{name: value}, quadrature=FULL)
    assert _model_ratio(**{key: value}) == pytest.approx(real / aligned, rel=tolerance)


def test_effective_capture_velocity_is_defined_by_the_kinetic_formula():
    # Foot 2005 ch. 9: R = (1/4) n A vbar P(2, vc^2/vp^2); with A = 4 pi w^2 the effective
    # capture velocity reproduces the averaged loading rate exactly
    w = 5e-3
    vp = float(most_probable_speed(RB.mass, 298.15))
    out = capture.capture(
        4.6, -12e6, waist=w, gradient=0.1, density=1e15, most_probable_speed=vp, **_atom(RB)
    )
    again = mot.loading_rate(1e15, 4 * math.pi * w**2, out.capture_velocity, vp)
    assert float(again) == pytest.approx(float(out.loading_rate), rel=1e-9)
    # Foot 2005 ch. 9 example: about 25 m/s for Rb with centimetre beams (order of magnitude)
    assert 15.0 < float(out.capture_velocity) < 45.0


def test_honest_limits_and_bounds():
    kw = {"waist": 5e-3, "gradient": 0.1, "density": 1e15, "most_probable_speed": 240.0}
    zero = capture.capture(
        np.array([0.0, 4.6, 4.6, 4.6]),
        np.array([-12e6, 0.0, 12e6, -12e6]),
        bright_fraction=np.array([1.0, 1.0, 1.0, 0.0]),
        **kw,
        **_atom(RB),
    )
    np.testing.assert_array_equal(zero.loading_rate, 0.0)
    np.testing.assert_array_equal(zero.capture_velocity, 0.0)
    # Metcalf & van der Straten ch. 3: vc^2 <= 2 a_max L over the longest path through the
    # light (the light sphere's diameter plus the trap region), for any settings
    rng = np.random.default_rng(9)
    n = 2000
    w = rng.uniform(1e-3, 2e-2, n)
    out = capture.capture(
        10 ** rng.uniform(-1, 3, n),
        -(10 ** rng.uniform(6, 8, n)),
        waist=w,
        gradient=10 ** rng.uniform(-3, 0, n),
        density=1e15,
        most_probable_speed=240.0,
        **_atom(RB),
    )
    bound = np.sqrt(2 * RB.max_acceleration * (2 * capture.LIGHT_RADIUS + 2) * w)
    assert np.all(np.isfinite(out.capture_velocity))
    assert np.all(out.capture_velocity <= bound)


def test_dimensionless_variables():
    # eta = hbar k^3 w / (2 m Gamma) = k^2 w a_max / Gamma^2; zeta = 2 mu' A w / (hbar Gamma)
    eta, red, zeta = dimensionless(
        waist=5e-3, detuning=-RB.linewidth_hz, gradient=0.1, **_atom(RB)
    )
    assert float(eta) == pytest.approx(
        RB.wavenumber**2 * 5e-3 * RB.max_acceleration / RB.linewidth**2, rel=1e-12
    )
    assert float(red) == pytest.approx(1.0)
    mu = abs(RB.zeeman_coefficient)
    assert float(zeta) == pytest.approx(2 * mu * 0.1 * 5e-3 / (constants.hbar * RB.linewidth))

"""Quadrupole coils and Zeeman shifts, checked against Biot-Savart and scipy.constants."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import constants, integrate, optimize, special

from trapbudget.models.field import (
    coil_gradient,
    radial_gradient,
    trap_centre_shift,
    zeeman_shift,
)

MU0 = constants.mu_0
GAUSS_PER_CM = 1e-2  # 1 G/cm = 1e-4 T / 1e-2 m = 1e-2 T/m


def _loop_field(current, radius, z0, rho, z):
    """(B_rho, B_z) of one circular loop at height z0, from the elliptic-integral form.

    Exact off-axis field of a current loop (J. D. Jackson, "Classical Electrodynamics",
    3rd ed., sec. 5.5; scipy.special.ellipk/ellipe use the parameter m = k^2).
    """
    dz = z - z0
    alpha2 = radius**2 + rho**2 + dz**2 - 2 * radius * rho
    beta2 = radius**2 + rho**2 + dz**2 + 2 * radius * rho
    m = 1 - alpha2 / beta2
    k_, e_ = special.ellipk(m), special.ellipe(m)
    c = MU0 * current / math.pi
    bz = c / (2 * alpha2 * math.sqrt(beta2)) * ((radius**2 - rho**2 - dz**2) * e_ + alpha2 * k_)
    if rho == 0:
        return 0.0, bz
    brho = (
        c
        * dz
        / (2 * alpha2 * math.sqrt(beta2) * rho)
        * ((radius**2 + rho**2 + dz**2) * e_ - alpha2 * k_)
    )
    return brho, bz


def _pair_field(current, turns, radius, separation, rho, z):
    a = separation / 2
    up = _loop_field(turns * current, radius, a, rho, z)
    down = _loop_field(-turns * current, radius, -a, rho, z)
    return up[0] + down[0], up[1] + down[1]


# references.md [F]: R = 5 cm, N = 100, I = 1 A: 4.3160 G/cm at 2a = R, 3.2235 G/cm at
# 2a = sqrt(3) R
@pytest.mark.parametrize(("separation", "g_cm"), [(0.05, 4.3160), (0.05 * math.sqrt(3), 3.2235)])
def test_coil_gradient_check_values(separation, g_cm):
    g = coil_gradient(1.0, turns=100, radius=0.05, separation=separation)
    assert g / GAUSS_PER_CM == pytest.approx(g_cm, abs=5e-5)


@pytest.mark.parametrize("separation", [0.03, 0.05, 0.08, 0.12])
def test_coil_gradient_against_biot_savart(separation):
    current, turns, radius = 2.5, 60, 0.04
    h = 1e-5

    def bz(z):
        return _pair_field(current, turns, radius, separation, 0.0, z)[1]

    # central difference of the exact loop field (Jackson sec. 5.5)
    axial = (bz(h) - bz(-h)) / (2 * h)
    g = coil_gradient(current, turns=turns, radius=radius, separation=separation)
    assert g == pytest.approx(axial, rel=1e-6)
    # the radial gradient of the same exact field is -1/2 of the axial (div B = 0)
    brho = _pair_field(current, turns, radius, separation, h, 0.0)[0]
    assert brho / h == pytest.approx(-radial_gradient(g), rel=1e-5)


def test_loop_field_matches_textbook_and_biot_savart():
    # Griffiths, "Introduction to Electrodynamics", ch. 5: Bz = mu0 I R^2 / (2 (R^2 + z^2)^1.5)
    current, radius, z = 3.0, 0.02, 0.015
    expected = MU0 * current * radius**2 / (2 * (radius**2 + z**2) ** 1.5)
    assert _loop_field(current, radius, 0.0, 0.0, z)[1] == pytest.approx(expected, rel=1e-12)
    # off axis: Biot-Savart law integrated around the loop with scipy.integrate.quad,
    # dB = mu0 I / (4 pi) dl x r / |r|^3, field point (rho, 0, z)
    rho = 0.011

    def integrand(phi, component):
        rx, ry, rz = rho - radius * math.cos(phi), -radius * math.sin(phi), z
        r3 = (rx**2 + ry**2 + rz**2) ** 1.5
        cross = (
            radius * math.cos(phi) * rz
            if component == 0
            else radius**2 - radius * rho * math.cos(phi)
        )
        return MU0 * current / (4 * math.pi) * cross / r3

    b_rho = integrate.quad(integrand, 0, 2 * math.pi, args=(0,), epsrel=1e-12)[0]
    b_z = integrate.quad(integrand, 0, 2 * math.pi, args=(1,), epsrel=1e-12)[0]
    got = _loop_field(current, radius, 0.0, rho, z)
    assert got[0] == pytest.approx(b_rho, rel=1e-9)
    assert got[1] == pytest.approx(b_z, rel=1e-9)


def test_gradient_per_current_is_largest_at_separation_equal_radius():
    # common practice: for fixed coil radius the anti-Helmholtz gradient peaks at 2a = R
    radius = 0.05
    best = optimize.minimize_scalar(
        lambda s: -coil_gradient(1.0, turns=1, radius=radius, separation=s),
        bounds=(0.01, 0.2),
        method="bounded",
        options={"xatol": 1e-9},
    )
    assert best.x == pytest.approx(radius, rel=1e-5)


def test_most_linear_gradient_at_sqrt3_radius():
    # Bergeman, Erez & Metcalf 1987: the third-order term of the axial field vanishes at
    # 2a = sqrt(3) R; check with a five-point third derivative of the exact loop field
    radius = 0.05
    h = 1e-3

    def third(sep):
        f = [_pair_field(1.0, 1, radius, sep, 0.0, z)[1] for z in (-2 * h, -h, h, 2 * h)]
        return (-f[0] + 2 * f[1] - 2 * f[2] + f[3]) / (2 * h**3)

    scale = abs(third(radius))
    assert abs(third(math.sqrt(3) * radius)) < 1e-3 * scale


def test_gradient_scales_linearly_and_broadcasts():
    current = np.array([0.5, 1.0, 2.0])[:, None]
    turns = np.array([50, 100])
    g = coil_gradient(current, turns=turns, radius=0.05, separation=0.05)
    assert g.shape == (3, 2)
    np.testing.assert_allclose(g / (current * turns), g[0, 0] / 25.0, rtol=1e-14)


def test_zeeman_shift_bohr_magneton():
    # scipy.constants (CODATA): mu_B / h = 13.996 GHz/T = 1.3996 MHz/G
    mu_b = constants.physical_constants["Bohr magneton"][0]
    mu_b_hz = constants.physical_constants["Bohr magneton in Hz/T"][0]
    shift = zeeman_shift(mu_b, 1e-4)  # 1 G
    assert shift / (2 * math.pi) == pytest.approx(mu_b_hz * 1e-4, rel=1e-9)
    assert shift / (2 * math.pi) == pytest.approx(1.3996e6, rel=1e-4)
    np.testing.assert_allclose(zeeman_shift(mu_b, np.array([-1e-4, 0.0])), [-shift, 0.0])


def test_trap_centre_shift():
    # field near the centre B(x) = A x + B_bias: zero at x0 = -B_bias / A
    bias, gradient = 2e-6, 0.12
    d = trap_centre_shift(bias, gradient)
    root = optimize.brentq(lambda x: gradient * x + bias, -1.0, 1.0)
    assert -d == pytest.approx(root, rel=1e-12)
    # common practice: 10 mG of stray field at 10 G/cm moves the MOT by 10 um
    assert trap_centre_shift(1e-6, 10 * GAUSS_PER_CM) == pytest.approx(10e-6)
    # a transverse bias sees half the gradient: twice the shift
    assert trap_centre_shift(1e-6, radial_gradient(0.1)) == pytest.approx(20e-6)
    assert np.isinf(trap_centre_shift(1e-6, 0.0))


@settings(derandomize=True, deadline=None)  # fixed examples, no timing
@given(st.floats(0.01, 0.2), st.floats(0.01, 0.3), st.floats(0.1, 20.0))
def test_gradient_positive_and_bounded(radius, separation, current):
    g = coil_gradient(current, turns=100, radius=radius, separation=separation)
    peak = coil_gradient(current, turns=100, radius=radius, separation=radius)
    assert 0.0 < g <= peak * (1 + 1e-12)

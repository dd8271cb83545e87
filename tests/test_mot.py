"""Loading, loss and steady state: closed forms against scipy quadrature and ODE solutions."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import constants, integrate, linalg, stats
from scipy.optimize import brentq

from trapbudget.models.catalog import species
from trapbudget.models.mot import (
    LOADING_FRACTION,
    bright_fraction,
    fluorescence,
    fluorescence_power,
    loading_curve,
    loading_rate,
    mean_density,
    repump_rate,
    steady_state,
    temperature_limited_radius,
    two_body_loss_rate,
    vapor_loss_rate,
)
from trapbudget.models.vapor import most_probable_speed

RB = species("Rb87")
GAUSS = (2 * math.pi) ** 1.5


def _quad_loading_rate(density, area, vc, temperature, mass):
    # (1/4) n A int_0^vc v f(v) dv with f the Maxwell speed distribution (scipy.stats.maxwell)
    scale = math.sqrt(constants.k * temperature / mass)
    integral = integrate.quad(
        lambda v: v * stats.maxwell.pdf(v, scale=scale), 0, vc, epsabs=0, epsrel=1e-12
    )[0]
    return 0.25 * density * area * integral


@pytest.mark.parametrize("vc", [0.5, 5.0, 25.0, 50.0, 200.0, 600.0])
def test_loading_rate_is_the_maxwell_boltzmann_flux_integral(vc):
    # kinetic theory (Foot, "Atomic Physics" 2005 ch. 9), integral by scipy quadrature
    n, area, temp = 1e15, 4 * math.pi * 1e-4, 300.0
    vp = float(most_probable_speed(RB.mass, temp))
    exact = _quad_loading_rate(n, area, vc, temp, RB.mass)
    assert float(loading_rate(n, area, vc, vp)) == pytest.approx(exact, rel=1e-9)


def test_loading_rate_small_capture_velocity_is_the_vc4_law():
    # Foot ch. 9 / Monroe et al. PRL 65, 1571 (1990): R ~= n A vc^4 / (4 sqrt(pi) vp^3), vc << vp
    n, area, vp = 1e15, 1e-3, 240.0
    for vc in (0.1, 1.0, 5.0):
        small_x = n * area * vc**4 / (4 * math.sqrt(math.pi) * vp**3)
        x2 = (vc / vp) ** 2
        # next term of the series is -(2/3) x^2 relative
        assert float(loading_rate(n, area, vc, vp)) == pytest.approx(small_x, rel=x2)
    assert float(loading_rate(n, area, 0.0, vp)) == 0.0
    assert float(loading_rate(n, area, 10.0, vp, prefactor=1.7)) == pytest.approx(
        1.7 * float(loading_rate(n, area, 10.0, vp))
    )


def test_flux_fraction_values_from_references():
    # references.md [F]: Rb-87, 300 K, vc = 25 m/s: wall flux below vc 5.885e-5; 50 m/s: 9.213e-4
    vp = float(most_probable_speed(RB.mass, 300.0))
    total_flux = 0.25 * 1.0 * 1.0 * 2 * vp / math.sqrt(math.pi)  # n vbar / 4 through 1 m^2
    assert float(loading_rate(1.0, 1.0, 25.0, vp)) / total_flux == pytest.approx(
        5.885e-5, rel=1e-3
    )
    assert float(loading_rate(1.0, 1.0, 50.0, vp)) / total_flux == pytest.approx(
        9.213e-4, rel=1e-3
    )


def test_mean_density_of_a_gaussian_cloud():
    # nbar = int n^2 dV / int n dV = n0 / 2^(3/2) (Gaussian cloud), radial quadrature (scipy)
    sigma, n0 = 1.0, 1.0

    def n(r):
        return n0 * math.exp(-(r**2) / (2 * sigma**2))

    top = integrate.quad(lambda r: 4 * math.pi * r**2 * n(r) ** 2, 0, np.inf, epsabs=0)[0]
    bottom = integrate.quad(lambda r: 4 * math.pi * r**2 * n(r), 0, np.inf, epsabs=0)[0]
    assert float(mean_density(n0)) == pytest.approx(top / bottom, rel=1e-9)
    assert bottom == pytest.approx(GAUSS * sigma**3 * n0, rel=1e-9)
    assert float(two_body_loss_rate(1e-17, 1e17)) == pytest.approx(1e-17 * 1e17 / 2**1.5)
    assert float(vapor_loss_rate(1e16, 3e-15)) == pytest.approx(30.0)


def test_temperature_limited_radius_equipartition():
    # references.md [F]: Rb-87 kappa = 1.66e-18 N/m <-> trap frequency 540 Hz; equipartition
    # m omega^2 sigma^2 = k_B T
    temp = 145.57e-6
    sigma = float(temperature_limited_radius(temp, 1.66e-18))
    omega = math.sqrt(1.66e-18 / RB.mass)
    assert omega / (2 * math.pi) == pytest.approx(540.0, rel=0.01)
    assert RB.mass * omega**2 * sigma**2 == pytest.approx(constants.k * temp, rel=1e-12)
    assert float(temperature_limited_radius(temp, 0.0)) == math.inf


def _ode_solution(rate, loss, beta, sigma, n_lim, t_end):
    # direct numerical solution of dN/dt = R - N/tau - beta nbar N (scipy solve_ivp, Radau)
    volume = GAUSS * sigma**3

    def rhs(_t, y):
        n0 = min(y[0] / volume, n_lim)
        return [rate - loss * y[0] - beta * n0 / 2**1.5 * y[0]]

    return integrate.solve_ivp(
        rhs, (0, t_end), [0.0], method="Radau", rtol=1e-10, atol=1e-2, dense_output=True
    )


CASES = [
    # R (1/s), 1/tau (1/s), beta (m^3/s), sigma (m), density limit (1/m^3)
    (1e8, 1.0, 0.0, 5e-4, np.inf),  # one-body only
    (1e9, 0.5, 1e-17, 3e-4, np.inf),  # temperature-limited with two-body loss
    (1e8, 1.0, 1e-17, 3e-4, 1e17),  # becomes density-limited
    (1e10, 3.0, 2e-17, 2e-4, 5e16),  # strongly density-limited
    (1e6, 0.1, 1e-16, 1e-4, np.inf),  # two-body dominated
]


@pytest.mark.parametrize(("rate", "loss", "beta", "sigma", "n_lim"), CASES)
def test_steady_state_and_loading_curve_match_the_ode(rate, loss, beta, sigma, n_lim):
    state = steady_state(
        rate, loss, two_body_coefficient=beta, cloud_radius=sigma, density_limit=n_lim
    )
    t_end = 40 * float(state.loading_time)
    sol = _ode_solution(rate, loss, beta, sigma, n_lim, t_end)
    assert float(state.atom_number) == pytest.approx(sol.y[0, -1], rel=1e-6)
    times = np.linspace(0, 3 * float(state.loading_time), 13)
    curve = loading_curve(
        times, rate, loss, two_body_coefficient=beta, cloud_radius=sigma, density_limit=n_lim
    )
    np.testing.assert_allclose(curve, sol.sol(times)[0], rtol=1e-6, atol=1e-6 * sol.y[0, -1])
    # loading time: where the numerical curve reaches 1 - 1/e of the steady state
    target = LOADING_FRACTION * sol.y[0, -1]
    t_cross = brentq(lambda t: sol.sol(t)[0] - target, 0, t_end, xtol=1e-12)
    assert float(state.loading_time) == pytest.approx(t_cross, rel=1e-5)


def test_one_body_limit_is_r_tau():
    # rate equation without two-body loss (references.md): N_s = R tau,
    # N(t) = N_s (1 - exp(-t/tau)); the loading time is then tau
    state = steady_state(2e8, 0.25, two_body_coefficient=0.0, cloud_radius=1e-3)
    assert float(state.atom_number) == pytest.approx(8e8)
    assert float(state.loading_time) == pytest.approx(4.0)
    curve = loading_curve(2.0, 2e8, 0.25, two_body_coefficient=0.0, cloud_radius=1e-3)
    assert float(curve) == pytest.approx(8e8 * (1 - math.exp(-0.5)))


def test_density_limited_cloud_grows_as_cube_root():
    # Walker, Sesko & Wieman PRL 64, 408 (1990): at the density limit the size grows as N^(1/3)
    rates = np.array([1e9, 8e9, 64e9])
    state = steady_state(
        rates, 1.0, two_body_coefficient=0.0, cloud_radius=1e-4, density_limit=1e17
    )
    assert np.all(state.density_limited)
    np.testing.assert_allclose(state.peak_density, 1e17)
    np.testing.assert_allclose(state.cloud_radius[1:] / state.cloud_radius[:-1], 2.0, rtol=1e-12)
    np.testing.assert_allclose(state.atom_number, GAUSS * state.cloud_radius**3 * 1e17, rtol=1e-12)


def test_empty_trap_limits():
    state = steady_state(0.0, 2.0, two_body_coefficient=1e-17, cloud_radius=3e-4)
    assert float(state.atom_number) == 0.0
    assert float(state.loading_time) == pytest.approx(0.5)  # loss-limited 1/c
    nothing = steady_state(0.0, 0.0, two_body_coefficient=0.0, cloud_radius=3e-4)
    assert float(nothing.loading_time) == math.inf
    assert float(nothing.atom_number) == 0.0


def test_bright_fraction_is_the_optical_pumping_steady_state():
    # two-state rate equation (Metcalf & van der Straten 1999 ch. 2): null space by scipy.linalg
    scatter, leak, repump = 6e6, 1e-4, 2e3
    matrix = np.array([[-scatter * leak, repump], [scatter * leak, -repump]])
    populations = linalg.null_space(matrix)[:, 0]
    populations /= populations.sum()
    assert float(bright_fraction(scatter, leak, repump)) == pytest.approx(
        populations[0], rel=1e-12
    )
    assert float(bright_fraction(scatter, 0.0, 0.0)) == 1.0  # closed line: nothing leaks
    assert float(bright_fraction(scatter, leak, 0.0)) == 0.0  # no repumper: all dark
    # common practice: a resonant repumper at a few I_sat pumps back at ~Gamma/2
    assert float(repump_rate(1e6, RB.linewidth)) == pytest.approx(RB.linewidth / 2, rel=1e-5)
    assert float(repump_rate(1.0, RB.linewidth)) == pytest.approx(RB.linewidth / 4)


def test_rubidium_goes_dark_without_repumper():
    # common practice: at ~6e6 photons/s and ~1e-4 leak per photon, atoms go dark in ms
    leak = float(RB.leak_probability(-12e6, saturation=10.0))
    dark_time = 1.0 / (6e6 * leak)
    assert 1e-4 < dark_time < 5e-2
    assert float(bright_fraction(6e6, leak, 0.0)) == 0.0


def test_fluorescence_counts_and_power():
    # isotropic emission: N R f Omega/(4 pi) eta; photon energy h c / lambda (scipy.constants)
    photons = fluorescence(1e8, 1e7, bright_fraction=0.5, solid_angle=4 * math.pi, efficiency=0.1)
    assert float(photons) == pytest.approx(5e13)
    power = fluorescence_power(1.0, RB.wavelength)
    assert float(power) == pytest.approx(constants.h * constants.c / 780.241209686e-9, rel=1e-9)
    assert float(power) == pytest.approx(2.546e-19, rel=1e-3)  # from memory: 1.589 eV at 780 nm

"""Vapor pressure, density, Maxwell-Boltzmann fractions and background loss."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import constants, integrate, optimize, stats

from trapbudget.models.catalog import species
from trapbudget.models.species import SPECIES
from trapbudget.models.vapor import (
    ARPORNTHIP_COEFFICIENT,
    background_loss_rate,
    flux_fraction_slower,
    fraction_slower,
    mean_speed,
    most_probable_speed,
    number_density,
    saturated_density,
    saturated_pressure,
)

KB, TORR = constants.k, constants.torr
RB = species("Rb87")
CS = species("Cs133")


@pytest.fixture(scope="module")
def arc_rb():
    arc = pytest.importorskip("arc")
    return arc.Rubidium87()


def test_rubidium_at_room_temperature():
    # references.md [F], Alcock 1984 Table 2 form at 25 C: 3.99e-7 torr, 5.32e-5 Pa, 1.29e16 m^-3
    p = saturated_pressure(RB.vapor, 298.15)
    assert p / TORR == pytest.approx(3.99e-7, rel=2e-3)
    assert p == pytest.approx(5.32e-5, rel=2e-3)
    assert saturated_density(RB.vapor, 298.15) == pytest.approx(1.29e16, rel=3e-3)
    # Cs, same source: 2.01e-4 Pa
    assert saturated_pressure(CS.vapor, 298.15) == pytest.approx(2.01e-4, rel=3e-3)


def test_saturated_density_against_arc(arc_rb):
    t = np.array([293.15, 313.15, 353.15])
    # arc: getNumberDensity(T) in m^-3 (Alcock's equations)
    expected = np.array([arc_rb.getNumberDensity(x) for x in t])
    np.testing.assert_allclose(saturated_density(RB.vapor, t), expected, rtol=0.05)


def test_number_density_loschmidt():
    # scipy.constants (CODATA): Loschmidt constant at 273.15 K and 101.325 kPa
    n0 = constants.physical_constants["Loschmidt constant (273.15 K, 101.325 kPa)"][0]
    assert number_density(101325.0, 273.15) == pytest.approx(n0, rel=1e-9)


def test_speeds_against_scipy_maxwell():
    t = 300.0
    dist = stats.maxwell(scale=math.sqrt(KB * t / RB.mass))  # scipy.stats Maxwell-Boltzmann
    mode = _mode(dist)
    assert most_probable_speed(RB.mass, t) == pytest.approx(mode, rel=1e-6)
    assert mean_speed(RB.mass, t) == pytest.approx(dist.mean(), rel=1e-12)
    # common practice: room-temperature Rb moves at about 240 m/s (most probable) / 270 m/s (mean)
    assert most_probable_speed(RB.mass, t) == pytest.approx(240, rel=0.02)
    assert mean_speed(RB.mass, t) == pytest.approx(270, rel=0.02)


def _mode(dist):
    return optimize.minimize_scalar(
        lambda v: -dist.pdf(v), bounds=(1.0, 2000.0), method="bounded", options={"xatol": 1e-6}
    ).x


@pytest.mark.parametrize("vc", [5.0, 25.0, 50.0, 200.0, 800.0])
def test_fraction_slower_against_scipy_maxwell(vc):
    t = 300.0
    vp = most_probable_speed(RB.mass, t)
    dist = stats.maxwell(scale=vp / math.sqrt(2))  # scipy.stats.maxwell cdf
    assert fraction_slower(vc, vp) == pytest.approx(dist.cdf(vc), rel=1e-9)


@pytest.mark.parametrize("vc", [5.0, 25.0, 50.0, 200.0, 800.0])
def test_flux_fraction_against_quadrature(vc):
    vp = most_probable_speed(RB.mass, 300.0)

    # effusive flux density ~ v^3 exp(-v^2 / vp^2), integrated with scipy.integrate.quad
    def flux(v):
        return v**3 * math.exp(-((v / vp) ** 2))

    below = integrate.quad(flux, 0, vc, epsrel=1e-12)[0]
    total = integrate.quad(flux, 0, np.inf, epsrel=1e-12)[0]
    assert flux_fraction_slower(vc, vp) == pytest.approx(below / total, rel=1e-8)


@pytest.mark.parametrize(
    ("name", "vc", "gas", "flux"),
    [
        ("Rb87", 25.0, 8.491e-4, 5.885e-5),  # references.md [F], 300 K
        ("Rb87", 50.0, 6.662e-3, 9.213e-4),  # references.md [F], 300 K
        ("Cs133", 25.0, 1.600e-3, 1.371e-4),  # references.md [F], 300 K
    ],
)
def test_fractions_reference_values(name, vc, gas, flux):
    vp = most_probable_speed(SPECIES[name].mass, 300.0)
    assert fraction_slower(vc, vp) == pytest.approx(gas, rel=1e-3)
    assert flux_fraction_slower(vc, vp) == pytest.approx(flux, rel=1e-3)


def test_few_slow_atoms_in_room_temperature_vapor():
    # common practice: less than half a percent of room-temperature Rb vapor moves slower
    # than 30 m/s
    vp = most_probable_speed(RB.mass, 295.0)
    assert fraction_slower(30.0, vp) < 5e-3


def test_small_velocity_limits():
    # series expansions: gas fraction ~ (4 / (3 sqrt(pi))) x^3, flux fraction ~ x^4 / 2
    x = 1e-3
    assert fraction_slower(x, 1.0) == pytest.approx(4 / (3 * math.sqrt(math.pi)) * x**3, rel=1e-5)
    assert flux_fraction_slower(x, 1.0) == pytest.approx(x**4 / 2, rel=1e-5)
    assert fraction_slower(-1.0, 1.0) == 0.0 and flux_fraction_slower(0.0, 1.0) == 0.0
    assert fraction_slower(np.inf, 1.0) == 1.0 and flux_fraction_slower(np.inf, 1.0) == 1.0


@settings(derandomize=True, deadline=None)  # fixed examples, no timing
@given(st.floats(0.0, 2000.0), st.floats(0.0, 2000.0), st.floats(50.0, 1000.0))
def test_fractions_bounded_and_ordered(v1, v2, vp):
    lo, hi = sorted((v1, v2))
    g_lo, g_hi = fraction_slower(lo, vp), fraction_slower(hi, vp)
    f_lo, f_hi = flux_fraction_slower(lo, vp), flux_fraction_slower(hi, vp)
    assert 0.0 <= g_lo <= g_hi <= 1.0
    assert 0.0 <= f_lo <= f_hi <= 1.0
    # the flux weights fast atoms more, so its slow fraction never exceeds the gas's
    assert f_hi <= g_hi + 1e-15


def test_arpornthip_rule():
    # Arpornthip, Sackett & Hughes, PRA 85, 033420 (2012): P ~ (2e-8 torr s) / tau;
    # 1 torr = 101325/760 Pa (definition)
    assert ARPORNTHIP_COEFFICIENT == pytest.approx(1 / (2e-8 * 101325 / 760), rel=1e-12)
    tau = 1.0 / background_loss_rate(1e-9 * TORR, ARPORNTHIP_COEFFICIENT)
    assert tau == pytest.approx(20.0, rel=1e-9)  # 1e-9 torr -> 20 s
    rates = background_loss_rate(np.array([1e-8, 1e-7]), ARPORNTHIP_COEFFICIENT)
    np.testing.assert_allclose(rates, ARPORNTHIP_COEFFICIENT * np.array([1e-8, 1e-7]))

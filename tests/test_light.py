"""Gaussian beams and the two-level scattering rate, checked against integrals and handbooks."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import constants, integrate, optimize

from trapbudget.models.catalog import species
from trapbudget.models.light import (
    absorption_cross_section,
    beam_intensity,
    beam_scattering_rates,
    clipped_fraction,
    cloud_intensities,
    peak_intensity,
    saturation_parameter,
    scattering_rate,
)

RB = species("Rb87")


def _power_inside(power, waist, aperture):
    # integral of the Gaussian profile over a disk, by scipy quadrature
    def ring(r):
        return 2 * math.pi * r * float(beam_intensity(power, waist, r))

    return integrate.quad(ring, 0.0, aperture, epsabs=0, epsrel=1e-12)[0]


def test_peak_intensity_integrates_to_power():
    # Siegman, "Lasers" ch. 17: I0 = 2P / (pi w^2); the profile integrates back to P
    power, waist = 4e-3, 5e-3
    assert peak_intensity(power, waist) == pytest.approx(2 * power / (math.pi * waist**2))
    assert _power_inside(power, waist, 20 * waist) == pytest.approx(power, rel=1e-10)


@pytest.mark.parametrize("ratio", [0.25, 0.5, 1.0, 1.5, 2.0])
def test_clipped_fraction_against_quadrature(ratio):
    power, waist = 1e-2, 4e-3
    expected = _power_inside(power, waist, ratio * waist) / power  # scipy.integrate.quad
    assert clipped_fraction(waist, ratio * waist) == pytest.approx(expected, rel=1e-10)


def test_clipped_fraction_known_values():
    # common practice: 86.5 % of a Gaussian beam's power lies within its 1/e^2 radius,
    # and an aperture of 1.5 w passes 98.9 %
    assert clipped_fraction(1.0, 1.0) == pytest.approx(1 - math.exp(-2), rel=1e-12)
    assert clipped_fraction(1.0, 1.0) == pytest.approx(0.865, abs=5e-4)
    assert clipped_fraction(1.0, 1.5) == pytest.approx(0.989, abs=5e-4)
    assert clipped_fraction(1.0, np.inf) == 1.0
    assert clipped_fraction(1.0, 0.0) == 0.0


@settings(derandomize=True, deadline=None)  # fixed examples, no timing
@given(st.floats(1e-4, 1e-1), st.floats(0.0, 0.2), st.floats(0.0, 0.2))
def test_clipped_fraction_bounded_and_monotone(waist, a1, a2):
    lo, hi = sorted((a1, a2))
    f_lo, f_hi = clipped_fraction(waist, lo), clipped_fraction(waist, hi)
    assert 0.0 <= f_lo <= f_hi <= 1.0


def test_beam_intensity_profile_and_hard_clip():
    power, waist = 2e-3, 3e-3
    i0 = peak_intensity(power, waist)
    r = np.array([0.0, waist, 2 * waist, 2.9e-3, 3.1e-3, -2.9e-3])
    # Gaussian: I(w) = I0 / e^2 (Siegman ch. 17)
    intensity = beam_intensity(power, waist, r)
    assert intensity[1] == pytest.approx(i0 * math.exp(-2))
    assert intensity[2] == pytest.approx(i0 * math.exp(-8))
    clipped = beam_intensity(power, waist, r, aperture_radius=3e-3)
    np.testing.assert_allclose(clipped[[0, 1, 3, 5]], intensity[[0, 1, 3, 5]], rtol=1e-14)
    assert clipped[2] == 0.0 and clipped[4] == 0.0


def test_beam_intensity_broadcasts():
    power = np.linspace(1e-3, 5e-3, 4)[:, None]
    waist = np.array([2e-3, 4e-3, 8e-3])
    assert beam_intensity(power, waist, 1e-3).shape == (4, 3)


def test_cloud_intensities():
    power, waist = 5e-3, 4e-3
    forward, backward = cloud_intensities(power, waist, imbalance=0.1)
    assert forward == pytest.approx(peak_intensity(power, waist))
    assert backward == pytest.approx(0.9 * forward)
    f_off, b_off = cloud_intensities(power, waist, offset=waist, imbalance=np.array([0.0, 0.2]))
    assert f_off == pytest.approx(forward * math.exp(-2))
    np.testing.assert_allclose(b_off, f_off * np.array([1.0, 0.8]))
    f_cut, b_cut = cloud_intensities(power, waist, offset=2e-3, aperture_radius=1e-3)
    assert f_cut == 0.0 and b_cut == 0.0


def test_saturation_parameter():
    # Steck Rb-87: I_sat = 1.669 mW/cm^2 = 16.69 W/m^2, so 16.69 W/m^2 gives s = 1
    assert saturation_parameter(16.6933, RB.saturation_intensity) == pytest.approx(1.0, rel=1e-4)


def test_scattering_rate_closed_form_and_limits():
    gamma = RB.linewidth
    # Metcalf & van der Straten 1999, ch. 2: R = (Gamma/2) s / (1 + s + (2 delta / Gamma)^2)
    assert scattering_rate(1.0, 0.0, gamma) == pytest.approx(gamma / 4)
    det = -RB.linewidth_hz  # delta = -Gamma
    assert scattering_rate(2.0, det, gamma) == pytest.approx(gamma / 2 * 2 / 7)
    # saturated: R -> Gamma / 2
    assert scattering_rate(1e9, 0.0, gamma) == pytest.approx(gamma / 2, rel=1e-8)
    # sharing: one beam of s = 1 among six saturating the atom with s_tot = 6
    assert scattering_rate(1.0, 0.0, gamma, total_saturation=6.0) == pytest.approx(gamma / 14)
    assert scattering_rate(1.0, det, gamma) == scattering_rate(1.0, -det, gamma)


@pytest.mark.parametrize("s0", [0.0, 1.0, 10.0])
def test_power_broadened_linewidth(s0):
    # Metcalf & van der Straten 1999, ch. 2: FWHM Gamma' = Gamma sqrt(1 + s0); scipy brentq
    gamma = RB.linewidth
    s = max(s0, 1e-9)
    peak = scattering_rate(s, 0.0, gamma, total_saturation=s0)

    def half(det):
        return scattering_rate(s, det, gamma, total_saturation=s0) - peak / 2

    half_width = optimize.brentq(half, 0.0, 10 * RB.linewidth_hz * math.sqrt(1 + s0))
    fwhm_angular = 2 * 2 * math.pi * half_width
    assert fwhm_angular == pytest.approx(gamma * math.sqrt(1 + s0), rel=1e-9)


def test_rubidium_scattering_and_force_scales():
    gamma = RB.linewidth
    # common practice: an Rb atom near saturation scatters millions of photons per second
    # (~6e6 typical in a MOT)
    rates = scattering_rate(
        np.array([1.0, 2.0, 5.0]), -RB.linewidth_hz * np.array([0.5, 1.0, 2.0]), gamma
    )
    assert np.all((rates > 1e6) & (rates < 2e7))
    # Metcalf & van der Straten 1999: F_max = hbar k Gamma / 2, about 1e4 g for Rb
    assert RB.max_acceleration == pytest.approx(
        constants.hbar * RB.wavenumber * gamma / (2 * RB.mass)
    )
    assert 1e4 < RB.max_acceleration / constants.g < 1.3e4
    # common practice: at ~6e6 photons/s the force is a few thousand times gravity
    a = constants.hbar * RB.wavenumber * 6e6 / RB.mass
    assert 2e3 < a / constants.g < 5e3


@settings(derandomize=True, deadline=None)  # fixed examples, no timing
@given(
    st.lists(st.floats(0.0, 1e4), min_size=6, max_size=6),
    st.lists(st.floats(-20.0, 20.0), min_size=6, max_size=6),
)
def test_six_beams_never_drive_the_excited_population_above_one_half(s, det):
    # Metcalf & van der Straten 1999, ch. 2: a two-level atom's excited population <= 1/2,
    # so the total scattering rate of any light is at most Gamma / 2
    rates = beam_scattering_rates(np.array(s), np.array(det) * RB.linewidth_hz, RB.linewidth)
    assert np.all(rates >= 0)
    assert rates.sum() <= RB.linewidth / 2 * (1 + 1e-12)


def test_shared_rates_reduce_to_the_total_saturation_form():
    # equal detunings: (Gamma/2) s_i / (1 + S + (2 delta/Gamma)^2), Metcalf & van der Straten ch. 2
    s = np.array([1.0, 2.0, 0.5, 0.5, 3.0, 0.0])
    det = -1.5 * RB.linewidth_hz
    got = beam_scattering_rates(s, np.full(6, det), RB.linewidth)
    expected = scattering_rate(s, det, RB.linewidth, total_saturation=s.sum())
    np.testing.assert_allclose(got, expected, rtol=1e-12)
    # far-detuned beams do not saturate the atom for the others
    far = beam_scattering_rates(
        np.array([1.0, 1e3]), np.array([0.0, 1e4 * RB.linewidth_hz]), RB.linewidth
    )
    assert far[0] == pytest.approx(RB.linewidth / 4, rel=1e-3)


def test_resonant_cross_section():
    # Steck, "Rubidium 87 D Line Data": resonant cross-section of the cycling transition
    # 3 lambda^2 / (2 pi) = 2.907e-13 m^2
    sigma = absorption_cross_section(RB.wavelength, 0.0, RB.linewidth, 0.0)
    assert float(sigma) == pytest.approx(2.907e-13, rel=1e-3)
    half = absorption_cross_section(RB.wavelength, RB.linewidth_hz / 2, RB.linewidth, 0.0)
    assert float(half) == pytest.approx(float(sigma) / 2, rel=1e-12)

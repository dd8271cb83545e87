"""Tolerances -> standard uncertainties and distributions, against JCGM 100/101 and scipy."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.scenario.distributions import Tolerance

A = 0.3  # half-width used below (arbitrary)


@pytest.mark.parametrize(
    ("shape", "divisor"),
    [
        ("rectangular", math.sqrt(3)),  # JCGM 100:2008, 4.3.7: u = a / sqrt(3)
        ("triangular", math.sqrt(6)),  # JCGM 100:2008, 4.3.9: u = a / sqrt(6)
        ("arcsine", math.sqrt(2)),  # JCGM 101:2008, 6.4.6 (U-shaped): u = a / sqrt(2)
    ],
)
def test_half_width_standard_uncertainty(shape, divisor):
    tol = Tolerance(nominal=2.0, value=A, meaning="half-width", shape=shape)
    assert tol.standard_uncertainty == pytest.approx(A / divisor, rel=1e-14)
    dist = tol.distribution()
    # scipy.stats: the frozen distribution's own std and support
    assert dist.std() == pytest.approx(A / divisor, rel=1e-12)
    assert dist.support() == pytest.approx((2.0 - A, 2.0 + A))
    assert dist.mean() == pytest.approx(2.0)
    assert tol.half_width == pytest.approx(A)


@pytest.mark.parametrize("shape", ["normal", "rectangular", "triangular", "arcsine"])
def test_standard_meaning_gives_std(shape):
    tol = Tolerance(nominal=-1.0, value=0.2, meaning="standard", shape=shape)
    assert tol.distribution().std() == pytest.approx(0.2, rel=1e-12)  # scipy.stats std


def test_expanded_uncertainty():
    # JCGM 100:2008, 6.2.1: U = k u
    tol = Tolerance(nominal=5.0, value=0.4, meaning="expanded", coverage_factor=2)
    assert tol.standard_uncertainty == pytest.approx(0.2)
    assert tol.distribution().std() == pytest.approx(0.2)
    with pytest.raises(ScenarioError, match=r"needs coverage_factor > 0"):
        Tolerance(nominal=5.0, value=0.4, meaning="expanded")


def test_lognormal_median_and_std():
    tol = Tolerance(nominal=2e-7, value=4e-8, shape="lognormal")
    dist = tol.distribution()
    # scipy.stats.lognorm: median = scale, std computed by scipy
    assert dist.median() == pytest.approx(2e-7, rel=1e-12)
    assert dist.std() == pytest.approx(4e-8, rel=1e-10)
    assert tol.standard_uncertainty == pytest.approx(4e-8)
    with pytest.raises(ScenarioError, match=r"needs a positive nominal"):
        Tolerance(nominal=-1.0, value=0.1, shape="lognormal")


def test_truncated_normal_against_scipy():
    tol = Tolerance(nominal=1.0, value=0.5, shape="truncated-normal", bounds=(0.5, 3.0))
    reference = stats.truncnorm(-1.0, 4.0, loc=1.0, scale=0.5)  # scipy.stats.truncnorm
    assert tol.standard_uncertainty == pytest.approx(reference.std(), rel=1e-12)
    assert tol.distribution().ppf(0.3) == pytest.approx(reference.ppf(0.3), rel=1e-12)
    with pytest.raises(ScenarioError, match=r"needs bounds"):
        Tolerance(nominal=1.0, value=0.5, shape="truncated-normal")


def test_half_width_of_normal_is_refused_with_fix():
    with pytest.raises(ScenarioError, match=r"a normal distribution has no half-width"):
        Tolerance(nominal=0.0, value=1.0, meaning="half-width", shape="normal")


def test_unknown_shape_and_meaning_list_valid_ones():
    with pytest.raises(ScenarioError, match=r"shape 'gaussian' is not known; use one of normal"):
        Tolerance(nominal=0.0, value=1.0, shape="gaussian")
    with pytest.raises(ScenarioError, match=r"meaning 'sigma' is not known; use one of standard"):
        Tolerance(nominal=0.0, value=1.0, meaning="sigma")


def test_bounds_checks():
    with pytest.raises(ScenarioError, match=r"lies outside bounds"):
        Tolerance(nominal=5.0, value=1.0, bounds=(0.0, 1.0))
    with pytest.raises(ScenarioError, match=r"must be increasing"):
        Tolerance(nominal=0.5, value=1.0, bounds=(1.0, 0.0))


def test_zero_tolerance_has_no_distribution():
    with pytest.raises(ScenarioError, match=r"tolerance is zero"):
        Tolerance(nominal=1.0, value=0.0).distribution()


def test_with_value_scaled_and_with_nominal():
    tol = Tolerance(
        nominal=4e-3, value=8e-5, relative=True, text="2 %", unit="W", meaning="standard"
    )
    tighter = tol.with_value(2e-5)
    assert tighter.value == 2e-5 and tighter.text == "0.5 %" and tighter.relative
    assert tol.scaled(0.5).value == pytest.approx(4e-5)
    moved = tol.with_nominal(8e-3)  # a relative tolerance follows the nominal
    assert moved.value == pytest.approx(1.6e-4)
    absolute = Tolerance(nominal=1.0, value=0.1, unit="K", text="0.1 K").with_nominal(2.0)
    assert absolute.value == pytest.approx(0.1)
    assert Tolerance(nominal=1.0, value=0.1, unit="K").with_value(0.2).text == "0.2 K"


def test_sampled_moments_match():
    # Monte Carlo check of the triangular case: std error of the sample std ~ u sqrt((k-1)/4n)
    tol = Tolerance(nominal=0.0, value=1.0, meaning="half-width", shape="triangular")
    n = 200_000
    x = tol.distribution().rvs(size=n, random_state=np.random.default_rng(7))
    kurtosis = 2.4  # triangular distribution kurtosis (not excess), scipy.stats.triang
    assert stats.triang(0.5).stats(moments="k") + 3 == pytest.approx(kurtosis)
    tolerance = 5 * tol.standard_uncertainty * math.sqrt((kurtosis - 1) / (4 * n))
    assert abs(np.std(x, ddof=1) - tol.standard_uncertainty) < tolerance

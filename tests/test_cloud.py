"""Cloud profile and steady state: against the ODE (scipy solve_ivp) and closed forms."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate

from trapbudget.models.cloud import cloud_steady_state, cored_volumes, limiting_density
from trapbudget.models.mot import steady_state


def _profile_integrals(core, sigma):
    # scipy.integrate.quad of the cored Gaussian n(r)/n_lim and its square over the sphere
    def n(r):
        return 1.0 if r < core else math.exp(-((r - core) ** 2) / (2 * sigma**2))

    top = core + 12 * sigma
    v1 = integrate.quad(lambda r: 4 * math.pi * r * r * n(r), 0, top, points=[core])[0]
    v2 = integrate.quad(lambda r: 4 * math.pi * r * r * n(r) ** 2, 0, top, points=[core])[0]
    return v1, v2


@pytest.mark.parametrize("core", [0.0, 0.3e-3, 1e-3, 5e-3])
def test_cored_volumes_are_the_profile_integrals(core):
    sigma = 0.4e-3
    v1, v2, _ = cored_volumes(core, sigma)
    q1, q2 = _profile_integrals(core, sigma)
    assert float(v1) == pytest.approx(q1, rel=1e-8)
    assert float(v2) == pytest.approx(q2, rel=1e-8)


def test_gaussian_limit_mean_density():
    # closed form: a Gaussian cloud has nbar = n0 / 2^(3/2) (references.md)
    v1, v2, _ = cored_volumes(0.0, 1e-3)
    assert float(v2 / v1) == pytest.approx(2**-1.5, rel=1e-12)
    # flat top (core >> sigma): nbar -> n0
    v1, v2, _ = cored_volumes(1.0, 1e-4)
    assert float(v2 / v1) == pytest.approx(1.0, abs=1e-3)


def _ode(rate, loss, beta, sigma, n_lim, t_end):
    # the rate equation dN/dt = R - c N - beta nbar(N) N with the cored profile, by scipy
    def nbar(n):
        v_g = (2 * math.pi) ** 1.5 * sigma**3
        if n <= n_lim * v_g:
            return n / v_g * 2**-1.5
        lo, hi = 0.0, 1.0
        while n_lim * float(cored_volumes(hi, sigma)[0]) < n:
            hi *= 2
        for _ in range(80):
            mid = 0.5 * (lo + hi)
            lo, hi = (mid, hi) if n_lim * float(cored_volumes(mid, sigma)[0]) < n else (lo, mid)
        v1, v2, _ = cored_volumes(lo, sigma)
        return n_lim * float(v2 / v1)

    sol = integrate.solve_ivp(
        lambda _t, y: [rate - loss * y[0] - beta * nbar(y[0]) * y[0]],
        (0, t_end),
        [0.0],
        rtol=1e-10,
        atol=1e-3,
        dense_output=True,
    )
    return sol


@pytest.mark.parametrize(
    ("rate", "beta", "n_lim"),
    [(1e8, 1e-17, 1e17), (1e10, 1e-17, 1e17), (1e9, 0.0, 3e16), (1e7, 1e-17, 1e30)],
)
def test_steady_state_and_loading_time_match_the_ode(rate, beta, n_lim):
    loss, sigma = 2.0, 0.3e-3
    state = cloud_steady_state(
        rate, loss, two_body_coefficient=beta, sigma=sigma, density_limit=n_lim
    )
    sol = _ode(rate, loss, beta, sigma, n_lim, 40.0)
    assert sol.y[0, -1] == pytest.approx(float(state.atom_number), rel=1e-6)
    t = float(state.loading_time)
    assert float(sol.sol(t)[0]) == pytest.approx(
        (1 - math.exp(-1)) * float(state.atom_number), rel=1e-4
    )


def test_temperature_limited_branch_is_the_riccati_closed_form():
    # below the density limit the result is the Gaussian-cloud closed form of mot.steady_state
    args = {"two_body_coefficient": 1e-17}
    new = cloud_steady_state(1e8, 1.5, sigma=0.3e-3, density_limit=np.inf, **args)
    old = steady_state(1e8, 1.5, cloud_radius=0.3e-3, **args)
    assert float(new.atom_number) == pytest.approx(float(old.atom_number), rel=1e-12)
    assert float(new.loading_time) == pytest.approx(float(old.loading_time), rel=1e-10)


def test_continuous_across_the_density_limit():
    # the profile is the Gaussian at the critical number: no step in any output
    sigma, n_lim = 0.3e-3, 1e17
    n_crit = n_lim * (2 * math.pi) ** 1.5 * sigma**3
    loss, beta = 2.0, 1e-17
    # loading rates that put the steady state just below and just above N_c
    rate_crit = loss * n_crit + beta * n_lim * 2**-1.5 * n_crit
    rates = rate_crit * np.linspace(0.98, 1.02, 401)
    s = cloud_steady_state(
        rates, loss, two_body_coefficient=beta, sigma=sigma, density_limit=n_lim
    )
    assert s.density_limited[0] == np.False_ and s.density_limited[-1] == np.True_
    for name in ("atom_number", "loading_time", "mean_density", "cloud_radius", "peak_density"):
        y = getattr(s, name)
        assert np.max(np.abs(np.diff(y)) / y[1:]) < 2e-3, name


def test_limiting_density_scales_as_spring_constant_over_intensity():
    # Walker, Sesko & Wieman, PRL 64, 408 (1990): n_max ~ kappa / (I sigma_L^2)
    ref = 1e-18 / (100.0 * 1e-28)
    base = limiting_density(1e17, 1e-18, 100.0, 1e-14, ref)
    assert float(base) == pytest.approx(1e17)
    assert float(limiting_density(1e17, 2e-18, 100.0, 1e-14, ref)) == pytest.approx(2e17)
    assert float(limiting_density(1e17, 1e-18, 200.0, 1e-14, ref)) == pytest.approx(5e16)
    assert float(limiting_density(1e17, 1e-18, 0.0, 1e-14, ref)) == 0.0

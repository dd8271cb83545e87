"""Measurement files and curve fits (trapbudget.sensitivity.measurements)."""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest
import scipy.constants as const
from scipy import integrate, optimize

from trapbudget.models import InputSpec, OutputSpec
from trapbudget.models.observables import loading_curve, time_of_flight_radius
from trapbudget.sensitivity.errors import DataError
from trapbudget.sensitivity.lab.datafiles import read_measurements
from trapbudget.sensitivity.lab.fits import fit_loading_curve, fit_time_of_flight
from trapbudget.sensitivity.lab.observations import to_observations

# Rb-87 mass, 86.909 180 531 u (Steck, "Rubidium 87 D Line Data"; NIST atomic masses)
RB87_MASS = 86.909180531 * const.atomic_mass


def small_model() -> SimpleNamespace:
    """A protocol-shaped description (inputs/outputs only) for file parsing."""
    inputs = {
        "beam_power": InputSpec("beam_power", "W", 4e-3, 0.0, 1.0, "power per beam"),
        "detuning": InputSpec("detuning", "Hz", -12e6, -1e9, 1e9, "detuning"),
        "cell_temperature": InputSpec("cell_temperature", "K", 295.0, 250.0, 400.0, "cell"),
        "gradient": InputSpec("gradient", "T/m", 0.12, 0.0, 1.0, "gradient"),
    }
    outputs = {
        name: OutputSpec(name, unit, name)
        for name, unit in [
            ("atom_number", ""),
            ("loading_time", "s"),
            ("temperature", "K"),
            ("fluorescence", "1/s"),
            ("cloud_radius", "m"),
        ]
    }
    return SimpleNamespace(inputs=inputs, outputs=outputs)


def write(tmp_path, name: str, text: str):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def test_units_in_header_are_converted_to_si(tmp_path):
    path = write(
        tmp_path,
        "scan.csv",
        "# label = invented scan\n"
        "# setting gradient = 12 G/cm\n"
        "detuning [MHz],beam_power [mW],cell_temperature [degC],atom_number [1]\n"
        "-12,4,22,2.0e8\n"
        "-10,4.5,23,1.5e8\n",
    )
    mset = read_measurements(path, model=small_model())
    assert mset.kind == "steady-state"
    assert mset.label == "invented scan"
    np.testing.assert_allclose(mset.columns["detuning"], [-12e6, -10e6], rtol=1e-15)
    np.testing.assert_allclose(mset.columns["beam_power"], [4e-3, 4.5e-3], rtol=1e-15)
    # SI definition of the degree Celsius: T/K = t/degC + 273.15
    np.testing.assert_allclose(mset.columns["cell_temperature"], [295.15, 296.15], rtol=1e-15)
    # 1 G = 1e-4 T (SI brochure, non-SI units table): 12 G/cm = 0.12 T/m
    assert mset.settings["gradient"] == pytest.approx(0.12, rel=1e-12)


def test_original_file_is_not_modified(tmp_path):
    text = "detuning [MHz],atom_number [1]\n-12,2e8\n-10,nan\n"
    path = write(tmp_path, "scan.csv", text)
    mset = read_measurements(path, model=small_model())
    assert mset.skipped_rows == 1 and mset.n_rows == 1
    assert path.read_text(encoding="utf-8") == text


@pytest.mark.parametrize(
    ("text", "match"),
    [
        ("detuning [MHz],atom_number [1]\n", "no data rows"),
        ("detuning [MQz],atom_number [1]\n-12,1\n", "'MQz' is not a unit; did you mean 'MHz'"),
        ("detuning [mW],atom_number [1]\n-12,1\n", "cannot be converted to 'Hz'"),
        ("detunin [MHz],atom_number [1]\n-12,1\n", "did you mean 'detuning'"),
        ("detuning [MHz],atom_number [1]\n-12\n", "row 2 has 1 cells"),
        ("detuning [MHz],atom_number [1]\n-12,abc\n", "'abc' is not a number"),
        ("# kind = loading\ntime [s],atom_number [1]\n1,1\n", "kind 'loading' is unknown"),
        ("# kind = loading-curve\natom_number [1]\n1\n", "needs a 'time \\[s\\]' column"),
        ("detuning MHz,atom_number [1]\n1,1\n", "is not 'name \\[unit\\]'"),
    ],
)
def test_bad_files_raise_one_line_data_errors(tmp_path, text, match):
    path = write(tmp_path, "bad.csv", text)
    with pytest.raises(DataError, match=match) as info:
        read_measurements(path, model=small_model())
    assert "\n" not in str(info.value)
    assert str(path) in str(info.value)


def test_missing_file_is_a_data_error(tmp_path):
    with pytest.raises(DataError, match="the data file does not exist; check the path"):
        read_measurements(tmp_path / "absent.csv")


# ------------------------------------------------------------------- loading curves


def test_loading_fit_noise_free_returns_exact_parameters():
    t = np.linspace(0, 10, 40)
    y = loading_curve(t, 3.2e8, 1.7)
    fit = fit_loading_curve(t, y, uncertainty=1e6)
    assert fit.value("steady_state") == pytest.approx(3.2e8, rel=1e-9)
    assert fit.value("time_constant") == pytest.approx(1.7, rel=1e-9)
    assert fit.chi2 == pytest.approx(0.0, abs=1e-12)


@pytest.mark.parametrize("given_sigma", [True, False])
def test_loading_fit_agrees_with_scipy_curve_fit(given_sigma):
    rng = np.random.default_rng(11)
    t = np.linspace(0.05, 8, 60)
    sigma = 4e6 * np.ones_like(t)
    y = loading_curve(t, 2.5e8, 1.3) + rng.normal(0, sigma)
    fit = fit_loading_curve(t, y, uncertainty=sigma if given_sigma else None)

    # scipy.optimize.curve_fit on the same data and model (reference implementation)
    def model(t, n_s, tau):
        return n_s * (1 - np.exp(-t / tau))

    popt, pcov = optimize.curve_fit(
        model,
        t,
        y,
        p0=[2e8, 1.0],
        sigma=sigma if given_sigma else None,
        absolute_sigma=given_sigma,
    )
    np.testing.assert_allclose(fit.values, popt, rtol=1e-6)
    np.testing.assert_allclose(fit.covariance, pcov, rtol=1e-4)


def test_two_body_fit_recovers_rate_equation_constants():
    # dN/dt = R - N/tau1 - b N^2 integrated by scipy.integrate.solve_ivp (reference ODE solver)
    rate, tau1, b = 2.0e8, 2.0, 1.5e-9
    t = np.linspace(0, 12, 80)
    solution = integrate.solve_ivp(
        lambda _t, n: rate - n / tau1 - b * n**2,
        (0, 12),
        [0.0],
        t_eval=t,
        rtol=1e-12,
        atol=1e-3,
    )
    fit = fit_loading_curve(t, solution.y[0], uncertainty=1e5, two_body=True)
    assert fit.derived["loading_rate"][0] == pytest.approx(rate, rel=1e-6)
    assert fit.derived["one_body_time"][0] == pytest.approx(tau1, rel=1e-6)
    assert fit.derived["two_body_rate"][0] == pytest.approx(b, rel=1e-5)
    # steady state: positive root of R - N/tau1 - b N^2 = 0
    n_s = (-1 / tau1 + math.sqrt(1 / tau1**2 + 4 * b * rate)) / (2 * b)
    assert fit.value("steady_state") == pytest.approx(n_s, rel=1e-7)
    # the ODE solution reaches 1 - 1/e of N_s at the reported loading time
    reached = integrate.solve_ivp(
        lambda _t, n: rate - n / tau1 - b * n**2,
        (0, fit.derived["loading_time"][0]),
        [0.0],
        rtol=1e-12,
        atol=1e-3,
    ).y[0, -1]
    assert reached == pytest.approx((1 - math.exp(-1)) * n_s, rel=1e-6)


# ----------------------------------------------------------------- time of flight


def test_time_of_flight_noise_free_returns_exact_parameters():
    t = np.linspace(0, 15e-3, 12)
    r = time_of_flight_radius(t, 0.4e-3, 80e-6, mass=RB87_MASS)
    fit = fit_time_of_flight(t, r, mass=RB87_MASS, uncertainty=5e-6)
    assert fit.value("initial_radius") == pytest.approx(0.4e-3, rel=1e-9)
    assert fit.value("temperature") == pytest.approx(80e-6, rel=1e-9)


def test_time_of_flight_agrees_with_scipy_curve_fit():
    rng = np.random.default_rng(5)
    t = np.linspace(1e-3, 14e-3, 15)
    sigma = 8e-6 * np.ones_like(t)
    r = time_of_flight_radius(t, 0.35e-3, 120e-6, mass=RB87_MASS) + rng.normal(0, sigma)
    fit = fit_time_of_flight(t, r, mass=RB87_MASS, uncertainty=sigma)

    # scipy.optimize.curve_fit: sigma(t) = sqrt(sigma0^2 + k_B T t^2 / m)
    def model(t, s0, temp):
        return np.sqrt(s0**2 + const.k * temp * t**2 / RB87_MASS)

    popt, pcov = optimize.curve_fit(
        model, t, r, p0=[0.3e-3, 100e-6], sigma=sigma, absolute_sigma=True
    )
    np.testing.assert_allclose(fit.values, popt, rtol=1e-6)
    np.testing.assert_allclose(fit.covariance, pcov, rtol=1e-4)


# ---------------------------------------------------------------- observations


def test_loading_curve_file_becomes_observations(tmp_path):
    t = np.linspace(0, 6, 25)
    lines = ["# kind = loading-curve", "time [s],atom_number [1],detuning [MHz]"]
    for det, n_s, tau in [(-12, 2.0e8, 1.5), (-9, 1.2e8, 1.1)]:
        lines += [
            f"{ti:.17g},{yi:.17g},{det}"
            for ti, yi in zip(t, loading_curve(t, n_s, tau), strict=True)
        ]
    path = write(tmp_path, "curves.csv", "\n".join(lines) + "\n")
    obs = to_observations(read_measurements(path, model=small_model()), model=small_model())
    assert list(obs.output) == ["atom_number", "loading_time", "atom_number", "loading_time"]
    np.testing.assert_allclose(obs.value, [2.0e8, 1.5, 1.2e8, 1.1], rtol=1e-8)
    np.testing.assert_allclose(obs.settings["detuning"], [-12e6, -12e6, -9e6, -9e6])


def test_time_of_flight_file_becomes_a_temperature(tmp_path):
    t = np.linspace(1e-3, 12e-3, 10)
    r = time_of_flight_radius(t, 0.3e-3, 150e-6, mass=RB87_MASS)
    body = "\n".join(f"{ti * 1e3:.17g},{ri * 1e3:.17g}" for ti, ri in zip(t, r, strict=True))
    path = write(tmp_path, "tof.csv", "time [ms],cloud_radius [mm]\n" + body + "\n")
    mset = read_measurements(path, model=small_model())
    assert mset.kind == "time-of-flight"
    obs = to_observations(mset, model=small_model(), mass=RB87_MASS)
    assert list(obs.output) == ["temperature"]
    assert obs.value[0] == pytest.approx(150e-6, rel=1e-8)
    with pytest.raises(DataError, match="need the species mass"):
        to_observations(mset, model=small_model())


def test_uncertainty_from_scatter_of_repeats(tmp_path):
    path = write(
        tmp_path,
        "repeats.csv",
        "detuning [MHz],atom_number [1]\n-12,2.0e8\n-12,2.2e8\n-12,2.1e8\n-9,1.0e8\n",
    )
    obs = to_observations(read_measurements(path, model=small_model()), model=small_model())
    std = np.std([2.0e8, 2.2e8, 2.1e8], ddof=1)  # sample standard deviation (numpy)
    np.testing.assert_allclose(obs.uncertainty[:3], std)
    # the single row gets the pooled relative scatter of the repeated group
    assert obs.uncertainty[3] == pytest.approx(std / 2.1e8 * 1.0e8)

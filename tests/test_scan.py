"""Scans (trapbudget.sensitivity.scan): grids, common random numbers, conditioning, bands."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from trapbudget.sensitivity.errors import ScenarioError, UsageError
from trapbudget.sensitivity.scanning import scan
from trapbudget.sensitivity.scenario.reader import load_scenario

LINEAR = """
[scenario]
title = "Linear y = x1 + 2 x2, correlated normal inputs (analytic check)"
model = "linear"

[scenario.options]
coefficients = [1.0, 2.0]

[inputs.x1]
nominal = "1.0"
tolerance = "0.5"
meaning = "standard"
shape = "normal"

[inputs.x2]
nominal = "-2.0"
tolerance = "0.25"
meaning = "standard"
shape = "normal"

[[correlations]]
inputs = ["x1", "x2"]
coefficient = {rho}
"""


def _linear(tmp_path: Path, rho: float) -> object:
    path = tmp_path / "linear.toml"
    path.write_text(LINEAR.format(rho=rho), encoding="utf-8")
    return load_scenario(path)


@pytest.mark.parametrize("rho", [0.0, 0.8, -0.6])
def test_band_is_the_conditional_normal(tmp_path, rho):
    """With normal marginals the Gaussian copula is a bivariate normal, so y | x1 = a is
    N(a + 2 (mu2 + rho s2/s1 (a - mu1)), (2 s2)^2 (1 - rho^2)) (conditional of a
    multivariate normal, Anderson 2003, theorem 2.5.1)."""
    scenario = _linear(tmp_path, rho)
    n = 4096
    ds = scan(scenario, "x1", n_samples=n, rng=3, outputs=["y"])
    a = ds["x1"].values
    mu1, s1, mu2, s2 = 1.0, 0.5, -2.0, 0.25
    mean = a + 2 * (mu2 + rho * s2 / s1 * (a - mu1))
    sd = 2 * s2 * math.sqrt(1 - rho**2)
    z = stats.norm.ppf(0.975)
    # Default grid: nominal +- 3 standard uncertainties, 41 points.
    assert a[0] == pytest.approx(mu1 - 3 * s1) and a[-1] == pytest.approx(mu1 + 3 * s1)
    assert a.size == 41
    # Standard error of a sample quantile: sqrt(p(1-p)/n)/f(q) (e.g. Serfling 1980, 2.3.3),
    # about 0.042 sd at p = 0.025 and n = 4096 on random draws; Sobol' draws do better.
    se_tail = math.sqrt(0.025 * 0.975 / n) / stats.norm.pdf(z) * sd
    se_mean = sd / math.sqrt(n)
    row = ds.sel(output="y")
    assert np.max(np.abs(row["mean"].values - mean)) < 4 * se_mean
    assert np.max(np.abs(row["low"].values - (mean - z * sd))) < 4 * se_tail
    assert np.max(np.abs(row["high"].values - (mean + z * sd))) < 4 * se_tail
    assert np.allclose(row["std"].values, sd, rtol=0.05)
    # nominal curve: the other input held at its nominal, not conditioned
    assert np.allclose(row["nominal_curve"].values, a + 2 * mu2)
    assert ds.attrs["conditioned"] == (["x2"] if rho else [])


def test_common_random_numbers_make_the_curve_smooth(tmp_path):
    """On common random numbers the scatter of the band between neighbouring grid points is
    far below the Monte Carlo error of each point (independent draws would not be)."""
    scenario = _linear(tmp_path, 0.5)
    ds = scan(scenario, "x1", n_samples=256, rng=5, outputs=["y"])
    high = ds["high"].sel(output="y").values
    second_difference = np.abs(np.diff(high, 2))
    se_tail = math.sqrt(0.025 * 0.975 / 256) / stats.norm.pdf(1.96) * 0.5 * math.sqrt(0.75)
    assert second_difference.max() < 0.1 * se_tail


def test_two_settings_give_a_map(tmp_path):
    scenario = _linear(tmp_path, 0.0)
    ds = scan(scenario, ["x1", "x2"], n_points=(5, 7), n_samples=64, rng=1)
    assert ds["median"].dims == ("output", "x1", "x2")
    assert ds["median"].shape == (1, 5, 7)
    # Both inputs swept: nothing is left uncertain, the band collapses on the curve.
    y = ds["x1"].values[:, None] + 2 * ds["x2"].values[None, :]
    assert np.allclose(ds["median"].sel(output="y").values, y)
    assert np.allclose(ds["high"].sel(output="y").values, y)


def test_ranges_and_refusals(tmp_path):
    scenario = _linear(tmp_path, 0.0)
    ds = scan(scenario, "x2", ranges={"x2": (0.0, 1.0)}, n_points=3, n_samples=16)
    assert ds["x2"].values.tolist() == [0.0, 0.5, 1.0]
    with pytest.raises(ScenarioError, match="no input 'x3'"):
        scan(scenario, "x3", n_samples=16)
    with pytest.raises(UsageError, match="one or two"):
        scan(scenario, ["x1", "x2", "x1"], n_samples=16)
    with pytest.raises(UsageError, match="twice"):
        scan(scenario, ["x1", "x1"], n_samples=16)


def test_trap_detuning_scan_shows_no_trap_on_the_blue_side(tmp_path):
    """Sweeping the detuning through resonance: on the blue side a MOT does not trap
    (Raab et al., PRL 59, 2631 (1987); common practice), so the model flags every draw."""
    from importlib import resources

    path = resources.files("trapbudget.examples") / "harrier-rb87.toml"
    scenario = load_scenario(Path(str(path)))
    ds = scan(
        scenario, "detuning", ranges={"detuning": (-30e6, 6e6)}, n_points=13, n_samples=64, rng=2
    )
    detuning = ds["detuning"].values
    invalid = ds["invalid_fraction"].values
    assert np.all(invalid[detuning > 1e6] == 1.0)
    assert np.all(invalid[detuning < -5e6] == 0.0)
    atoms = ds["median"].sel(output="atom_number").values
    assert np.all(atoms[detuning > 1e6] == 0.0)
    assert np.all(atoms[detuning < -5e6] > 1e8)
    # the correlated pair beam_power / repump_power is not swept: nothing is conditioned
    assert ds.attrs["conditioned"] == []
    # a setting without tolerance in the scenario needs a range
    fixed = next(n for n in scenario.model.inputs if n not in scenario.inputs)
    with pytest.raises(ScenarioError, match="--range"):
        scan(scenario, fixed, n_samples=16)

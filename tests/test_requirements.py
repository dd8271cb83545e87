"""Requirements on outputs, against exact normal probabilities (scipy.stats)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from trapbudget.sensitivity.compliance import check_requirements, requirement_met
from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.propagation import propagate
from trapbudget.sensitivity.scenario.requirements import Requirement, parse_requirements
from trapbudget.sensitivity.testfunctions import LinearModel

MODEL = LinearModel([2.0, 3.0], offset=10.0)
INPUTS = {"x1": stats.norm(0.0, 0.5), "x2": stats.norm(1.0, 0.4)}
# y = 10 + 2 x1 + 3 x2 is normal: mean 13, std sqrt((2*0.5)^2 + (3*0.4)^2) (sum of normals)
Y = stats.norm(13.0, math.hypot(1.0, 1.2))
N = 2**14


@pytest.fixture(scope="module")
def samples():
    return propagate(MODEL, INPUTS, n_samples=N, method="random", rng=31)


def _binomial_se(p: float) -> float:
    return math.sqrt(p * (1 - p) / N)


def test_at_least_vs_exact_normal_probability(samples):
    req = Requirement("y", "at_least", 11.5, 0.9, "y high enough")
    check = requirement_met(samples, req)
    exact = Y.sf(11.5)  # scipy.stats.norm.sf
    assert abs(check.probability - exact) < 5 * _binomial_se(exact)
    assert check.standard_error == pytest.approx(_binomial_se(exact), rel=0.05)
    assert check.met == (check.probability >= 0.9)
    assert check.margin == pytest.approx(check.probability - 0.9)


def test_at_most_and_within_vs_exact(samples):
    at_most = requirement_met(samples, Requirement("y", "at_most", 14.0, 0.99))
    assert abs(at_most.probability - Y.cdf(14.0)) < 5 * _binomial_se(Y.cdf(14.0))
    assert at_most.met is False  # Y.cdf(14) = 0.75 < 0.99
    within = requirement_met(samples, Requirement("y", "within", (12.0, 15.0), 0.5))
    exact = Y.cdf(15.0) - Y.cdf(12.0)
    assert abs(within.probability - exact) < 5 * _binomial_se(exact)
    assert within.met is True


def test_relative_spread(samples):
    check = requirement_met(samples, Requirement("y", "relative_spread_at_most", 0.2))
    cv = Y.std() / Y.mean()
    # normal theory (McKay 1932): se(c) ~ c sqrt(1/(2n) + c^2/n)
    se = cv * math.sqrt(1 / (2 * N) + cv**2 / N)
    assert abs(check.estimate - cv) < 5 * se
    half = (check.estimate_high - check.estimate_low) / 2
    assert half == pytest.approx(stats.norm.ppf(0.975) * se, rel=0.1)
    assert check.met is True and check.margin == pytest.approx(0.2 - check.estimate)
    assert math.isnan(check.probability)


def test_check_requirements_dataset(samples):
    reqs = (
        Requirement("y", "at_least", 10.5, 0.9, "y high enough"),  # exact P = Y.sf(10.5) = 0.945
        Requirement("y", "relative_spread_at_most", 0.05),
    )
    ds = check_requirements(samples, reqs)
    assert list(ds["requirement"].values) == ["y high enough", "y relative spread at most 0.05"]
    assert ds["met"].dtype == bool
    assert bool(ds["met"][0]) is True and bool(ds["met"][1]) is False  # cv = 0.12 > 0.05
    assert ds.attrs["all_met"] is False
    assert float(ds["limit_low"][0]) == 10.5 and math.isnan(float(ds["limit_high"][0]))


def test_parse_requirements_units():
    from trapbudget.sensitivity.testfunctions import MassCalibration

    raw = [
        {"output": "y", "within": ["1 mg", "1.5 mg"], "probability": 0.95, "label": "in spec"},
        {"output": "y", "relative_spread_at_most": "10 %"},
    ]
    reqs = parse_requirements(raw, model=MassCalibration(), path="s.toml")
    assert reqs[0].limit == pytest.approx((1e-6, 1.5e-6))  # 1 mg = 1e-6 kg (SI prefixes)
    assert reqs[1].limit == pytest.approx(0.1)
    assert reqs[0].label == "in spec"


@pytest.mark.parametrize(
    ("raw", "message"),
    [
        ({"output": "q", "at_least": "1", "probability": 0.9}, r"output 'q' is not an output"),
        ({"output": "y", "probability": 0.9}, r"give exactly one of at_least"),
        ({"output": "y", "at_least": "1", "at_most": "2", "probability": 0.9}, r"exactly one"),
        ({"output": "y", "at_least": "1"}, r"missing probability; add e.g. probability = 0.95"),
        ({"output": "y", "at_least": "1", "probability": 1.5}, r"must lie in \(0, 1\]"),
        ({"output": "y", "within": "1", "probability": 0.9}, r"must be \[low, high\]"),
        ({"output": "y", "within": ["2", "1"], "probability": 0.9}, r"low < high"),
        ({"output": "y", "at_least": "1", "probability": 0.9, "prob": 1}, r"unknown key 'prob'"),
        ({"output": "y", "relative_spread_at_most": "5 %", "probability": 0.9}, r"no probability"),
    ],
)
def test_parse_errors(raw, message):
    with pytest.raises(ScenarioError, match=message):
        parse_requirements([raw], model=MODEL, path="s.toml")


def test_missing_output_in_samples(samples):
    with pytest.raises(ScenarioError, match=r"no such output in the samples"):
        requirement_met(samples, Requirement("atoms", "at_least", 1.0, 0.5))


def test_unknown_kind():
    with pytest.raises(ScenarioError, match=r"kind 'above' is not known; use one of at_least"):
        Requirement("y", "above", 1.0, 0.5)


def test_zero_spread_sample():
    import xarray as xr

    ds = xr.Dataset({"y": ("sample", np.full(10, 3.0), {"role": "output"})})
    check = requirement_met(ds, Requirement("y", "relative_spread_at_most", 0.01))
    assert check.estimate == 0.0 and check.met is True


def _exact_coverage(n: int, p: float, method: str) -> float:
    """Coverage of the interval summed over the Binomial(n, p) outcomes (no simulation)."""
    from trapbudget.sensitivity.compliance import probability_interval

    k = np.arange(n + 1)
    pmf = stats.binom.pmf(k, n, p)
    keep = pmf > 1e-14  # outcomes below this carry less than n * 1e-14 of the mass
    covered = [
        pmf[i] for i in k[keep] if _inside(p, probability_interval(int(i), n, method=method))
    ]
    return float(np.sum(covered))


def _inside(p: float, interval: tuple[float, float]) -> bool:
    return interval[0] <= p <= interval[1]


GRID_N = (50, 200, 1000, 4096)
GRID_P = (0.5, 0.9, 0.95, 0.99, 0.995, 0.999)


@pytest.mark.parametrize("n", GRID_N)
def test_clopper_pearson_covers_at_least_nominal_on_the_grid(n):
    # Clopper & Pearson 1934: coverage >= the level for every n and p; summed exactly over
    # the binomial outcomes, so the only tolerance is float rounding (1e-9).
    for p in GRID_P:
        assert _exact_coverage(n, p, "exact") >= 0.95 - 1e-9, (n, p)


@pytest.mark.parametrize("n", GRID_N)
def test_wilson_coverage_within_its_known_dip(n):
    # Brown, Cai & DasGupta 2001 (Stat. Sci. 16, 101): the Wilson interval dips below the
    # level where n p (1 - p) is of order one; stated tolerance 0.05 on this grid.
    for p in GRID_P:
        assert _exact_coverage(n, p, "wilson") >= 0.95 - 0.05, (n, p)


def test_probability_near_one_keeps_an_honest_interval():
    # Every draw passes: the Wald error is 0, the Clopper-Pearson lower bound is
    # (alpha/2)^(1/n) (Clopper & Pearson 1934, closed form for k = n).
    from trapbudget.sensitivity.compliance import probability_interval

    samples = propagate(MODEL, INPUTS, n_samples=4096, method="random", rng=2)
    req = Requirement(output="y", kind="at_least", limit=0.0, probability=0.999)
    check = requirement_met(samples, req)
    assert check.probability == 1.0 and check.standard_error == 0.0
    assert check.probability_low == pytest.approx(0.025 ** (1 / 4096), rel=1e-12)
    assert check.probability_high == 1.0
    assert all(math.isnan(v) for v in probability_interval(0, 0))  # no draws, no interval


def test_binomial_interval_covers_on_monte_carlo_samples():
    # 200 independent samples of 2000 draws, y normal (exact probability from scipy.stats):
    # the covering count must lie in the central 99.9 % band of Binomial(200, >= 0.95).
    limit = Y.ppf(0.02)
    exact = float(Y.sf(limit))
    req = Requirement(output="y", kind="at_least", limit=limit, probability=0.9)
    hits = 0
    for seed in range(200):
        check = requirement_met(
            propagate(MODEL, INPUTS, n_samples=2000, method="random", rng=seed), req
        )
        hits += check.probability_low <= exact <= check.probability_high
    assert hits >= stats.binom.ppf(0.0005, 200, 0.95), hits

"""Tests of before/after comparison with common random numbers (trapbudget.sensitivity.compare)."""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pytest
from scipy import stats

from trapbudget.sensitivity.decisions.compare import (
    common_random_samples,
    compare,
    compare_samples,
    compare_upgrades,
)
from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.scenario.core import Scenario
from trapbudget.sensitivity.scenario.requirements import Requirement
from trapbudget.sensitivity.testfunctions import LinearModel

N = 2**14
COEFFICIENTS = (2.0, -1.0, 0.5)
OFFSET = 10.0


@dataclass(frozen=True)
class _Side:
    """The attributes of a Scenario that the CRN machinery reads."""

    inputs: dict
    model: object = field(default_factory=lambda: LinearModel(COEFFICIENTS, offset=OFFSET))
    correlation: np.ndarray | None = None
    outputs: tuple = ("y",)
    requirements: tuple = ()


def _side(sd=(0.1, 0.2, 0.4), requirements=()):
    return _Side(
        inputs={f"x{i + 1}": stats.norm(0.0, s) for i, s in enumerate(sd)},
        requirements=tuple(requirements),
    )


def _linear_variance(sd):
    # Var Y = sum b_i^2 s_i^2 for independent inputs (references.md, linear model [F])
    return sum(b * b * s * s for b, s in zip(COEFFICIENTS, sd, strict=True))


def test_scenario_compared_with_itself_shows_exactly_no_change():
    req = Requirement("y", "at_least", 9.8, 0.9, "enough")
    side = _side(requirements=[req])
    before, after = common_random_samples([side, side], n_samples=N, rng=5)
    ds = compare_samples(before, after, requirements=[req])
    assert float(ds["mean_change"].item()) == 0.0
    assert float(ds["variance_removed"].item()) == 0.0
    assert float(ds["probability_shift"].item()) == 0.0
    assert float(ds["shift_standard_error"].item()) == 0.0


def test_halving_one_tolerance_removes_the_predicted_variance_share():
    # linear model: Var removed = b1^2 u1^2 (1 - 1/4), share of Var(before) (references.md [F])
    sd = (0.3, 0.2, 0.4)
    before, after = common_random_samples(
        [_side(sd), _side((sd[0] / 2, sd[1], sd[2]))], n_samples=N, rng=11
    )
    ds = compare_samples(before, after)
    expected = COEFFICIENTS[0] ** 2 * sd[0] ** 2 * 0.75 / _linear_variance(sd)
    # relative standard error of a sample variance ~ sqrt(2/n) (normal theory); 5 sigma
    tolerance = 5 * math.sqrt(2.0 / N)
    assert float(ds["variance_removed_fraction"].item()) == pytest.approx(expected, abs=tolerance)
    # the inputs not changed take identical values on both sides (common random numbers)
    np.testing.assert_array_equal(before["x2"].values, after["x2"].values)
    np.testing.assert_allclose(after["x1"].values, before["x1"].values / 2, rtol=1e-12)


@pytest.mark.parametrize("method", ["sobol", "random"])
def test_probabilities_match_exact_normal_values(method):
    # linear-Gaussian model: Y ~ N(offset, sqrt(sum b^2 s^2)); exact P from scipy.stats.norm
    sd_before, sd_after = (0.1, 0.2, 0.4), (0.1, 0.1, 0.2)
    limit = 9.7
    reqs = [
        Requirement("y", "at_least", limit, 0.9, "enough"),
        Requirement("y", "within", (9.6, 10.3), 0.9, "window"),
    ]
    before, after = common_random_samples(
        [_side(sd_before, reqs), _side(sd_after, reqs)], n_samples=N, method=method, rng=2
    )
    ds = compare_samples(before, after, requirements=reqs, repetition_rate=2.0)
    s_b, s_a = math.sqrt(_linear_variance(sd_before)), math.sqrt(_linear_variance(sd_after))
    exact_b = [
        stats.norm.sf(limit, OFFSET, s_b),
        stats.norm.cdf(10.3, OFFSET, s_b) - stats.norm.cdf(9.6, OFFSET, s_b),
    ]
    exact_a = [
        stats.norm.sf(limit, OFFSET, s_a),
        stats.norm.cdf(10.3, OFFSET, s_a) - stats.norm.cdf(9.6, OFFSET, s_a),
    ]
    for i in range(2):
        pb = float(ds["probability_before"].values[i])
        pa = float(ds["probability_after"].values[i])
        # binomial standard error sqrt(p (1 - p) / n); 4 sigma
        assert pb == pytest.approx(
            exact_b[i], abs=4 * math.sqrt(exact_b[i] * (1 - exact_b[i]) / N)
        )
        assert pa == pytest.approx(
            exact_a[i], abs=4 * math.sqrt(exact_a[i] * (1 - exact_a[i]) / N)
        )
        shift_se = float(ds["shift_standard_error"].values[i])
        assert pa - pb == pytest.approx(exact_a[i] - exact_b[i], abs=4 * shift_se + 1.0 / N)
        # expected failing runs per day at 2 Hz: (1 - P) * 2 * 86400 (arithmetic)
        assert float(ds["failing_per_day_after"].values[i]) == pytest.approx((1 - pa) * 2 * 86400)


def test_paired_shift_error_is_smaller_than_independent_draws():
    # common random numbers: Var(I_a - I_b) << Var(I_a) + Var(I_b) when the change is small
    req = Requirement("y", "at_least", 9.7, 0.9, "enough")
    before, after = common_random_samples(
        [_side((0.1, 0.2, 0.4), [req]), _side((0.1, 0.2, 0.36), [req])], n_samples=N, rng=3
    )
    ds = compare_samples(before, after, requirements=[req])
    pb, pa = float(ds["probability_before"].item()), float(ds["probability_after"].item())
    independent = math.sqrt(pb * (1 - pb) / N + pa * (1 - pa) / N)
    assert float(ds["shift_standard_error"].item()) < 0.5 * independent


def test_relative_spread_requirement_reports_the_spread_not_a_probability():
    # relative spread is std / |mean| of the output (common practice)
    req = Requirement("y", "relative_spread_at_most", 0.05, None, "stable")
    before, after = common_random_samples([_side(), _side((0.05, 0.1, 0.2))], n_samples=N, rng=4)
    ds = compare_samples(before, after, requirements=[req])
    assert math.isnan(float(ds["probability_before"].item()))
    expected = math.sqrt(_linear_variance((0.05, 0.1, 0.2))) / OFFSET
    assert float(ds["relative_spread_after"].item()) == pytest.approx(expected, rel=0.05)


def test_unpaired_samples_are_refused():
    a = common_random_samples([_side()], n_samples=256, rng=1)[0]
    b = common_random_samples([_side()], n_samples=512, rng=1)[0]
    with pytest.raises(ValueError, match="same number of paired samples"):
        compare_samples(a, b)


# ---------------------------------------------------------------- scenario-level drivers

LIN = {"x1": 2.0, "x2": -1.0, "x3": 0.5}


def _scenario(upgrades=(), *, limit=9.4, n_samples=N):
    return Scenario.from_dict(
        {
            "scenario": {
                "title": "linear compare test",
                "model": "linear",
                "options": {"coefficients": LIN, "offset": OFFSET},
                "currency": "EUR",
            },
            "inputs": {
                "x1": {"nominal": 0.0, "tolerance": 0.2},
                "x2": {"nominal": 0.0, "tolerance": 0.3},
                "x3": {"nominal": 0.0, "tolerance": 0.4},
            },
            "outputs": {"names": ["y"]},
            "settings": {"n_samples": n_samples, "method": "sobol", "seed": 9},
            "requirements": [
                {"output": "y", "at_least": limit, "probability": 0.95, "label": "enough"}
            ],
            "upgrades": list(upgrades),
        }
    )


def test_compare_scenario_with_itself_is_exactly_zero():
    scenario = _scenario()
    ds = compare(scenario, scenario)
    assert float(ds["mean_change"].item()) == 0.0
    assert float(ds["variance_removed"].item()) == 0.0
    assert float(ds["probability_shift"].item()) == 0.0


def test_new_nominal_shifts_the_mean_by_the_linear_coefficient():
    # linear model: dY = b1 dx1 exactly, and with common random numbers for every sample
    scenario = _scenario()
    ds = compare(scenario, scenario.with_nominal({"x1": 0.05}))
    assert float(ds["mean_change"].item()) == pytest.approx(LIN["x1"] * 0.05, rel=1e-9)
    assert float(ds["mean_change_standard_error"].item()) == pytest.approx(0.0, abs=1e-12)


def test_compare_upgrades_ranks_by_exact_probability_gain_per_cost():
    upgrades = [
        {"name": "halve x1", "cost": 1000, "changes": {"x1": {"tolerance": 0.1}}},
        {"name": "halve x2", "cost": 500, "changes": {"x2": {"tolerance": 0.15}}},
        {"name": "halve x3", "cost": 100, "changes": {"x3": {"tolerance": 0.2}}},
    ]
    scenario = _scenario(upgrades)
    ds = compare_upgrades(scenario, repetition_rate=1.0)
    sd = {"x1": 0.2, "x2": 0.3, "x3": 0.4}

    def exact_p(change):  # exact normal P(Y >= 9.4), scipy.stats.norm.sf
        s = dict(sd, **change)
        return stats.norm.sf(9.4, OFFSET, math.sqrt(sum((LIN[k] * s[k]) ** 2 for k in s)))

    p0 = exact_p({})
    gains = [exact_p({"x1": 0.1}) - p0, exact_p({"x2": 0.15}) - p0, exact_p({"x3": 0.2}) - p0]
    for k, name in enumerate(["halve x1", "halve x2", "halve x3"]):
        item = ds.sel(upgrade=name)
        se = float(item["shift_standard_error"].item())
        assert float(item["probability_shift"].item()) == pytest.approx(
            gains[k], abs=4 * se + 1 / N
        )
        # variance removed: b^2 u^2 (1 - 1/4) / Var (references.md, linear model [F])
        var = sum((LIN[j] * sd[j]) ** 2 for j in sd)
        expected = (LIN[f"x{k + 1}"] * sd[f"x{k + 1}"]) ** 2 * 0.75 / var
        assert float(item["variance_removed_fraction"].item()) == pytest.approx(
            expected, abs=5 * math.sqrt(2.0 / N)
        )
    per_cost = np.array(gains) / np.array([1000.0, 500.0, 100.0])
    # x1 and x2 gain within 3 % of each other per unit cost (5.98e-5 vs 6.18e-5), less
    # than 4 standard errors of the shifts (about 1e-3 / 500 = 2e-6 per cost): a
    # statistical tie, so only the clear first place is checked exactly.
    assert int(np.argmax(per_cost)) == 2 and ds["rank"].sel(upgrade="halve x3").item() == 1
    assert sorted(ds["rank"].sel(upgrade=["halve x1", "halve x2"]).values) == [2, 3]
    se_cost = ds["shift_standard_error"].values.ravel() / np.array([1000.0, 500.0, 100.0])
    assert abs(per_cost[0] - per_cost[1]) < 4 * math.hypot(se_cost[0], se_cost[1])
    assert ds.attrs["benefit_metric"].startswith("probability gained")


def test_compare_upgrades_without_upgrades_is_refused():
    with pytest.raises(ScenarioError, match=r"no upgrades to compare; add \[\[upgrades\]\]"):
        compare_upgrades(_scenario())


def test_a_different_component_changes_the_variance_as_its_coefficient_predicts():
    # "after" swaps in a component with half the sensitivity to x1 (a different model):
    # Var removed = (b1^2 - (b1/2)^2) u1^2 (linear model, references.md [F])
    before = _scenario()
    after = Scenario.from_dict(
        {
            **{k: v for k, v in before.to_dict().items() if k != "scenario"},
            "scenario": {
                "title": "after: less sensitive component",
                "model": "linear",
                "options": {"coefficients": dict(LIN, x1=1.0), "offset": OFFSET},
            },
        }
    )
    ds = compare(before, after)
    var = sum((LIN[k] * s) ** 2 for k, s in {"x1": 0.2, "x2": 0.3, "x3": 0.4}.items())
    expected = (LIN["x1"] ** 2 - 1.0) * 0.2**2
    assert float(ds["variance_removed"].item()) == pytest.approx(
        expected, abs=5 * math.sqrt(2.0 / N) * var
    )
    # mean change = (b1' - b1) * mean(x1 samples): zero up to the sample mean's error u1/sqrt(n)
    assert float(ds["mean_change"].item()) == pytest.approx(0.0, abs=5 * 0.2 / math.sqrt(N))


def test_options_that_all_reach_every_requirement_are_ordered_by_variance_removed():
    # Both upgrades put the limit more than 7 standard deviations below the mean, so on
    # 2^12 common draws every run passes after either (normal tail 1e-12, scipy.stats.norm):
    # their probability gains are exactly equal, and the one that removes more variance
    # (linear model: 1 - scale^2 of Var, references.md [F]) must rank first.
    sigma = math.sqrt(sum((LIN[k] * s) ** 2 for k, s in (("x1", 0.2), ("x2", 0.3), ("x3", 0.4))))
    limit = OFFSET - 1.5 * sigma

    def scaled(name, scale):
        changes = {k: {"tolerance": s * scale} for k, s in (("x1", 0.2), ("x2", 0.3), ("x3", 0.4))}
        return {"name": name, "cost": 1000, "changes": changes}

    upgrades = [scaled("fifth", 0.2), scaled("tenth", 0.1), scaled("nothing", 1.0)]
    ds = compare_upgrades(_scenario(upgrades, limit=limit, n_samples=2**12))
    gains = ds["benefit"].sel(upgrade=["fifth", "tenth"]).values
    assert gains[0] == gains[1] > 0
    removed = ds["variance_removed_first"].sel(upgrade=["fifth", "tenth"]).values
    assert removed == pytest.approx([1 - 0.2**2, 1 - 0.1**2], abs=1e-9)
    assert [int(ds["rank"].sel(upgrade=u)) for u in ("tenth", "fifth", "nothing")] == [1, 2, 3]

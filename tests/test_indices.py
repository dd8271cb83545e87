"""Sobol' indices: closed forms (Ishigami, G-function, linear) and SALib on identical samples."""

from __future__ import annotations

import math

import numpy as np
import pytest
from SALib.analyze import delta as salib_delta
from SALib.analyze import sobol as salib_sobol
from SALib.sample import sobol as salib_sample

from trapbudget.sensitivity.indices.givendata import default_bins, first_order_given_data
from trapbudget.sensitivity.indices.sobol import saltelli_design, sobol_indices

PI = math.pi


def ishigami(x: np.ndarray, a: float = 7.0, b: float = 0.1) -> np.ndarray:
    return np.sin(x[..., 0]) + a * np.sin(x[..., 1]) ** 2 + b * x[..., 2] ** 4 * np.sin(x[..., 0])


def ishigami_exact(a: float = 7.0, b: float = 0.1):
    # Ishigami & Homma 1990; Saltelli et al. 2008, "Global Sensitivity Analysis: The Primer".
    v = 0.5 + a**2 / 8 + b * PI**4 / 5 + b**2 * PI**8 / 18
    v1 = (1 + b * PI**4 / 5) ** 2 / 2
    v2 = a**2 / 8
    v13 = 8 * b**2 * PI**8 / 225
    return np.array([v1, v2, 0.0]) / v, np.array([v1 + v13, v2, v13]) / v, v13 / v


def g_exact(a):
    # Sobol' G-function, x ~ U(0,1): V_i = 1/(3 (1+a_i)^2), V = prod(1+V_i) - 1
    # (Saltelli & Sobol' 1995; Saltelli et al. 2008, Primer).
    a = np.asarray(a, float)
    vi = 1 / (3 * (1 + a) ** 2)
    v = np.prod(1 + vi) - 1
    return vi / v, vi * np.prod(1 + vi) / (1 + vi) / v


def run_design(func, n, d, *, lows, highs, second_order=False, seed=0):
    design = saltelli_design(n, d, second_order=second_order, rng=seed)
    lows, highs = np.asarray(lows, float), np.asarray(highs, float)
    rows = lows + design.stacked() * (highs - lows)
    return design, design.split(func(rows))


def assert_within(estimate, se, exact, k=4.0):
    # Monte Carlo tolerance from n: k bootstrap standard errors (plus float slack).
    assert np.all(np.abs(estimate - exact) <= k * se + 1e-12), (estimate, exact, se)


def test_ishigami_matches_closed_form():
    s_exact, st_exact, s13 = ishigami_exact()
    # Check the closed form itself against the published decimals (Primer, Table; from memory).
    np.testing.assert_allclose(s_exact, [0.3139, 0.4424, 0.0], atol=1e-4)
    _, (f_a, f_b, f_ab, f_ba) = run_design(
        ishigami, 4096, 3, lows=[-PI] * 3, highs=[PI] * 3, second_order=True, seed=11
    )
    res = sobol_indices(f_a, f_b, f_ab, f_ba, n_bootstrap=300, rng=5)
    assert_within(res.first_order, res.first_order_se, s_exact)
    assert_within(res.total_order, res.total_order_se, st_exact)
    assert_within(res.second_order[0, 2], res.second_order_se[0, 2], s13)
    assert_within(res.second_order[0, 1], res.second_order_se[0, 1], 0.0)
    # Intervals bracket the estimates and the matrix is symmetric.
    assert np.all(res.total_order_interval.low <= res.total_order)
    assert np.all(res.total_order <= res.total_order_interval.high)
    np.testing.assert_array_equal(res.second_order, res.second_order.T)
    # Analytic output variance: V of the closed form.
    v = 0.5 + 49 / 8 + 0.1 * PI**4 / 5 + 0.01 * PI**8 / 18
    assert abs(res.variance - v) < 0.05 * v


@pytest.mark.parametrize(
    "a",
    [
        (0.0, 1.0, 4.5, 9.0, 99.0, 99.0),  # Saltelli et al. 2008, Primer (G-function example)
        (0.0, 0.0, 0.5, 3.0, 9.0),  # a second set: two dominant, interacting inputs
    ],
)
def test_g_function_matches_closed_form(a):
    s_exact, st_exact = g_exact(a)

    def g(x):
        return np.prod((np.abs(4 * x - 2) + np.asarray(a)) / (1 + np.asarray(a)), axis=-1)

    d = len(a)
    _, (f_a, f_b, f_ab, _) = run_design(g, 4096, d, lows=[0] * d, highs=[1] * d, seed=3)
    res = sobol_indices(f_a, f_b, f_ab, n_bootstrap=300, rng=1)
    assert_within(res.first_order, res.first_order_se, s_exact)
    assert_within(res.total_order, res.total_order_se, st_exact)


def test_linear_model_independent_inputs():
    # Linear Y = sum b_i X_i, independent: S_i = ST_i = b_i^2 s_i^2 / sum (common practice, [F]).
    b = np.array([2.0, -1.0, 0.5, 0.0])
    half = np.array([1.0, 2.0, 1.0, 3.0])  # uniform half-widths: s = half / sqrt(3)
    exact = (b * half) ** 2 / np.sum((b * half) ** 2)
    _, (f_a, f_b, f_ab, _) = run_design(lambda x: x @ b, 2048, 4, lows=-half, highs=half, seed=2)
    res = sobol_indices(f_a, f_b, f_ab, n_bootstrap=200, rng=0)
    assert_within(res.first_order, res.first_order_se, exact)
    assert_within(res.total_order, res.total_order_se, exact)
    # A zero coefficient gives exactly zero with the Jansen estimator.
    assert res.total_order[3] == 0.0


@pytest.mark.parametrize("second_order", [False, True])
def test_agrees_with_salib_on_identical_samples(second_order):
    # SALib.sample.sobol.sample / SALib.analyze.sobol.analyze (SALib 1.5+), same matrices.
    problem = {"num_vars": 3, "names": ["x1", "x2", "x3"], "bounds": [[-PI, PI]] * 3}
    n, d = 512, 3
    x = salib_sample.sample(problem, n, calc_second_order=second_order, seed=7)
    y = ishigami(x)
    ref = salib_sobol.analyze(
        problem, y, calc_second_order=second_order, num_resamples=100, conf_level=0.9, seed=42
    )
    step = 2 * d + 2 if second_order else d + 2
    blocks = y.reshape(n, step)
    f_ba = blocks[:, d + 1 : 2 * d + 1].T if second_order else None
    res = sobol_indices(
        blocks[:, 0],
        blocks[:, -1],
        blocks[:, 1 : d + 1].T,
        f_ba,
        n_bootstrap=100,
        confidence_level=0.9,
        interval="normal",
        rng=42,
    )
    np.testing.assert_allclose(res.first_order, ref["S1"], rtol=0, atol=1e-10)
    np.testing.assert_allclose(res.total_order, ref["ST"], rtol=0, atol=1e-10)
    # Same seed -> same resamples: the half-widths agree too.
    half_s1 = res.first_order_interval.high - res.first_order
    half_st = res.total_order_interval.high - res.total_order
    np.testing.assert_allclose(half_s1, ref["S1_conf"], rtol=0, atol=1e-10)
    np.testing.assert_allclose(half_st, ref["ST_conf"], rtol=0, atol=1e-10)
    if second_order:
        upper = np.triu_indices(d, 1)
        np.testing.assert_allclose(res.second_order[upper], ref["S2"][upper], atol=1e-10)
        half = res.second_order_interval.high - res.second_order
        np.testing.assert_allclose(half[upper], ref["S2_conf"][upper], atol=1e-10)


def test_design_layout_matches_salib_blocks():
    # SALib.sample.sobol.sample builds rows A, AB_1..AB_d, (BA_1..BA_d), B from one 2d sequence.
    design = saltelli_design(64, 3, second_order=True, rng=4)
    assert design.n_evaluations == 64 * (2 * 3 + 2)
    np.testing.assert_array_equal(design.AB[1][:, [0, 2]], design.A[:, [0, 2]])
    np.testing.assert_array_equal(design.AB[1][:, 1], design.B[:, 1])
    np.testing.assert_array_equal(design.BA[2][:, 2], design.A[:, 2])
    np.testing.assert_array_equal(design.BA[2][:, :2], design.B[:, :2])
    assert np.all((design.stacked() > 0) & (design.stacked() < 1))
    grouped = saltelli_design(64, 3, factors=[(0, 2), (1,)], rng=4)
    np.testing.assert_array_equal(grouped.AB[0][:, [0, 2]], grouped.B[:, [0, 2]])
    assert grouped.n_evaluations == 64 * 4


def test_vectorized_over_outputs_equals_one_at_a_time():
    _, (f_a, f_b, f_ab, f_ba) = run_design(
        lambda x: np.stack([ishigami(x), x[:, 0] + 2 * x[:, 1] * x[:, 2]], axis=-1),
        256,
        3,
        lows=[-PI] * 3,
        highs=[PI] * 3,
        second_order=True,
    )
    both = sobol_indices(f_a, f_b, f_ab, f_ba, n_bootstrap=50, rng=9)
    for k in range(2):
        one = sobol_indices(
            f_a[:, k], f_b[:, k], f_ab[..., k], f_ba[..., k], n_bootstrap=50, rng=9
        )
        np.testing.assert_allclose(both.first_order[:, k], one.first_order, atol=1e-12)
        np.testing.assert_allclose(
            both.total_order_interval.high[:, k], one.total_order_interval.high, atol=1e-12
        )
        np.testing.assert_allclose(both.second_order[..., k], one.second_order, atol=1e-12)


def test_bootstrap_blocks_give_the_same_intervals(monkeypatch):
    # Chunking the resamples (bounded memory) must not change the numbers.
    import trapbudget.sensitivity.indices.bootstrap as indices

    _, (f_a, f_b, f_ab, f_ba) = run_design(
        ishigami, 128, 3, lows=[-PI] * 3, highs=[PI] * 3, second_order=True
    )
    whole = sobol_indices(f_a, f_b, f_ab, f_ba, n_bootstrap=64, rng=3)
    monkeypatch.setattr(indices, "_BOOTSTRAP_BLOCK", 128 * 3 * 5)
    blocks = sobol_indices(f_a, f_b, f_ab, f_ba, n_bootstrap=64, rng=3)
    np.testing.assert_allclose(whole.first_order_se, blocks.first_order_se, atol=1e-12)
    np.testing.assert_allclose(whole.second_order_se, blocks.second_order_se, atol=1e-12)


def test_sobol2007_estimator_is_consistent():
    # Sobol' et al. 2007 total-order estimator: same target as Jansen.
    _, st_exact, _ = ishigami_exact()
    _, (f_a, f_b, f_ab, _) = run_design(ishigami, 4096, 3, lows=[-PI] * 3, highs=[PI] * 3)
    res = sobol_indices(f_a, f_b, f_ab, n_bootstrap=200, rng=0, estimator="sobol2007")
    assert_within(res.total_order, res.total_order_se, st_exact)


def test_given_data_first_order_matches_salib_class_means():
    # SALib.analyze.delta.sobol_first: same class-mean estimator (Plischke et al. 2013, eq. 13).
    rng = np.random.default_rng(0)
    x = rng.normal(size=(3000, 3))
    y = x[:, 0] + 0.5 * x[:, 1] ** 2
    n_bins = default_bins(3000)
    edges = np.linspace(0, 3000, n_bins + 1)
    ours, interval = first_order_given_data(x, y, n_bootstrap=50, rng=1)
    ref = [salib_delta.sobol_first(y, x[:, i], edges) for i in range(3)]
    np.testing.assert_allclose(ours, ref, rtol=1e-12)
    assert np.all(interval.low <= interval.high)


def test_errors_name_the_fix():
    with pytest.raises(ValueError, match=r"power of 2; got 1000, use 1024"):
        saltelli_design(1000, 3)
    with pytest.raises(ValueError, match=r"estimator must be one of"):
        sobol_indices(np.ones(4), np.ones(4), np.ones((1, 4)), estimator="homma")
    with pytest.raises(ValueError, match=r"f_AB must have shape"):
        sobol_indices(np.ones(4), np.ones(4), np.ones((1, 5)))
    with pytest.raises(ValueError, match=r"n_bootstrap must be 0 or an integer >= 2"):
        sobol_indices(np.ones(4), np.ones(4), np.ones((1, 4)), n_bootstrap=1)
    with pytest.raises(ValueError, match=r"factor columns"):
        saltelli_design(8, 2, factors=[(0, 5)])


def test_dependent_design_structure_and_copula():
    # Gaussian copula (normal scores correlation R) in A, B and every C_i, D_i;
    # C_i shares x_i with B, D_i shares the others with A (Kucherenko et al. 2012).
    from scipy import stats
    from scipy.stats import qmc

    from trapbudget.sensitivity.indices.dependent import dependent_design

    corr = np.array([[1.0, 0.5, 0.8], [0.5, 1.0, 0.0], [0.8, 0.0, 1.0]])
    n = 4096
    base = qmc.Sobol(6, rng=np.random.default_rng(0)).random(n)
    a, b, c, d = dependent_design(base, corr)
    # Standard error of a correlation estimate ~ (1 - rho^2)/sqrt(n); 5 of them.
    tol = 5 / math.sqrt(n)
    for sample in (a, b, c[0], c[2], d[1]):
        np.testing.assert_allclose(np.corrcoef(stats.norm.ppf(sample).T), corr, atol=tol)
    np.testing.assert_array_equal(c[1][:, 1], b[:, 1])
    np.testing.assert_array_equal(d[1][:, [0, 2]], a[:, [0, 2]])
    # A and B independent of each other.
    cross = np.corrcoef(stats.norm.ppf(a).T, stats.norm.ppf(b).T)[:3, 3:]
    assert np.all(np.abs(cross) < tol)

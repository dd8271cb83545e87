"""Sample designs and the Gaussian-copula transform, against scipy.stats."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.sampling import (
    check_correlation,
    rank_correlation_to_copula,
    sample_inputs,
    transform,
    unit_design,
)

N = 4096
# 99.9 % critical value of the one-sample Kolmogorov-Smirnov statistic, sqrt(n) D
# (scipy.stats.kstwobign, the limiting Kolmogorov distribution)
KS_CRITICAL = stats.kstwobign.ppf(0.999) / math.sqrt(N)

MARGINALS = [
    stats.norm(1.0, 2.0),
    stats.uniform(-1.0, 2.0),
    stats.lognorm(0.5, scale=3.0),
    stats.arcsine(loc=-1.0, scale=2.0),
    stats.triang(0.5, loc=0.0, scale=4.0),
]


@pytest.mark.parametrize("method", ["random", "latin", "sobol"])
def test_marginals_preserved(method):
    x = transform(unit_design(N, len(MARGINALS), method=method, rng=11), MARGINALS)
    for j, dist in enumerate(MARGINALS):
        # scipy.stats.kstest against the marginal's cdf
        assert stats.kstest(x[:, j], dist.cdf).statistic < KS_CRITICAL


@pytest.mark.parametrize("method", ["random", "latin", "sobol"])
def test_design_in_open_unit_cube_and_seeded(method):
    a = unit_design(256, 3, method=method, rng=5)
    b = unit_design(256, 3, method=method, rng=5)
    assert a.shape == (256, 3)
    assert np.all((a > 0) & (a < 1))
    np.testing.assert_array_equal(a, b)
    assert not np.array_equal(a, unit_design(256, 3, method=method, rng=6))


def test_latin_hypercube_strata():
    # McKay, Beckman & Conover 1979: each of the n equal strata of every axis holds one point
    n = 64
    points = unit_design(n, 4, method="latin", rng=3)
    for j in range(4):
        assert sorted(np.floor(points[:, j] * n).astype(int)) == list(range(n))


def test_sobol_power_of_two_error():
    with pytest.raises(
        ScenarioError,
        match=r"method='sobol' requires n_samples to be a power of 2; got 1000, use 1024",
    ):
        unit_design(1000, 2, method="sobol", rng=0)


def test_unknown_method():
    with pytest.raises(ScenarioError, match=r"method='halton' is not known; use one of random"):
        unit_design(16, 2, method="halton")


def test_copula_reproduces_normal_score_correlation():
    rho = np.array([[1.0, 0.6, -0.3], [0.6, 1.0, 0.2], [-0.3, 0.2, 1.0]])
    n = 2**14
    dists = [stats.uniform(0, 1), stats.lognorm(0.8), stats.norm(5, 2)]
    x = transform(unit_design(n, 3, method="random", rng=2), dists, correlation=rho)
    scores = np.column_stack([stats.norm.ppf(d.cdf(x[:, j])) for j, d in enumerate(dists)])
    measured = np.corrcoef(scores, rowvar=False)
    # standard error of a Pearson coefficient (1 - r^2) / sqrt(n) (Fisher 1915, large n)
    tolerance = 5 * (1 - rho**2) / math.sqrt(n) + 1e-12
    assert np.all(np.abs(measured - rho) <= tolerance)
    for j, dist in enumerate(dists):
        assert stats.kstest(x[:, j], dist.cdf).statistic < stats.kstwobign.ppf(0.999) / math.sqrt(
            n
        )


def test_rank_correlation_conversion():
    # bivariate normal: Spearman rho_s = (6 / pi) arcsin(r / 2) (Kruskal 1958), inverted here
    for rho_s in (-0.7, 0.0, 0.3, 0.9):
        r = rank_correlation_to_copula(rho_s)
        assert (6 / math.pi) * math.asin(r / 2) == pytest.approx(rho_s, abs=1e-12)
    n = 2**14
    r = float(rank_correlation_to_copula(0.5))
    x = transform(
        unit_design(n, 2, method="random", rng=9),
        [stats.expon(), stats.uniform()],
        correlation=[[1, r], [r, 1]],
    )
    spearman = stats.spearmanr(x[:, 0], x[:, 1]).statistic  # scipy.stats.spearmanr
    # standard error of Spearman's rho about 1/sqrt(n - 1) at most (common practice bound)
    assert abs(spearman - 0.5) < 5 / math.sqrt(n - 1)


def test_check_correlation_names_inputs():
    # a, b, c with r_ab = r_ac = 0.9 and r_bc = -0.9 cannot coexist; d is uncorrelated
    bad = np.eye(4)
    bad[0, 1] = bad[1, 0] = bad[0, 2] = bad[2, 0] = 0.9
    bad[1, 2] = bad[2, 1] = -0.9
    with pytest.raises(
        ScenarioError, match=r"not positive definite .* among 'b', 'c', 'a' contradict"
    ):
        check_correlation(bad, ["a", "b", "c", "d"])
    with pytest.raises(ScenarioError, match=r"symmetric"):
        check_correlation([[1, 0.2], [0.1, 1]], ["a", "b"])
    with pytest.raises(ScenarioError, match=r"must be 3 x 3"):
        check_correlation(np.eye(2), ["a", "b", "c"])


def test_sample_inputs_skips_fixed():
    out = sample_inputs(
        {"a": stats.norm(0, 1), "b": 3.0, "c": stats.uniform()}, n_samples=64, rng=1
    )
    assert list(out) == ["a", "c"] and out["a"].shape == (64,)


def test_copula_to_pearson_closed_forms():
    from trapbudget.sensitivity.sampling import copula_to_pearson

    r = 0.6
    corr = [[1.0, r], [r, 1.0]]
    # uniform marginals: Pearson = (6 / pi) arcsin(r / 2) (Pearson 1907; Kruskal 1958)
    uniform = copula_to_pearson(corr, [stats.uniform(), stats.uniform(2, 3)])[0, 1]
    assert uniform == pytest.approx((6 / math.pi) * math.asin(r / 2), abs=1e-9)
    # log-normal marginals with log-sds s1, s2: (exp(r s1 s2) - 1) / sqrt((e^s1^2 - 1)(e^s2^2 - 1))
    # (Johnson, Kotz & Balakrishnan, Continuous Multivariate Distributions, ch. 46)
    s1, s2 = 0.5, 1.0
    lognormal = copula_to_pearson(corr, [stats.lognorm(s1), stats.lognorm(s2, scale=3.0)])[0, 1]
    exact = (math.exp(r * s1 * s2) - 1) / math.sqrt((math.exp(s1**2) - 1) * (math.exp(s2**2) - 1))
    assert lognormal == pytest.approx(exact, abs=1e-8)
    # normal marginals: the copula coefficient itself
    normal = copula_to_pearson(corr, [stats.norm(3, 2), stats.norm()])[0, 1]
    assert normal == pytest.approx(r, abs=1e-12)


def test_copula_to_pearson_matches_sampled_correlation():
    from trapbudget.sensitivity.sampling import copula_to_pearson

    r = -0.5
    dists = [stats.arcsine(), stats.expon()]
    n = 2**15
    x = transform(unit_design(n, 2, method="random", rng=8), dists, correlation=[[1, r], [r, 1]])
    predicted = copula_to_pearson([[1, r], [r, 1]], dists)[0, 1]
    # Pearson standard error about (1 - rho^2) / sqrt(n) for near-normal data; 10x margin for
    # the heavy exponential tail (common practice)
    assert abs(np.corrcoef(x, rowvar=False)[0, 1] - predicted) < 10 * (
        1 - predicted**2
    ) / math.sqrt(n)


@pytest.mark.parametrize(
    "dist",
    [
        stats.norm(-12e6, 3e5),
        stats.uniform(-5.0, 2.0),
        stats.lognorm(0.7, scale=3e-7),
        stats.lognorm(0.2, loc=1.0, scale=2.0),
        stats.arcsine(loc=1.0, scale=2.0),
    ],
    ids=lambda d: d.dist.name,
)
def test_fast_ppf_equals_scipy(dist):
    from trapbudget.sensitivity.sampling import ppf

    u = np.linspace(1e-12, 1 - 1e-12, 1001)
    np.testing.assert_allclose(ppf(dist, u), dist.ppf(u), rtol=1e-13, atol=0)  # scipy.stats ppf


def test_correlation_built_from_a_covariance_tolerates_rounding():
    # cov / outer(sd, sd) leaves the diagonal a few ulp from 1 (IEEE 754 rounding); the
    # check accepts it and returns a clean matrix, and still refuses a real excess.
    import pytest

    from trapbudget.sensitivity.errors import ScenarioError
    from trapbudget.sensitivity.sampling import check_correlation

    rng = np.random.default_rng(0)
    accepted = 0
    for _ in range(200):
        m = rng.normal(size=(4, 4))
        cov = m @ m.T + 4 * np.eye(4)
        sd = np.sqrt(np.diag(cov))
        corr = cov / np.outer(sd, sd)
        clean = check_correlation(corr)
        accepted += 1
        assert np.all(np.diag(clean) == 1.0) and np.array_equal(clean, clean.T)
        assert np.max(np.abs(clean - corr)) <= 1e-15
    assert accepted == 200
    ulp = np.array([[1.0 + 2.3e-16, 0.5], [0.5, 1.0]])
    assert check_correlation(ulp)[0, 0] == 1.0
    with pytest.raises(ScenarioError, match="outside"):
        check_correlation(np.array([[1.0, 1.01], [1.01, 1.0]]))

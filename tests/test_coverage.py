"""Coverage of the engine's nominal 95 % intervals, measured over many seeds.

Every check counts how many of ``n_seeds`` independent runs put the exact value
inside the reported interval. For intervals with the stated coverage that count
is Binomial(n_seeds, 0.95); a check passes when the count lies inside the
central 99.9 % band of that binomial, Bonferroni-corrected for the number of
such checks in this file (``N_CHECKS``): each band has tail mass
0.001 / N_CHECKS, split between the two sides. The tolerance therefore follows
from the number of seeds alone, never from a reported standard error.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from scipy import stats

from trapbudget.sensitivity.indices.dependent import dependent_design
from trapbudget.sensitivity.indices.sobol import design_from_base, sobol_indices
from trapbudget.sensitivity.ranking import rank
from trapbudget.sensitivity.testfunctions import LinearModel

#: Individual coverage checks in this file: Ishigami 3 + 3 + 1, G-function 4 + 4,
#: conditional sampling 3 + 3, after convergence 3 + 3, compare 1, interval ends 2,
#: Borgonovo delta 4.
N_CHECKS = 34
LEVEL = 0.95
PI = math.pi


def band(n_seeds: int) -> tuple[int, int]:
    """Central binomial band of the covering count, 99.9 % Bonferroni over N_CHECKS."""
    tail = 0.001 / N_CHECKS / 2
    return (
        int(stats.binom.ppf(tail, n_seeds, LEVEL)),
        int(stats.binom.isf(tail, n_seeds, LEVEL)),
    )


def assert_covers(hits: np.ndarray, label: str) -> None:
    """hits (n_seeds, ...) booleans; each column's count must lie inside the band."""
    n_seeds = hits.shape[0]
    low, high = band(n_seeds)
    counts = hits.reshape(n_seeds, -1).sum(axis=0)
    assert np.all((counts >= low) & (counts <= high)), (label, counts, (low, high))


def replicated(f, n: int, d: int, r: int, seed: int, *, second_order: bool = False):
    """f on R independently scrambled Saltelli designs, stacked replicate-major."""
    from scipy.stats import qmc

    blocks = []
    for stream in np.random.default_rng(seed).spawn(r):
        base = qmc.Sobol(d=2 * d, scramble=True, rng=stream).random(n)
        design = design_from_base(
            base, factors=[(j,) for j in range(d)], second_order=second_order
        )
        blocks.append(design.split(f(design.stacked())))
    f_a = np.concatenate([b[0] for b in blocks])
    f_b = np.concatenate([b[1] for b in blocks])
    f_ab = np.concatenate([b[2] for b in blocks], axis=1)
    f_ba = np.concatenate([b[3] for b in blocks], axis=1) if second_order else None
    return f_a, f_b, f_ab, f_ba


def ishigami_unit(u: np.ndarray, a: float = 7.0, b: float = 0.1) -> np.ndarray:
    x = -PI + 2 * PI * u
    return np.sin(x[:, 0]) + a * np.sin(x[:, 1]) ** 2 + b * x[:, 2] ** 4 * np.sin(x[:, 0])


def ishigami_exact(a: float = 7.0, b: float = 0.1):
    # Ishigami & Homma 1990; Saltelli et al. 2008 (Primer): V, V1, V2, V13 closed forms.
    v = 0.5 + a**2 / 8 + b * PI**4 / 5 + b**2 * PI**8 / 18
    v1, v2, v13 = (1 + b * PI**4 / 5) ** 2 / 2, a**2 / 8, 8 * b**2 * PI**8 / 225
    return np.array([v1, v2, 0.0]) / v, np.array([v1 + v13, v2, v13]) / v, v13 / v


def test_sobol_replicate_intervals_cover_ishigami():
    # 200 seeds, N = 64 per replicate, R = 10: 6 + 1 checks (first, total, S13).
    first, total, s13 = ishigami_exact()
    hits_f, hits_t, hits_13 = [], [], []
    for seed in range(200):
        res = sobol_indices(
            *replicated(ishigami_unit, 64, 3, 10, seed, second_order=True), n_replicates=10
        )
        hits_f.append(
            (res.first_order_interval.low <= first) & (first <= res.first_order_interval.high)
        )
        hits_t.append(
            (res.total_order_interval.low <= total) & (total <= res.total_order_interval.high)
        )
        lo, hi = res.second_order_interval.low[0, 2], res.second_order_interval.high[0, 2]
        hits_13.append(lo <= s13 <= hi)
    assert_covers(np.array(hits_f), "first order")
    assert_covers(np.array(hits_t), "total order")
    assert_covers(np.array(hits_13), "second order x1 x3")


def test_g_function_weak_inputs_are_covered():
    # Sobol' G-function closed forms (references.md [F]); a = (0, 1, 9, 99): weak inputs too.
    a = np.array([0.0, 1.0, 9.0, 99.0])
    vi = 1 / (3 * (1 + a) ** 2)
    v = np.prod(1 + vi) - 1
    first = vi / v
    total = vi * np.array([np.prod(np.delete(1 + vi, i)) for i in range(4)]) / v

    def g(u):
        return np.prod((np.abs(4 * u - 2) + a) / (1 + a), axis=1)

    hits_f, hits_t = [], []
    for seed in range(200):
        res = sobol_indices(*replicated(g, 128, 4, 10, 1000 + seed)[:3], n_replicates=10)
        iv_f, iv_t = res.first_order_interval, res.total_order_interval
        hits_f.append((iv_f.low <= first) & (first <= iv_f.high))
        hits_t.append((iv_t.low <= total) & (total <= iv_t.high))
    assert_covers(np.array(hits_f), "G first order")
    assert_covers(np.array(hits_t), "G total order")


CORR = np.array([[1.0, 0.5, 0.8], [0.5, 1.0, 0.0], [0.8, 0.0, 1.0]])


def linear_gaussian_exact(corr: np.ndarray, beta: np.ndarray):
    """Full first-order and independent total-order indices of Y = beta . X, X ~ N(0, corr)."""
    # Closed forms by Gaussian conditioning (references.md [F]; Iooss & Prieur 2019).
    cov_y = corr @ beta
    v = beta @ cov_y
    d = len(beta)
    first = cov_y**2 / np.diag(corr) / v
    total = []
    for i in range(d):
        rest = [j for j in range(d) if j != i]
        r = corr[i, rest]
        total.append(
            beta[i] ** 2 * (corr[i, i] - r @ np.linalg.solve(corr[np.ix_(rest, rest)], r)) / v
        )
    return first, np.array(total)


def test_kucherenko_replicate_intervals_cover_linear_gaussian():
    # 200 seeds, N = 64 per replicate, R = 10: 3 + 3 checks.
    beta = np.array([1.0, 1.0, 1.0])
    first, total = linear_gaussian_exact(CORR, beta)
    np.testing.assert_allclose(total, [0.0196, 0.0546, 0.0262], atol=1e-4)  # references.md
    np.testing.assert_allclose(first, [0.9446, 0.4018, 0.5786], atol=1e-4)  # references.md
    from scipy.stats import qmc

    hits_f, hits_t = [], []
    for seed in range(200):
        parts = {"A": [], "B": [], "C": [], "D": []}
        for stream in np.random.default_rng(seed).spawn(10):
            base = qmc.Sobol(d=6, scramble=True, rng=stream).random(64)
            a, b, c, dd = (stats.norm.ppf(x) for x in dependent_design(base, CORR))
            parts["A"].append(a @ beta)
            parts["B"].append(b @ beta)
            parts["C"].append(c @ beta)
            parts["D"].append(dd @ beta)
        f_a, f_b = np.concatenate(parts["A"]), np.concatenate(parts["B"])
        f_c, f_d = np.concatenate(parts["C"], axis=1), np.concatenate(parts["D"], axis=1)
        fo = sobol_indices(f_a, f_b, f_c, n_replicates=10).first_order_interval
        to = sobol_indices(f_a, f_b, f_d, n_replicates=10).total_order_interval
        hits_f.append((fo.low <= first) & (first <= fo.high))
        hits_t.append((to.low <= total) & (total <= to.high))
    assert_covers(np.array(hits_f), "full first order")
    assert_covers(np.array(hits_t), "independent total order")


def test_intervals_cover_after_the_convergence_loop_stops():
    # Coverage of the budget the loop returns (its stopping rule chooses n): 100 seeds,
    # linear model with independent uniform inputs, S_i = ST_i = b_i^2 / sum b^2
    # (references.md [F]); 3 + 3 checks.
    b = np.array([1.0, 2.0, 0.5])
    exact = b**2 / np.sum(b**2)
    inputs = {f"x{i + 1}": stats.uniform(0, 1) for i in range(3)}
    hits_f, hits_t, sizes = [], [], []
    for seed in range(100):
        with warnings.catch_warnings():
            warnings.simplefilter("error")
            ds = rank(
                LinearModel(b), inputs, n_samples=32, rng=seed, convergence=True,
                convergence_tolerance=0.03, max_samples=4096, dummy=False,
            )  # fmt: skip
        sub = ds.sel(output="y")
        assert ds.attrs["converged"] is True
        sizes.append(ds.attrs["n_samples"])
        hits_f.append(
            (sub.first_order_low.values <= exact) & (exact <= sub.first_order_high.values)
        )
        hits_t.append(
            (sub.total_order_low.values <= exact) & (exact <= sub.total_order_high.values)
        )
    assert len(set(sizes)) >= 1
    assert_covers(np.array(hits_f), "first order after convergence")
    assert_covers(np.array(hits_t), "total order after convergence")


@pytest.mark.parametrize("n_seeds", [100, 200])
def test_band_is_what_the_binomial_says(n_seeds):
    # The band holds 99.9 % / N_CHECKS of Binomial(n, 0.95) outside it at most (scipy.stats).
    low, high = band(n_seeds)
    outside = stats.binom.cdf(low - 1, n_seeds, LEVEL) + stats.binom.sf(high, n_seeds, LEVEL)
    assert outside <= 0.001 / N_CHECKS


def test_compare_differences_are_covered():
    # Probability shift of P(y >= 9.4) when x1's tolerance is halved, y = 10 + 2 x1 - x2
    # + 0.5 x3, normal inputs: exact shift from scipy.stats.norm.sf. 200 seeds, 2^10
    # common-random-number samples in 16 scrambled blocks; t on 15 degrees of freedom.
    from trapbudget.sensitivity.decisions.compare import compare
    from trapbudget.sensitivity.scenario.core import Scenario

    lin = {"x1": 2.0, "x2": -1.0, "x3": 0.5}
    sd_before = {"x1": 0.2, "x2": 0.3, "x3": 0.4}
    sd_after = dict(sd_before, x1=0.1)

    def scenario(sd, seed):
        return Scenario.from_dict(
            {
                "scenario": {"title": "compare coverage", "model": "linear",
                             "options": {"coefficients": lin, "offset": 10.0}},
                "inputs": {k: {"nominal": 0.0, "tolerance": v} for k, v in sd.items()},
                "outputs": {"names": ["y"]},
                "settings": {"n_samples": 2**10, "method": "sobol", "seed": seed},
                "requirements": [{"output": "y", "at_least": 9.4, "probability": 0.9}],
            }
        )  # fmt: skip

    def spread(sd):
        return math.sqrt(sum((lin[k] * s) ** 2 for k, s in sd.items()))

    exact_shift = stats.norm.sf(9.4, 10.0, spread(sd_after)) - stats.norm.sf(
        9.4, 10.0, spread(sd_before)
    )
    t = stats.t.ppf(0.975, 15)
    hits = []
    for seed in range(200):
        ds = compare(scenario(sd_before, seed), scenario(sd_after, seed))
        assert ds.attrs["n_replicates"] == 16
        shift = float(ds["probability_shift"].item())
        se = float(ds["shift_standard_error"].item())
        hits.append(abs(shift - exact_shift) <= t * se)
    assert_covers(np.array(hits), "probability shift")


def test_coverage_interval_ends_are_covered_by_their_batch_uncertainty():
    # JCGM 101:2008 example 9.2 (Y = X1 + X2 + X3 + X4, X_i ~ N(0, 1)): the 95 % interval
    # is +-1.96 * 2 exactly (scipy.stats.norm). The adaptive run's batches (independent
    # scrambles of 2^14 Sobol' points) give each end's standard uncertainty; t on h - 1
    # degrees of freedom. 100 seeds, 2 checks (both ends).
    from trapbudget.sensitivity.propagation import propagate_adaptive
    from trapbudget.sensitivity.summary import summarize

    end = float(stats.norm.ppf(0.975) * 2.0)
    inputs = {f"x{i}": stats.norm(0, 1) for i in range(1, 5)}
    hits = []
    for seed in range(100):
        samples = propagate_adaptive(
            LinearModel([1.0, 1.0, 1.0, 1.0]), inputs, method="sobol", rng=seed,
            significant_digits=1, max_samples=2**17,
        )  # fmt: skip
        ds = summarize(samples).sel(output="y")
        t = stats.t.ppf(0.975, ds.attrs["batch_degrees_of_freedom"])
        hits.append(
            [
                abs(float(ds["interval_low"]) + end) <= t * float(ds["interval_low_uncertainty"]),
                abs(float(ds["interval_high"]) - end)
                <= t * float(ds["interval_high_uncertainty"]),
            ]
        )
    assert_covers(np.array(hits), "coverage interval ends")


def exact_delta_independent(b: np.ndarray, i: int) -> float:
    """Borgonovo's delta of x_i for Y = b . x, x standard normal and independent.

    f(y | x_i) = N(b_i x_i, r^2), r^2 = |b|^2 - b_i^2, f(y) = N(0, |b|^2): the L1 distance
    by the trapezoid rule on a fine grid, the mean over x_i by Gauss-Hermite quadrature
    (Borgonovo 2007, definition; numpy quadrature).
    """
    s = float(np.sqrt(np.sum(b**2)))
    r = math.sqrt(s**2 - b[i] ** 2)
    y = np.linspace(-8 * s, 8 * s, 4001)
    nodes, weights = np.polynomial.hermite_e.hermegauss(80)
    weights = weights / weights.sum()
    f_y = stats.norm.pdf(y, 0, s)
    l1 = [np.trapezoid(np.abs(stats.norm.pdf(y, b[i] * x, r) - f_y), y) for x in nodes]
    return 0.5 * float(weights @ np.array(l1))


def test_delta_intervals_cover_linear_gaussian():
    # Y = x1 + 0.7 x2 + 0.3 x3, and a fourth input the model ignores (exact delta 0);
    # independent standard normal inputs, n = 1000 random points per data set, 48 data sets,
    # 4 checks. The exact deltas by quadrature: 0.3811, 0.2131, 0.0788, 0.
    from trapbudget.sensitivity.indices.delta import delta_indices

    b = np.array([1.0, 0.7, 0.3])
    exact = np.array([exact_delta_independent(b, i) for i in range(3)] + [0.0])
    np.testing.assert_allclose(exact[:3], [0.3811, 0.2131, 0.0788], atol=1e-4)
    hits = []
    for seed in range(48):
        x = np.random.default_rng(seed).standard_normal((1000, 4))
        ds = delta_indices(x, x[:, :3] @ b, n_bootstrap=20, rng=seed).isel(output=0)
        hits.append((ds["delta_low"].values <= exact) & (exact <= ds["delta_high"].values))
    assert_covers(np.array(hits), "Borgonovo delta")

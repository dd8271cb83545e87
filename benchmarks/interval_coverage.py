"""Interval validity on randomized QMC: the bootstrap of one scrambled design against replicates.

For each test function, over many seeds: coverage of the nominal 95 % interval of
every index, and the ratio of the reported standard error to the true spread of
the estimate across seeds (1 is right), for

* "bootstrap": one scrambled Sobol' design of R N rows, rows resampled (the old way);
* "replicates": R = 10 independent scramblings of N rows, Student t on R - 1 dof.

Both use the same number of model runs. Run by hand: ``python benchmarks/interval_coverage.py``.
"""

from __future__ import annotations

import math

import numpy as np
from scipy.stats import qmc

from trapbudget.sensitivity.indices.sobol import design_from_base, sobol_indices

PI = math.pi
R = 10


def ishigami(u):
    x = -PI + 2 * PI * u
    return np.sin(x[:, 0]) + 7 * np.sin(x[:, 1]) ** 2 + 0.1 * x[:, 2] ** 4 * np.sin(x[:, 0])


def linear(u):
    return u @ np.array([1.0, 2.0, 0.5])


def product(u):
    return np.prod(0.5 + u, axis=1) + u[:, 2]


def exact(name):
    if name == "ishigami":
        a, b = 7.0, 0.1
        v = 0.5 + a**2 / 8 + b * PI**4 / 5 + b**2 * PI**8 / 18
        v1, v2, v13 = (1 + b * PI**4 / 5) ** 2 / 2, a**2 / 8, 8 * b**2 * PI**8 / 225
        return np.array([v1, v2, 0]) / v, np.array([v1 + v13, v2, v13]) / v
    if name == "linear":
        s = np.array([1.0, 4.0, 0.25]) / 5.25
        return s, s
    return None, None


def blocks(f, n, seed, r):
    out = []
    for stream in np.random.default_rng(seed).spawn(r):
        base = qmc.Sobol(d=6, scramble=True, rng=stream).random(n)
        design = design_from_base(base, factors=[(0,), (1,), (2,)])
        out.append(design.split(f(design.stacked())))
    return (
        np.concatenate([b[0] for b in out]),
        np.concatenate([b[1] for b in out]),
        np.concatenate([b[2] for b in out], axis=1),
    )


def main(n=512, seeds=100):
    for name, f in (("linear", linear), ("product", product), ("ishigami", ishigami)):
        _, total = exact(name)
        for mode in ("bootstrap", "replicates"):
            est, se, hit = [], [], []
            for seed in range(seeds):
                if mode == "bootstrap":
                    # one design of 8 N rows (a power of two, about the same runs)
                    res = sobol_indices(*blocks(f, 8 * n, seed, 1), n_bootstrap=200, rng=seed)
                else:
                    res = sobol_indices(*blocks(f, n, seed, R), n_replicates=R)
                est.append(res.total_order)
                se.append(res.total_order_se)
                if total is not None:
                    iv = res.total_order_interval
                    hit.append((iv.low <= total) & (total <= iv.high))
            ratio = np.mean(se, axis=0) / np.std(est, axis=0, ddof=1)
            cover = np.mean(hit, axis=0) if hit else [math.nan] * 3
            print(
                f"{name:9s} {mode:10s} total order: SE ratio {np.round(ratio, 2)}, "
                f"coverage {np.round(cover, 3)} ({seeds} seeds, N = {n}, R = {R})"
            )


CORR = np.array([[1.0, 0.5, 0.8], [0.5, 1.0, 0.0], [0.8, 0.0, 1.0]])
# Independent total-order indices of x1 + x2 + x3 under CORR by Gaussian conditioning,
# (1 - r' R_rest^-1 r) / sum(CORR) (references.md gives them rounded: 0.0196, 0.0546, 0.0262).
KUCHERENKO_TOTAL = np.array(
    [
        (1 - CORR[i, rest] @ np.linalg.solve(CORR[np.ix_(rest, rest)], CORR[i, rest])) / CORR.sum()
        for i, rest in ((0, [1, 2]), (1, [0, 2]), (2, [0, 1]))
    ]
)


def kucherenko(n=512, seeds=100):
    """Conditional-sampling total order: bootstrap of one design against replicates."""
    from scipy import stats

    from trapbudget.sensitivity.indices.dependent import dependent_design

    def run(rows, seed, r):
        parts = {"A": [], "B": [], "D": []}
        for stream in np.random.default_rng(seed).spawn(r):
            base = qmc.Sobol(d=6, scramble=True, rng=stream).random(rows)
            a, b, _, dd = (stats.norm.ppf(x) for x in dependent_design(base, CORR))
            parts["A"].append(a.sum(axis=1))
            parts["B"].append(b.sum(axis=1))
            parts["D"].append(dd.sum(axis=2))
        return (
            np.concatenate(parts["A"]),
            np.concatenate(parts["B"]),
            np.concatenate(parts["D"], axis=1),
        )

    for mode in ("bootstrap", "replicates"):
        est, se, hit = [], [], []
        for seed in range(seeds):
            if mode == "bootstrap":
                res = sobol_indices(*run(8 * n, seed, 1), n_bootstrap=200, rng=seed)
            else:
                res = sobol_indices(*run(n, seed, R), n_replicates=R)
            est.append(res.total_order)
            se.append(res.total_order_se)
            iv = res.total_order_interval
            hit.append((iv.low <= KUCHERENKO_TOTAL) & (KUCHERENKO_TOTAL <= iv.high))
        ratio = np.mean(se, axis=0) / np.std(est, axis=0, ddof=1)
        print(
            f"kucherenko {mode:10s} total order: SE ratio {np.round(ratio, 2)}, "
            f"coverage {np.round(np.mean(hit, axis=0), 3)} ({seeds} seeds, N = {n})"
        )


def compare_shift(seeds=100):
    """Paired probability shift: row standard error against 16 scrambled blocks."""
    from trapbudget.sensitivity.decisions.compare import compare_samples, replicated_unit
    from trapbudget.sensitivity.decisions.crn import common_random_samples
    from trapbudget.sensitivity.scenario.core import Scenario

    def scenario(sd1):
        return Scenario.from_dict(
            {
                "scenario": {"title": "bench", "model": "linear",
                             "options": {"coefficients": {"x1": 2.0, "x2": -1.0}, "offset": 10.0}},
                "inputs": {"x1": {"nominal": 0.0, "tolerance": sd1},
                           "x2": {"nominal": 0.0, "tolerance": 0.3}},
                "outputs": {"names": ["y"]},
                "requirements": [{"output": "y", "at_least": 9.4, "probability": 0.9}],
            }
        )  # fmt: skip

    before, after = scenario(0.2), scenario(0.1)
    for mode in ("rows", "blocks"):
        est, se = [], []
        for seed in range(seeds):
            if mode == "rows":  # one scrambled sequence, rows taken as independent
                unit = qmc.Sobol(d=2, scramble=True, rng=seed).random(2**12)
                blocks = 1
            else:
                unit, blocks = replicated_unit(2**12, 2, method="sobol", rng=seed)
            pair = common_random_samples([before, after], n_samples=2**12, unit=unit)
            ds = compare_samples(*pair, requirements=before.requirements, n_replicates=blocks)
            est.append(float(ds["probability_shift"].item()))
            se.append(float(ds["shift_standard_error"].item()))
        print(
            f"compare    {mode:10s} probability shift: SE ratio "
            f"{np.mean(se) / np.std(est, ddof=1):.2f} ({seeds} seeds, n = 4096)"
        )


if __name__ == "__main__":
    main()
    kucherenko()
    compare_shift()

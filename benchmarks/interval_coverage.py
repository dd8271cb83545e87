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


if __name__ == "__main__":
    main()

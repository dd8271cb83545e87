"""Borgonovo delta against its exact value: bias, scatter and interval coverage.

Y = x1 + 0.7 x2 + 0.3 x3 with independent standard normal inputs and a fourth input the
model ignores; the exact deltas (0.3811, 0.2131, 0.0788, 0) by quadrature. For each size,
over many data sets: the mean error of the estimate (as a fraction of delta), its
standard deviation across data sets against the mean reported standard uncertainty
(half-width / z; 1 is right), and the share of 95 % intervals that hold the exact value,
for the project's cross-fitted estimator ("fast") and SALib's (Plischke et al. 2013)
on the same data. Run by hand: ``python benchmarks/delta_accuracy.py [--sets 80]``.
"""

from __future__ import annotations

import argparse
import math
import time

import numpy as np
from scipy import stats

from trapbudget.sensitivity.indices.delta import delta_indices

B = np.array([1.0, 0.7, 0.3])


def exact_delta(i: int) -> float:
    s = float(np.sqrt(np.sum(B**2)))
    r = math.sqrt(s**2 - B[i] ** 2)
    y = np.linspace(-8 * s, 8 * s, 4001)
    nodes, weights = np.polynomial.hermite_e.hermegauss(80)
    weights = weights / weights.sum()
    f_y = stats.norm.pdf(y, 0, s)
    l1 = [np.trapezoid(np.abs(stats.norm.pdf(y, B[i] * x, r) - f_y), y) for x in nodes]
    return 0.5 * float(weights @ np.array(l1))


def run(backend: str, n: int, sets: int, exact: np.ndarray) -> None:
    z = stats.norm.ppf(0.975)
    est, half, hits = [], [], []
    start = time.perf_counter()
    for seed in range(10_000, 10_000 + sets):
        x = np.random.default_rng(seed).standard_normal((n, 4))
        ds = delta_indices(
            x,
            x[:, :3] @ B,
            n_bootstrap=20,
            backend=backend,
            rng=seed,  # type: ignore[arg-type]
        ).isel(output=0)
        est.append(ds["delta"].values)
        half.append((ds["delta_high"] - ds["delta"]).values)
        hits.append((ds["delta_low"].values <= exact) & (exact <= ds["delta_high"].values))
    est, half = np.array(est), np.array(half)
    seconds = (time.perf_counter() - start) / sets
    with np.errstate(divide="ignore", invalid="ignore"):
        bias = np.where(exact > 0, est.mean(axis=0) / exact - 1, est.mean(axis=0))
    ratio = (half.mean(axis=0) / z) / est.std(axis=0, ddof=1)
    print(
        f"{backend:5s} n={n:5d} sets={sets}: bias {np.round(bias, 3)} "
        f"(last: absolute), se/scatter {np.round(ratio, 2)}, "
        f"coverage {np.round(np.mean(hits, axis=0), 3)}, {seconds:.2f} s per data set"
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sets", type=int, default=80)
    args = parser.parse_args()
    exact = np.array([exact_delta(i) for i in range(3)] + [0.0])
    print("exact delta", np.round(exact, 4))
    for n in (1000, 8000):
        run("fast", n, args.sets, exact)
    run("salib", 2000, max(args.sets // 4, 10), exact)


if __name__ == "__main__":
    main()

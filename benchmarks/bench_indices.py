"""Sobol' index analysis: trapbudget's vectorized estimators against SALib, side by side.

Run by hand: ``/work/venv/bin/python benchmarks/bench_indices.py [--n-log2 13]``.
Same model evaluations (SALib's own Saltelli sample of the Sobol' G-function,
8 inputs, second order, 100 bootstrap resamples, the same resample indices);
prints both timings, their ratio, and the largest difference of the estimates.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from SALib.analyze import sobol as salib_sobol
from SALib.sample import sobol as salib_sample

from trapbudget.sensitivity.indices.sobol import sobol_indices


def g_function(x: np.ndarray, a: np.ndarray) -> np.ndarray:
    return np.prod((np.abs(4 * x - 2) + a) / (1 + a), axis=1)


def best_of(repeats: int, func):
    times, result = [], None
    for _ in range(repeats):
        start = time.perf_counter()
        result = func()
        times.append(time.perf_counter() - start)
    return min(times), result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n-log2", type=int, default=13, help="base size N = 2**n_log2")
    parser.add_argument("--resamples", type=int, default=100)
    parser.add_argument("--repeats", type=int, default=3)
    args = parser.parse_args()
    d, n = 8, 2**args.n_log2
    a = np.array([0.0, 1.0, 4.5, 9.0, 99.0, 99.0, 99.0, 99.0])
    problem = {"num_vars": d, "names": [f"x{i}" for i in range(d)], "bounds": [[0, 1]] * d}
    x = salib_sample.sample(problem, n, calc_second_order=True, seed=1)
    y = g_function(x, a)
    blocks = y.reshape(n, 2 * d + 2)
    f_a, f_b = blocks[:, 0], blocks[:, -1]
    f_ab, f_ba = blocks[:, 1 : d + 1].T, blocks[:, d + 1 : 2 * d + 1].T

    t_salib, ref = best_of(
        args.repeats,
        lambda: salib_sobol.analyze(
            problem, y, calc_second_order=True, num_resamples=args.resamples, seed=7
        ),
    )
    t_ours, res = best_of(
        args.repeats,
        lambda: sobol_indices(
            f_a, f_b, f_ab, f_ba, n_bootstrap=args.resamples, rng=7, interval="normal"
        ),
    )
    upper = np.triu_indices(d, 1)
    diff = max(
        np.abs(res.first_order - ref["S1"]).max(),
        np.abs(res.total_order - ref["ST"]).max(),
        np.abs(res.second_order[upper] - ref["S2"][upper]).max(),
        np.abs(res.total_order_interval.high - res.total_order - ref["ST_conf"]).max(),
    )
    print(
        f"G-function, d = {d}, N = 2^{args.n_log2} = {n}, second order, "
        f"{args.resamples} bootstrap resamples ({y.size} model runs)"
    )
    print(f"SALib.analyze.sobol.analyze : {t_salib:8.3f} s")
    print(f"trapbudget sobol_indices    : {t_ours:8.3f} s")
    print(f"ratio (SALib / trapbudget)  : {t_salib / t_ours:8.1f}x")
    print(f"largest difference of S1, ST, S2, ST half-width: {diff:.2e}")
    bench_delta()
    bench_rank(args.n_log2 - 1)


def bench_delta(n: int = 2048, resamples: int = 10) -> None:
    """Borgonovo delta on given data: the vectorized estimator against SALib's."""
    from trapbudget.sensitivity.indices.delta import delta_indices

    cov = np.array([[1.0, 0.5, 0.8], [0.5, 1.0, 0.0], [0.8, 0.0, 1.0]])
    x = np.random.default_rng(0).multivariate_normal(np.zeros(3), cov, size=n)
    y = x.sum(axis=1)
    timings = {}
    for backend in ("salib", "fast"):
        start = time.perf_counter()
        ds = delta_indices(x, y, n_bootstrap=resamples, backend=backend, rng=1)
        timings[backend] = (time.perf_counter() - start, ds["delta"].values.ravel())
    print(
        f"delta, d = 3, n = {n}, {resamples} resamples: SALib {timings['salib'][0]:.2f} s, "
        f"trapbudget {timings['fast'][0]:.2f} s, ratio "
        f"{timings['salib'][0] / timings['fast'][0]:.1f}x; estimates "
        f"{np.round(timings['salib'][1], 3)} vs {np.round(timings['fast'][1], 3)}"
    )


def bench_rank(n_log2: int) -> None:
    """End-to-end budget of the trap model (invented 2 % tolerances on its defaults)."""
    from scipy import stats

    from trapbudget.models import VaporCellMOT
    from trapbudget.sensitivity.ranking import rank

    model = VaporCellMOT()
    names = (
        "beam_power", "beam_waist", "detuning", "gradient", "repump_power",
        "cell_temperature", "background_pressure", "beam_imbalance",
    )  # fmt: skip
    inputs = {k: stats.norm(model.inputs[k].default, 0.02 * abs(model.inputs[k].default))
              for k in names}  # fmt: skip
    outputs = ["atom_number", "loading_time", "temperature"]
    start = time.perf_counter()
    ds = rank(model, inputs, n_samples=2**n_log2, outputs=outputs, rng=0)
    elapsed = time.perf_counter() - start
    print(
        f"rank(VaporCellMOT), d = {len(names)}, N = 2^{n_log2}, 3 outputs, "
        f"{ds.attrs['n_evaluations']} model runs: {elapsed:.2f} s "
        f"({ds.attrs['n_evaluations'] / elapsed:,.0f} runs/s including analysis)"
    )


if __name__ == "__main__":
    main()

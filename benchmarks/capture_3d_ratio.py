"""How far curved 3-D paths are from the straight-line capture, over random aligned traps.

Run by hand (about 11 s per trap on one core)::

    python benchmarks/capture_3d_ratio.py --traps 80 [--seed 101] [--workers 2]

For random Rb-87 traps of ``bench_model.traps`` made aligned (field zero at the beam
crossing, balanced beams, no aperture), the loading rate from the 3-D trajectories of
:mod:`trapbudget.models.capture_reference` is divided by the straight-line rate on the
*same* lines (1152 lines, impact parameters to 1.5 trap radii). Prints the spread of that
ratio, the traps at its ends, and how well a low-order correction in the table variables
(ln eta, ln s0, -delta/Gamma, ln(1 + zeta)) would describe it, by leave-one-out
cross-validation: the question is whether a smooth factor on the straight-line table
could stand in for a table built from 3-D trajectories.
"""

from __future__ import annotations

import argparse
import itertools
import math
import sys
import time
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

import bench_model

from trapbudget.models import capture_reference


def _ratio(case: dict) -> tuple[list[float], float]:
    case = {**case, "centre": 0.0, "imbalance": 0.0, "aperture_radius": 10 * case["waist"]}
    lines = capture_reference.reference_lines(6, 8, 4, 6, reach=1.5)
    ratio = bench_model.trajectory_rate(case, lines) / bench_model.line_rate(case, lines)
    return list(bench_model._table_args(case)[0]), ratio


def _loo(design: np.ndarray, y: np.ndarray) -> np.ndarray:
    residuals = []
    for k in range(len(y)):
        keep = np.arange(len(y)) != k
        beta, *_ = np.linalg.lstsq(design[keep], y[keep], rcond=None)
        residuals.append(y[k] - design[k] @ beta)
    return np.array(residuals)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--traps", type=int, default=80)
    parser.add_argument("--seed", type=int, default=101)
    parser.add_argument("--workers", type=int, default=2)
    args = parser.parse_args()
    cases = bench_model.traps(args.traps, np.random.default_rng(args.seed))
    start = time.perf_counter()
    with ProcessPoolExecutor(args.workers) as pool:
        results = list(pool.map(_ratio, cases))
    seconds = time.perf_counter() - start
    table = np.array([r[0] for r in results])
    ratio = np.array([r[1] for r in results])
    eta, s0, red, zeta = table.T
    y = np.log(ratio)
    print(f"{len(ratio)} aligned traps ({seconds:.0f} s): 3-D / straight-line loading rate")
    print(
        f"  range {ratio.min():.3f}-{ratio.max():.3f}, median {np.median(ratio):.3f}, "
        f"RMS of ln(ratio) {math.sqrt(np.mean(y**2)):.3f}"
    )
    working = (red <= 3.0) & (s0 >= 2.0)
    print(
        f"  detuning within 3 Gamma and s0 >= 2 ({working.sum()} traps): range "
        f"{ratio[working].min():.3f}-{ratio[working].max():.3f}"
    )
    order = np.argsort(ratio)
    for k in (*order[:3], *order[-3:]):
        print(
            f"  eta {eta[k]:6.1f} s0 {s0[k]:5.2f} -delta/Gamma {red[k]:4.2f} "
            f"zeta {zeta[k]:5.2f}: {ratio[k]:.3f}"
        )
    x = np.column_stack([np.log(eta), np.log(s0), red, np.log1p(zeta)])
    linear = np.column_stack([np.ones(len(y)), x])
    quadratic = np.column_stack(
        [linear]
        + [x[:, i] * x[:, j] for i, j in itertools.combinations_with_replacement(range(4), 2)]
    )
    for name, design in (("linear", linear), ("quadratic", quadratic)):
        if design.shape[1] >= len(y) - 2:
            continue
        res = _loo(design, y)
        print(
            f"  {name} correction in the table variables, leave-one-out: RMS of ln "
            f"{math.sqrt(np.mean(res**2)):.3f}, max {np.max(np.abs(res)):.3f}"
        )


if __name__ == "__main__":
    main()

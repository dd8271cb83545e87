"""Throughput of the full VaporCellMOT model against the per-sample reference capture integrator.

Run by hand (not in CI), on an otherwise quiet machine::

    python benchmarks/bench_model.py [--reference 200] [--seed 1]

It times ``VaporCellMOT().evaluate`` on 10^5 and 10^6 parameter sets drawn
around the nominal cell (every uncertain input varied at once), and, in the
same run, ``capture_velocity_reference`` (scipy solve_ivp + brentq, one sample
at a time, one entry direction, while the model computes two) on a few
hundred samples of the same spread. It prints evaluations per
second, their ratio, the agreement of the two capture solvers on the shared
samples, and the peak memory traced while evaluating 10^6 samples.
Targets: >= 2e5 full evaluations/s on one core, >= 1000x the reference,
10^6 samples in < 1 GB.
"""

from __future__ import annotations

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "NUMBA_NUM_THREADS"):
    os.environ.setdefault(_var, "1")  # one core

import argparse  # noqa: E402
import resource  # noqa: E402
import time  # noqa: E402
import tracemalloc  # noqa: E402

import numpy as np  # noqa: E402

from trapbudget.models import VaporCellMOT, capture, light  # noqa: E402
from trapbudget.models.field import radial_gradient  # noqa: E402


def draw(model: VaporCellMOT, n: int, rng: np.random.Generator) -> dict[str, np.ndarray]:
    """Random spreads around the nominal cell (a few percent to tens of percent)."""
    d = {name: spec.default for name, spec in model.inputs.items()}
    return {
        "beam_power": rng.normal(d["beam_power"], 0.1 * d["beam_power"], n),
        "beam_waist": rng.normal(d["beam_waist"], 0.05 * d["beam_waist"], n),
        "beam_offset": rng.normal(0.0, 0.5e-3, n),
        "beam_imbalance": rng.uniform(0.0, 0.1, n),
        "detuning": rng.normal(d["detuning"], 1e6, n),
        "gradient": rng.normal(d["gradient"], 0.1 * d["gradient"], n),
        "bias_field": rng.normal(0.0, 2e-6, n),
        "repump_power": rng.normal(d["repump_power"], 1e-4, n),
        "cell_temperature": rng.normal(d["cell_temperature"], 1.0, n),
        "vapor_fraction": rng.uniform(0.05, 0.2, n),
        "background_pressure": rng.lognormal(np.log(d["background_pressure"]), 0.3, n),
    }


def time_model(model: VaporCellMOT, values: dict[str, np.ndarray], repeats: int) -> float:
    best = np.inf
    for _ in range(repeats):
        start = time.perf_counter()
        model.evaluate(values)
        best = min(best, time.perf_counter() - start)
    return best


def reference_inputs(model: VaporCellMOT, values: dict[str, np.ndarray]) -> list[dict]:
    """The capture-solver arguments the model builds for each sample (same physics)."""
    sp = model.species
    aperture = model.inputs["aperture_radius"].default
    bright = model.evaluate(values)["bright_fraction"]
    cases = []
    for i in range(len(values["beam_power"])):
        waist = float(values["beam_waist"][i])
        cases.append(
            {
                "saturation": float(
                    light.peak_intensity(values["beam_power"][i], waist) / sp.saturation_intensity
                ),
                "detuning": float(values["detuning"][i]),
                "waist": waist,
                "capture_radius": float(capture.capture_radius(waist, aperture)),
                "gradient": float(radial_gradient(values["gradient"][i])),
                "wavenumber": sp.wavenumber,
                "linewidth": sp.linewidth,
                "mass": sp.mass,
                "zeeman_coefficient": abs(sp.zeeman_coefficient),
                "beam_offset": float(values["beam_offset"][i]),
                "imbalance": float(values["beam_imbalance"][i]),
                "bias_field": float(values["bias_field"][i]),
                "bright_fraction": float(bright[i]),
            }
        )
    return cases


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--reference", type=int, default=200, help="reference samples")
    parser.add_argument("--seed", type=int, default=1)
    args = parser.parse_args()
    rng = np.random.default_rng(args.seed)
    model = VaporCellMOT()

    model.evaluate(draw(model, 16, rng))  # compile / load the numba cache
    rates = {}
    for n, repeats in ((10**5, 3), (10**6, 1)):
        values = draw(model, n, rng)
        seconds = time_model(model, values, repeats)
        rates[n] = n / seconds
        print(
            f"VaporCellMOT.evaluate, n = {n:>7}: {seconds:7.3f} s, {rates[n]:,.0f} evaluations/s"
        )

    values = draw(model, 10**6, rng)
    tracemalloc.start()
    model.evaluate(values)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    inputs_bytes = sum(a.nbytes for a in values.values())
    print(
        f"peak memory traced while evaluating 10^6 samples: {peak / 2**20:,.0f} MiB "
        f"(inputs {inputs_bytes / 2**20:,.0f} MiB held outside); "
        f"process max RSS {resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 2**10:,.0f} MiB"
    )

    small = draw(model, args.reference, rng)
    cases = reference_inputs(model, small)
    start = time.perf_counter()
    reference = np.array([capture.capture_velocity_reference(**c) for c in cases])
    seconds = time.perf_counter() - start
    stacked = {key: np.array([c[key] for c in cases]) for key in cases[0]}
    fast = capture.capture_velocity(stacked.pop("saturation"), stacked.pop("detuning"), **stacked)
    ref_rate = args.reference / seconds
    deviation = np.max(np.abs(fast - reference) / np.maximum(reference, 1e-12))
    print(
        f"reference capture integrator (one direction), n = {args.reference}: {seconds:7.1f} s, "
        f"{ref_rate:,.2f} evaluations/s; max relative deviation of the fast solver "
        f"{deviation:.2e}"
    )
    print(
        f"ratio full model / reference capture: {rates[10**5] / ref_rate:,.0f}x (10^5), "
        f"{rates[10**6] / ref_rate:,.0f}x (10^6)"
    )


if __name__ == "__main__":
    main()

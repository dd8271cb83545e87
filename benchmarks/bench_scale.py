"""Scale-out and bounded memory: one process, two local processes, a local dask cluster.

Run by hand (not in CI), on an otherwise quiet machine::

    python benchmarks/bench_scale.py speed  [--samples 2048] [--rounds 2]
    python benchmarks/bench_scale.py memory [--samples 10000000] [--full]

``speed``: the same study (``rank`` of the invented demo scenario harrier-rb87.toml,
correlated inputs, its four outputs, base size ``--samples``) run in this process
(``workers=1``), on a local pool of two processes (``workers=2``, start-up included)
and on a local ``dask.distributed`` cluster of two single-threaded worker processes
(``executor=client.get_executor()``; the cluster's start-up is printed apart), side by
side, ``--rounds`` times interleaved; the best time of each. Also the model-evaluation
phase alone (``evaluate_in_chunks`` on 2^21 trap samples), and a control: a pure-Python
loop on one process and on two, which shows how much of the two cores this machine
gives right now (on a shared machine it is below 2, and so is every ratio above it).
Every parallel result is checked identical to the one-process one.

``memory``: peak resident memory (``ru_maxrss`` of a fresh child process) of a Monte
Carlo study of the trap's four default outputs: ``propagate`` of ``--samples`` random
draws (summary-only from 2^22 samples on: outputs kept as float32), ``summarize`` and
``check_requirements``. ``--full`` also runs ``keep="all"`` (every sample in float64)
for comparison. Target: 10^7 samples under 1 GB.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import time
from importlib import resources

SCENARIO = "harrier-rb87.toml"


def _burn(n: int) -> int:
    total = 0
    for i in range(n):
        total += i * i
    return total


def _control(n: int = 20_000_000) -> tuple[float, float]:
    from concurrent.futures import ProcessPoolExecutor

    start = time.perf_counter()
    _burn(n)
    _burn(n)
    serial = time.perf_counter() - start
    with ProcessPoolExecutor(2) as pool:
        pool.submit(_burn, 1).result()
        start = time.perf_counter()
        list(pool.map(_burn, [n, n]))
        parallel = time.perf_counter() - start
    return serial, parallel


def _scenario():
    from trapbudget.sensitivity import load_scenario

    return load_scenario(resources.files("trapbudget.examples") / SCENARIO)


def speed(args: argparse.Namespace) -> None:
    from distributed import Client, LocalCluster

    from trapbudget.sensitivity import rank
    from trapbudget.sensitivity.protocol import evaluate_in_chunks
    from trapbudget.sensitivity.sampling import sample_inputs

    scenario = _scenario()
    outputs = list(scenario.outputs)

    def study(**where):
        return rank(
            scenario.model,
            scenario.inputs,
            n_samples=args.samples,
            outputs=outputs,
            correlation=scenario.correlation,
            nominal=scenario.nominal,
            rng=20261203,
            **where,
        )

    columns = sample_inputs(
        scenario.inputs, n_samples=2**21, correlation=scenario.correlation, rng=1
    )

    def evaluations(**where):
        from trapbudget.sensitivity.executors import running_on

        with running_on(**where):
            return evaluate_in_chunks(scenario.model, columns)

    evaluations(workers=1)  # compile (or load) the kernels here first
    start = time.perf_counter()
    cluster = LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None
    )
    client = Client(cluster)
    client.run(lambda: __import__("trapbudget.models.trap"))
    print(
        f"dask LocalCluster of 2 worker processes started in {time.perf_counter() - start:.1f} s"
    )
    executor = client.get_executor()
    ways = {
        "1 process": {"workers": 1},
        "2 local processes": {"workers": 2},
        "dask, 2 workers": {"executor": executor},
    }
    best: dict[str, dict[str, float]] = {"study": {}, "evaluations": {}}
    reference = None
    for round_ in range(args.rounds):
        for name, where in ways.items():
            for label, run in (("study", study), ("evaluations", evaluations)):
                start = time.perf_counter()
                result = run(**where)
                elapsed = time.perf_counter() - start
                best[label][name] = min(best[label].get(name, float("inf")), elapsed)
                print(f"round {round_ + 1} {label:11s} {name:18s} {elapsed:7.2f} s", flush=True)
                if label == "study":
                    if reference is None:
                        reference = result
                    elif not result.identical(reference):
                        raise SystemExit(f"{name}: result differs from one process")
    client.close()
    cluster.close()
    serial, parallel = _control()
    n_eval = int(reference.attrs["n_evaluations"]) if reference is not None else 0
    print()
    print(
        f"study: rank of {SCENARIO}, N = {args.samples}, {n_eval} model runs; "
        f"best of {args.rounds}"
    )
    for label in ("study", "evaluations"):
        one = best[label]["1 process"]
        for name in ways:
            t = best[label][name]
            print(f"  {label:11s} {name:18s} {t:7.2f} s   speed-up {one / t:4.2f}x")
    print(
        f"control, pure Python on 2 processes: speed-up {serial / parallel:4.2f}x "
        "(what the machine's two cores give now)"
    )
    print("results identical to one process: yes")


def _memory_child(n: int, keep: str | None) -> None:
    import resource

    from trapbudget.sensitivity import check_requirements, propagate, summarize

    scenario = _scenario()
    start = time.perf_counter()
    samples = propagate(
        scenario.model,
        scenario.inputs,
        n_samples=n,
        method="random",
        correlation=scenario.correlation,
        rng=7,
        outputs=list(scenario.outputs),
        nominal=scenario.nominal,
        keep=keep,  # type: ignore[arg-type]
    )
    summary = summarize(samples)
    if scenario.requirements:
        check_requirements(samples, scenario.requirements)
    elapsed = time.perf_counter() - start
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    print(
        json.dumps(
            {
                "kept": samples.attrs["kept"],
                "peak_bytes": peak,
                "seconds": elapsed,
                "dataset_bytes": int(samples.nbytes),
                "mean_atom_number": float(summary["mean"].sel(output="atom_number")),
            }
        )
    )


def memory(args: argparse.Namespace) -> None:
    from trapbudget.sensitivity.guard import memory_needed

    runs = [None, "all"] if args.full else [None]
    for keep in runs:
        out = subprocess.run(
            [
                sys.executable,
                __file__,
                "memory-child",
                "--samples",
                str(args.samples),
                "--keep",
                keep or "auto",
            ],
            check=True,
            capture_output=True,
            text=True,
        ).stdout
        got = json.loads(out.strip().splitlines()[-1])
        print(
            f"{args.samples:.3g} samples, keep={got['kept']}: peak RSS "
            f"{got['peak_bytes'] / 2**30:.2f} GiB (samples Dataset "
            f"{got['dataset_bytes'] / 2**20:.0f} MiB), {got['seconds']:.1f} s"
        )
    scenario = _scenario()
    full = memory_needed("propagate", args.samples, len(scenario.inputs), len(scenario.outputs))
    print(f"the memory guard's estimate for keep='all': {full / 2**30:.1f} GiB")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("what", choices=["speed", "memory", "memory-child"])
    parser.add_argument("--samples", type=float, default=None)
    parser.add_argument("--rounds", type=int, default=2)
    parser.add_argument("--full", action="store_true")
    parser.add_argument("--keep", default="auto")
    args = parser.parse_args()
    if args.what == "speed":
        args.samples = int(args.samples or 2048)
        speed(args)
    elif args.what == "memory":
        args.samples = int(args.samples or 10_000_000)
        memory(args)
    else:
        _memory_child(int(args.samples), None if args.keep == "auto" else args.keep)


if __name__ == "__main__":
    main()

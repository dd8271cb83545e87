"""Scale-out and bounded memory: one process, two local processes, a local dask cluster.

Run by hand (not in CI), on an otherwise quiet machine::

    python benchmarks/bench_scale.py speed  [--samples 2048] [--mc-samples 8388608] [--rounds 1]
    python benchmarks/bench_scale.py memory [--samples 10000000] [--full]
    python benchmarks/bench_scale.py rank-memory [--samples 16384]

``speed``: two studies of the invented demo scenario harrier-rb87.toml (correlated
inputs, its four outputs): ``rank`` at base size ``--samples`` and a summary-only Monte
Carlo of ``--mc-samples`` samples (propagate + summarize), each run in this process
(``workers=1``), on a local pool of two processes (``workers=2``, start-up included) and
on a local ``dask.distributed`` cluster of two single-threaded worker processes
(``executor=client.get_executor()``; the cluster's start-up is printed apart), side by
side, ``--rounds`` times (first one process and the pool interleaved, then one process
and the cluster); the best wall time of each, and the CPU time all processes
spent (the overhead of sending chunks, which contention on a shared machine does not
change). A control, a pure-Python loop on one process and on two, shows how much of the
two cores the machine gives right now (on a shared machine it is below 2, and so is
every ratio above it). Every parallel result is checked identical to the one-process one.

``memory``: peak resident memory (``ru_maxrss`` of a fresh child process) of a Monte
Carlo study of the trap's four default outputs: ``propagate`` of ``--samples`` random
draws (summary-only from 2^22 samples on: outputs kept as float32), ``summarize`` and
``check_requirements``. ``--full`` also runs ``keep="all"`` (every sample in float64)
for comparison. Target: 10^7 samples under 1 GB.

``rank-memory``: peak resident memory of the demo's ``rank`` (one process) at base size
``--samples`` in a fresh process.
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


def _cpu_seconds(client=None) -> float:
    """CPU time of this process, its reaped children and (with a client) the dask workers."""
    import resource

    own = resource.getrusage(resource.RUSAGE_SELF)
    children = resource.getrusage(resource.RUSAGE_CHILDREN)
    total = own.ru_utime + own.ru_stime + children.ru_utime + children.ru_stime
    if client is not None:
        total += sum(client.run(time.process_time).values())
    return total


class _Outputs(dict):
    """Model outputs that compare like a Dataset (``identical``: bit for bit)."""

    def identical(self, other) -> bool:
        import numpy as np

        return self.keys() == other.keys() and all(
            np.array_equal(self[k], other[k], equal_nan=True) for k in self
        )


def _draws(scenario, n: int) -> dict:
    """n random physical draws of the scenario's uncertain inputs (independent)."""
    import numpy as np

    rng = np.random.default_rng(20261203)
    columns = {}
    for name, dist in scenario.inputs.items():
        columns[name] = np.asarray(dist.rvs(size=n, random_state=rng), dtype=float)
    return columns


def speed(args: argparse.Namespace) -> None:
    from distributed import Client, LocalCluster

    from trapbudget.sensitivity import propagate, rank, summarize

    scenario = _scenario()
    outputs = list(scenario.outputs)

    def ranking(**where):
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

    def monte_carlo(**where):
        samples = propagate(
            scenario.model,
            scenario.inputs,
            n_samples=args.mc_samples,
            outputs=outputs,
            correlation=scenario.correlation,
            nominal=scenario.nominal,
            rng=20261203,
            keep="outputs",
            **where,
        )
        return summarize(samples)

    # The trap model alone: the same random draws (a fixed table of physical inputs, made
    # once) evaluated through the one evaluation path, here or on the workers.
    from trapbudget.sensitivity.protocol import BoundModel

    draws = _draws(scenario, args.eval_samples)
    # the settings travel with the model (as in propagate and rank), the draws as columns
    settled = BoundModel(
        scenario.model, {k: v for k, v in scenario.nominal.items() if k not in draws}
    )

    def evaluations(**where):
        from trapbudget.sensitivity.executors import running_on
        from trapbudget.sensitivity.protocol import evaluate_in_chunks

        with running_on(where.get("executor"), where.get("workers")):
            out = evaluate_in_chunks(settled, draws, outputs=outputs)
        return _Outputs(out)

    ranking(workers=1)  # compile (or load) the kernels here first
    studies = {"trap model": evaluations, "rank": ranking, "Monte Carlo": monte_carlo}
    wall: dict[tuple[str, str], float] = {}
    cpu: dict[tuple[str, str], float] = {}
    reference: dict[str, object] = {}

    def measure(ways: dict) -> None:
        for round_ in range(args.rounds):
            for label, run in studies.items():
                for name, (where, watch) in ways.items():
                    cpu_start = _cpu_seconds(watch)
                    start = time.perf_counter()
                    result = run(**where)
                    elapsed = time.perf_counter() - start
                    used = _cpu_seconds(watch) - cpu_start
                    if elapsed < wall.get((label, name), float("inf")):
                        wall[label, name], cpu[label, name] = elapsed, used
                    print(
                        f"round {round_ + 1} {label:11s} {name:18s} {elapsed:7.2f} s wall "
                        f"{used:7.2f} s CPU",
                        flush=True,
                    )
                    if label not in reference:
                        reference[label] = result
                    elif not result.identical(reference[label]):  # type: ignore[attr-defined]
                        raise SystemExit(f"{label} on {name}: result differs from one process")

    # First one process and the local pool, interleaved, while this process has no other
    # threads: the pool then forks, as it does from the command line. (Beside a dask
    # client's threads it would take its workers from a fork server, whose children's CPU
    # time this process cannot see.)
    one = {"workers": 1}, None
    measure({"1 process": one, "2 local processes": ({"workers": 2}, None)})
    # Then the dask cluster, interleaved with one process again; each ratio below is taken
    # against the best one-process time of the whole run.
    start = time.perf_counter()
    # dask's nanny sets MALLOC_TRIM_THRESHOLD_=65536 in its workers by default, which also
    # turns off glibc's adaptive mmap threshold: every temporary array of more than 128 kB
    # is then mapped and unmapped, and the trap model runs about 3.5 times slower. Workers
    # started with the platform's malloc settings:
    import dask

    environ = dict(dask.config.get("distributed.nanny.pre-spawn-environ"))
    environ.pop("MALLOC_TRIM_THRESHOLD_", None)
    dask.config.set({"distributed.nanny.pre-spawn-environ": environ})
    cluster = LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None
    )
    client = Client(cluster)
    client.run(lambda: __import__("trapbudget.models.trap"))
    print(
        f"dask LocalCluster of 2 worker processes started in {time.perf_counter() - start:.1f} s"
    )
    measure({"1 process": one, "dask, 2 workers": ({"executor": client.get_executor()}, client)})
    ways = ["1 process", "2 local processes", "dask, 2 workers"]
    client.close()
    cluster.close()
    serial, parallel = _control()
    print()
    print(
        f"trap model: {args.eval_samples} evaluations; rank: {SCENARIO}, N = {args.samples}; "
        f"Monte Carlo: {args.mc_samples} samples, summary-only; best of {args.rounds}"
    )
    for label in studies:
        one = wall[label, "1 process"]
        for name in ways:
            t = wall[label, name]
            overhead = cpu[label, name] / cpu[label, "1 process"] - 1
            print(
                f"  {label:11s} {name:18s} {t:7.2f} s   speed-up {one / t:4.2f}x   "
                f"CPU overhead {100 * overhead:+5.1f} %"
            )
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


def _rank_memory_child(n: int) -> None:
    import resource

    from trapbudget.sensitivity import rank

    scenario = _scenario()
    start = time.perf_counter()
    result = rank(
        scenario.model,
        scenario.inputs,
        n_samples=n,
        outputs=list(scenario.outputs),
        correlation=scenario.correlation,
        nominal=scenario.nominal,
        rng=1,
        workers=1,
    )
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
    runs = int(result.attrs.get("n_evaluations", 0))
    print(json.dumps({"peak_bytes": peak, "seconds": time.perf_counter() - start, "runs": runs}))


def _child(*argv: str) -> dict:
    """Run this script again in a fresh process (its own peak memory); its last JSON line."""
    out = subprocess.run(
        [sys.executable, __file__, *argv], check=True, capture_output=True, text=True
    ).stdout
    return json.loads(out.strip().splitlines()[-1])


def rank_memory(args: argparse.Namespace) -> None:
    n = int(args.samples or 2**14)
    got = _child("rank-memory-child", "--samples", str(n))
    print(
        f"rank of {SCENARIO}, N = {n} ({got['runs']:,} model runs): peak RSS "
        f"{got['peak_bytes'] / 2**30:.2f} GiB, {got['seconds']:.0f} s"
    )


def memory(args: argparse.Namespace) -> None:
    from trapbudget.sensitivity.guard import memory_needed

    runs = [None, "all"] if args.full else [None]
    for keep in runs:
        got = _child("memory-child", "--samples", str(args.samples), "--keep", keep or "auto")
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
    parser.add_argument(
        "what", choices=["speed", "memory", "memory-child", "rank-memory", "rank-memory-child"]
    )
    parser.add_argument("--samples", type=float, default=None)
    parser.add_argument("--rounds", type=int, default=1)
    parser.add_argument("--mc-samples", type=int, default=2**23)
    parser.add_argument("--eval-samples", type=int, default=2**23)
    parser.add_argument("--full", action="store_true")
    parser.add_argument("--keep", default="auto")
    args = parser.parse_args()
    if args.what == "speed":
        args.samples = int(args.samples or 2048)
        speed(args)
    elif args.what == "memory":
        args.samples = int(args.samples or 10_000_000)
        memory(args)
    elif args.what == "rank-memory":
        rank_memory(args)
    elif args.what == "rank-memory-child":
        _rank_memory_child(int(args.samples))
    else:
        _memory_child(int(args.samples), None if args.keep == "auto" else args.keep)


if __name__ == "__main__":
    main()

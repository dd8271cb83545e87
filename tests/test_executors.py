"""Model evaluations on a process pool and on a dask cluster give the same bits as one process.

The chunk grid is fixed by ``chunk_size`` (never by the number of workers) and designs,
replicates and analysis stay in the calling process, so each result must be *identical*
(``xarray.Dataset.identical``: same values bit for bit, same attrs) whichever runs the
chunks. Small chunks make every run below span several chunks.
"""

from __future__ import annotations

import dataclasses
import json
import multiprocessing
import subprocess
import sys
import time
from concurrent.futures import ProcessPoolExecutor
from importlib import resources

import numpy as np
import pytest
from distributed import Client, LocalCluster
from scipy import stats

from trapbudget.sensitivity import load_scenario, propagate, propagate_adaptive, rank
from trapbudget.sensitivity.decisions.compare import compare
from trapbudget.sensitivity.errors import ConvergenceWarning, UsageError
from trapbudget.sensitivity.executors import AUTO_MIN_SAMPLES, current_executor, running_on

CHUNK = 512
OUTPUTS = ["atom_number", "loading_time", "temperature"]


def _scenario(name: str):
    scenario = load_scenario(resources.files("trapbudget.examples") / name)
    settings = dataclasses.replace(scenario.settings, chunk_size=CHUNK)
    return dataclasses.replace(scenario, settings=settings)


@pytest.fixture(scope="module")
def scenario():
    return _scenario("harrier-rb87.toml")


@pytest.fixture(scope="module")
def pool():
    context = multiprocessing.get_context("forkserver")
    with ProcessPoolExecutor(max_workers=2, mp_context=context) as executor:
        yield executor


@pytest.fixture(scope="module")
def cluster_executor():
    # A local dask.distributed cluster of two workers (threads: starts in well under a second).
    with (
        LocalCluster(
            n_workers=2, threads_per_worker=1, processes=False, dashboard_address=None
        ) as cluster,
        Client(cluster) as client,
    ):
        yield client.get_executor()


def _each_way(run, pool, cluster_executor):
    alone = run(executor=None, workers=1)
    assert run(executor=pool, workers=None).identical(alone)
    assert run(executor=cluster_executor, workers=None).identical(alone)
    return alone


def test_propagate_is_identical_on_a_pool_and_a_cluster(scenario, pool, cluster_executor):
    def run(**where):
        return propagate(
            scenario.model,
            scenario.inputs,
            n_samples=4096,
            rng=3,
            outputs=OUTPUTS,
            nominal=scenario.nominal,
            chunk_size=CHUNK,
            **where,
        )

    ds = _each_way(run, pool, cluster_executor)
    assert ds.sizes["sample"] == 4096
    # workers=2 starts (and shuts down) its own pool of two processes
    assert run(executor=None, workers=2).identical(ds)


def test_adaptive_monte_carlo_is_identical_on_a_pool_and_a_cluster(
    scenario, pool, cluster_executor
):
    def run(**where):
        return propagate_adaptive(
            scenario.model,
            scenario.inputs,
            max_samples=30_000,  # three batches of 10^4
            significant_digits=3,  # does not converge: every batch runs
            rng=6,
            outputs=OUTPUTS[:2],
            nominal=scenario.nominal,
            **where,
        )

    with pytest.warns(ConvergenceWarning, match="did not converge"):
        ds = _each_way(run, pool, cluster_executor)
    assert ds.attrs["n_batches"] == 3


def test_rank_is_identical_on_a_pool_and_a_cluster(scenario, pool, cluster_executor):
    def run(**where):
        return rank(
            scenario.model,
            scenario.inputs,
            n_samples=32,
            outputs=OUTPUTS[:1],
            nominal=scenario.nominal,
            rng=4,
            chunk_size=CHUNK,
            n_replicates=4,
            **where,
        )

    ds = _each_way(run, pool, cluster_executor)
    assert ds.attrs["n_evaluations"] > 4 * CHUNK  # many chunks went out


def test_compare_is_identical_on_a_pool_and_a_cluster(pool, cluster_executor):
    before = _scenario("harrier-upgrade.toml")
    after = before.apply_upgrade(before.upgrades[0])

    def run(**where):
        return compare(before, after, n_samples=2048, rng=5, **where)

    ds = _each_way(run, pool, cluster_executor)
    assert float(ds["variance_removed"].sel(output=before.outputs[0])) != 0.0


def _local_function_model(values):
    return {"y": np.asarray(values["x"]) ** 2}


def test_a_model_that_does_not_pickle_is_refused_with_the_fix(pool):
    scale = 2.0
    model = lambda values: {"y": scale * np.asarray(values["x"])}  # noqa: E731
    with pytest.raises(UsageError, match=r"cannot be sent to worker processes.*module level"):
        propagate(model, {"x": stats.norm()}, n_samples=4 * CHUNK, chunk_size=CHUNK, executor=pool)
    # a function at module level is sent by reference and runs
    ds = propagate(
        _local_function_model,
        {"x": stats.norm()},
        n_samples=4 * CHUNK,
        chunk_size=CHUNK,
        rng=1,
        executor=pool,
    )
    np.testing.assert_array_equal(ds["y"].values, ds["x"].values ** 2)


def test_workers_must_be_a_positive_count_or_auto():
    with pytest.raises(UsageError, match=r"workers=0: give a number of processes >= 1"):
        propagate(_local_function_model, {"x": stats.norm()}, n_samples=8, workers=0)


def test_auto_runs_small_evaluations_here_and_large_ones_on_the_pool():
    with running_on(workers="auto"):
        assert current_executor(AUTO_MIN_SAMPLES - 1, 8) is None
        large = current_executor(AUTO_MIN_SAMPLES, 8)
        assert (large is None) == ((multiprocessing.cpu_count() or 1) < 2)
        assert current_executor(AUTO_MIN_SAMPLES, 1) is None  # one chunk: nothing to share
    assert current_executor(AUTO_MIN_SAMPLES, 8) is None  # outside the block: this process


def _blas_threads() -> list[int]:
    from threadpoolctl import threadpool_info

    return [lib["num_threads"] for lib in threadpool_info() if lib["user_api"] == "blas"]


def test_pool_workers_keep_to_one_blas_thread_each():
    # Two processes on two cores: BLAS threads of their own in each would compete with the
    # other worker (numpy's OpenBLAS starts one per core; threadpoolctl reads the count)
    with running_on(workers=2):
        pool = current_executor(AUTO_MIN_SAMPLES, 8)
        counts = [pool.submit(_blas_threads).result() for _ in range(4)]
    assert all(count and set(count) == {1} for count in counts), counts


_KILLED_CALLER = """
import os, sys, threading, time
from trapbudget.sensitivity.executors import current_executor, running_on
if sys.argv[1] == "forkserver":
    threading.Thread(target=time.sleep, args=(600,), daemon=True).start()
with running_on(workers=2):
    pool = current_executor(2**20, 8)
    pids = {pool.submit(os.getpid).result() for _ in range(8)}
    print(pool._method, *sorted(pids), flush=True)
    time.sleep(600)
"""


def _alive(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/stat") as stat:
            return stat.read().rsplit(")", 1)[1].split()[0] != "Z"  # a zombie is dead
    except FileNotFoundError:
        return False


@pytest.mark.skipif(not sys.platform.startswith("linux"), reason="reads /proc (Linux)")
@pytest.mark.parametrize("method", ["fork", "forkserver"])
def test_pool_workers_stop_when_their_caller_is_killed(method):
    # A caller killed with SIGKILL cannot shut its pool down; its workers must not stay
    # behind asleep (they hold the task pipe's write end, so they never see it close).
    caller = subprocess.Popen(
        [sys.executable, "-c", _KILLED_CALLER, method], stdout=subprocess.PIPE, text=True
    )
    try:
        started, *pids = caller.stdout.readline().split()
        assert started == method and pids
        assert all(_alive(int(pid)) for pid in pids)
    finally:
        caller.kill()
        caller.wait(timeout=30)
    deadline = time.monotonic() + 20
    while time.monotonic() < deadline and any(_alive(int(pid)) for pid in pids):
        time.sleep(0.1)
    assert not any(_alive(int(pid)) for pid in pids), pids


def test_a_process_with_other_threads_is_not_forked(scenario):
    # Python 3.12+ warns (DeprecationWarning) when a process that runs other threads
    # forks: the child may inherit a lock one of them held (Python docs, os.fork). A pool
    # opened beside a live thread (a notebook's, a dask client's, a progress monitor's)
    # must take its workers from a fork server and still give the same bits.
    import threading
    import warnings

    def run(workers):
        return propagate(
            scenario.model,
            scenario.inputs,
            n_samples=2048,
            rng=5,
            outputs=OUTPUTS[:1],
            nominal=scenario.nominal,
            chunk_size=CHUNK,
            workers=workers,
        )

    alone = run(1)
    stop = threading.Event()
    other = threading.Thread(target=stop.wait, daemon=True)
    other.start()
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", DeprecationWarning)
            with running_on(workers=2):
                method = current_executor(AUTO_MIN_SAMPLES, 8)._method
            assert method == "forkserver"
            assert run(2).identical(alone)
    finally:
        stop.set()
        other.join()


# ---------------------------------------------------------------- the command line

ISHIGAMI = """
[scenario]
title = "Ishigami on two processes"
model = "ishigami"
[inputs.x1]
nominal = "0"
tolerance = "3"
[inputs.x2]
nominal = "0"
tolerance = "3"
[inputs.x3]
nominal = "0"
tolerance = "3"
[settings]
n_samples = 256
seed = 12
chunk_size = 1024
"""


def _cli(capsys, *argv):
    from trapbudget.cli.main import main

    code = main([str(a) for a in argv])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_cli_workers_give_the_same_json(capsys, tmp_path):
    path = tmp_path / "ishigami.toml"
    path.write_text(ISHIGAMI, encoding="utf-8")
    results = []
    for workers in ("1", "2"):
        code, out, err = _cli(
            capsys, "rank", path, "--json", "--workers", workers, "--out", tmp_path / workers
        )
        assert code == 0, err
        result = json.loads(out)
        result.pop("report")
        results.append(result)
    assert results[0] == results[1]


@pytest.mark.parametrize(
    ("argv", "code", "message"),
    [
        (("--workers", "0"), 2, "give 1 or more processes, or 'auto'"),
        (("--workers", "many"), 2, "not a number of processes or 'auto'"),
        (("--scheduler", "tcp://127.0.0.1:9"), 2, "no dask scheduler answers there"),
    ],
)
def test_cli_bad_workers_or_scheduler_is_one_line(
    capsys, tmp_path, monkeypatch, argv, code, message
):
    monkeypatch.setattr("trapbudget.sensitivity.executors.SCHEDULER_TIMEOUT", "1s")
    path = tmp_path / "ishigami.toml"
    path.write_text(ISHIGAMI, encoding="utf-8")
    got, out, err = _cli(capsys, "rank", path, "--out", tmp_path / "r", *argv)
    assert got == code and out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1 and message in lines[0] and "Traceback" not in err, err

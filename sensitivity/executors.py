"""Where model evaluations run: this process, a local process pool, or a dask cluster.

Every evaluation of a model on many samples goes through
:func:`~trapbudget.sensitivity.protocol.evaluate_in_chunks`, which cuts the samples
on a fixed grid of ``chunk_size`` rows (whatever the number of workers) and maps the
chunks with :func:`map_chunks`. Designs, random numbers, replicates and the analysis
stay in the calling process, so a result is bit for bit the same with one worker, a
process pool or a cluster.

Where the chunks go is set for a block of code with :func:`running_on` (each public
function that evaluates a model takes ``executor=`` and ``workers=`` and opens one):

- ``executor``: any ``concurrent.futures.Executor``-like object with ``submit``
  (a ``ProcessPoolExecutor``, or ``dask.distributed.Client.get_executor()``);
- ``workers=N``: a local process pool of N processes, started on first use and
  shut down at the end of the block; ``workers=1`` (or nothing) runs in this process;
- ``workers="auto"``: all cores (``os.cpu_count()``), but only for an evaluation of
  at least :data:`AUTO_MIN_SAMPLES` samples; smaller ones run here, where starting
  processes would cost more than it saves.
"""

from __future__ import annotations

import collections
import contextlib
import contextvars
import functools
import os
import pickle
from collections.abc import Callable, Generator, Iterable, Iterator
from typing import Any, Literal, ParamSpec, TypeVar, Union

from trapbudget.sensitivity.errors import UsageError

__all__ = [
    "AUTO_MIN_SAMPLES",
    "Workers",
    "check_picklable",
    "current_executor",
    "evaluations_on",
    "map_chunks",
    "running_on",
]

#: ``workers``: a number of local processes, ``"auto"`` (all cores where it pays) or None.
Workers = Union[int, Literal["auto"], None]  # noqa: UP007 - a runtime alias on Python 3.10

#: Under ``workers="auto"``, an evaluation of fewer samples than this runs in this process:
#: about 0.3 s of trap evaluations on one core, several times a process pool's start-up.
AUTO_MIN_SAMPLES = 2**18

#: How long to wait for a dask scheduler to answer.
SCHEDULER_TIMEOUT = "10s"


def _no_op() -> None:
    return None


def _exit_with_parent() -> None:
    """Stop this worker when the process that started the pool dies.

    A killed caller (SIGKILL, an out-of-memory kill) cannot shut its pool down, and the
    workers never see the task pipe close: each holds a copy of its write end. They would
    sleep on, orphaned, for good. A daemon thread waits on multiprocessing's parent
    sentinel, a pipe the caller holds open, and exits the process when it closes. (The
    parent process id is no guide: a fork server's worker keeps its server alive, since
    it holds the server's keep-alive pipe.)
    """
    import multiprocessing
    import threading
    from multiprocessing.connection import wait

    parent = multiprocessing.parent_process()
    if parent is None:  # pragma: no cover - not started by multiprocessing
        return

    def watch() -> None:
        wait([parent.sentinel])
        os._exit(1)

    threading.Thread(target=watch, name="trapbudget-parent-watch", daemon=True).start()


def _start_worker() -> None:
    """Worker start-up: stop with the parent, and one BLAS thread per process."""
    _exit_with_parent()
    _one_blas_thread()


def _one_blas_thread() -> None:
    """One BLAS thread per process.

    The pool already gives each core a process; OpenBLAS's own threads (two here, one
    per core) would then compete with the other worker. They bring nothing even in one
    process: a Monte Carlo run of the demo took the same wall time with one BLAS thread
    and 30 % less CPU (2^21 samples, measured 2026-12-03).
    """
    # A fork-server or spawned worker has not loaded the BLAS libraries yet: load numpy's
    # and scipy's (each wheel brings its own OpenBLAS) so that the limit reaches both.
    import numpy  # noqa: F401
    import scipy.linalg  # noqa: F401
    from threadpoolctl import threadpool_limits

    threadpool_limits(1)


class _LocalPool:
    """A process pool of ``workers`` processes.

    On Linux the processes are forked, and forked at once when the pool opens: before
    any progress-bar thread starts and before the run's arrays fill the memory, and
    without re-running the caller's script. A process that already runs other Python
    threads (a notebook, a dask client, an earlier study's progress-bar monitor) is not
    forked: a child may inherit a lock one of those threads held and hang, which is why
    Python 3.12+ warns about such a fork. Its workers come from a fork server instead, a
    fresh single-threaded process. Elsewhere they are spawned (the platform's default)
    on first use. Both of these need the usual ``if __name__ == "__main__":`` guard in a
    script.
    """

    def __init__(self, workers: int) -> None:
        import sys
        import threading

        self.workers = workers
        self.owner = os.getpid()  # a forked worker must not use its parent's pool
        self._method: str | None = None
        if sys.platform.startswith("linux"):
            self._method = "fork" if threading.active_count() == 1 else "forkserver"
        self._pool: Any = None
        if self._method == "fork":
            self.submit(_no_op).result()  # every process forked now

    def _start(self) -> None:
        import multiprocessing
        from concurrent.futures import ProcessPoolExecutor

        context = multiprocessing.get_context(self._method)
        if self._method == "forkserver":
            # the server imports these once; every worker it forks then starts with them
            context.set_forkserver_preload(["scipy.linalg", "trapbudget.models.trap"])
        self._pool = ProcessPoolExecutor(
            max_workers=self.workers, mp_context=context, initializer=_start_worker
        )

    def submit(self, function: Callable[..., Any], *args: Any) -> Any:
        if self._pool is None:
            self._start()
        return self._pool.submit(function, *args)

    def shutdown(self) -> None:
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None


class _Plan:
    def __init__(self, executor: Any, *, auto: bool, slots: int) -> None:
        self.executor = executor
        self.auto = auto
        self.slots = slots


_CURRENT: contextvars.ContextVar[_Plan | None] = contextvars.ContextVar(
    "trapbudget_executor", default=None
)


def _check_workers(workers: Workers) -> None:
    if workers is None or workers == "auto":
        return
    if isinstance(workers, bool) or not isinstance(workers, int) or workers < 1:
        raise UsageError(f"workers={workers!r}: give a number of processes >= 1, or 'auto'")


def _slots(executor: Any) -> int:
    """How many chunks to keep in flight: twice the executor's workers, when it says."""
    count = getattr(executor, "_max_workers", None) or getattr(executor, "workers", None)
    client = getattr(executor, "_client", None)
    if count is None and client is not None:
        try:
            count = sum(client.nthreads().values())
        except Exception:  # pragma: no cover - a client that cannot answer
            count = None
    return 2 * int(count or 4) + 2


@contextlib.contextmanager
def running_on(
    executor: Any = None, workers: Workers = None, *, scheduler: str | None = None
) -> Iterator[None]:
    """Run the model evaluations inside the block on ``executor`` or ``workers`` processes.

    Parameters
    ----------
    executor : Executor-like, optional
        An object with ``submit(function, *args) -> future``; it stays open (the
        caller owns it). Takes precedence over ``workers``.
    workers : int or "auto", optional
        Local processes: 1 runs here, N > 1 starts a pool of N processes on first
        use and shuts it down at the end of the block, ``"auto"`` uses every core
        for evaluations of at least :data:`AUTO_MIN_SAMPLES` samples.
    scheduler : str, optional
        Address of a ``dask.distributed`` scheduler (``tcp://host:8786``): the
        block runs on that cluster (its workers need trapbudget installed).
        Needs the ``dask`` extra. Takes precedence over ``workers``.

    Raises
    ------
    UsageError
        For a bad ``workers``, a ``scheduler`` without dask installed, or one
        that does not answer.

    Notes
    -----
    With neither given, the block keeps the executor of an enclosing block (or
    runs here), so a study that opens one pool shares it with every stage.
    """
    _check_workers(workers)
    if executor is None and scheduler is not None:
        with _cluster(scheduler) as remote:
            with running_on(remote):
                yield
        return
    if executor is None and workers is None:
        yield
        return
    pool: _LocalPool | None = None
    if executor is not None:
        plan = _Plan(executor, auto=False, slots=_slots(executor))
    elif workers == "auto":
        cores = os.cpu_count() or 1
        pool = _LocalPool(cores) if cores > 1 else None
        plan = _Plan(pool, auto=True, slots=_slots(pool))
    else:
        assert isinstance(workers, int)
        pool = _LocalPool(workers) if workers > 1 else None
        plan = _Plan(pool, auto=False, slots=_slots(pool))
    token = _CURRENT.set(plan)
    try:
        yield
    finally:
        _CURRENT.reset(token)
        if pool is not None:
            pool.shutdown()


@contextlib.contextmanager
def _cluster(address: str) -> Iterator[Any]:
    try:
        from distributed import Client
    except ImportError:
        raise UsageError(
            f"--scheduler {address}: dask.distributed is not installed; "
            "pip install 'trapbudget[dask]'"
        ) from None
    try:
        client = Client(address, timeout=SCHEDULER_TIMEOUT)
    except (OSError, ValueError) as error:
        reason = str(error).splitlines()[0] if str(error) else type(error).__name__
        raise UsageError(
            f"--scheduler {address}: no dask scheduler answers there ({reason}); "
            "give the address it prints, e.g. tcp://10.0.0.5:8786"
        ) from error
    try:
        yield client.get_executor()
    finally:
        client.close()


def current_executor(n_samples: int, n_chunks: int) -> Any:
    """The executor an evaluation of ``n_samples`` in ``n_chunks`` chunks should use, or None."""
    plan = _CURRENT.get()
    if plan is None or plan.executor is None or n_chunks < 2:
        return None
    if plan.auto and n_samples < AUTO_MIN_SAMPLES:
        return None
    if getattr(plan.executor, "owner", os.getpid()) != os.getpid():
        return None
    return plan.executor


def check_picklable(model: Any, name: str) -> None:
    """Raise a one-line UsageError when ``model`` cannot be sent to another process."""
    try:
        pickle.dumps(model)
    except Exception as error:
        reason = str(error).splitlines()[0] if str(error) else type(error).__name__
        raise UsageError(
            f"model {name} cannot be sent to worker processes ({reason}); define its class "
            "or function at module level (no lambda, local function or open file), or run "
            "with workers=1 (--workers 1)"
        ) from error


def map_chunks(
    function: Callable[..., Any], arguments: Iterable[tuple[Any, ...]], executor: Any
) -> Generator[Any, None, None]:
    """``function(*args)`` for each tuple of ``arguments``, in order, on ``executor``.

    At most a few chunks per worker are in flight, so the samples waiting to be sent
    stay bounded however many chunks there are. Without an executor, runs here.
    """
    if executor is None:
        for args in arguments:
            yield function(*args)
        return
    plan = _CURRENT.get()
    slots = plan.slots if plan is not None and plan.executor is executor else _slots(executor)
    pending: collections.deque[Any] = collections.deque()
    try:
        for args in arguments:
            pending.append(executor.submit(function, *args))
            if len(pending) >= slots:
                yield pending.popleft().result()
        while pending:
            yield pending.popleft().result()
    finally:
        for future in pending:
            future.cancel()


_P = ParamSpec("_P")
_R = TypeVar("_R")


def evaluations_on(function: Callable[_P, _R]) -> Callable[_P, _R]:
    """Decorate a public function whose keyword arguments ``executor`` and ``workers``
    say where its model evaluations run: the call runs inside :func:`running_on`."""

    @functools.wraps(function)
    def wrapper(*args: _P.args, **kwargs: _P.kwargs) -> _R:
        with running_on(kwargs.get("executor"), kwargs.get("workers")):  # type: ignore[arg-type]
            return function(*args, **kwargs)

    return wrapper

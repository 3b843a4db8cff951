"""Where the points of a scan (or any list of independent tasks) are computed.

Nothing here knows about physics: an executor takes a picklable function and a list of
arguments and returns ``[fn(a) for a in args]`` in order, calling ``on_result(i, result)``
as each one finishes (in completion order).

* :class:`InProcess` -- one after the other in this process.
* :class:`LocalProcesses` -- N long-lived worker processes (``spawn``; each imports the
  package and compiles its JIT functions once, then serves many points).  By default N is
  the number of cores this process may use and every worker gets
  ``threads = cores // N`` threads for JAX/XLA and BLAS, so workers × threads ≤ cores.
  The thread settings are environment variables that XLA and the BLAS libraries read
  when they load, so they are set in the worker before anything imports JAX.
* :class:`Dask` -- a dask.distributed cluster: ``Dask("tcp://host:8786")`` uses an
  existing scheduler (its workers' thread settings are the cluster's business);
  ``Dask("local")`` starts a ``LocalCluster`` of worker processes sized and configured
  like :class:`LocalProcesses` (and stops it afterwards).  Needs ``pip install
  rlmeson[dask]``.

The three give the same numbers bit for bit (tested on a point of the pipeline: in this
process with JAX's default thread pool, in a worker process and on a dask worker with one
thread each).
"""

from __future__ import annotations

import os
import threading
from collections.abc import Callable, Sequence

#: Environment variables that fix the thread count of XLA's CPU backend and of BLAS.
_THREAD_VARS = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS", "VECLIB_MAXIMUM_THREADS",
                "NUMEXPR_NUM_THREADS")


def available_cores() -> int:
    """The cores this process may run on (its CPU affinity where the OS tells it)."""
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return max(1, os.cpu_count() or 1)


def threads_per_worker(workers: int, cores: int | None = None) -> int:
    """Threads each of ``workers`` processes may use so that workers × threads ≤ cores."""
    return max(1, (cores or available_cores()) // max(1, workers))


def worker_environment(threads: int, base: dict | None = None) -> dict[str, str]:
    """The environment variables that limit a fresh process to ``threads`` threads: the
    BLAS/OpenMP libraries, and for one thread XLA's CPU backend (``XLA_FLAGS``: its Eigen
    thread pool switched off; the user's other XLA flags are kept).  XLA has no flag for
    a pool of a given size: with more than one thread it sizes its pool by the cores the
    process may run on, which :class:`LocalProcesses` narrows to ``threads`` cores per
    worker (``_init_worker``)."""
    base = os.environ if base is None else base
    flags = [f for f in base.get("XLA_FLAGS", "").split()
             if not f.startswith(("--xla_cpu_multi_thread_eigen", "intra_op_parallelism_threads",
                                  "--intra_op_parallelism_threads"))]
    if threads == 1:
        flags = ["--xla_cpu_multi_thread_eigen=false", *flags, "intra_op_parallelism_threads=1"]
    env = {"XLA_FLAGS": " ".join(flags)} if flags else {}
    env.update({v: str(threads) for v in _THREAD_VARS})
    return env


def _pin(threads: int, slot: int) -> None:
    """Run this process on ``threads`` of the available cores, the ``slot``-th group
    (Linux; elsewhere nothing happens)."""
    try:
        cores = sorted(os.sched_getaffinity(0))
    except (AttributeError, OSError):
        return
    if threads >= len(cores):
        return
    start = (slot * threads) % len(cores)
    group = (cores + cores)[start:start + threads]
    try:
        os.sched_setaffinity(0, set(group))
    except OSError:
        pass


def _init_worker(env: dict[str, str], parent: int | None, threads: int = 1, counter=None) -> None:
    """First thing a worker process runs: thread settings before JAX is imported (with
    more than one thread, the worker is narrowed to its own group of cores), and a watch
    on the parent so that a worker never outlives a killed scan."""
    os.environ.update(env)
    if threads > 1 and counter is not None:
        with counter.get_lock():
            slot = counter.value
            counter.value += 1
        _pin(threads, slot)
    if parent is not None:
        def watch():
            import time

            while True:
                time.sleep(1.0)
                if os.getppid() != parent:
                    os._exit(1)

        threading.Thread(target=watch, daemon=True, name="rlmeson-parent-watch").start()


class Executor:
    """``map(fn, args, on_result)`` → results in the order of ``args``."""

    workers: int = 1
    description: str = ""

    def map(self, fn: Callable, args: Sequence, on_result: Callable | None = None) -> list:
        raise NotImplementedError

    def close(self) -> None:
        pass

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()


class InProcess(Executor):
    """One task after the other in this process."""

    description = "in this process"

    def map(self, fn, args, on_result=None):
        out = []
        for i, a in enumerate(args):
            out.append(fn(a))
            if on_result is not None:
                on_result(i, out[-1])
        return out


class LocalProcesses(Executor):
    """``workers`` spawned processes (default: one per core), each limited to ``threads``
    threads (default: cores // workers).  The pool lives as long as the executor, so a
    second ``map`` reuses warm workers."""

    def __init__(self, workers: int | None = None, threads: int | None = None):
        self.workers = workers or available_cores()
        self.threads = threads or threads_per_worker(self.workers)
        self.env = worker_environment(self.threads)
        self.description = f"{self.workers} worker process(es) × {self.threads} thread(s)"
        self._pool = None

    def _ensure(self):
        if self._pool is None:
            import multiprocessing as mp
            from concurrent.futures import ProcessPoolExecutor

            ctx = mp.get_context("spawn")
            self._pool = ProcessPoolExecutor(max_workers=self.workers, mp_context=ctx, initializer=_init_worker,
                                             initargs=(self.env, os.getpid(), self.threads, ctx.Value("i", 0)))
        return self._pool

    def map(self, fn, args, on_result=None):
        from concurrent.futures import as_completed

        pool = self._ensure()
        futs = {pool.submit(fn, a): i for i, a in enumerate(args)}
        out: dict[int, object] = {}
        try:
            for f in as_completed(futs):
                i = futs[f]
                out[i] = f.result()
                if on_result is not None:
                    on_result(i, out[i])
        except BaseException:
            for f in futs:
                f.cancel()
            raise
        return [out[i] for i in range(len(args))]

    def close(self):
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None


class Dask(Executor):
    """A dask.distributed cluster: ``address`` of an existing scheduler, or ``"local"``
    for a LocalCluster of ``workers`` processes (default one per core) with
    ``cores // workers`` threads each for JAX/BLAS and one task at a time per worker."""

    def __init__(self, address: str = "local", workers: int | None = None, threads: int | None = None):
        try:
            from dask.distributed import Client, LocalCluster
        except ImportError:
            raise ImportError("--dask needs dask.distributed: pip install 'rlmeson[dask]'") from None
        self._cluster = None
        if address == "local":
            self.workers = workers or available_cores()
            self.threads = threads or threads_per_worker(self.workers)
            env = worker_environment(self.threads)
            # The thread settings must be in place before the worker process imports NumPy
            # (BLAS) and JAX: dask's "pre-spawn" environment is set in this process while the
            # workers are spawned (then inherited); this process's own environment is put back.
            import dask

            saved = dict(os.environ)
            try:
                with dask.config.set({"distributed.nanny.pre-spawn-environ": env}):
                    self._cluster = LocalCluster(n_workers=self.workers, threads_per_worker=1, processes=True,
                                                 dashboard_address=None, env=env)
            finally:
                os.environ.clear()
                os.environ.update(saved)
            self._client = Client(self._cluster)
            self.description = f"dask LocalCluster, {self.workers} worker(s) × {self.threads} thread(s)"
        else:
            self._client = Client(address)
            self.workers = max(1, len(self._client.scheduler_info().get("workers", {})))
            self.description = f"dask scheduler {address} ({self.workers} worker(s))"

    def map(self, fn, args, on_result=None):
        from dask.distributed import as_completed

        futs = [self._client.submit(fn, a, pure=False) for a in args]
        index = {f.key: i for i, f in enumerate(futs)}
        out: dict[int, object] = {}
        try:
            for f in as_completed(futs):
                i = index[f.key]
                out[i] = f.result()
                if on_result is not None:
                    on_result(i, out[i])
        except BaseException:
            self._client.cancel(futs)
            raise
        return [out[i] for i in range(len(args))]

    def close(self):
        self._client.close()
        if self._cluster is not None:
            self._cluster.close()


def make(workers: int | None = 1, dask: str | None = None, tasks: int | None = None) -> Executor:
    """The executor the command line asks for: ``dask`` (an address or ``"local"``) wins;
    else ``workers`` = 1 in this process, N > 1 (or None: one per core, but no more than
    ``tasks``) in worker processes."""
    if workers is None and tasks is not None:
        workers = max(1, min(available_cores(), tasks))
    if dask is not None:
        return Dask(dask, workers)
    if workers == 1:
        return InProcess()
    return LocalProcesses(workers)

"""Executors (rlmeson.workflows.executors: in process, local worker processes, dask.distributed)
and progress bars (rlmeson.workflows.progress).  No physics here: the checks are the contract --
results in input order, every task exactly once, workers × threads ≤ cores, thread
settings in place in the worker before JAX loads -- and the three output modes of a bar.
"""

import io
import math
import os

import pytest

from rlmeson.workflows import executors
from rlmeson.workflows.progress import bar


def test_sizing_keeps_workers_times_threads_within_the_cores():
    for cores in (1, 2, 3, 8, 16):
        for workers in range(1, cores + 1):
            t = executors.threads_per_worker(workers, cores)
            assert t >= 1 and workers * t <= cores
    assert executors.threads_per_worker(3, 2) == 1          # more workers than cores: one thread each
    env = executors.worker_environment(1, {"XLA_FLAGS": "--xla_dump_to=/tmp/x intra_op_parallelism_threads=7"})
    flags = env["XLA_FLAGS"].split()
    assert "--xla_dump_to=/tmp/x" in flags                  # the user's other flags are kept
    assert "--xla_cpu_multi_thread_eigen=false" in flags and "intra_op_parallelism_threads=1" in flags
    assert "intra_op_parallelism_threads=7" not in flags
    assert env["OMP_NUM_THREADS"] == "1"
    many = executors.worker_environment(4, {"XLA_FLAGS": "--xla_dump_to=/tmp/x"})
    assert many["XLA_FLAGS"] == "--xla_dump_to=/tmp/x" and many["OMP_NUM_THREADS"] == "4"
    assert "XLA_FLAGS" not in executors.worker_environment(4, {})   # XLA reads a flag without -- as a file


def test_in_process_keeps_order_and_reports_each_result():
    seen = []
    out = executors.InProcess().map(math.sqrt, [4.0, 9.0, 16.0], lambda i, r: seen.append((i, r)))
    assert out == [2.0, 3.0, 4.0] and seen == [(0, 2.0), (1, 3.0), (2, 4.0)]


def test_local_processes_order_threads_and_reuse():
    """Results in input order; the worker sees the thread settings (set by the
    initializer before anything in it imports JAX) and is another process; a second map
    reuses the same workers (the JIT cache of a worker lives as long as the executor)."""
    with executors.LocalProcesses(workers=2, threads=1) as ex:
        assert ex.map(math.sqrt, [float(i * i) for i in range(7)]) == [float(i) for i in range(7)]
        flags = ex.map(os.getenv, ["XLA_FLAGS", "OMP_NUM_THREADS"])
        assert "--xla_cpu_multi_thread_eigen=false" in flags[0] and flags[1] == "1"
        pids = set(ex.map(_pid, range(4))) | set(ex.map(_pid, range(4)))
        assert os.getpid() not in pids and 1 <= len(pids) <= 2   # two maps, the same two workers


def _pid(_):
    return os.getpid()


def test_make_picks_the_executor():
    assert isinstance(executors.make(1), executors.InProcess)
    ex = executors.make(None)
    assert isinstance(ex, executors.LocalProcesses) and ex.workers == executors.available_cores()
    assert ex.workers * ex.threads <= executors.available_cores()
    ex.close()
    assert isinstance(executors.make(None, tasks=1), executors.InProcess)   # no more workers than points


def test_dask_local_cluster_keeps_order_and_thread_settings():
    pytest.importorskip("dask.distributed")
    with executors.Dask("local", workers=1, threads=1) as ex:
        assert ex.map(math.sqrt, [1.0, 4.0, 9.0]) == [1.0, 2.0, 3.0]
        assert "--xla_cpu_multi_thread_eigen=false" in ex.map(os.getenv, ["XLA_FLAGS"])[0]


def test_workers_with_several_threads_run_jax():
    """Workers with more than one thread each: XLA starts (its flags parse) and each
    worker is narrowed to its own group of cores (on a machine with ≥ 2 cores)."""
    cores = executors.available_cores()
    with executors.LocalProcesses(workers=1, threads=cores) as ex:
        assert ex.map(_jax_sum, [3])[0] == 6.0
    if cores >= 2 and hasattr(os, "sched_getaffinity"):
        with executors.LocalProcesses(workers=1, threads=1) as ex:
            assert ex.map(_ncores, [0])[0] == cores          # one thread: no pinning needed
            groups = ex.map(_pinned, [(cores - 1, 0), (cores - 1, 1)])   # (threads, slot), in a worker
        assert all(len(g) == cores - 1 for g in groups) and groups[0] != groups[1]


def _jax_sum(n):
    from rlmeson.numerics._jax import jnp

    return float(jnp.arange(n + 1.0).sum())


def _ncores(_):
    return len(os.sched_getaffinity(0))


def _pinned(args):
    before = os.sched_getaffinity(0)
    executors._pin(*args)
    group = sorted(os.sched_getaffinity(0))
    os.sched_setaffinity(0, before)
    return group


def test_progress_bar_modes():
    """A log gets one line per step; a non-terminal stream too; quiet prints nothing but
    keeps the log; a terminal gets a tqdm bar (carriage returns, no per-step lines)."""
    log, stream = [], io.StringIO()
    with bar(3, "point", quiet=False, log=log, stream=stream) as b:
        for i in range(3):
            b.step(f"m = {i}")
    lines = stream.getvalue().splitlines()
    assert len(lines) == 3 and lines[-1].endswith("point 3/3: m = 2") and log == lines
    log, stream = [], io.StringIO()
    with bar(2, "point", quiet=True, log=log, stream=stream) as b:
        b.step("a")
        b.step("b")
    assert stream.getvalue() == "" and len(log) == 2

    class Tty(io.StringIO):
        def isatty(self):
            return True

    tty = Tty()
    with bar(2, "point", stream=tty) as b:
        b.step("a")
        b.step("b")
    assert "\r" in tty.getvalue() and "2/2" in tty.getvalue() and "point 1/2: a" not in tty.getvalue()


def test_store_claim_excludes_others_and_survives_sigkill(tmp_path):
    """Store.claim: a second claimant of the same entry waits (told once) until the first
    leaves; another entry is not blocked; a holder killed with SIGKILL leaves a lock file
    that is no obstacle (the OS lock dies with the process) and is not an entry."""
    import signal
    import subprocess
    import sys
    import threading
    import time

    from rlmeson.io.store import Store

    st = Store(tmp_path)
    order, told = [], []

    def second():
        with st.claim("quark", "k1", waiting=told.append):
            order.append("second")

    with st.claim("quark", "k1"):
        t = threading.Thread(target=second)
        t.start()
        time.sleep(0.5)
        with st.claim("quark", "k2"):           # another entry: not blocked
            order.append("other")
        order.append("first done")
    t.join(10)
    assert order == ["other", "first done", "second"] and len(told) == 1
    code = ("import sys, time; from rlmeson.io.store import Store\n"
            f"with Store({str(tmp_path)!r}).claim('quark', 'k3'):\n"
            "    print('held', flush=True); time.sleep(60)\n")
    p = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True)
    assert p.stdout.readline().strip() == "held"
    p.send_signal(signal.SIGKILL)
    p.wait(10)
    assert st.lock_path("quark", "k3").exists()
    t0 = time.perf_counter()
    with st.claim("quark", "k3", waiting=told.append):
        pass
    assert time.perf_counter() - t0 < 10.0 and len(told) == 1      # released by the kill, no timeout
    assert st.get("quark", "k3") is None and not (tmp_path / "quark").exists()   # a lock is no entry

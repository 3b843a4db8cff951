"""Small helpers shared by the benchmark scripts (timing, memory, subprocess runs)."""

from __future__ import annotations

import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from contextlib import contextmanager


def peak_rss_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


@contextmanager
def timer(store: dict, key: str):
    t0 = time.perf_counter()
    yield
    store[key] = time.perf_counter() - t0


def best_of(fn, repeat=3):
    ts = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        ts.append(time.perf_counter() - t0)
    return min(ts)


def fresh_process(code: str, jax_cache: str | None) -> dict:
    """Run ``code`` (which prints one JSON line) in a new interpreter; returns its dict."""
    env = dict(os.environ)
    env["RLMESON_JAX_CACHE"] = jax_cache or ""
    env.setdefault("RLMESON_CACHE", tempfile.mkdtemp(prefix="rlmeson-bench-store-"))
    t0 = time.perf_counter()
    out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True, check=True)
    res = json.loads(out.stdout.strip().splitlines()[-1])
    res["process_seconds"] = time.perf_counter() - t0
    return res


def table(title: str, rows: list[tuple], head: tuple) -> str:
    w = [max(len(str(x)) for x in col) for col in zip(head, *rows)]
    line = "  ".join(f"{{:<{n}}}" for n in w)
    out = [title, line.format(*head), line.format(*("-" * n for n in w))]
    out += [line.format(*map(str, r)) for r in rows]
    return "\n".join(out)

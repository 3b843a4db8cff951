"""Wall time of the fit workflow (prints a table; no assertions).

    python benchmarks/bench_fit.py [--derivatives exact|central]

Row: "fit (D, m) to (m_pi, f_pi) from D = 0.8" — configs/mt-fit.toml (Maris–Tandy,
omega = 0.4 GeV, hard cutoff, default grids) in a fresh interpreter with an empty result
store: imports, every evaluation, and JIT compilation either from scratch (no persistent
compilation cache) or read from a filled persistent cache (the usual case after the
first run of the package).  Target (2-core machine): ≤ 30 s wall.  ``fit_function`` is
the row as a function, for a combined production benchmark.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile

sys.path.insert(0, os.path.dirname(__file__))
from _common import fresh_process, table  # noqa: E402

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))

CODE = """
import json, resource, time
t0 = time.perf_counter()
import rlmeson
res = rlmeson.fit({path!r}, overrides=["fit.derivatives={deriv!r}"] if {deriv!r} else (), cache=False)
print(json.dumps({{"seconds": time.perf_counter() - t0, "fit_seconds": res.seconds,
                  "evaluations": res.evaluations, "iterations": res.iterations, "converged": res.converged,
                  "D": float(res.parameters[0]), "m": float(res.parameters[1]),
                  "cpu_seconds": sum(resource.getrusage(resource.RUSAGE_SELF)[:2]),
                  "peak_mb": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0}}))
"""


def fit_function(derivatives: str = "", jax_cache: str | None = None) -> dict:
    """The mt-fit row: wall time of a fit in a fresh process (empty result store; the
    persistent JIT cache ``jax_cache``, None: none) and what it found."""
    path = os.path.join(ROOT, "configs", "mt-fit.toml")
    return fresh_process(CODE.format(path=path, deriv=derivatives), jax_cache)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--derivatives", choices=("exact", "central"), default="")
    a = ap.parse_args()
    jit = tempfile.mkdtemp(prefix="rlmeson-bench-jax-")
    rows = []
    for label, cache in (("no JIT cache", None), ("filling a JIT cache", jit), ("JIT cache filled", jit)):
        r = fit_function(a.derivatives, cache)
        rows.append((f"fit (D, m) to (m_pi, f_pi) from D = 0.8; {label}", f"{r['process_seconds']:.1f}",
                     f"{r['cpu_seconds']:.1f}", "30",
                     f"{r['evaluations']} / {r['iterations']}", f"{r['D']:.5f}", f"{1e3 * r['m']:.4f}",
                     "yes" if r["converged"] else "NO", f"{r['peak_mb']:.0f}"))
    print(table(f"fit workflow ({a.derivatives or 'default'} derivatives; fresh process, empty result store)",
                rows, ("row", "wall s", "cpu s", "target s", "evals / iters", "D GeV^2", "m MeV", "converged",
                       "peak MB")))


if __name__ == "__main__":
    main()

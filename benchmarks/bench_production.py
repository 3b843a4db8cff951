"""Production workflows: wall time and memory (prints a table; no assertions).

    python benchmarks/bench_production.py [--points 20] [--workers N] [--skip-run] [--fit]

Rows (each in a fresh interpreter with an empty result store, "cold"; the persistent JIT
compilation cache either empty -- "JIT cold" -- or filled by an earlier row/run -- "JIT
cached", the usual case after the first use of the package):

* ``scan``: a current-mass scan of the pion and the rho on the Maris–Tandy published
  setting (configs/mt-pion.toml: omega = 0.4 GeV, D = 0.933 GeV^2, hard cutoff), m(19 GeV)
  log-spaced from 2 to 20 MeV, ``--points`` points (default 20), no error-bar grid,
  ``rlmeson scan`` with its default executor (one worker process per core).  Target
  (2-core machine): <= 60 s.  Also: the mean seconds per point inside a worker and the
  peak resident memory of any worker (target <= 1.5 GB), from scan.json.
* ``run mt-pion``: ``rlmeson run configs/mt-pion.toml``.  Target: <= 20 s.
* ``fit``: the fit helper's row (benchmarks/bench_fit.py, ``fit_function``), with
  ``--fit``.  Target: <= 30 s.

Timings on a shared machine are upper bounds.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
import time

sys.path.insert(0, os.path.dirname(__file__))
from _common import table  # noqa: E402

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))


def _cli(args: list[str], jax_cache: str) -> tuple[float, str]:
    """Wall seconds of ``python -m rlmeson ARGS`` in a fresh interpreter with an empty
    result store; raises on a non-zero exit."""
    env = dict(os.environ)
    env["RLMESON_JAX_CACHE"] = jax_cache
    env["RLMESON_CACHE"] = tempfile.mkdtemp(prefix="rlmeson-bench-store-")
    t0 = time.perf_counter()
    p = subprocess.run([sys.executable, "-m", "rlmeson", *args], env=env, cwd=ROOT, capture_output=True, text=True)
    if p.returncode != 0:
        raise RuntimeError(f"rlmeson {' '.join(args)}: exit {p.returncode}: {p.stderr.strip()[-400:]}")
    return time.perf_counter() - t0, p.stderr


def scan_config(points: int) -> str:
    """configs/mt-pion.toml with a [scan] table over the light current mass."""
    text = open(os.path.join(ROOT, "configs", "mt-pion.toml"), encoding="utf-8").read()
    return text + f"""
[scan]
error_bar = false
[[scan.axis]]
key = "quarks.l.current_mass_gev"
range = {{ start = 0.002, stop = 0.020, points = {points}, spacing = "log" }}
"""


def scan_row(points: int, workers: int | None, jax_cache: str) -> dict:
    d = tempfile.mkdtemp(prefix="rlmeson-bench-scan-")
    cfg = os.path.join(d, "scan.toml")
    with open(cfg, "w", encoding="utf-8") as fh:
        fh.write(scan_config(points))
    extra = [] if workers is None else ["--workers", str(workers)]
    wall, _ = _cli(["scan", cfg, "--out", os.path.join(d, "out"), "--quiet", *extra], jax_cache)
    doc = json.load(open(os.path.join(d, "out", "scan.json"), encoding="utf-8"))
    pts = doc["points"]
    return {"wall": wall, "ok": doc["points_ok"], "n": len(pts), "executor": doc["executor"],
            "per_point": sum(p["seconds"] for p in pts) / len(pts),
            "peak_mb": max((p.get("peak_rss_mb") or 0.0) for p in pts)}


def run_row(jax_cache: str) -> dict:
    d = tempfile.mkdtemp(prefix="rlmeson-bench-run-")
    wall, _ = _cli(["run", "configs/mt-pion.toml", "--out", os.path.join(d, "out"), "--quiet"], jax_cache)
    man = json.load(open(os.path.join(d, "out", "manifest.json"), encoding="utf-8"))
    t = man.get("timings_seconds", {})
    return {"wall": wall, "quarks": t.get("quarks", {}), "mesons": t.get("mesons", {})}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--points", type=int, default=20)
    ap.add_argument("--workers", type=int, default=None, help="scan workers (default: rlmeson's, one per core)")
    ap.add_argument("--skip-run", action="store_true", help="no mt-pion run row")
    ap.add_argument("--fit", action="store_true", help="also the fit row (benchmarks/bench_fit.py)")
    ap.add_argument("--jit-cold", action="store_true", help="also the rows with an empty JIT cache")
    a = ap.parse_args(argv)
    jit = tempfile.mkdtemp(prefix="rlmeson-bench-jit-")      # filled by the first row that runs
    rows, notes = [], []
    modes = [("JIT cold", "")] if a.jit_cold else []
    modes.append(("JIT cached", jit))
    if not a.skip_run:
        _cli(["run", "configs/mt-pion.toml", "--out", os.path.join(tempfile.mkdtemp(), "o"), "--quiet"], jit)
    for label, cache in modes:
        s = scan_row(a.points, a.workers, cache)
        rows.append((f"scan, {a.points} masses, pi + rho ({label})", f"{s['wall']:.1f}", "60",
                     f"{s['ok']}/{s['n']} ok; {s['executor']}; {s['per_point']:.1f} s/point in a worker; "
                     f"peak worker memory {s['peak_mb']:.0f} MB (target 1536)"))
        if not a.skip_run:
            r = run_row(cache)
            parts = ", ".join(f"{k} {v:.1f}" for k, v in {**{f'quark {q}': s for q, s in r['quarks'].items()},
                                                            **r["mesons"]}.items())
            rows.append((f"run configs/mt-pion.toml ({label})", f"{r['wall']:.1f}", "20", parts))
    if a.fit:
        try:
            from bench_fit import fit_function
        except ImportError as e:
            notes.append(f"fit row: benchmarks/bench_fit.py not usable ({e})")
        else:
            f = fit_function(jax_cache=jit)
            rows.append(("fit (D, m) to (m_pi, f_pi) from D = 0.8 (JIT cached)", f"{f['seconds']:.1f}", "30",
                         f"{f.get('evaluations')} evaluations, converged {f.get('converged')}"))
    print(table(f"production benchmarks ({os.cpu_count()} cores; shared machine: upper bounds)", rows,
                ("workflow", "wall [s]", "target [s]", "details")))
    for n in notes:
        print(n)
    return 0


if __name__ == "__main__":
    sys.exit(main())

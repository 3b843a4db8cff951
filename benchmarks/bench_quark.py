"""Timings of the quark stage (prints a table; no assertions).

    python benchmarks/bench_quark.py

Targets (2-core machine, float64): real-axis solve at the default grid ≤ 0.3 s after JIT
warm-up and ≤ 5 s cold including JIT (persistent compilation cache); the shifted solve
for one M on a 64 × 32 (r, z) grid ≤ 0.5 s after warm-up; peak memory ≤ 1 GB.
"""

from __future__ import annotations

import os
import sys
import tempfile

sys.path.insert(0, os.path.dirname(__file__))
from _common import best_of, fresh_process, peak_rss_mb, table  # noqa: E402

COLD = """
import json, time
t0 = time.perf_counter()
import rlmeson
from rlmeson.quark import gap
from rlmeson.model import interactions
from rlmeson.model.kernel import Kernel
t1 = time.perf_counter()
k = Kernel("maris-tandy", interactions.get("maris-tandy").defaults(), regularisation="{reg}")
s = gap.solve(k, 0.00374, 19.0)
t2 = time.perf_counter()
print(json.dumps({{"import": t1 - t0, "solve": t2 - t1}}))
"""


def main():

    import rlmeson  # noqa: F401
    from rlmeson.quark import gap, routed
    from rlmeson.model import interactions, ladder
    from rlmeson.numerics import quadrature as qd
    from rlmeson.model.kernel import Kernel

    rows = []
    for reg in ("hard-cutoff", "translation-invariant"):
        cache = tempfile.mkdtemp(prefix="rlmeson-jax-")
        nocache = fresh_process(COLD.format(reg=reg), None)
        first = fresh_process(COLD.format(reg=reg), cache)
        again = fresh_process(COLD.format(reg=reg), cache)
        k = Kernel("maris-tandy", interactions.get("maris-tandy").defaults(), regularisation=reg)
        gap.solve(k, 0.00374, 19.0)
        warm = best_of(lambda: gap.solve(k, 0.00374, 19.0))
        warm0 = best_of(lambda: gap.solve(k, 0.0, 19.0))
        n = gap.GapGrid().radial(k.q2_max).size
        rows.append((reg, n, f"{warm:.3f}", f"{warm0:.3f}", f"{nocache['solve']:.2f}",
                     f"{first['solve']:.2f}", f"{again['solve']:.2f}", f"{again['import']:.2f}"))
    print(table("real-axis gap equation, default grid (seconds)", rows,
                ("regularisation", "nodes", "warm m=3.74MeV", "warm chiral", "cold, no JIT cache",
                 "cold, JIT cache filled", "cold, cache reused", "import")))

    rows = []
    for reg in ("hard-cutoff", "translation-invariant"):
        k = Kernel("maris-tandy", interactions.get("maris-tandy").defaults(), regularisation=reg)
        sol = gap.solve(k, 0.00374, 19.0)
        widths = (3.5, 2.4, 2.31, 2.31) if reg == "hard-cutoff" else (7.0, 2.4, 2.31, 8.1)  # 8 panels: 64 nodes
        rad = qd.radial_grid(1e-4, k.q2_max, widths, 8)
        lg = ladder.LadderGrid(rad, 32)
        import time
        t0 = time.perf_counter()
        solver = routed.ShiftedSolver(sol, lg)
        build = time.perf_counter() - t0
        solver.solve(0.5, 0.5)  # JIT warm-up
        cold_start = best_of(lambda: solver.solve(0.5, 0.5), 2)
        prev = solver.solve(0.49, 0.5)
        warm_start = best_of(lambda: solver.solve(0.5, 0.5, guess=prev), 2)
        sp = solver.solve(0.5, 0.5)
        rows.append((reg, f"{rad.size}x{lg.n_z}", f"{build:.2f}", f"{cold_start:.3f}", f"{warm_start:.3f}",
                     sp.iterations, f"{sp.residuals[-1]:.1e}"))
    print()
    print(table("shifted (quark-routed) solve at M = 0.5 GeV, eta = 1/2 (seconds)", rows,
                ("regularisation", "(r, z) grid", "kernel build", "solve from real axis",
                 "solve from M = 0.49", "Newton steps", "residual")))
    print(f"\npeak memory of this process: {peak_rss_mb():.0f} MB")


if __name__ == "__main__":
    main()

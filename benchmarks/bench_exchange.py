"""Timings of the quark on the complex plane and its files (prints a table; no assertions).

    python benchmarks/bench_exchange.py

Targets (2-core machine): exporting the propagator of one flavour for a region with apex
−(1.0 GeV)²/4 ≤ 5 s warm (gap solution at hand, JIT warm); the reader at 10⁶ complex
points ≤ 1 s.  Also: the quark stage's singularity search (``quarkplane.locate``) and
the cost of one AAA fit.
"""

from __future__ import annotations

import os
import sys
import tempfile
import time

sys.path.insert(0, os.path.dirname(__file__))
from _common import best_of, peak_rss_mb, table  # noqa: E402


def main():
    import numpy as np

    import rlmeson
    from rlmeson.io import config, exchange
    from rlmeson.workflows import pipeline
    from rlmeson.quark import quarkplane

    text = """
name = "bench-exchange"
[interaction]
model = "maris-tandy"
[quarks.l]
current_mass_gev = 0.0037
"""
    cfg = config.parse(text)
    quark = pipeline.solve_quark(cfg, "l", None)
    out = tempfile.mkdtemp(prefix="rlmeson-bench-exchange-")
    rows = []

    def export():
        plane = pipeline.quark_plane(cfg, quark, 1.0, 0.5, None)
        exchange.write_netcdf(exchange.propagator_dataset(cfg, quark, plane), os.path.join(out, "p.nc"))
        return plane

    t0 = time.perf_counter()
    plane = export()
    rows.append(("export, region M = 1.0 GeV, first (kernel built, JIT)", f"{time.perf_counter() - t0:.2f} s", "—"))
    rows.append(("export, region M = 1.0 GeV, warm", f"{best_of(export, 2):.2f} s", "≤ 5 s"))
    smp = plane.samples
    rows.append(("  of which the AAA fit and zeros", f"{best_of(lambda: quarkplane.build(quark.solution, smp), 2):.2f} s",
                 ""))
    rows.append(("  support points, held-out error",
                 f"{plane.A.support.size}, {plane.holdout_error:.1e}", ""))
    r = rlmeson.open_propagator(os.path.join(out, "p.nc"))
    rng = np.random.default_rng(1)
    q2 = np.geomspace(1e-3, 30.0, 10**6)
    z = rng.uniform(-1, 1, q2.size)
    m = 0.5 * 1.0
    pts = q2 - m * m + 2j * m * np.sqrt(q2) * z            # inside the exported parabola
    near = np.mean(np.abs(pts) <= r.window_gev2)
    rows.append((f"reader, 10^6 complex points ({100 * near:.0f}% through the approximant)",
                 f"{best_of(lambda: r.dressing(pts), 2):.2f} s", "≤ 1 s"))
    rows.append(("reader, 10^6 complex points all within the window",
                 f"{best_of(lambda: r.dressing(pts[np.abs(pts) <= r.window_gev2][:10**6]), 2):.2f} s", ""))
    real = np.geomspace(1e-3, 1e3, 10**6)
    rows.append(("reader, 10^6 real points", f"{best_of(lambda: r.dressing(real), 2):.2f} s", ""))
    t0 = time.perf_counter()
    loc = quarkplane.locate(quark.solution)
    rows.append(("singularity search (locate: kernel, samples, AAA, check)", f"{time.perf_counter() - t0:.2f} s", ""))
    rows.append(("peak memory", f"{peak_rss_mb():.0f} MB", ""))
    print(table("rlmeson: the quark on the complex plane (Maris–Tandy, translation-invariant)", rows,
                ("task", "measured", "target")))
    if loc.nearest is not None:
        print(f"nearest singularity {loc.nearest.s_gev2:.5f} GeV^2, M_max {loc.nearest.max_mass():.4f} GeV, "
              f"check {loc.check:.2g}")


if __name__ == "__main__":
    main()

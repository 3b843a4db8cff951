"""Timings and convergence of the meson stage (prints tables; no assertions).

    python benchmarks/bench_meson.py [--regularisation hard-cutoff|translation-invariant]
    python benchmarks/bench_meson.py --strange     # the kaon rows only

Targets (2-core machine): pion mass + f_π converged to 1e-4 relative ≤ 2 s after JIT
warm-up and ≤ 10 s cold; ρ ≤ 5 s after warm-up; peak memory ≤ 2 GB; the measured
exponent of kernel-build time against the number of grid points (expect ≈ 2); kaon
(configs/mt-strange*.toml) mass + f_K ≤ 3 s warm, its η spread ≤ 2× that.
"""

from __future__ import annotations

import argparse
import math
import os
import sys
import tempfile
import time

sys.path.insert(0, os.path.dirname(__file__))
from _common import fresh_process, peak_rss_mb, table  # noqa: E402

CFG = """
name = "bench"
[kernel]
regularisation = "{reg}"
[quarks.l]
current_mass_gev = 0.00374
[[mesons]]
name = "pion"
channel = "pseudoscalar"
[[mesons]]
name = "rho"
channel = "vector"
[[mesons]]
name = "sigma"
channel = "scalar"
[[mesons]]
name = "a1"
channel = "axial-vector"
[[mesons]]
name = "b1"
channel = "pseudovector"
"""

COLD = """
import json, time
t0 = time.perf_counter()
import rlmeson
from rlmeson.io import config
from rlmeson.workflows import pipeline
cfg = config.parse('''{cfg}''')
q = {{"l": pipeline.solve_quark(cfg, "l")}}
t1 = time.perf_counter()
core = pipeline.bound_state(cfg, cfg.mesons[0], q, pipeline.bse_grid_of(cfg))
t2 = time.perf_counter()
print(json.dumps({{"quark": t1 - t0, "pion": t2 - t1, "mass": core.mass_gev}}))
"""


def _meson(cfg, quarks, which, grid):
    from rlmeson.workflows import pipeline

    t0 = time.perf_counter()
    core = pipeline.bound_state(cfg, cfg.mesons[which], quarks, grid)
    return core, time.perf_counter() - t0


def kaon_rows(config_name: str) -> list[tuple]:
    """The kaon of a shipped strange-sector config (its m_s fitted to m_K): mass + f_K
    warm (JIT compiled, kernel built, then reused), and the η spread's extra cost (the
    mass found again at a second momentum partition).  Target: ≤ 3 s; spread ≤ 2×."""
    from pathlib import Path

    from rlmeson.io import config
    from rlmeson.model import ladder
    from rlmeson.workflows import pipeline

    cfg = config.load(Path(__file__).resolve().parents[1] / "configs" / f"{config_name}.toml")
    quarks = {f.name: pipeline.solve_quark(cfg, f.name) for f in cfg.flavours}
    kaon = next(m for m in cfg.mesons if m.name == "kaon")
    grid = pipeline.bse_grid_of(cfg)

    def once(spread):
        t0 = time.perf_counter()
        core = pipeline.bound_state(cfg, kaon, quarks, grid, eta_spread=spread)
        return core, time.perf_counter() - t0

    once(True)                                               # JIT warm-up
    ladder._MOMENT_CACHE.clear()
    core, t_build = once(False)
    core, t_kaon = once(False)
    core2, t_both = once(True)
    f = core.normalised.decay_constant / math.sqrt(2)
    return [(config_name, f"{core.mass_gev:.7f}", f"{f:.7f}", f"{t_build:.2f}", f"{t_kaon:.2f}",
             f"{t_both - t_kaon:.2f}", f"{(t_both - t_kaon) / t_kaon:.2f}",
             f"{core2.eta_spread_gev / core2.mass_gev:.1e}")]


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--regularisation", default="translation-invariant")
    ap.add_argument("--strange", action="store_true", help="only the kaon rows (mt-strange, mt-strange-ti)")
    args = ap.parse_args()
    reg = args.regularisation
    if args.strange:
        # one BLAS thread, as `rlmeson run` sets it: ARPACK's orthogonalisation with threaded
        # BLAS competing with JAX's pool ran 5x slower on two busy cores (measured: kaon 5.9 s
        # against 1.2 s warm)
        for var in ("OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
            os.environ.setdefault(var, "1")
        import rlmeson  # noqa: F401

        rows = kaon_rows("mt-strange") + kaon_rows("mt-strange-ti")
        print(table("kaon, default grid (seconds; f in the 92 MeV convention)", rows,
                    ("config", "M_K [GeV]", "f_K [GeV]", "warm incl. kernel build", "warm, kernel reused",
                     "eta spread extra", "spread / kaon", "relative spread")))
        print(f"\npeak memory of this process: {peak_rss_mb():.0f} MB")
        return

    import rlmeson  # noqa: F401
    from rlmeson.meson import bse
    from rlmeson.io import config
    from rlmeson.model import ladder
    from rlmeson.workflows import pipeline

    cfg = config.parse(CFG.format(reg=reg))
    quarks = {"l": pipeline.solve_quark(cfg, "l")}
    grid = pipeline.bse_grid_of(cfg)

    cache = tempfile.mkdtemp(prefix="rlmeson-jax-")
    cold1 = fresh_process(COLD.format(cfg=CFG.format(reg=reg)), cache)
    cold2 = fresh_process(COLD.format(cfg=CFG.format(reg=reg)), cache)

    rows = []
    # the positive-parity channels (scalar, axial-vector, pseudovector) through the same
    # code path: target ≤ 2× the ρ's time each
    for which, name in ((0, "pion"), (1, "rho"), (2, "sigma"), (3, "a1"), (4, "b1")):
        _meson(cfg, quarks, which, grid)                     # JIT warm-up (and kernel moments)
        ladder._MOMENT_CACHE.clear()
        core, t_build = _meson(cfg, quarks, which, grid)     # warm, kernel built from scratch
        core, t_cached = _meson(cfg, quarks, which, grid)    # warm, kernel moments reused
        n = core.normalised
        f92 = "—" if n.decay_constant is None else f"{n.decay_constant / math.sqrt(2):.7f}"
        rows.append((name, f"{core.mass_gev:.7f}", f92, core.evaluations,
                     f"{t_build:.2f}", f"{t_cached:.2f}"))
    print(table(f"bound states, {reg}, default grid (seconds; f in the 92 MeV convention)", rows,
                ("meson", "M [GeV]", "f [GeV]", "BSE evaluations", "warm incl. kernel build", "warm, kernel reused")))
    print(f"cold pion in a fresh process (JIT cache empty, then reused): {cold1['pion']:.2f} s, {cold2['pion']:.2f} s "
          f"(+ quark stage {cold1['quark']:.2f} s, {cold2['quark']:.2f} s including imports)")

    # convergence: default against finer and coarser grids
    d = grid
    variants = [("coarser (error-bar grid)", d.coarser()), ("default", d),
                ("finer radial ×0.6", bse.BSEGrid(d.q2_min, tuple(0.6 * w for w in d.widths), d.order, d.n_z)),
                ("finer z (n_z + 4)", bse.BSEGrid(d.q2_min, d.widths, d.order, d.n_z + 4)),
                ("finer angles (×2)", bse.BSEGrid(d.q2_min, d.widths, d.order, d.n_z, 2 * d.angular_half))]
    res = {}
    for label, g in variants:
        res[label] = [_meson(cfg, quarks, w, g)[0] for w in (0, 1)]
    ref = res["finer radial ×0.6"]
    rows = []
    for label, cores in res.items():
        rel = [c.mass_gev / r.mass_gev - 1 for c, r in zip(cores, ref)]
        relf = [c.normalised.decay_constant / r.normalised.decay_constant - 1 for c, r in zip(cores, ref)]
        rows.append((label, f"{rel[0]:+.1e}", f"{relf[0]:+.1e}", f"{rel[1]:+.1e}", f"{relf[1]:+.1e}"))
    print()
    print(table("convergence: relative change against the finer radial grid", rows,
                ("grid", "m_pi", "f_pi", "m_rho", "f_rho")))

    # kernel build time against grid size
    kern = pipeline.kernel_of(cfg)
    from rlmeson.model.channels import PSEUDOSCALAR

    pts = []
    for scale in (2.0, 1.4, 1.0, 0.7, 0.5):
        g = bse.BSEGrid(d.q2_min, tuple(scale * w for w in d.widths), d.order, d.n_z)
        lg = ladder.LadderGrid(g.radial(kern.q2_max), g.n_z)
        ladder._MOMENT_CACHE.clear()
        ladder.build(kern, PSEUDOSCALAR, lg)                 # compile this shape
        ladder._MOMENT_CACHE.clear()
        t0 = time.perf_counter()
        ladder.build(kern, PSEUDOSCALAR, lg)
        pts.append((lg.radial.size, time.perf_counter() - t0))
    import numpy as np

    x, y = np.log([p[0] for p in pts]), np.log([p[1] for p in pts])
    slope = np.polyfit(x, y, 1)[0]
    print()
    print(table("pseudoscalar kernel build against radial nodes N", [(n, f"{t:.3f}") for n, t in pts],
                ("N", "seconds")))
    print(f"measured exponent d ln t / d ln N = {slope:.2f}")
    print(f"\npeak memory of this process: {peak_rss_mb():.0f} MB")


if __name__ == "__main__":
    main()

"""The propagator's nearest complex singularities and the largest accessible bound-state mass.

S(p) is singular where D(s) = s A(s)² + B(s)² vanishes (s = p²).  A bound state of mass
M with momentum fraction η probes q₊² = q² − η²M² + 2iηM q z, which fills a parabola
with vertex −η²M²; a point s₀ = a + ib lies inside it iff a ≥ b²/(4η²M²) − η²M².  The
largest M whose parabola leaves s₀ outside is therefore

    M_max(η) = |Im √s₀| / η      (the point lies on the boundary),

minimised over the singularities found.  The search evaluates D with the direct
continuation (``GapSolution.dressing`` at complex s): a scan of log|D| over a region
scaled by M(0)², then two-dimensional Newton refinement of each local minimum.  That
continuation is not exactly analytic for interactions with g(0) ≠ 0 (see
``propagators``), so s₀ carries a relative uncertainty of order 1e-3; M_max is a bound
for the search, not an observable.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .gap import GapSolution


@dataclass(frozen=True)
class Singularity:
    s_gev2: complex            # location in p² (upper half plane; its conjugate is one too)
    residual: float            # |D(s₀)| / (|s₀| A² + |B|²) at the refined point

    def max_mass(self, eta: float = 0.5) -> float:
        return float(abs(np.sqrt(complex(self.s_gev2)).imag) / eta)


def _d(sol: GapSolution, s):
    """D(s) and its scale; non-finite values (the Gaussians overflow far out on the
    timelike side for heavy quarks) are returned as inf so that the search skips them."""
    with np.errstate(all="ignore"):
        a, b = sol.dressing(np.asarray(s, dtype=complex))
        d = s * a * a + b * b
        nrm = np.abs(s) * np.abs(a) ** 2 + np.abs(b) ** 2
    bad = ~(np.isfinite(d) & np.isfinite(nrm))
    return np.where(bad, np.inf, d), np.where(bad, 1.0, nrm)


def _refine(sol, s0, steps=12, tol=1e-10):
    s = complex(s0)
    scale = max(abs(s), 1e-3)
    for _ in range(steps):
        h = 1e-6 * scale
        d, nrm = _d(sol, np.array([s, s + h, s + 1j * h]))
        f0 = np.array([d[0].real, d[0].imag])
        jac = np.array([[(d[1] - d[0]).real / h, (d[2] - d[0]).real / h],
                        [(d[1] - d[0]).imag / h, (d[2] - d[0]).imag / h]])
        try:
            dx = np.linalg.solve(jac, -f0)
        except np.linalg.LinAlgError:
            break
        step = complex(dx[0], dx[1])
        if abs(step) > 0.5 * scale:
            step *= 0.5 * scale / abs(step)
        s = complex(s.real + step.real, abs(s.imag + step.imag))
        if abs(step) < tol * scale:
            break
    d, nrm = _d(sol, np.array([s]))
    return Singularity(s_gev2=s, residual=float(abs(d[0]) / nrm[0]))


def find(sol: GapSolution, n_scan: int = 14, keep: int = 3) -> list[Singularity]:
    """Singularities of S in the upper half of the s plane near the origin, nearest first
    (in the sense of M_max)."""
    m0 = abs(sol.mass_function_at_zero())
    scale = max(m0 * m0, 1e-4)
    re = np.linspace(-3.0, 0.5, n_scan) * scale
    im = np.linspace(0.02, 3.0, n_scan) * scale
    grid = re[:, None] + 1j * im[None, :]
    d, nrm = _d(sol, grid.ravel())
    val = np.log(np.abs(d) / nrm).reshape(grid.shape)
    cands = []
    for i in range(n_scan):
        for j in range(n_scan):
            nb = val[max(0, i - 1):i + 2, max(0, j - 1):j + 2]
            if val[i, j] <= nb.min():
                cands.append((val[i, j], grid[i, j]))
    cands.sort(key=lambda c: c[0])
    found: list[Singularity] = []
    for _, s0 in cands[: 2 * keep]:
        sing = _refine(sol, s0)
        if sing.residual < 1e-8 and all(abs(sing.s_gev2 - f.s_gev2) > 1e-6 * scale for f in found):
            found.append(sing)
    found.sort(key=lambda f: f.max_mass())
    return found[:keep]


def max_bound_state_mass(sol: GapSolution, eta: float = 0.5) -> tuple[float, Singularity | None]:
    """(M_max, the singularity that sets it); M_max = inf when none is found."""
    sings = find(sol)
    if not sings:
        return float("inf"), None
    best = min(sings, key=lambda s: s.max_mass(eta))
    return best.max_mass(eta), best


#: How far beyond M_max the check solves.  Just beyond, so that s₀ lies inside the
#: parabola; not further, because once the parabola encloses a zero of S⁻¹ the shifted
#: loop runs over the singularity and its quadrature degrades: measured for Maris–Tandy
#: (hard cutoff) and Qin–Chang at their analytic zeros, |D|/norm = 0.003–0.01 at
#: 1.003–1.01 M_max but 0.03–0.16 at 1.02 and 0.1–0.2 at 1.05 (and the covariance
#: residual of the shifted solve grows alike, 5e-3 → 2e-2 → 0.1).
CHECK_BEYOND = 1.01


def check_with_shifted(sol: GapSolution, sing: Singularity, eta: float = 0.5, n_z: int = 16,
                       widths=None, solver=None) -> float | None:
    """|D(s₀)| / (|s₀| |A|² + |B|²) with A, B from the *shifted* (analytic) continuation,
    solved at a mass just above M_max (``CHECK_BEYOND``) so that s₀ lies inside its parabola.

    Small (≲ 0.05) confirms the singularity found with the direct continuation; of order
    one means the direct continuation produced it (possible when g(0) ≠ 0) and the true
    propagator is regular there.  None when the shifted solve does not converge there."""
    from ..numerics.grids import BSEGrid
    from ..model import ladder
    from . import routed

    m = CHECK_BEYOND * sing.max_mass(eta)
    if solver is None:
        grid = BSEGrid() if widths is None else BSEGrid(widths=widths)
        solver = routed.ShiftedSolver(sol, ladder.LadderGrid(grid.radial(sol.kernel.q2_max), n_z))
    lg = solver.grid
    # reach m by continuation from 0.7 m, where the covariant Taylor start is good
    try:
        sp = solver.solve(m, eta, guess=solver.solve(0.7 * m, eta))
    except routed.ShiftedNotConverged:
        return None
    s0 = complex(sing.s_gev2)
    q2 = s0.real + (eta * m) ** 2
    z = s0.imag / (2.0 * eta * m * np.sqrt(q2))
    a, b = sp.dressing_at(lg.radial, np.array([q2]), np.array([z]))
    a, b = complex(a[0]), complex(b[0])
    return float(abs(s0 * a * a + b * b) / (abs(s0) * abs(a) ** 2 + abs(b) ** 2))

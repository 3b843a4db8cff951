"""The renormalised rainbow gap equation on the real axis (Landau gauge).

    A(p²) = Z₂ + Z₂² Σ_A(p²),        B(p²) = Z₄ m^ζ + Z₂² Σ_B(p²)

(the Z₂² is dropped when the kernel does not carry it).  Renormalisation at ζ:
A(ζ²) = 1 fixes Z₂; B(ζ²) = m^ζ fixes Z₄ m^ζ = m^ζ − Z₂² Σ_B(ζ²) for m^ζ > 0.  The
self-energies at ζ² are integrated there directly (never interpolated).

Chiral limit (m^ζ = 0): Z₄ m^ζ = 0 exactly, so B = Z₂² Σ_B and B(ζ²) is the small
dynamical mass at ζ rather than 0.  The solve starts from B ≠ 0, so Newton lands on the
symmetry-breaking (Nambu) solution and not on B ≡ 0.  Z₄ for the chiral condensate is
the m → 0 limit of d(Z₄ m^ζ)/dm^ζ along the massive solutions, obtained exactly as
1/∂B(ζ²)/∂μ at μ ≡ Z₄ m^ζ = 0 by one linear solve with the converged Newton Jacobian
(implicit differentiation); Z_m = Z₄/Z₂.

Unknowns are A, B on the radial nodes and Z₂; the Jacobian is JAX's forward-mode one, so
Newton converges quadratically to the residual floor.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field
from functools import partial

import numpy as np

from ..numerics import quadrature as qd
from . import selfenergy as se
from ..numerics._jax import jax, jnp
from ..numerics.grids import GapGrid  # noqa: F401  (defined without JAX, for the config)
from ..model.kernel import N_C, Kernel, one_loop_condensate_factor

#: The smallest momenta at which M is evaluated directly, for M(0) by extrapolation.
M0_PROBES_GEV2 = (1e-4, 2e-4)


@dataclass(frozen=True)
class GapSolution:
    """A converged real-axis solution with everything needed to evaluate S elsewhere."""

    kernel: Kernel = field(repr=False)
    grid: GapGrid
    radial: qd.RadialGrid = field(repr=False)
    mass_gev: float
    zeta_gev: float
    q2: np.ndarray = field(repr=False)
    A: np.ndarray = field(repr=False)
    B: np.ndarray = field(repr=False)
    z2: float
    z4m: float                 # Z₄ m^ζ (the bare-mass term in the B equation)
    z4: float                  # Z₄ (for m = 0: from the linear response, see module doc)
    iterations: int
    residuals: tuple[float, ...]
    seconds: float
    notes: tuple[str, ...] = ()

    @property
    def chiral(self) -> bool:
        return self.mass_gev == 0.0

    @property
    def zm(self) -> float:
        return self.z4 / self.z2

    @property
    def M(self) -> np.ndarray:
        return self.B / self.A

    @property
    def Z(self) -> np.ndarray:
        return 1.0 / self.A

    @property
    def residual(self) -> float:
        return self.residuals[-1]

    @property
    def u_v(self) -> np.ndarray:
        return self.q2 * self.A / (self.q2 * self.A**2 + self.B**2)

    @property
    def u_s(self) -> np.ndarray:
        return self.q2 * self.B / (self.q2 * self.A**2 + self.B**2)

    def dressing(self, p2, **kw) -> tuple[np.ndarray, np.ndarray]:
        """A(p²), B(p²) by direct evaluation of the self-energy at p² (real or complex)."""
        opts = dict(n_half=self.grid.angular_half, order=self.grid.fine_order)
        opts.update(kw)
        ra, rb = se.rows(self.kernel, self.radial, p2, **opts)
        zf = float(self.kernel.z2_factor(self.z2))
        a = self.z2 + zf * np.asarray(ra @ self.u_v)
        b = self.z4m + zf * np.asarray(rb @ self.u_s)
        return a, b

    def mass_function_at_zero(self) -> float:
        """M(0) by linear extrapolation of directly evaluated M at p² = 1e-4, 2e-4 GeV²
        (M is analytic at p² = 0; the O(p⁴) remainder is below 1e-8 GeV)."""
        a, b = self.dressing(np.array(M0_PROBES_GEV2))
        m = b / a
        return float(2.0 * m[0] - m[1])

    def condensate_cbrt(self, scale_gev: float | None = None) -> float:
        """(−⟨q̄q⟩)^{1/3} in GeV at ζ (or evolved at one loop to ``scale_gev``), from
        −⟨q̄q⟩ = Z₄ N_c ∫_q tr S(q) over the regularised domain.  Meaningful in the chiral
        limit."""
        # ∫_q tr S = 4 ∫ d⁴q/(2π)⁴ σ_S = 4 · (2π²/(2π)⁴) ∫ dt q⁴/2 σ_S
        w = self.radial.t_weights
        integral = 4.0 * (2.0 * math.pi**2) / (2.0 * math.pi) ** 4 * np.sum(w * self.q2 * self.u_s / 2.0)
        val = self.z4 * N_C * integral
        if scale_gev is not None:
            lam = float(self.kernel.params.get("lambda_qcd_gev", 0.234))
            nf = float(self.kernel.params.get("flavours", 4.0))
            val = val * one_loop_condensate_factor(self.zeta_gev, scale_gev, lam, nf)
        return float(np.sign(val) * abs(val) ** (1.0 / 3.0))


def _targets(radial: qd.RadialGrid, zeta: float) -> np.ndarray:
    return np.concatenate([radial.q2, [zeta * zeta]])


@partial(jax.jit, static_argnames=("z2sq", "chiral"))
def _residual(x, ra, rb, q2, mass, z2sq: bool, chiral: bool, mu):
    n = q2.shape[0]
    A, B, z2 = x[:n], x[n:2 * n], x[2 * n]
    den = q2 * A * A + B * B
    uv = q2 * A / den
    us = q2 * B / den
    sa = ra @ uv
    sb = rb @ us
    zf = z2 * z2 if z2sq else 1.0
    fa = A - z2 - zf * sa[:n]
    fz = 1.0 - z2 - zf * sa[n]
    if chiral:
        fb = B - mu - zf * sb[:n]
    else:
        fb = B - mass - zf * (sb[:n] - sb[n])
    return jnp.concatenate([fa, fb, jnp.atleast_1d(fz)])


_jac = jax.jit(jax.jacfwd(_residual), static_argnames=("z2sq", "chiral"))


def _relative(r, x):
    """max over nodes of |F_A|/|A| and |F_B|/|B| (and |F_Z|)."""
    n = (x.size - 1) // 2
    ra = np.abs(r[:n]) / np.abs(x[:n])
    rb = np.abs(r[n:2 * n]) / np.maximum(np.abs(x[n:2 * n]), 1e-300)
    return float(max(ra.max(), rb.max(), abs(r[-1])))


def _newton(x, args, kw, tol, max_iter):
    """Damped Newton: backtracking on the absolute residual (a smooth merit), stopping on
    the node-by-node relative residual (what is reported)."""
    r = np.asarray(_residual(x, *args, **kw))
    merit = float(np.max(np.abs(r)))
    hist = [_relative(r, x)]
    it = 0
    while hist[-1] > tol and it < max_iter:
        J = np.asarray(_jac(x, *args, **kw))
        dx = np.linalg.solve(J, -r)
        lam = 1.0
        while True:
            xn = x + lam * dx
            rn = np.asarray(_residual(xn, *args, **kw)) if np.all(np.isfinite(xn)) else None
            if rn is not None and np.all(np.isfinite(rn)):
                mn = float(np.max(np.abs(rn)))
                if mn < (1 - 0.25 * lam) * merit or lam < 1e-3 or mn < 1e-14:
                    break
            lam *= 0.5
            if lam < 1e-4:
                break
        if rn is None:
            break
        x, r, merit = xn, rn, mn
        hist.append(_relative(r, x))
        it += 1
    return x, it, hist


def solve(kernel: Kernel, mass_gev: float, zeta_gev: float, grid: GapGrid = GapGrid(), *,
          tol: float = 1e-12, max_iter: int = 60, guess: GapSolution | None = None) -> GapSolution:
    """Solve the gap equation; raises RuntimeError when Newton does not converge."""
    t0 = time.perf_counter()
    radial = grid.radial(kernel.q2_max)
    q2 = radial.q2
    n = q2.size
    ra, rb = se.rows(kernel, radial, _targets(radial, zeta_gev), n_half=grid.angular_half,
                     order=grid.fine_order)
    chiral = mass_gev == 0.0
    if guess is not None and guess.q2.size == n:
        x0 = np.concatenate([guess.A, guess.B, [guess.z2]])
    else:
        b0 = mass_gev + 0.5 / (1.0 + q2 / 0.6)
        x0 = np.concatenate([np.ones(n), b0, [1.0]])
    args = (ra, rb, jnp.asarray(q2), mass_gev)
    kw = dict(z2sq=kernel.z2_squared, chiral=chiral, mu=0.0)
    x, it, hist = _newton(x0, args, kw, tol, max_iter)
    if not hist[-1] <= tol * 10:
        raise RuntimeError(f"gap equation did not converge: residual {hist[-1]:.3e} after {it} Newton steps")
    A, B, z2 = x[:n], x[n:2 * n], float(x[2 * n])
    zf = z2 * z2 if kernel.z2_squared else 1.0
    if chiral and np.max(np.abs(B)) < 1e-8:
        raise RuntimeError("the chiral-limit gap equation has only the Wigner solution B = 0 here: the "
                           "interaction is too weak to break chiral symmetry dynamically")
    if chiral:
        z4m = 0.0
        z4 = _chiral_z4(x, args, kw, rb, q2, zf, kernel.z2_squared)
    else:
        den = q2 * A * A + B * B
        sbz = float(rb[n] @ (q2 * B / den))
        z4m = mass_gev - zf * sbz
        z4 = z4m / mass_gev
    if not z2 > 0:
        raise RuntimeError(f"renormalisation at zeta = {zeta_gev:g} GeV gives Z2 = {z2:.4g} <= 0: "
                           "choose zeta in the perturbative region (a few GeV and above)")
    notes = ()
    if z4 <= 0:
        notes = (f"Z4 = {z4:.4g} <= 0: at zeta = {zeta_gev:g} GeV the dynamical mass exceeds the current "
                 "mass, so B(zeta^2) = m is not a perturbative condition there (a larger zeta or mass fixes it)",)
    return GapSolution(kernel=kernel, grid=grid, radial=radial, mass_gev=float(mass_gev),
                       zeta_gev=float(zeta_gev), q2=q2, A=A, B=B, z2=z2, z4m=float(z4m), z4=float(z4),
                       iterations=it, residuals=tuple(hist), seconds=time.perf_counter() - t0,
                       notes=notes)


def _chiral_z4(x, args, kw, rb, q2, zf, z2sq):
    """Z₄ = 1/(∂B(ζ²)/∂μ) at μ = 0, by implicit differentiation of the converged solve."""
    n = q2.size
    J = np.asarray(_jac(x, *args, **kw))
    dfdmu = np.zeros_like(x)
    dfdmu[n:2 * n] = -1.0
    dx = np.linalg.solve(J, -dfdmu)
    A, B, z2 = x[:n], x[n:2 * n], x[2 * n]
    dA, dB, dz2 = dx[:n], dx[n:2 * n], dx[2 * n]
    den = q2 * A * A + B * B
    us = q2 * B / den
    dus = q2 * dB / den - q2 * B * (2 * q2 * A * dA + 2 * B * dB) / den**2
    sb = float(rb[n] @ us)
    dsb = float(rb[n] @ dus)
    dzf = 2 * z2 * dz2 if z2sq else 0.0
    dbz = 1.0 + zf * dsb + dzf * sb
    return 1.0 / dbz

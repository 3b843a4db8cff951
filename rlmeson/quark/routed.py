"""The quark propagator at shifted momenta x = q + ηP by solving the gap equation there,
with the gluon momentum kept real ("quark-routed" continuation).

    S⁻¹(x) = Z₂ iγ·x + Z₄ m^ζ + Z₂² C_F ∫_{q'} g((q − q')²) T_μν γ_μ S(q' + ηP) γ_ν − B.T.

The unknown is S⁻¹ in the general form X₀ + X₁ γ·q_T + X₂ γ·P̂ + X₃ γ·q_T γ·P̂ on the
(q, z) nodes of a ladder grid (no covariance assumed), so that covariance — one A for
the γ·q_T and γ·P̂ parts, X₃ = 0, equal A and B at equal x² — is a result to check, not
an input.  Z₂ and Z₄ m^ζ are those of the real-axis solution.  Solved by Newton's method
with GMRES on the exact JAX linearisation, warm-started from the real-axis solution (or
from a previous mass).

η is any real fraction: the antiquark line of a bound state, q − (1−η)P, is the family
with η → −(1−η) (equal, to rounding, to the reflection x₄ → −x₄ of the solve at +(1−η);
``propagators.reflected``).

B.T. is the boundary term that a hard cutoff on the loop momentum leaves when the loop is
shifted by c = ηP: iγ·c δ with δ = Z₂² 3 C_F g(Λ²) Λ² / (32π² A(Λ²)) (leading order in
c/Λ).  It is subtracted by default; with the translation-invariant regularisation it is
absent.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field

import numpy as np
import scipy.sparse.linalg as spla

from ..model import ladder
from ..model.channels import QUARK
from ..numerics.dirac import rest_frame_vectors
from .gap import GapSolution
from ..numerics._jax import jax, jnp
from ..model.kernel import C_F


class ShiftedNotConverged(RuntimeError):
    """The shifted gap equation did not reach its tolerance at this mass."""

    def __init__(self, mass: float, residual: float):
        super().__init__(f"shifted gap equation did not converge at M = {mass:.6g} GeV "
                         f"(relative residual {residual:.2e})")
        self.mass_gev = mass
        self.residual = residual


def boundary_delta(sol: GapSolution) -> float:
    """δ of the hard-cutoff surface term (0 for translation-invariant regularisation)."""
    k = sol.kernel
    if not k.hard:
        return 0.0
    lam2 = k.cutoff_gev2
    a_lam = float(np.real(sol.dressing(np.array([lam2]))[0][0]))
    g = float(np.real(k.g(np.array([lam2]))[0]))
    zf = float(k.z2_factor(sol.z2))
    return zf * 3.0 * C_F * g * lam2 / (32.0 * math.pi**2 * a_lam)


@dataclass(frozen=True)
class ShiftedPropagator:
    """S⁻¹ coefficients X[c, k, q] at x = q + ηP on the nodes, with diagnostics."""

    mass_gev: float
    eta: float
    q2: np.ndarray = field(repr=False)
    z: np.ndarray = field(repr=False)
    X: np.ndarray = field(repr=False)
    iterations: int
    residuals: tuple[float, ...]
    seconds: float
    subtracted_delta: float

    @property
    def x2(self) -> np.ndarray:
        return shifted_x2(self.q2, self.z, self.mass_gev, self.eta)  # (k, q)

    @property
    def B(self):
        return self.X[0]

    @property
    def A_transverse(self):
        return self.X[1] / (1j * np.sqrt(self.q2)[None, :])

    @property
    def A_longitudinal(self):
        q = np.sqrt(self.q2)[None, :]
        return self.X[2] / (1j * q * self.z[:, None] - self.eta * self.mass_gev)

    @property
    def tensor_part(self):
        return self.X[3]

    def dressing_at(self, radial, q2, z) -> tuple[np.ndarray, np.ndarray]:
        """A (from the γ·q_T part) and B at off-node points (q², z), by Chebyshev
        interpolation in z and the panels' Lagrange interpolation in ln q²."""
        from ..numerics import quadrature as qd

        q2, z = np.broadcast_arrays(np.asarray(q2, float), np.asarray(z, float))
        n = self.z.size
        _, w = qd.chebyshev_u_nodes(n)
        u_nodes = qd.chebyshev_u(n - 1, self.z)  # (k, m)
        out = []
        for f in (self.A_transverse, self.B):  # (k, q)
            mom = (2.0 / np.pi) * np.einsum("k,km,kq->mq", w, u_nodes, f)  # (m, q)
            radial_vals = radial.interpolate(mom, np.log(q2.ravel()))  # (m, P)
            uz = qd.chebyshev_u(n - 1, z.ravel())  # (P, m)
            out.append(np.einsum("pm,mp->p", uz, radial_vals).reshape(q2.shape))
        return out[0], out[1]

    def coefficients_of_S(self) -> np.ndarray:
        """Coefficients s[c, k, q] of S = (S⁻¹)⁻¹ in the same basis."""
        return np.asarray(_invert(jnp.asarray(self.X), *_basis_arrays(self.z)))


def _basis_arrays(z):
    qh, ph = rest_frame_vectors(z)
    t = QUARK.basis(qh, ph)[:, :, 0]  # (k, c, 4, 4)
    ginv = np.linalg.inv(QUARK.gram(qh, ph))  # (k, c, c)
    return jnp.asarray(t), jnp.asarray(ginv)


@jax.jit
def _invert(X, t, ginv):
    m = jnp.einsum("ckq,kcab->kqab", X, t)
    s = jnp.linalg.inv(m)
    rhs = jnp.einsum("kcab,kqba->kcq", t, s)
    return jnp.einsum("kdc,kcq->dkq", ginv, rhs)


def shifted_x2(q2, z, mass, eta):
    """x² = q² − η²M² + 2iηM q z on the (z, q) nodes, shape (n_z, n_q)."""
    q = np.sqrt(q2)[None, :]
    m = eta * mass
    return q2[None, :] - m * m + 2j * m * q * np.asarray(z)[:, None]


def covariant_inverse(q2, z, mass, eta, A, B):
    """S⁻¹ = iγ·x A + B in the basis {1, γ·q_T, γ·P̂, γ·q_T γ·P̂} for A, B on the nodes."""
    q = np.sqrt(q2)[None, :]
    zz = np.asarray(z)[:, None]
    return np.stack([B + 0j, 1j * q * A, A * (1j * q * zz - eta * mass), np.zeros_like(B, dtype=complex)])


def _free_part(q2, z, mass, eta, z2, z4m):
    q = np.sqrt(q2)[None, :]
    zz = z[:, None]
    x0 = np.full(zz.shape[:1] + q.shape[1:], z4m, dtype=complex)
    x1 = np.broadcast_to(1j * z2 * q, x0.shape)
    x2 = z2 * (1j * q * zz - eta * mass)
    return np.stack([x0, x1, x2, np.zeros_like(x0)])


class ShiftedSolver:
    """Solves for S at q + ηP on a ladder grid; the kernel is built once per grid."""

    def __init__(self, sol: GapSolution, grid: ladder.LadderGrid, subtract_boundary: bool = True,
                 operator: ladder.LadderOperator | None = None):
        self.sol = sol
        self.grid = grid
        self.op = operator if operator is not None else ladder.build(sol.kernel, QUARK, grid, sign=+1.0)
        self.z = self.op.z
        self.q2 = grid.radial.q2
        self.zf = float(sol.kernel.z2_factor(sol.z2))
        self.delta = boundary_delta(sol) if subtract_boundary else 0.0
        self._t, self._ginv = _basis_arrays(self.z)
        a, b = sol.dressing(self.q2)
        self._a_real = np.asarray(a, dtype=float)
        self._b_real = np.asarray(b, dtype=float)

    def free_part(self, mass, eta) -> np.ndarray:
        """Z₂ iγ·x + Z₄m in coefficients (no self-energy)."""
        return _free_part(self.q2, self.z, mass, eta, self.sol.z2, self.sol.z4m)

    def self_energy(self, X) -> np.ndarray:
        """Z₂² × the shifted loop applied to S = X⁻¹ (no boundary subtraction)."""
        s = _invert(jnp.asarray(X), self._t, self._ginv)
        return self.zf * np.asarray(self.op.apply(s))

    def _guess(self, mass, eta):
        """Covariant start: A, B of the real-axis solution continued to x² by a
        second-order Taylor expansion about q² (derivatives of its interpolant in ln q²)."""
        sol = self.sol
        t = np.log(self.q2)
        h = 1e-3
        vals = {}
        for name, arr in (("A", sol.A), ("B", sol.B)):
            f = sol.radial.interpolate(arr, np.stack([t - h, t, t + h]))
            d1t = (f[2] - f[0]) / (2 * h)
            d2t = (f[2] - 2 * f[1] + f[0]) / h**2
            # d/dq² = e^{−t} d/dt,  d²/d(q²)² = e^{−2t} (d²/dt² − d/dt)
            vals[name] = (f[1], d1t / self.q2, (d2t - d1t) / self.q2**2)
        x2 = shifted_x2(self.q2, self.z, mass, eta)
        dx = x2 - self.q2[None, :]

        def taylor(name):
            f0, f1, f2 = vals[name]
            return f0[None] + f1[None] * dx + 0.5 * f2[None] * dx * dx

        a = np.where(np.isfinite(taylor("A")), taylor("A"), self._a_real[None])
        b = np.where(np.isfinite(taylor("B")), taylor("B"), self._b_real[None])
        return covariant_inverse(self.q2, self.z, mass, eta, a, b)

    def solve(self, mass: float, eta: float, guess=None,
              tol: float = 1e-11, max_iter: int = 30) -> ShiftedPropagator:
        """Solve at mass M.  ``guess``: a ShiftedPropagator, or a list of them at other
        masses (the last two are extrapolated linearly in M² to the new mass)."""
        t0 = time.perf_counter()
        free = _free_part(self.q2, self.z, mass, eta, self.sol.z2, self.sol.z4m)
        bt = np.zeros_like(free)
        bt[2] = eta * mass * self.delta  # −iγ·(ηP)δ = +ηMδ γ·P̂
        rhs = jnp.asarray(free + bt)
        arrays = self.op.arrays
        if isinstance(guess, ShiftedPropagator):
            guess = [guess]
        guess = [g for g in (guess or []) if g.X.shape == free.shape and g.eta == eta]
        candidates = [jnp.asarray(self._guess(mass, eta))]
        if len(guess) >= 2 and guess[-1].mass_gev != guess[-2].mass_gev:
            g0, g1 = guess[-2], guess[-1]
            w = (mass**2 - g1.mass_gev**2) / (g1.mass_gev**2 - g0.mass_gev**2)
            candidates.append(jnp.asarray(g1.X + w * (g1.X - g0.X)))
        elif guess:
            candidates.append(jnp.asarray(guess[-1].X))
        res = lambda x: _residual(x, rhs, self.zf, self._t, self._ginv, arrays)  # noqa: E731
        # start from the better of the covariant Taylor guess and the previous solutions
        X, r = min(((c, res(c)) for c in candidates), key=lambda cr: float(jnp.max(jnp.abs(cr[1]))))
        # residual relative to S⁻¹ node by node (S⁻¹ spans many decades in q)
        node_scale = jnp.sqrt(jnp.sum(jnp.abs(jnp.asarray(free)) ** 2, axis=0))
        rel = lambda r: float(jnp.max(jnp.sqrt(jnp.sum(jnp.abs(r) ** 2, axis=0)) / node_scale))  # noqa: E731
        hist = [rel(r)]
        merit = lambda r: float(jnp.sqrt(jnp.mean(jnp.sum(jnp.abs(r) ** 2, axis=0) / node_scale**2)))  # noqa: E731
        it = 0
        shape = free.shape
        n = int(np.prod(shape))
        w = np.asarray(node_scale)[None].repeat(shape[0], 0).ravel()
        while hist[-1] > tol and it < max_iter:
            op = spla.LinearOperator((n, n), dtype=complex, matvec=lambda v, Xc=X: np.array(
                _jvp(Xc, jnp.asarray(v.reshape(shape)), rhs, self.zf, self._t, self._ginv, arrays)).ravel())
            # inexact Newton; right-preconditioned by the node scale so that GMRES works
            # on relative quantities
            opw = spla.LinearOperator((n, n), dtype=complex,
                                      matvec=lambda u, op=op, w=w: op.matvec(u * w) / w)
            du, info = spla.gmres(opw, -np.asarray(r).ravel() / w, rtol=_forcing(hist[-1], tol),
                                  atol=0.0, restart=80, maxiter=30)
            dx = jnp.asarray((du * w).reshape(shape))
            # backtracking on the mean relative residual: far from the solution a full
            # step can overshoot into the region where S⁻¹ nearly vanishes and Newton
            # wanders; near it the full step is always taken (quadratic convergence)
            m0 = merit(r)
            step = 1.0
            for _ in range(8):
                Xt = X + step * dx
                rt = res(Xt)
                if merit(rt) <= (1.0 - 1e-4 * step) * m0:
                    break
                step *= 0.5
            X, r = Xt, rt
            hist.append(rel(r))
            it += 1
        if not hist[-1] <= tol * 10:
            raise ShiftedNotConverged(mass, hist[-1])
        return ShiftedPropagator(mass_gev=mass, eta=float(eta), q2=self.q2, z=self.z,
                                 X=np.asarray(X), iterations=it, residuals=tuple(hist),
                                 seconds=time.perf_counter() - t0, subtracted_delta=self.delta)


def _forcing(res: float, tol: float) -> float:
    """GMRES tolerance of an inexact Newton step: loose far from the solution, and just
    tight enough near it that one more step reaches ``tol`` (quadratic convergence)."""
    return float(min(0.1, max(0.3 * tol / res, res)))


@jax.jit
def _jvp(X, v, rhs, zf, t, ginv, arrays):
    return jax.jvp(lambda x: _residual(x, rhs, zf, t, ginv, arrays), (X,), (v,))[1]


@jax.jit
def _residual(X, rhs, zf, t, ginv, arrays):
    s = _invert(X, t, ginv)
    sigma = ladder._apply(s, *arrays)
    return X - rhs - zf * sigma

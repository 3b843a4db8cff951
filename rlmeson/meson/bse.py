"""Homogeneous Bethe–Salpeter equation in rainbow-ladder truncation, rest frame.

    λ(P²) Γ(p; P) = −Z₂² C_F ∫_q g(k²) T_μν(k) γ_μ S(q₊) Γ(q; P) S(q₋) γ_ν

Γ is stored by its covariant coefficients F_i on the (z, p) nodes; the wave function
χ = S(q₊) Γ S(q₋) is a local map G₀(M) on those nodes; the kernel K̂ (``ladder``) maps χ
back to Γ and does not depend on M.  λ(P²) are the eigenvalues of Z₂² K̂ G₀(M): the
leading ones by implicitly restarted Arnoldi (ARPACK, warm-started from the previous
eigenvector), or all of them densely as a cross-check.
"""

from __future__ import annotations

import numpy as np
import scipy.linalg
import scipy.sparse.linalg as spla

from ..model import ladder
from ..quark import propagators as props
from ..model.channels import Channel
from ..numerics.dirac import rest_frame_vectors
from ..quark.gap import GapSolution
from ..numerics.grids import CONTINUATIONS, BSEGrid  # noqa: F401  (defined without JAX, for the config)
from ..model.kernel import Kernel
from ..numerics._jax import jax, jnp


@jax.jit
def _bse_matvec(v, g0, zf, arrays):
    chi = jnp.einsum("qkji,ikq->jkq", g0, v)
    return zf * ladder._apply(chi, *arrays)


class BoundState:
    """A channel on a grid with two quark propagators: G₀(M), the operator, eigenvalues."""

    def __init__(self, kernel: Kernel, channel: Channel, grid: BSEGrid, quark1: GapSolution,
                 quark2: GapSolution | None = None, eta: float = 0.5, kernel_operator=None,
                 continuation: str = "shifted", subtract_boundary: bool = True,
                 max_mass: float = float("inf"), quark_operator=None, reflect: bool = True,
                 shifted_tol: float = 1e-11, on_axis: bool = False):
        self.kernel = kernel
        self.channel = channel
        self.grid = grid
        self.quark1 = quark1
        self.quark2 = quark2 if quark2 is not None else quark1
        self.eta = float(eta)
        self.radial = grid.radial(kernel.q2_max)
        lgrid = ladder.LadderGrid(self.radial, grid.n_z, grid.angular_half, grid.fine_order)
        self.ladder = kernel_operator if kernel_operator is not None else ladder.build(kernel, channel, lgrid)
        self.z = self.ladder.z
        self.wz = self.ladder.wz
        self.q2 = self.radial.q2
        zf1 = float(kernel.z2_factor(self.quark1.z2)) ** 0.5
        zf2 = float(kernel.z2_factor(self.quark2.z2)) ** 0.5
        self.z2_factor = zf1 * zf2
        qh, ph = rest_frame_vectors(self.z)
        self._basis = channel.basis(qh, ph)  # (n_z, n_b, n_idx, 4, 4)
        self._ginv = np.linalg.inv(channel.gram(qh, ph))  # (n_z, n_b, n_b)
        self._cache: dict[float, tuple] = {}
        self.max_mass = float(max_mass)
        if continuation not in CONTINUATIONS:
            raise ValueError(f"unknown continuation {continuation!r}")
        self.continuation = continuation
        if not 0.0 < self.eta < 1.0:
            raise ValueError(f"momentum partition eta = {self.eta!r} must lie in (0, 1)")
        self._lgrid = lgrid
        # real quark momenta only (spacelike P with the direct continuation): the
        # real-axis solution interpolated instead of the self-energy evaluated anew
        self._on_axis = bool(on_axis) and continuation == "direct"
        self._subtract_boundary = subtract_boundary
        self.shifted_tol = float(shifted_tol)  # relative residual of the shifted gap solves
        self._shifted = self._shifted2 = None
        self._reflect = False
        self._qop = None
        if continuation == "shifted":
            # flavour 1 at q₊ = q + ηP, flavour 2 at q₋ = q − (1−η)P: each on its own shifted
            # family, the second as the shift by the negative fraction −(1−η).  For one
            # flavour at η = 1/2 the second family is the reflection x₄ → −x₄ of the first
            # (an exact symmetry of the gap equation on a z grid symmetric about 0), so one
            # solve serves both unless ``reflect`` is False.
            from ..model.channels import QUARK
            from ..quark.routed import ShiftedSolver

            qop = quark_operator if quark_operator is not None else ladder.build(kernel, QUARK, lgrid, sign=+1.0)
            self._qop = qop
            self._shifted = ShiftedSolver(self.quark1, lgrid, subtract_boundary, operator=qop)
            self._reflect = bool(reflect) and self.quark2 is self.quark1 and self.eta == 0.5
            if not self._reflect:
                self._shifted2 = (self._shifted if self.quark2 is self.quark1 else
                                  ShiftedSolver(self.quark2, lgrid, subtract_boundary, operator=qop))
            self._last = self._last2 = None
            self._history = []
            self._history2 = []

    @property
    def eta2(self) -> float:
        """The fraction of P carried by the antiquark line: q₋ = q − (1−η)P."""
        return 1.0 - self.eta

    @property
    def shifted_residual(self) -> float | None:
        """The larger final relative residual of the last shifted solves (None: direct)."""
        res = [s.residuals[-1] for s in (getattr(self, "_last", None), getattr(self, "_last2", None))
               if s is not None]
        return max(res) if res else None

    def with_eta(self, eta: float, max_mass: float | None = None) -> "BoundState":
        """The same problem at another momentum partition, sharing the η-independent
        ladder operators (the BSE kernel and the shifted gap kernel)."""
        return BoundState(self.kernel, self.channel, self.grid, self.quark1,
                          None if self.quark2 is self.quark1 else self.quark2, eta=eta,
                          kernel_operator=self.ladder, continuation=self.continuation,
                          subtract_boundary=self._subtract_boundary,
                          max_mass=self.max_mass if max_mass is None else max_mass,
                          quark_operator=self._qop, shifted_tol=self.shifted_tol)

    def spacelike_twin(self) -> "BoundState":
        """The same problem with the direct continuation, sharing the BSE kernel, for
        spacelike P (P² = μ² > 0, called with mass = iμ): the quark momenta q + ηP and
        q − (1−η)P are then real Euclidean vectors, where the direct evaluation of the
        self-energy is the real-axis solution itself, here interpolated on its nodes
        (``propagators.dress_on_axis``: ≤ 5e-6 relative)."""
        return BoundState(self.kernel, self.channel, self.grid, self.quark1,
                          None if self.quark2 is self.quark1 else self.quark2, eta=self.eta,
                          kernel_operator=self.ladder, continuation="direct", on_axis=True)

    @property
    def shape(self):
        return (self.channel.n_basis, self.grid.n_z, self.radial.size)

    @property
    def size(self):
        return int(np.prod(self.shape))

    # -------------------------------------------------------------------------------
    def propagators(self, mass: float):
        """S(q₊), S(q₋) matrices on the grid (cached per mass)."""
        if abs(mass) >= self.max_mass:
            raise ValueError(f"M = {abs(mass):.6g} GeV is beyond M_max = {self.max_mass:.6g} GeV: the "
                             "parabola of quark momenta would enclose a propagator singularity")
        key = mass
        hit = self._cache.get(key)
        if hit is not None:
            return hit
        if self._shifted is not None:
            near = sorted(self._history, key=lambda g: abs(g.mass_gev - mass))[:2][::-1]
            sol = self._shifted.solve(mass, self.eta, guess=near, tol=self.shifted_tol)
            self._last = sol
            self._history = (self._history + [sol])[-6:]
            cp = sol.coefficients_of_S()
            sp = props.matrices_from_coefficients(cp, self.z)
            if self._reflect:
                sol2, cm = None, props.reflected(cp)
            else:
                near2 = sorted(self._history2, key=lambda g: abs(g.mass_gev - mass))[:2][::-1]
                sol2 = self._shifted2.solve(mass, -self.eta2, guess=near2, tol=self.shifted_tol)
                self._last2 = sol2
                self._history2 = (self._history2 + [sol2])[-6:]
                cm = sol2.coefficients_of_S()
            sm = props.matrices_from_coefficients(cm, self.z)
            if len(self._cache) > 16:
                self._cache.clear()
            self._cache[key] = (sp, sm, sol, sol2)
            return self._cache[key]
        plus2, minus2 = props.shifted_momenta(self.q2, self.z, mass, self.eta)
        if self._on_axis:
            dp = props.dress_on_axis(self.quark1, plus2)
            dm = props.dress_on_axis(self.quark2, minus2)
        elif self.quark2 is self.quark1:
            both = props.dress(self.quark1, np.stack([plus2, minus2]))
            dp = props.DressedPoints(both.p2[0], both.A[0], both.B[0])
            dm = props.DressedPoints(both.p2[1], both.A[1], both.B[1])
        else:
            dp = props.dress(self.quark1, plus2)
            dm = props.dress(self.quark2, minus2)
        sp, sm = props.propagator_matrices(self.q2, self.z, mass, self.eta, dp, dm)
        if len(self._cache) > 16:
            self._cache.clear()
        self._cache[key] = (sp, sm, dp, dm)
        return self._cache[key]

    def g0(self, mass: float) -> np.ndarray:
        """G₀[q, k, j, i]: coefficient j of S(q₊) τ_i S(q₋) at node (q, z_k)."""
        sp, sm, _, _ = self.propagators(mass)
        t = self._basis
        chi = np.einsum("qkab,kimbc,qkcd->qkimad", sp, t, sm, optimize=True)
        rhs = np.einsum("kjmab,qkimba->qkji", t, chi, optimize=True)
        return np.einsum("kjJ,qkJi->qkji", self._ginv, rhs, optimize=True)

    def wave_function(self, amp: np.ndarray, mass: float) -> np.ndarray:
        """χ coefficients (n_b, n_z, n_q) for Γ coefficients ``amp`` of the same shape."""
        return np.einsum("qkji,ikq->jkq", self.g0(mass), amp.reshape(self.shape))

    def apply_kernel(self, chi: np.ndarray) -> np.ndarray:
        return self.z2_factor * np.asarray(self.ladder.apply(jnp.asarray(chi.reshape(self.shape))))

    def operator(self, mass: float) -> spla.LinearOperator:
        g0 = jnp.asarray(self.g0(mass))
        zf = self.z2_factor
        shape = self.shape
        arrays = self.ladder.arrays

        def mv(v):
            return np.asarray(_bse_matvec(jnp.asarray(v.reshape(shape)), g0, zf, arrays)).reshape(-1)

        return spla.LinearOperator((self.size, self.size), matvec=mv, dtype=complex)

    def dense(self, mass: float) -> np.ndarray:
        """The full matrix Z₂² K̂ G₀(M) (small grids only)."""
        g0 = self.g0(mass)
        n_b, n_z, n_q = self.shape
        blk = np.zeros((n_b, n_z, n_q, n_b, n_z, n_q), dtype=complex)
        kk, qq = np.meshgrid(np.arange(n_z), np.arange(n_q), indexing="ij")
        for j in range(n_b):
            for i in range(n_b):
                blk[j, kk, qq, i, kk, qq] = g0[qq, kk, j, i]
        return self.z2_factor * (self.ladder.dense() @ blk.reshape(self.size, self.size))

    def eigen(self, mass: float, k: int = 3, v0=None, tol: float = 1e-12):
        """Leading k eigenvalues (by real part) and eigenvectors of the BSE at P² = −M²."""
        op = self.operator(mass)
        if v0 is None:
            v0 = start_vector(op.shape[0], op.dtype)
        ncv = max(2 * k + 6, 8)
        vals, vecs = spla.eigs(op, k=k, which="LR", v0=v0, tol=tol, ncv=ncv, maxiter=5000)
        order = np.argsort(-vals.real)
        return vals[order], vecs[:, order]

    def eigen_dense(self, mass: float):
        vals, vecs = scipy.linalg.eig(self.dense(mass))
        order = np.argsort(-vals.real)
        return vals[order], vecs[:, order]


def start_vector(n: int, dtype=complex) -> np.ndarray:
    """A fixed, generic start vector for ARPACK where no warm start is given.  SciPy's
    default is a fresh unseeded random vector, which made the last digits of a result
    differ from run to run (measured 4e-14 in M, 9e-12 in f between two identical
    processes); with this start a point gives the same bits in every process."""
    return np.random.default_rng(20261202).uniform(-1.0, 1.0, n).astype(dtype)


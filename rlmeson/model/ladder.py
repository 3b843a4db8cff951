"""The ladder kernel in the rest frame, reduced exactly to one-dimensional angular
integrals by the 4D Funk–Hecke theorem.

For a channel with covariants τ_j(q̂, P̂) the kernel acting on χ(q) = Σ_j τ_j χ_j(q², z_q)
gives, projected on τ_i(p̂, P̂) with the trace pairing,

  Π_i(p) = Z₂² ∫_q g(k²) W_ij(p, q) χ_j(q),
  W_ij = sign·C_F Σ_μ tr[τ_i^μ(p̂) γ_α τ_j^μ(q̂) γ_β] T_αβ(k),   k = p − q,

with sign = −1 for the Bethe–Salpeter kernel and +1 for the quark self-energy.  Because
the covariants are polynomials in the unit vectors, W_ij = Q⁰_ij + (p² Qᵖᵖ_ij + pq Qᵖ𝑞_ij
+ q² Q𝑞𝑞_ij)/k², each Q a polynomial in z_p = p̂·P̂, z_q = q̂·P̂ and x = p̂·q̂.  The
coefficients are derived programmatically: explicit 4×4 traces on a tensor grid of
(z_p, z_q, x) points, solved for the monomial coefficients, and verified at random
points (``TraceError`` if the degree is too small).

The angular integral ∫dΩ_q f(x) x^s z_q^b χ_jm U_m(z_q) is then exact: z_q^b U_m is a
finite sum of U_l, and Funk–Hecke gives ∫dΩ_q F(p̂·q̂) U_l(q̂·P̂) = λ_l[F] U_l(z_p) with
λ_l[F] = 4π/(l+1) ∫_0^π sin²θ F(cos θ) U_l(cos θ) dθ.  The sharp structure of g(k²) at
q ≈ p then lives only in 1D integrals over θ (angular rule graded per pair) and over q
(product integration graded per target), which is what makes the kernel accurate at
large momenta.  None of this depends on the bound-state mass: it is built once per grid.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache, partial

import numpy as np

from ..numerics import quadrature as qd
from ..numerics._jax import jax, jnp
from .channels import Channel
from ..numerics.dirac import GAMMA, slash
from .kernel import C_F, Kernel

TERMS = ("0", "pp", "pq", "qq")


class TraceError(RuntimeError):
    pass


def _frame(zp, zq, x):
    """Complex unit vectors with p̂·P̂ = zp, q̂·P̂ = zq, p̂·q̂ = x (bilinear products)."""
    zp, zq, x = np.broadcast_arrays(*(np.asarray(a, dtype=complex) for a in (zp, zq, x)))
    sp = np.sqrt(1.0 - zp * zp)
    w = (x - zp * zq) / sp
    c = np.sqrt(1.0 - zq * zq - w * w)
    zero = np.zeros_like(zp)
    ph = np.stack([zero, zero, zero, zero + 1.0], axis=-1)
    pv = np.stack([zero, zero, sp, zp], axis=-1)
    qv = np.stack([zero, c, w, zq], axis=-1)
    return pv, qv, ph


def kernel_traces(channel: Channel, sign: float, zp, zq, x) -> dict[str, np.ndarray]:
    """The four trace terms of W_ij at points (zp, zq, x): dict term -> (..., n, n)."""
    pv, qv, ph = _frame(zp, zq, x)
    tp = channel.basis(pv, ph)  # (..., n, m, 4, 4)
    tq = channel.basis(qv, ph)
    sp_, sq_ = slash(pv), slash(qv)
    # Σ_α γ_α τ γ_α
    gtg = np.einsum("xab,...jmbc,xcd->...jmad", GAMMA, tq, GAMMA)

    def sandwich(l, r):
        return np.einsum("...ab,...jmbc,...cd->...jmad", l, tq, r)

    def pair(y):
        return np.einsum("...imab,...jmba->...ij", tp, y)

    f = sign * C_F
    return {
        "0": f * pair(gtg),
        "pp": -f * pair(sandwich(sp_, sp_)),
        "pq": f * (pair(sandwich(sp_, sq_)) + pair(sandwich(sq_, sp_))),
        "qq": -f * pair(sandwich(sq_, sq_)),
    }


def _fit(channel, sign, degree):
    d = degree
    nodes = np.cos((np.arange(d + 1) + 0.5) * np.pi / (d + 1))
    zp, zq, x = np.meshgrid(nodes, nodes, nodes, indexing="ij")
    vals = kernel_traces(channel, sign, zp, zq, x)
    vinv = np.linalg.inv(np.polynomial.polynomial.polyvander(nodes, d))
    return {t: np.einsum("ai,bj,sk,ijkxy->xyabs", vinv, vinv, vinv, v) for t, v in vals.items()}


@lru_cache(maxsize=8)
def kernel_polynomials(channel: Channel, sign: float, max_degree: int = 6, tol: float = 1e-11):
    """Monomial coefficients C[term] of shape (n, n, d+1, d+1, d+1) over (z_p^a, z_q^b, x^s).

    A first fit at ``max_degree`` finds the true degree (coefficients above it are pure
    rounding noise), a second fit at that degree gives clean coefficients, which are then
    verified against direct traces at random points.
    """
    first = _fit(channel, sign, max_degree)
    scale = max(float(np.max(np.abs(c))) for c in first.values())
    deg = 0
    for c in first.values():
        big = np.argwhere(np.abs(c) > 1e-7 * scale)
        if big.size:
            deg = max(deg, int(big[:, 2:].max()))
    if deg >= max_degree:
        raise TraceError(f"{channel.name}: kernel traces need degree > {max_degree}")
    out = _fit(channel, sign, deg)
    rng = np.random.default_rng(1234)
    pts = rng.uniform(-0.95, 0.95, size=(3, 64))
    direct = kernel_traces(channel, sign, *pts)
    cleaned = {}
    for t, c in out.items():
        if np.max(np.abs(c.imag)) > 1e-9 * scale:
            raise TraceError(f"{channel.name}: trace term {t} has an imaginary part")
        cr = np.where(np.abs(c.real) < 1e-12 * scale, 0.0, c.real)
        rec = evaluate_polynomial(cr, *pts)
        err = float(np.max(np.abs(rec - direct[t]))) / scale
        if err > tol:
            raise TraceError(f"{channel.name}: trace term {t} is not reproduced (error {err:.2e})")
        cleaned[t] = cr
    return cleaned


def evaluate_polynomial(c, zp, zq, x):
    """Σ c[i,j,a,b,s] zp^a zq^b x^s at points (arrays of equal shape) → (..., n, n)."""
    d = c.shape[-1] - 1
    pa = np.stack([np.asarray(zp) ** k for k in range(d + 1)], axis=-1)
    pb = np.stack([np.asarray(zq) ** k for k in range(d + 1)], axis=-1)
    ps = np.stack([np.asarray(x) ** k for k in range(d + 1)], axis=-1)
    return np.einsum("ijabs,...a,...b,...s->...ij", c, pa, pb, ps)


# ----------------------------------------------------------------------------------------
# Radial–angular moments Λ^{t,s}_l(p, q): the mass-independent heart of the kernel

@dataclass(frozen=True)
class LadderGrid:
    """Resolution of a ladder kernel: radial panels for p and q, z nodes, moments."""

    radial: qd.RadialGrid
    n_z: int
    angular_half: int = 40
    fine_order: int = 10


@partial(jax.jit, static_argnames=("form", "n_nodes", "n_u"))
def _moments_block(form, jparams, p, t_f, w_f, idx, lag, level, half_t, x_t, s2w_t, n_nodes: int,
                   n_u: int):
    """μ_l[f] = ∫ sin²θ U_l(cos θ) f(k²) dθ for l < n_u and f ∈ {g, g p²/k², g pq/k², g q²/k²},
    with the radial measure and product integration onto the nodes: (T, N, n_u, 4)."""
    q2 = jnp.exp(t_f)
    q = jnp.sqrt(q2)
    half = half_t[level]
    x = x_t[level]
    s2w = s2w_t[level]
    pq = p[:, None] * q
    dpq = p[:, None] - q
    k2 = dpq[..., None] ** 2 + 4.0 * pq[..., None] * half
    gk = form.g(k2, jparams) * s2w
    p2 = (p * p)[:, None]
    gk2 = gk / k2
    f = jnp.stack([gk, gk2 * p2[..., None], gk2 * pq[..., None], gk2 * q2[..., None]], axis=-1)
    us = [jnp.ones_like(x), 2.0 * x]
    for _ in range(2, n_u):
        us.append(2.0 * x * us[-1] - us[-2])
    u = jnp.stack(us[:n_u], axis=-1)  # (T,F,n,L)
    mom = jnp.einsum("tfnc,tfnl->tflc", f, u)
    # χ(q) is interpolated as ψ(q) = (μ² + q²)² χ(q) (μ² = 1 GeV²): constant in the
    # infrared and a slow power in the ultraviolet, where χ itself falls like q⁻⁶; the
    # node factor (μ² + q_j²)² is applied by the caller.
    meas = (q2 * q2 / (1.0 + q2) ** 2 / 2.0) / (2.0 * math.pi) ** 4 * w_f  # (T,F)
    contrib = (mom * meas[..., None, None])[:, :, None] * lag[..., None, None]
    T = p.shape[0]
    tt = jnp.broadcast_to(jnp.arange(T)[:, None, None], idx.shape)
    return jnp.zeros((T, n_nodes) + mom.shape[2:], dtype=mom.dtype).at[tt, idx].add(contrib)


_MOMENT_CACHE: dict = {}


def moments(kernel: Kernel, grid: LadderGrid, n_l: int, n_s: int, block: int = 8):
    """Λ[term, s, l, p, q] = 4π/(l+1) ∫ sin²θ x^s U_l f_term ... on the radial nodes.

    Computed once per (kernel, grid) for the largest (n_l, n_s) asked so far and sliced,
    so the quark and meson operators on one grid share it.
    """
    key = (kernel.form, tuple(sorted((k, float(v)) for k, v in kernel.params.items())), grid)
    hit = _MOMENT_CACHE.get(key)
    if hit is not None and hit[0] >= n_l and hit[1] >= n_s:
        return hit[2][:, :n_s, :n_l]
    if hit is not None:
        n_l, n_s = max(n_l, hit[0]), max(n_s, hit[1])
    mu = _raw_moments(kernel, grid, n_l + n_s - 1, block)[0]  # (P, Q, n_u, 4)
    lam = _lam_from_mu(mu, grid.radial.q2, n_l, n_s)
    if len(_MOMENT_CACHE) > 8:
        _MOMENT_CACHE.clear()
    _MOMENT_CACHE[key] = (n_l, n_s, lam)
    return lam


def _raw_moments(kernel: Kernel, grid: LadderGrid, n_u: int, block: int, pairs=None):
    """[μ (P, Q, n_u, 4)] of ``_moments_block`` on the grid's nodes for each (form,
    jparams) of ``pairs`` (default: the kernel's own), on one set of rules."""
    from ..quark.selfenergy import RuleSet, fine_levels

    rad = grid.radial
    pabs = np.sqrt(rad.q2)
    levels = fine_levels(kernel, rad)
    tabs = qd.angular_tables(grid.angular_half)
    tables = tuple(jnp.asarray(tabs[k]) for k in ("half", "x", "s2w"))
    pairs = [(kernel.form, kernel.jparams())] if pairs is None else pairs
    k_res = kernel.resolution_gev
    T = pabs.size
    nb = -(-T // block)
    pp = np.concatenate([pabs, np.full(nb * block - T, pabs[-1])])
    outs = [[] for _ in pairs]
    for b in range(nb):
        sl = pp[b * block:(b + 1) * block]
        rs = RuleSet(rad, sl * sl, k_res, levels, grid.fine_order)
        fr = rs.fine
        for (form, jp), out in zip(pairs, outs):
            out.append(_moments_block(form, jp, jnp.asarray(sl), fr.t, fr.w, fr.idx, fr.lag,
                                      rs.level, *tables, rad.size, n_u))
    return [np.asarray(jnp.concatenate(o)[:T]) for o in outs]


def _lam_from_mu(mu, qn2, n_l: int, n_s: int) -> np.ndarray:
    """Λ[term, s, l, p, q] from the angular moments μ (P, Q, n_u, 4): the node factor
    (1 + q²)² and x^s U_l = Σ a[l, l'] U_l' (linear in μ)."""
    T = mu.shape[0]
    mu = mu * ((1.0 + qn2) ** 2)[None, :, None, None]
    lam = np.empty((4, n_s, n_l, T, T))
    lfac = 4.0 * np.pi / (np.arange(n_l) + 1.0)
    for s in range(n_s):
        a = qd.times_z_power(n_l - 1, s)  # x^s U_l = Σ a[l, l'] U_l'
        lam[:, s] = np.einsum("lL,pqLc->clpq", a, mu[:, :, : n_l + s]) * lfac[None, :, None, None]
    return lam


def moment_sizes(channel: Channel, sign: float, n_z: int) -> tuple[int, int]:
    """(n_l, n_s) of the moments that ``build`` asks for this channel on n_z nodes."""
    _, db, ds = _polynomial_degrees(kernel_polynomials(channel, sign))
    return n_z + db, ds + 1


def moments_with_tangents(kernel: Kernel, grid: LadderGrid, n_l: int, n_s: int, directions, block: int = 8):
    """[Λ, dΛ/dθ per direction]: ``moments`` and its derivatives along ``directions``
    (dicts parameter name → tangent) in the interaction parameters, by forward-mode
    differentiation of g (``kernel.TangentForm``) on the same quadrature rules (built
    once; they follow ``kernel.resolution_gev`` and are held fixed).  Λ fills the moment
    cache, so operators built afterwards on this grid reuse it."""
    from .kernel import TangentForm

    pairs = [(kernel.form, kernel.jparams())] + [(TangentForm(kernel.form), kernel.jtangent(d)) for d in directions]
    out = [_lam_from_mu(mu, grid.radial.q2, n_l, n_s) for mu in _raw_moments(kernel, grid, n_l + n_s - 1, block, pairs)]
    key = (kernel.form, tuple(sorted((k, float(v)) for k, v in kernel.params.items())), grid)
    hit = _MOMENT_CACHE.get(key)
    if hit is None or hit[0] < n_l or hit[1] < n_s:
        if len(_MOMENT_CACHE) > 8:
            _MOMENT_CACHE.clear()
        _MOMENT_CACHE[key] = (n_l, n_s, out[0])
    return out


# ----------------------------------------------------------------------------------------
# The kernel as a factorised linear operator

def _polynomial_degrees(c: dict) -> tuple[int, int, int]:
    da = db = ds = 0
    for v in c.values():
        nz = np.argwhere(np.abs(v) > 0)
        if nz.size:
            da = max(da, nz[:, 2].max())
            db = max(db, nz[:, 3].max())
            ds = max(ds, nz[:, 4].max())
    return int(da), int(db), int(ds)


@dataclass(frozen=True)
class LadderOperator:
    """Maps χ on (j, z-node, q) to the projected Γ on (i, z-node, p) (no Z₂² factor).

    Applied in factorised form (Chebyshev moments, Funk–Hecke rows, polynomial
    coefficients), which costs about as much as a dense matrix–vector product but needs
    only the moments Λ in memory.  ``dense()`` materialises it for small grids.
    """

    channel: Channel
    grid: LadderGrid
    sign: float
    z: np.ndarray
    wz: np.ndarray
    arrays: tuple  # (lam, cst, amat, zpow, ul, ninv, proj) as jax arrays

    @property
    def shape(self):
        return (self.channel.n_basis, self.grid.n_z, self.grid.radial.size)

    @property
    def size(self):
        return int(np.prod(self.shape))

    def apply(self, chi):
        """Γ = K χ for χ of shape (n_b, n_z, n_q) (or a batch (..., n_b, n_z, n_q))."""
        return _apply(chi, *self.arrays)

    def dense(self) -> np.ndarray:
        eye = np.eye(self.size).reshape((self.size,) + self.shape)
        cols = [np.asarray(self.apply(jnp.asarray(eye[i:i + 256]))) for i in range(0, self.size, 256)]
        return np.concatenate(cols).reshape(self.size, self.size).T


@jax.jit
def _apply(chi, lam, cst, amat, zpow, ul, ninv, proj):
    """Factorised kernel application; the two large contractions are real matrix
    products on stacked real and imaginary parts.  χ: (..., n_b, n_z, n_q)."""
    batch = chi.shape[:-3]
    chi = chi.reshape((-1,) + chi.shape[-3:])
    nB = chi.shape[0]
    chim = jnp.einsum("mK,BjKq->Bjmq", proj, chi)
    psi = jnp.einsum("bml,Bjmq->Blqbj", amat, chim)  # (B, l, q, b, j)
    _, nl, nq, nb, nj = psi.shape
    p = psi.reshape(nB, nl, nq, nb * nj)
    pr = jnp.concatenate([p.real, p.imag], axis=-1)  # (B, l, q, 2bj)
    nt, ns, _, npp, _ = lam.shape
    lam_l = jnp.transpose(lam, (2, 0, 1, 3, 4)).reshape(nl, nt * ns * npp, nq)
    y = jnp.matmul(lam_l[None], pr)  # (B, l, t s p, 2bj)
    y = y.reshape(nB, nl, nt, ns, npp, 2, nb, nj)
    y = jnp.transpose(y, (0, 5, 1, 4, 2, 3, 6, 7)).reshape(nB, 2, nl, npp, nt * ns * nb * nj)
    ni, na = cst.shape[1], cst.shape[3]
    c2 = jnp.transpose(cst, (0, 5, 4, 2, 1, 3)).reshape(nt * ns * nb * nj, ni * na)
    r = jnp.matmul(y, c2).reshape(nB, 2, nl, npp, ni, na)
    r = r[:, 0] + 1j * r[:, 1]  # (B, l, p, i, a)
    pi = jnp.einsum("ka,kl,Blpia->Bikp", zpow, ul, r)
    out = jnp.einsum("kiI,BIkp->Bikp", ninv, pi)
    return out.reshape(batch + out.shape[1:])


#: Ladder operators built in this process, by (kernel, channel, grid, sign): the operator
#: depends on nothing else (not on current masses, M or η), so the mesons of a run, its
#: error grid's two channels, a fit's iterations at fixed interaction and a scan's
#: current-mass points share them.  Oldest first; a few tens of MB each on default grids.
_BUILT: dict = {}
BUILT_KEEP = 8


def build(kernel: Kernel, channel: Channel, grid: LadderGrid, sign: float = -1.0) -> LadderOperator:
    """The mass-independent ladder kernel of ``channel`` on ``grid`` (kept in-process)."""
    key = (kernel, channel.name, channel.covariants, grid, float(sign))
    hit = _BUILT.get(key)
    if hit is None:
        hit = _build(kernel, channel, grid, sign)
        while len(_BUILT) >= BUILT_KEEP:
            _BUILT.pop(next(iter(_BUILT)))
        _BUILT[key] = hit
    return hit


def _build(kernel: Kernel, channel: Channel, grid: LadderGrid, sign: float) -> LadderOperator:
    from ..numerics.dirac import rest_frame_vectors

    poly = kernel_polynomials(channel, sign)
    da, db, ds = _polynomial_degrees(poly)
    nz = grid.n_z
    z, wz = qd.chebyshev_u_nodes(nz)
    n_l = nz + db  # U_l needed for l ≤ (n_z − 1) + b_max
    lam = moments(kernel, grid, n_l, ds + 1)  # (4, S, L, P, Q)
    qh, ph = rest_frame_vectors(z)
    ninv = np.linalg.inv(channel.gram(qh, ph)).real  # (k, i, i')
    ul = qd.chebyshev_u(n_l - 1, z)  # (k, l)
    zpow = np.stack([z**a for a in range(da + 1)], axis=-1)  # (k, a)
    amat = np.zeros((db + 1, nz, n_l))
    for b in range(db + 1):
        amat[b, :, : nz + b] = qd.times_z_power(nz - 1, b)  # (b, m, l)
    cst = np.stack([poly[t][:, :, : da + 1, : db + 1, : ds + 1] for t in TERMS])  # (t, i, j, a, b, s)
    proj = (2.0 / np.pi) * (wz[:, None] * qd.chebyshev_u(nz - 1, z)).T  # (m, k')
    arrays = tuple(jnp.asarray(a) for a in (lam, cst, amat, zpow, ul, ninv, proj))
    return LadderOperator(channel=channel, grid=grid, sign=sign, z=z, wz=wz, arrays=arrays)

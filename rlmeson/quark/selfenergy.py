"""Rows of the rainbow quark self-energy: Σ_A(p²), Σ_B(p²) as linear maps of the
propagator on the radial nodes, for real or complex external p².

With S(q) = −iγ·q σ_V(q²) + σ_S(q²) and u_{V,S} = q² σ_{V,S} on the radial nodes,

    Σ_B(p²) = 4 ∫_q g(k²) σ_S(q²)
    Σ_A(p²) = (4/3) (1/p²) ∫_q g(k²) σ_V(q²) [p·q + 2 (k·p)(k·q)/k²],   k = p − q,

(the Dirac projections of C_F ∫ g T_μν(k) γ_μ S(q) γ_ν; the tests check them against
explicit 4×4 traces), so that A = Z₂ + Z₂² Σ_A and B = Z₄ m + Z₂² Σ_B.  The rows are
``R_A @ u_V`` and ``R_B @ u_S``.

For complex p² the same integrals are evaluated with p = √p² (principal root) and a
real loop momentum: this is the covariant continuation "at complex external momentum";
the angular rule is symmetric, so the result depends on p² only.
"""

from __future__ import annotations

import math
from functools import partial

import numpy as np

from ..numerics import quadrature as qd
from ..numerics._jax import jax, jnp
from ..model.kernel import Kernel

_PI = math.pi
# ∫ d⁴q/(2π)⁴ = ∫ dt (q⁴/2) · 4π ∫_0^π sin²θ dθ / (2π)⁴ ; with σ = u/q² the radial factor is q²/2
_MEASURE = 4.0 * _PI / (2.0 * _PI) ** 4 / 2.0


def _angle_scale(p_abs, q, k_res):
    """θ*: the smallest angular feature of g((p − q)²) for |p|, q (sets the θ grading)."""
    return 0.25 * np.maximum(np.abs(p_abs - q), 0.25 * k_res) / np.sqrt(np.maximum(p_abs * q, 1e-300))


class RuleSet:
    """The target-adapted rules for a set of external momenta p² (real or complex; graded
    about |p|): the fine radial rule and each (p, q) pair's angular level.  Shared by the
    gap-equation rows and the ladder-kernel moments."""

    def __init__(self, grid: qd.RadialGrid, p2: np.ndarray, k_res: float, levels: int, order: int):
        p2 = np.asarray(p2)
        pabs = np.sqrt(np.abs(p2))
        h_min = np.clip(0.2 * k_res / np.maximum(pabs, 1e-12), 1e-10, 2.0)
        self.fine = qd.fine_rule(grid, np.log(np.maximum(np.abs(p2), 1e-300)), h_min,
                                 levels=levels, order=order)
        q = np.sqrt(self.fine.q2)
        self.level = qd.angular_level(_angle_scale(pabs[:, None], q, k_res))


@partial(jax.jit, static_argnames=("form", "n_nodes"))
def _rows_block(form, jparams, p2, t_f, w_f, idx, lag, level, tables, n_nodes: int):
    p = jnp.sqrt(p2)
    q2 = jnp.exp(t_f)
    q = jnp.sqrt(q2)
    pq = p[:, None] * q  # (T,F)
    dpq = p[:, None] - q
    half = tables["half"][level]  # (T,F,n)
    s2 = tables["s2w"][level]
    x = tables["x"][level]
    k2 = dpq[..., None] ** 2 + 4.0 * pq[..., None] * half
    gk = form.g(k2, jparams)
    kp = p[:, None, None] * (dpq[..., None] + 2.0 * q[..., None] * half)
    kq = q[..., None] * (dpq[..., None] - 2.0 * p[:, None, None] * half)
    ib = jnp.sum(s2 * gk, axis=-1)
    ia = jnp.sum(s2 * gk * (pq[..., None] * x + 2.0 * kp * kq / k2), axis=-1) / p2[:, None]
    fac = _MEASURE * q2 * w_f  # (T,F)
    vb = (4.0 * fac * ib)[..., None] * lag
    va = ((4.0 / 3.0) * fac * ia)[..., None] * lag
    T = p2.shape[0]
    tt = jnp.broadcast_to(jnp.arange(T)[:, None, None], idx.shape)
    rb = jnp.zeros((T, n_nodes), dtype=vb.dtype).at[tt, idx].add(vb)
    ra = jnp.zeros((T, n_nodes), dtype=va.dtype).at[tt, idx].add(va)
    return ra, rb


def rows(kernel: Kernel, grid: qd.RadialGrid, p2, *, n_half: int = 40, levels: int | None = None,
         order: int = 6, block: int = 16, jparams=None):
    """(R_A, R_B) of shape (T, N) for targets p2 (real ≥ 0 or complex)."""
    jparams = kernel.jparams() if jparams is None else jparams
    return _rows_of(kernel, grid, p2, [(kernel.form, jparams)], n_half, levels, order, block)[0]


def rows_with_tangents(kernel: Kernel, grid: qd.RadialGrid, p2, directions, *, n_half: int = 40,
                       levels: int | None = None, order: int = 6, block: int = 16):
    """[(R_A, R_B), (dR_A, dR_B) per direction]: ``rows`` and its derivatives along
    ``directions`` (dicts parameter name → tangent) in the interaction parameters, by
    forward-mode differentiation of g (``kernel.TangentForm``) on the same quadrature rules
    (built once; they follow ``kernel.resolution_gev`` and are held fixed)."""
    from ..model.kernel import TangentForm

    pairs = [(kernel.form, kernel.jparams())] + [(TangentForm(kernel.form), kernel.jtangent(d)) for d in directions]
    return _rows_of(kernel, grid, p2, pairs, n_half, levels, order, block)


def _rows_of(kernel: Kernel, grid: qd.RadialGrid, p2, pairs, n_half, levels, order, block):
    """Rows for each (form, jparams) of ``pairs`` on one set of target-adapted rules."""
    p2 = np.atleast_1d(np.asarray(p2))
    cplx = np.iscomplexobj(p2)
    if levels is None:
        levels = fine_levels(kernel, grid)
    T = p2.size
    nb = -(-T // block)
    pad = nb * block - T
    p2p = np.concatenate([p2, np.full(pad, p2[-1] if T else 1.0, dtype=p2.dtype)])
    outs = [([], []) for _ in pairs]
    tables = {k: jnp.asarray(v) for k, v in qd.angular_tables(n_half).items()}
    for b in range(nb):
        sl = p2p[b * block:(b + 1) * block]
        rs = RuleSet(grid, sl, kernel.resolution_gev, levels, order)
        dt = jnp.complex128 if cplx else jnp.float64
        for (form, jparams), (out_a, out_b) in zip(pairs, outs):
            ra, rb = _rows_block(form, jparams, jnp.asarray(sl, dtype=dt), rs.fine.t, rs.fine.w,
                                 rs.fine.idx, rs.fine.lag, rs.level, tables, grid.size)
            out_a.append(ra)
            out_b.append(rb)
    return [(jnp.concatenate(a)[:T], jnp.concatenate(b)[:T]) for a, b in outs]


def fine_levels(kernel: Kernel, grid: qd.RadialGrid) -> int:
    """Grading depth that reaches the finest sub-panel needed at the top of the grid."""
    p_top = math.sqrt(math.exp(grid.t_max))
    h = max(0.2 * kernel.resolution_gev / p_top, 1e-10)
    return int(min(40, max(4, math.ceil(math.log2(2.0 / h)))))

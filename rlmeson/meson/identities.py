"""Residuals of the exact rainbow-ladder identities a run can check.

* kernel vs gap equation: at P = 0 the pseudoscalar kernel acting on γ₅B(q) (chiral
  propagators) returns the gap equation's Σ_B(p) (the same integral) — Goldstone's
  theorem, and a probe of the kernel's resolution at large momenta;
* off-shell axial-vector Ward–Takahashi identity: the inhomogeneous pseudoscalar-channel
  BSE with inhomogeneity −iZ₂γ₅γ·P + 2Z₄mγ₅ is solved by S⁻¹(q₊)γ₅ + γ₅S⁻¹(q₋) when the
  propagators solve the gap equation on the loop momenta the kernel uses (shifted
  continuation) and the regularisation is translation invariant;
* on shell: f_P M² = (m₁ + m₂) ρ_P (``observables``).
"""

from __future__ import annotations

import numpy as np
import scipy.sparse.linalg as spla

from .bse import BoundState
from ..numerics.dirac import GAMMA5, rest_frame_vectors


def kernel_vs_gap(bs: BoundState) -> tuple[np.ndarray, np.ndarray]:
    """(p², relative residual max over z) of K[S γ₅ B S](p) vs Σ_B(p) = B(p) − Z₄m at P = 0.

    Uses the pseudoscalar kernel of ``bs`` with the direct real-axis propagator of its
    quark (P = 0 needs no continuation).
    """
    sol = bs.quark1
    a, b = sol.dressing(bs.q2)
    a, b = np.asarray(a, float), np.asarray(b, float)
    den = bs.q2 * a * a + b * b
    sv, ss = a / den, b / den
    # χ = S(q) γ₅ B S(q) = γ₅ B/(q²A² + B²) = γ₅ B σ_S/B ... only the γ₅ component
    chi = np.zeros(bs.shape, dtype=complex)
    chi[0] = (b * (bs.q2 * sv * sv + ss * ss))[None, :]
    out = bs.apply_kernel(chi)
    sigma_b = b - sol.z4m
    rel = np.abs(out[0] - sigma_b[None, :]).max(axis=0) / np.abs(sigma_b)
    other = np.abs(out[1:]).max(axis=(0, 1)) / np.abs(sigma_b)
    return bs.q2, np.maximum(rel, other)


def _inverse_matrices(bs: BoundState, mass: float):
    sp, sm, _, _ = bs.propagators(mass)
    return np.linalg.inv(sp), np.linalg.inv(sm)


def av_wti_offshell(bs: BoundState, mass: float, tol: float = 1e-12, q2_max: float = np.inf) -> dict:
    """Solve (1 − K G₀) Γ = Γ⁰ at P² = −M² in the pseudoscalar channel and compare with
    Ω = S⁻¹(q₊)γ₅ + γ₅S⁻¹(q₋).  Returns the max relative deviation (over nodes with
    q² ≤ ``q2_max``, the whole grid by default) and the GMRES information."""
    if bs.channel.name != "pseudoscalar":
        raise ValueError("the axial-vector identity lives in the pseudoscalar channel")
    sol = bs.quark1
    shape = bs.shape
    gam0 = np.zeros(shape, dtype=complex)
    gam0[0] = bs.quark1.z4m + bs.quark2.z4m  # (Z₄m₁ + Z₄m₂) γ₅
    gam0[2] = sol.z2 * mass  # −i Z₂ γ₅ γ·P with P = iM P̂  →  Z₂ M γ₅ γ·P̂ (covariant 2)
    op = bs.operator(mass)
    lin = spla.LinearOperator(op.shape, dtype=complex, matvec=lambda v: v - op.matvec(v))
    x, info = spla.gmres(lin, gam0.ravel(), rtol=tol, atol=0.0, restart=200, maxiter=50)
    gam = x.reshape(shape)
    spi, smi = _inverse_matrices(bs, mass)  # (q, k, 4, 4)
    omega = spi @ GAMMA5 + GAMMA5 @ smi
    qh, ph = rest_frame_vectors(bs.z)
    coeff = bs.channel.project(qh[None], ph[None], omega[:, :, None])  # (q, k, n)
    coeff = np.transpose(coeff, (2, 1, 0))
    sel = bs.q2 <= q2_max
    scale = np.max(np.abs(coeff[:, :, sel]), axis=(0, 1))
    dev = np.max(np.abs(gam - coeff)[:, :, sel], axis=(0, 1)) / scale
    return {"max_relative_deviation": float(dev.max()), "per_q2": dev, "q2": bs.q2[sel],
            "gmres_info": int(info), "solution": gam, "expected": coeff}


"""Bethe–Salpeter channels as data: covariant basis, C-parity, decay and condensate
projectors.  The solver has no per-channel branches; adding a channel is adding an entry.

Covariants are built from the unit vectors q̂ (relative momentum) and P̂ (total
momentum; in the rest frame P = iM P̂ with P̂ = e₄ real), with the transverse part
q_T = q̂ − (q̂·P̂) P̂, so that every covariant is a polynomial in q̂ and P̂ (needed by
the angular reduction in ``ladder``).  A channel with a Lorentz index (vector) carries
an index axis of length 4; transverse covariants have a vanishing μ = 4 component.

The projection of a Dirac matrix X onto the basis uses the trace pairing
⟨τ_i, X⟩ = Σ_μ tr[τ_i^μ X^μ] and the inverse of the Gram matrix N_ik = ⟨τ_i, τ_k⟩.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from typing import Callable

import numpy as np

from ..numerics.dirac import CHARGE_C, CHARGE_C_INV, GAMMA, GAMMA5, ONE, slash


def _transverse(qh, ph):
    z = np.einsum("...m,...m->...", qh, ph)
    return qh - z[..., None] * ph


def _four_structures(qh, ph):
    """{1, q̸_T, P̸̂, q̸_T P̸̂} as (..., 4, 4, 4)."""
    qt = slash(_transverse(qh, ph))
    pp = slash(ph)
    one = np.broadcast_to(ONE, qt.shape)
    return np.stack([one, qt, pp, qt @ pp], axis=-3)


def _pseudoscalar(qh, ph):
    s = _four_structures(qh, ph)  # (..., 4, 4, 4)
    return (GAMMA5 @ s)[..., :, None, :, :]  # index axis of length 1


def _scalar_like(qh, ph):
    return _four_structures(qh, ph)[..., :, None, :, :]


def _vector(qh, ph):
    s = _four_structures(qh, ph)  # (..., 4, 4, 4)
    qt = _transverse(qh, ph)
    gt = GAMMA - np.einsum("...m,...n,nab->...mab", ph, ph, GAMMA)  # γ_μ^T (..., 4, 4, 4)
    first = np.einsum("...mab,...kbc->...kmac", gt, s)  # γ^T_μ · Y_k
    second = qt[..., None, :, None, None] * s[..., :, None, :, :]  # q^T_μ · Y_k
    return np.concatenate([first, second], axis=-4)  # (..., 8, 4, 4, 4)


def _axial_vector(qh, ph):
    """γ₅ times the eight transverse vector covariants (the 1⁺ amplitudes, both C)."""
    return GAMMA5 @ _vector(qh, ph)


@dataclass(frozen=True)
class Channel:
    name: str
    jpc: str
    c_parity: int
    covariants: Callable  # (q̂, P̂) -> (..., n_basis, n_index, 4, 4)
    n_basis: int
    n_index: int
    polarisations: int
    # decay constant:  f = Z₂ N_c · decay_factor(M) / polarisations · ∫_q Σ_μ tr[D^μ χ^μ]
    decay_projector: Callable | None = None  # (P̂) -> (n_index, 4, 4)
    decay_factor: Callable | None = None     # M -> complex
    # in-meson condensate: ρ = condensate_factor · Z₄ N_c ∫_q tr[D χ]
    condensate_projector: Callable | None = None
    condensate_factor: complex = 0.0
    basis_labels: tuple[str, ...] = ()

    def basis(self, qh, ph) -> np.ndarray:
        return self.covariants(np.asarray(qh, dtype=complex), np.asarray(ph, dtype=complex))

    def gram(self, qh, ph) -> np.ndarray:
        t = self.basis(qh, ph)
        return np.einsum("...imab,...kmba->...ik", t, t)

    def project(self, qh, ph, x) -> np.ndarray:
        """Coefficients of X (..., n_index, 4, 4) in the basis at (q̂, P̂)."""
        t = self.basis(qh, ph)
        rhs = np.einsum("...imab,...mba->...i", t, x)
        return np.linalg.solve(self.gram(qh, ph), rhs[..., None])[..., 0]

    def charge_matrix(self, z) -> np.ndarray:
        """M[k, j, i]: C τ_i(−q̂, P̂)ᵀ C⁻¹ = Σ_j M_ji τ_j(q̂, P̂) at the rest-frame q̂ of each
        z node, derived from the explicit 4×4 matrices (``charge_conjugate``)."""
        return _charge_matrix(self, tuple(np.asarray(z, dtype=float).tolist()))

    def charge_conjugate(self, amp, z) -> np.ndarray:
        """The coefficients of Γ_C(q; P) = C Γᵀ(−q; P) C⁻¹ for Γ coefficients ``amp`` of shape
        (..., n_basis, n_z, n_q) on z nodes symmetric about 0: q → −q flips z (node k ↔
        n_z − 1 − k) and maps each covariant by ``charge_matrix``.  For one flavour at η = 1/2
        the ladder BSE commutes with this involution, so each eigenvector has C = ±1."""
        z = np.asarray(z, dtype=float)
        if not np.allclose(z[::-1], -z, rtol=0, atol=1e-13):
            raise ValueError("charge conjugation needs z nodes symmetric about 0")
        return np.einsum("kji,...ikq->...jkq", self.charge_matrix(z), np.asarray(amp)[..., ::-1, :])

    def charge_parity(self, amp, z) -> float:
        """⟨Γ, Γ_C⟩/⟨Γ, Γ⟩ on the coefficients (n_basis, n_z, n_q) of one amplitude (±1 for
        a C eigenstate; the distance from ±1 measures how well the state is one)."""
        a = np.asarray(amp)
        c = self.charge_conjugate(a, z)
        return float((np.vdot(a, c) / np.vdot(a, a)).real)


@lru_cache(maxsize=32)
def _charge_matrix(channel: "Channel", z: tuple) -> np.ndarray:
    from ..numerics.dirac import rest_frame_vectors

    qh, ph = rest_frame_vectors(np.asarray(z))
    tm = channel.basis(-qh, ph)  # τ_i(−q̂, P̂)
    conj = CHARGE_C @ np.swapaxes(tm, -1, -2) @ CHARGE_C_INV
    m = np.stack([channel.project(qh, ph, conj[:, i]) for i in range(channel.n_basis)], axis=-1)
    back = m  # (k, j, i)
    # an involution mapping the basis onto itself: M(z)² = 1, and the map is exact
    rec = np.einsum("kji,kjmab->kimab", back, channel.basis(qh, ph))
    if not (np.allclose(rec, conj, atol=1e-12) and
            np.allclose(np.einsum("kij,kjl->kil", back, back), np.eye(channel.n_basis), atol=1e-12)):
        raise ValueError(f"{channel.name}: the basis is not closed under charge conjugation")
    return back.real if np.allclose(back.imag, 0.0, atol=1e-13) else back


_REGISTRY: dict[str, Channel] = {}


def register(ch: Channel) -> Channel:
    _REGISTRY[ch.name] = ch
    return ch


def get(name: str) -> Channel:
    return _REGISTRY[name]


def registered(meson_only: bool = True) -> tuple[str, ...]:
    return tuple(sorted(k for k, c in _REGISTRY.items() if not meson_only or c.c_parity != 0))


PSEUDOSCALAR = register(Channel(
    name="pseudoscalar", jpc="0-+", c_parity=+1, covariants=_pseudoscalar, n_basis=4, n_index=1,
    polarisations=1,
    decay_projector=lambda ph: (GAMMA5 @ slash(ph))[None],
    decay_factor=lambda m: 1.0 / (1j * m),
    condensate_projector=lambda ph: GAMMA5[None],
    condensate_factor=-1j,
    basis_labels=("γ5", "γ5 γ·q_T", "γ5 γ·P̂", "γ5 γ·q_T γ·P̂"),
))

VECTOR = register(Channel(
    name="vector", jpc="1--", c_parity=-1, covariants=_vector, n_basis=8, n_index=4,
    polarisations=3,
    decay_projector=lambda ph: GAMMA.copy(),
    decay_factor=lambda m: 1.0 / m,
    basis_labels=("γ_μ^T", "γ_μ^T γ·q_T", "γ_μ^T γ·P̂", "γ_μ^T γ·q_T γ·P̂",
                  "q_μ^T", "q_μ^T γ·q_T", "q_μ^T γ·P̂", "q_μ^T γ·q_T γ·P̂"),  # order of _vector
))

# The positive-parity channels.  Each basis holds both C: the opposite-C partners (0⁺⁻ in
# the scalar basis, 1⁺⁻ and 1⁺⁺ in the axial-vector one) are eigenvectors of the same
# operator, told apart by ``charge_parity``; a channel's ``c_parity`` names the one it
# looks for.  No decay constant is defined for them here: for one flavour the scalar's
# (∝ m₁ − m₂) and the 1⁺⁻'s (C-odd) vanish, and the 1⁺⁺'s is not reported (no projector
# registered), so their amplitudes are phased by ``observables.normalise``'s fallback.
SCALAR = register(Channel(
    name="scalar", jpc="0++", c_parity=+1, covariants=_scalar_like, n_basis=4, n_index=1,
    polarisations=1, basis_labels=("1", "γ·q_T", "γ·P̂", "γ·q_T γ·P̂"),
))

AXIAL_VECTOR = register(Channel(
    name="axial-vector", jpc="1++", c_parity=+1, covariants=_axial_vector, n_basis=8, n_index=4,
    polarisations=3,
    basis_labels=tuple("γ5 " + label for label in VECTOR.basis_labels),
))

PSEUDOVECTOR = register(Channel(
    name="pseudovector", jpc="1+-", c_parity=-1, covariants=_axial_vector, n_basis=8, n_index=4,
    polarisations=3,
    basis_labels=tuple("γ5 " + label for label in VECTOR.basis_labels),
))

#: The Dirac structure of a quark propagator at complex momentum q + ηP (not a meson).
QUARK = register(Channel(
    name="quark", jpc="", c_parity=0, covariants=_scalar_like, n_basis=4, n_index=1,
    polarisations=1, basis_labels=("1", "γ·q_T", "γ·P̂", "γ·q_T γ·P̂"),
))

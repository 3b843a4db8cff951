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
from typing import Callable

import numpy as np

from .dirac import GAMMA, GAMMA5, ONE, slash


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

#: The Dirac structure of a quark propagator at complex momentum q + ηP (not a meson).
QUARK = register(Channel(
    name="quark", jpc="", c_parity=0, covariants=_scalar_like, n_basis=4, n_index=1,
    polarisations=1, basis_labels=("1", "γ·q_T", "γ·P̂", "γ·q_T γ·P̂"),
))

"""Euclidean Dirac algebra with explicit 4×4 matrices.

Hermitian γ_μ with {γ_μ, γ_ν} = 2δ_μν (chiral representation), γ₅ = γ₄γ₁γ₂γ₃,
σ_μν = (i/2)[γ_μ, γ_ν], charge conjugation C = γ₂γ₄.  Index 0..3 ↔ μ = 1..4.
Every trace the package uses is computed from these matrices; the tests check the
Clifford algebra and C γ_μᵀ C⁻¹ = −γ_μ.
"""

from __future__ import annotations

import numpy as np

_I2 = np.eye(2, dtype=complex)
_Z2 = np.zeros((2, 2), dtype=complex)
_PAULI = (
    np.array([[0, 1], [1, 0]], dtype=complex),
    np.array([[0, -1j], [1j, 0]], dtype=complex),
    np.array([[1, 0], [0, -1]], dtype=complex),
)


def _block(a, b, c, d):
    return np.block([[a, b], [c, d]])


GAMMA = np.stack(
    [_block(_Z2, -1j * s, 1j * s, _Z2) for s in _PAULI] + [_block(_Z2, _I2, _I2, _Z2)]
)  # (4, 4, 4): GAMMA[mu] is γ_{mu+1}
GAMMA5 = GAMMA[3] @ GAMMA[0] @ GAMMA[1] @ GAMMA[2]
ONE = np.eye(4, dtype=complex)
CHARGE_C = GAMMA[1] @ GAMMA[3]
CHARGE_C_INV = np.linalg.inv(CHARGE_C)


def slash(v) -> np.ndarray:
    """γ·v for vectors v (..., 4), complex allowed.  Returns (..., 4, 4)."""
    return np.einsum("...m,mab->...ab", np.asarray(v), GAMMA)


def sigma(mu: int, nu: int) -> np.ndarray:
    return 0.5j * (GAMMA[mu] @ GAMMA[nu] - GAMMA[nu] @ GAMMA[mu])


def tr(m) -> np.ndarray:
    return np.trace(m, axis1=-2, axis2=-1)


def conjugate_transposed(m) -> np.ndarray:
    """C mᵀ C⁻¹ on the last two axes (the charge-conjugate of a Dirac matrix)."""
    return CHARGE_C @ np.swapaxes(m, -1, -2) @ CHARGE_C_INV


def rest_frame_vectors(z, extra=None):
    """Unit vectors in the rest frame: P̂ = e₄ and q̂ = (0, 0, √(1−z²), z).

    Returns (q̂, P̂) with shapes (..., 4).  ``z`` may be complex-safe arrays in [−1, 1].
    """
    z = np.asarray(z, dtype=float)
    qh = np.zeros(z.shape + (4,))
    qh[..., 2] = np.sqrt(np.clip(1.0 - z * z, 0.0, None))
    qh[..., 3] = z
    ph = np.zeros(z.shape + (4,))
    ph[..., 3] = 1.0
    return qh, ph

"""Dirac algebra and the traces the code relies on, against explicit 4×4 matrices.

Sources: the Euclidean Clifford algebra {γ_μ, γ_ν} = 2δ_μν with hermitian γ's and
C γ_μᵀ C⁻¹ = −γ_μ (common practice; conventions of the team sheet).  Every projection
formula used by the solvers is compared here with a trace computed from the matrices.
"""

import math

import numpy as np
import pytest

from rlmeson.model import channels, ladder
from rlmeson.meson import observables
from rlmeson.numerics.dirac import CHARGE_C, CHARGE_C_INV, GAMMA, GAMMA5, ONE, slash, tr
from rlmeson.model.kernel import C_F


def test_clifford_algebra_and_hermiticity():
    for m in range(4):
        assert np.allclose(GAMMA[m], GAMMA[m].conj().T, atol=1e-15)
        for n in range(4):
            anti = GAMMA[m] @ GAMMA[n] + GAMMA[n] @ GAMMA[m]
            assert np.allclose(anti, 2.0 * (m == n) * ONE, atol=1e-15)
        assert np.allclose(GAMMA5 @ GAMMA[m] + GAMMA[m] @ GAMMA5, 0.0, atol=1e-15)
    assert np.allclose(GAMMA5 @ GAMMA5, ONE, atol=1e-15)
    assert np.allclose(GAMMA5, GAMMA5.conj().T, atol=1e-15)


def test_charge_conjugation_reverses_gamma_transpose():
    for m in range(4):
        assert np.allclose(CHARGE_C @ GAMMA[m].T @ CHARGE_C_INV, -GAMMA[m], atol=1e-15)
    assert np.allclose(CHARGE_C @ GAMMA5.T @ CHARGE_C_INV, GAMMA5, atol=1e-15)


def _selfenergy_traces(p, q):
    """(1/4) tr of the A and B projections of C_F T_μν(k) γ_μ S γ_ν for S = −iγ·q σ_V + σ_S,
    separately for the σ_V and σ_S parts (σ's set to 1)."""
    k = p - q
    k2 = k @ k
    sig_v = -1j * slash(q)
    sig_s = ONE
    out = {}
    for name, s in (("V", sig_v), ("S", sig_s)):
        tot = np.zeros((4, 4), dtype=complex)
        for m in range(4):
            for n in range(4):
                t = (m == n) - k[m] * k[n] / k2
                tot += C_F * t * GAMMA[m] @ s @ GAMMA[n]
        out[name] = tot
    a = tr(-1j * slash(p) @ out["V"]) / 4.0 / (p @ p)   # coefficient of iγ·p A
    b = tr(out["S"]) / 4.0                               # coefficient of B
    return a, b


def test_gap_projections_equal_explicit_traces(rng):
    """The A and B integrands of selfenergy.py: 4σ_S and (4/3)[p·q + 2(k·p)(k·q)/k²]σ_V/p²."""
    for _ in range(20):
        p, q = rng.normal(size=4), rng.normal(size=4)
        k = p - q
        a_tr, b_tr = _selfenergy_traces(p, q)
        a_formula = (4.0 / 3.0) * (p @ q + 2.0 * (k @ p) * (k @ q) / (k @ k)) / (p @ p)
        assert b_tr == pytest.approx(4.0, abs=1e-13)
        assert a_tr == pytest.approx(a_formula, rel=1e-12, abs=1e-13)


@pytest.mark.parametrize("name", ["pseudoscalar", "vector", "quark"])
def test_kernel_polynomials_reproduce_explicit_traces(name, rng):
    ch = channels.get(name)
    for sign in (-1.0, 1.0):
        poly = ladder.kernel_polynomials(ch, sign)
        zp, zq, x = rng.uniform(-0.99, 0.99, size=(3, 25))
        direct = ladder.kernel_traces(ch, sign, zp, zq, x)
        for term, c in poly.items():
            assert np.allclose(ladder.evaluate_polynomial(c, zp, zq, x), direct[term], atol=1e-11)


def test_kernel_traces_match_a_hand_built_sandwich(rng):
    """One entry of W_ij built from scratch: real unit vectors in a generic frame."""
    ch = channels.PSEUDOSCALAR
    ph = np.array([0, 0, 0, 1.0])
    pv = rng.normal(size=4); pv[:] = pv / np.linalg.norm(pv)
    qv = rng.normal(size=4); qv[:] = qv / np.linalg.norm(qv)
    zp, zq, x = pv @ ph, qv @ ph, pv @ qv
    tp = ch.basis(pv, ph)[:, 0]
    tq = ch.basis(qv, ph)[:, 0]
    i, j = 2, 1
    val = sum(np.trace(tp[i] @ GAMMA[m] @ tq[j] @ GAMMA[m]) for m in range(4))
    d = ladder.kernel_traces(ch, -1.0, np.array(zp), np.array(zq), np.array(x))["0"]
    assert d[i, j] == pytest.approx(-C_F * val, abs=1e-12)


def test_vector_basis_is_complete_and_transverse():
    z = np.linspace(-0.9, 0.9, 7)
    from rlmeson.numerics.dirac import rest_frame_vectors

    qh, ph = rest_frame_vectors(z)
    t = channels.VECTOR.basis(qh, ph)  # (k, 8, 4, 4, 4)
    assert np.allclose(t[:, :, 3], 0.0, atol=1e-15)          # no μ = 4 component
    g = channels.VECTOR.gram(qh, ph)
    assert np.all(np.abs(np.linalg.det(g)) > 1e-8)           # eight independent covariants


def test_pseudoscalar_standard_basis_round_trip(rng):
    """Γ built from chosen E, F, G, H with explicit matrices is recovered exactly."""
    from types import SimpleNamespace

    from rlmeson.numerics.dirac import rest_frame_vectors, sigma

    z = np.array([-0.7, -0.2, 0.3, 0.8])
    q2 = np.array([0.3, 2.0])
    M = 0.4
    efgh = rng.normal(size=(4, len(z), len(q2))) + 1j * rng.normal(size=(4, len(z), len(q2)))
    qh, ph = rest_frame_vectors(z)
    P = 1j * M * ph
    sig = np.stack([np.stack([sigma(m, n) for n in range(4)]) for m in range(4)])
    amp = np.empty_like(efgh)
    for iq, qq in enumerate(q2):
        qv = math.sqrt(qq) * qh
        qp = np.einsum("km,km->k", qv, P)
        E, F, G, H = efgh[:, :, iq]
        gam = GAMMA5 @ (1j * E[:, None, None] * ONE + F[:, None, None] * slash(P)
                        + (G * qp)[:, None, None] * slash(qv)
                        + H[:, None, None] * np.einsum("km,kn,mnab->kab", qv, P, sig))
        amp[:, :, iq] = channels.PSEUDOSCALAR.project(qh, ph, gam[:, None]).T
    view = SimpleNamespace(z=z, q2=q2, channel=channels.PSEUDOSCALAR)
    back = observables.pseudoscalar_standard_basis(view, amp, M)
    assert np.allclose(back, efgh, atol=1e-12)
    assert np.allclose(observables.leading_e(amp), efgh[0], atol=1e-13)

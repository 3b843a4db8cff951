"""Normalisation, decay constants, in-meson condensates and identity residuals of a
bound state found by ``bse``.

Conventions (the tests pin them with exact identities):
  L(P) = N_c ∫_q (1/n_pol) Σ_μ tr[Γ̄_μ(q; −K) S(q₊) Γ_μ(q; K) S(q₋)],  Γ̄(q;K) = C Γ(−q;K)ᵀ C⁻¹,
  canonical:   N² = dL/dP² at P = K (Γ fixed, propagators moved; finite differences),
  Nakanishi:   N² = λ′(P²) L(K)   (λ′ = dλ/dP² from the same masses),
and Γ → Γ/N.  With this normalisation
  f_P = Z₂ N_c/(iM) ∫_q tr[γ₅ γ·P̂ χ],   f_V = Z₂ N_c/(3M) ∫_q Σ_μ tr[γ_μ χ_μ],
  ρ_P = −i Z₄ N_c ∫_q tr[γ₅ χ],
come out in the √2 convention (f_π ≈ 131 MeV).  The default reporting convention divides
Γ, f and ρ by √2 (f_π ≈ 92 MeV); either way the output says which.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from ..numerics.dirac import CHARGE_C, CHARGE_C_INV, rest_frame_vectors
from ..model.kernel import N_C

CONVENTIONS = {"92": 1.0 / math.sqrt(2.0), "131": 1.0}
CONVENTION_LABELS = {"92": "f_pi ~ 92 MeV (Gamma and f divided by sqrt 2)",
                     "131": "f_pi ~ 131 MeV (sqrt 2 convention)"}


def integration_weights(bs) -> np.ndarray:
    """W[k, q] with ∫ d⁴q/(2π)⁴ f ≈ Σ W f on the bound state's (z, q) nodes."""
    rad = bs.radial
    wq = rad.t_weights * rad.q2**2 / 2.0 / (2.0 * math.pi) ** 4
    return 4.0 * math.pi * bs.wz[:, None] * wq[None, :]


def conjugate_pairing(channel, z) -> np.ndarray:
    """B[k, i, j] = Σ_μ tr[C τ_i^μ(−q̂, −P̂)ᵀ C⁻¹ τ_j^μ(q̂, P̂)] at the z nodes."""
    qh, ph = rest_frame_vectors(z)
    t = channel.basis(qh, ph)  # (k, n, m, 4, 4)
    tm = channel.basis(-qh, -ph)
    tbar = CHARGE_C @ np.swapaxes(tm, -1, -2) @ CHARGE_C_INV
    return np.einsum("kimab,kjmba->kij", tbar, t)


def loop(bs, amp: np.ndarray, mass_prop: float) -> complex:
    """L at propagator mass ``mass_prop`` for Γ coefficients ``amp`` (n_b, n_z, n_q)."""
    chi = bs.wave_function(amp, mass_prop)
    pair = conjugate_pairing(bs.channel, bs.z)
    w = integration_weights(bs)
    val = np.einsum("kq,ikq,kij,jkq->", w, amp, pair, chi)
    return complex(N_C * val / bs.channel.polarisations)


def projected_integral(bs, chi: np.ndarray, projector) -> complex:
    """∫_q Σ_μ tr[D^μ χ^μ] for χ coefficients (n_b, n_z, n_q) and D (n_index, 4, 4)."""
    qh, ph = rest_frame_vectors(bs.z)
    t = bs.channel.basis(qh, ph)  # (k, n, m, 4, 4)
    d = projector(ph[0])
    tr = np.einsum("mab,kimba->ki", d, t)
    return complex(np.einsum("kq,ki,ikq->", integration_weights(bs), tr, chi))


@dataclass(frozen=True)
class Normalised:
    """A normalised bound state and what follows from it (√2 convention internally)."""

    mass_gev: float
    amplitude: np.ndarray = field(repr=False)  # normalised Γ coefficients, √2 convention
    wave_function: np.ndarray = field(repr=False)
    norm_nakanishi: complex
    norm_canonical: complex
    eigenvalue_slope: float   # dλ/dP² (GeV⁻²)
    decay_constant: float | None       # √2 convention; None: no decay constant for the channel
    decay_constant_imag: float | None
    condensate: float | None  # ρ, √2 convention (GeV²)
    condensate_imag: float | None
    norm_phase: complex = 1.0  # λ′ L of the final Γ: +1 for a normalisable state, −1 a ghost

    @property
    def normalisation_agreement(self) -> float:
        return abs(self.norm_canonical / self.norm_nakanishi - 1.0)


def _derivative_at(p2_points, values, p2):
    """d/dP² at P² = p2 of the interpolating polynomial through (p2_points, values)."""
    x = np.asarray(p2_points, dtype=float)
    c = np.polynomial.polynomial.polyfit(x - p2, np.asarray(values, dtype=complex), len(x) - 1)
    return complex(c[1])


def derivative_masses(mass: float) -> tuple[float, ...]:
    """Masses M(1 ± 10⁻³) at which λ and L are evaluated for the P² derivatives."""
    if not mass > 0:
        raise ValueError("normalisation needs M > 0 (see chiral_limit for a Goldstone boson)")
    return (mass * (1 - 1e-3), mass * (1 + 1e-3))


#: Masses (GeV) at which a chiral-limit Goldstone boson is solved off shell; its
#: normalisation and observables are extrapolated to M = 0 from them (errors O(M⁴)).
CHIRAL_PROBES_GEV = (0.01, 0.02)


def chiral_limit(n1: "Normalised", n2: "Normalised") -> "Normalised":
    """Richardson extrapolation in M² of two off-shell normalisations to M = 0.

    At P → 0 the subleading amplitudes (F, G, H) multiply γ·P and vanish from Γ, yet
    they contribute at O(1) to the normalisation; so the limit is taken from M > 0.
    The amplitude kept is that at the smaller mass (O(M²) from the limit)."""
    m1, m2 = n1.mass_gev, n2.mass_gev
    w = m1 * m1 / (m2 * m2 - m1 * m1)

    def ex(a, b):
        return None if a is None else a + (a - b) * w

    return Normalised(mass_gev=0.0, amplitude=n1.amplitude, wave_function=n1.wave_function,
                      norm_nakanishi=ex(n1.norm_nakanishi, n2.norm_nakanishi),
                      norm_canonical=ex(n1.norm_canonical, n2.norm_canonical),
                      eigenvalue_slope=ex(n1.eigenvalue_slope, n2.eigenvalue_slope),
                      decay_constant=ex(n1.decay_constant, n2.decay_constant),
                      decay_constant_imag=ex(n1.decay_constant_imag, n2.decay_constant_imag),
                      condensate=ex(n1.condensate, n2.condensate),
                      condensate_imag=ex(n1.condensate_imag, n2.condensate_imag),
                      norm_phase=n1.norm_phase)


def normalise(bs, mass: float, amp: np.ndarray, lam_at: dict, method: str = "nakanishi") -> Normalised:
    """Normalise ``amp`` (the eigenvector at ``mass`` > 0) given λ at ``derivative_masses``."""
    amp = amp.reshape(bs.shape)
    ms = derivative_masses(mass)
    p2 = [-(m * m) for m in ms]
    slope = _derivative_at(p2, [lam_at[m] for m in ms], -mass * mass).real
    l0 = loop(bs, amp, mass)
    n_nak = slope * l0
    n_can = _derivative_at(p2, [loop(bs, amp, m) for m in ms], -mass * mass)
    n2 = n_nak if method == "nakanishi" else n_can
    gamma = amp / np.sqrt(complex(n2))
    ch = bs.channel
    fz = bs.quark1.z2 ** 0.5 * bs.quark2.z2 ** 0.5

    def decay(m):
        chi_m = bs.wave_function(gamma, m)
        return fz * N_C * ch.decay_factor(m) / ch.polarisations * projected_integral(bs, chi_m, ch.decay_projector)

    chi = bs.wave_function(gamma, mass)
    if ch.decay_projector is not None:
        f = decay(mass)
        phase = abs(f) / f if f != 0 else 1.0
    else:
        # no decay constant registered for the channel: Γ/√N² is kept (λ′L = 1 for it),
        # its sign chosen so that the coefficient of largest modulus has Re > 0
        big = gamma.reshape(-1)[int(np.argmax(np.abs(gamma)))]
        f, phase = None, (1.0 if big.real >= 0 else -1.0)
    gamma = gamma * phase
    chi = chi * phase
    f = None if f is None else f * phase
    rho = rho_i = None
    if ch.condensate_projector is not None:
        # ρ is defined so that f M² = (m₁ + m₂) ρ: the AV-WTI carries Z₄₁m₁ + Z₄₂m₂, and
        # Z₄ differs between flavours where B(ζ²) = m fixes it (MOM-like scheme)
        msum = bs.quark1.mass_gev + bs.quark2.mass_gev
        z4 = ((bs.quark1.z4m + bs.quark2.z4m) / msum if msum > 0
              else 0.5 * (bs.quark1.z4 + bs.quark2.z4))
        r = ch.condensate_factor * z4 * N_C * projected_integral(bs, chi, ch.condensate_projector)
        rho, rho_i = float(r.real), float(r.imag)
    return Normalised(mass_gev=float(mass), amplitude=gamma, wave_function=chi,
                      norm_nakanishi=complex(n_nak), norm_canonical=complex(n_can),
                      eigenvalue_slope=float(slope), decay_constant=None if f is None else float(f.real),
                      decay_constant_imag=None if f is None else float(f.imag), condensate=rho,
                      condensate_imag=rho_i,
                      norm_phase=complex(phase * phase))


def pseudoscalar_standard_basis(bs, gamma: np.ndarray, mass: float) -> np.ndarray:
    """E, F, G, H with Γ = γ₅[iE + γ·P F + γ·q (q·P) G + σ_μν q_μ P_ν H] (shape (4, n_z, n_q)).

    The conversion from the internal covariants is derived numerically from explicit
    matrices at each node (no hand-typed formula).  Requires M > 0.
    """
    from ..numerics.dirac import GAMMA5, sigma, slash

    if mass <= 0:
        raise ValueError("the E, F, G, H basis needs M > 0")
    qh, ph = rest_frame_vectors(bs.z)  # (k, 4)
    P = 1j * mass * ph
    out = np.empty((4,) + gamma.shape[1:], dtype=complex)
    sig = np.stack([np.stack([sigma(m, n) for n in range(4)]) for m in range(4)])
    for iq, q2 in enumerate(bs.q2):
        qv = math.sqrt(q2) * qh
        qp = np.einsum("km,km->k", qv, P)
        std = np.stack([
            1j * np.broadcast_to(GAMMA5, (len(bs.z), 4, 4)),
            GAMMA5 @ slash(P),
            (GAMMA5 @ slash(qv)) * qp[:, None, None],
            GAMMA5 @ np.einsum("km,kn,mnab->kab", qv, P, sig),
        ], axis=1)[:, :, None]  # (k, 4, 1, 4, 4)
        r = np.stack([bs.channel.project(qh, ph, std[:, c]) for c in range(4)], axis=-1)  # (k, i, c)
        out[:, :, iq] = np.linalg.solve(r, gamma[:, :, iq].T[..., None])[..., 0].T
    return out


def leading_e(gamma: np.ndarray) -> np.ndarray:
    """E(q, z) of a pseudoscalar amplitude: the γ₅ coefficient is iE exactly."""
    return -1j * gamma[0]


"""Bound states: the exact rainbow-ladder identities, normalisation and numerics.

Sources (theorems of RL truncation with a translation-invariant regularisation): the
pseudoscalar BSE kernel at P = 0 on γ₅B is the gap equation's Σ_B (Goldstone); the
off-shell axial-vector Ward–Takahashi identity; f_P M_P² = (m₁+m₂) ρ_P (Maris, Roberts,
Tandy, PLB 420 (1998) 267); Goldberger–Treiman f E(q;0) = B₀(q²) (92 MeV convention);
Nakanishi = canonical normalisation; Gell-Mann–Oakes–Renner to O(m) (a few per cent,
common practice).  Reference library: scipy.linalg.eig for a dense cross-check.
"""

import math

import numpy as np
import pytest

from conftest import M_LIGHT, ZETA, mt_kernel, normalised_at
from rlmeson.meson import bse, identities, observables, search
from rlmeson.model import channels
from rlmeson.quark import gap


_normalised = normalised_at


def _solve(bs, guess, m_max=1.05):
    sol = search.find_mass(bs, guess, m_max)
    return sol.mass_gev, _normalised(bs, sol.mass_gev, sol.eigenvector)


@pytest.fixture(scope="module")
def pion_ti_solved(pion_ti):
    return _solve(pion_ti, 0.137)


@pytest.fixture(scope="module")
def pion_hard_solved(pion_hard):
    return _solve(pion_hard, 0.138)


@pytest.mark.parametrize("fixture", ["chiral_hard", "chiral_ti"])
def test_kernel_reproduces_the_gap_equation_at_zero_momentum(fixture, request):
    sol = request.getfixturevalue(fixture)
    bs = bse.BoundState(sol.kernel, channels.get("pseudoscalar"), bse.BSEGrid(), sol, continuation="direct")
    q2, rel = identities.kernel_vs_gap(bs)
    assert rel[q2 < 10].max() < 1e-5
    assert rel[q2 < 1e3].max() < 1e-4
    assert rel.max() < 1e-5                                # measured ≤ 2e-6 up to the grid end


@pytest.mark.parametrize("fixture", ["chiral_hard", "chiral_ti"])
def test_goldstone_eigenvalue_is_one_in_the_chiral_limit(fixture, request):
    sol = request.getfixturevalue(fixture)
    bs = bse.BoundState(sol.kernel, channels.get("pseudoscalar"), bse.BSEGrid(), sol, continuation="direct")
    lam = bs.eigen(0.0, k=2)[0]
    assert abs(lam[0].real - 1.0) < 1e-4
    # the pion is isolated: the next eigenvalue near P² = 0 is measured at 0.58 (the
    # pion of mt-pion.toml, "next λ" in the results table); 0.9 only excludes a
    # near-degenerate second state
    assert lam[1].real < 0.9


@pytest.mark.parametrize("mass", [0.3, 0.5, 0.7])
def test_offshell_axial_ward_identity_translation_invariant(pion_ti, mass):
    r = identities.av_wti_offshell(pion_ti, mass)
    assert r["gmres_info"] == 0
    assert r["max_relative_deviation"] < 1e-6


def test_offshell_axial_ward_identity_hard_cutoff_shrinks_with_the_cutoff(light_hard):
    """A regularisation artefact: ~1.7% at Λ² = 1e5 GeV², smaller at 1e7 (like 1/ln Λ²)."""
    devs = []
    for lam2 in (1e5, 1e7):
        k = mt_kernel("hard-cutoff", cutoff_gev2=lam2)
        sol = light_hard if lam2 == 1e5 else gap.solve(k, M_LIGHT, ZETA)
        bs = bse.BoundState(k, channels.get("pseudoscalar"), bse.BSEGrid(), sol)
        devs.append(identities.av_wti_offshell(bs, 0.3)["max_relative_deviation"])
    # measured 1.7–2.2e-2 at Λ² = 1e5 GeV² (README); the band is a factor ~3 each side
    assert 0.005 < devs[0] < 0.05
    # a surface term ∝ 1/ln Λ² gives ln(1e5)/ln(1e7) = 0.71 (derived); 0.85 leaves room for
    # the subleading terms while excluding no shrinkage
    assert devs[1] < 0.85 * devs[0]


def test_onshell_axial_identity_and_normalisations_translation_invariant(pion_ti_solved):
    m, n = pion_ti_solved
    f, rho = n.decay_constant, n.condensate
    assert abs((f * m**2 - 2 * M_LIGHT * rho) / (f * m**2)) < 1e-3
    assert n.normalisation_agreement < 1e-3
    assert abs(n.condensate_imag) < 1e-8 * abs(rho)          # ρ is real once f is made real
    assert abs(n.norm_phase - 1) < 1e-8                       # a normalisable state, not a ghost


def test_onshell_axial_identity_hard_cutoff_records_the_artefact(pion_hard_solved):
    m, n = pion_hard_solved
    f, rho = n.decay_constant, n.condensate
    res = (f * m**2 - 2 * M_LIGHT * rho) / (f * m**2)
    assert 0.01 < res < 0.025                              # ~1.7% at Λ² = 1e5 GeV² (team sheet)
    assert n.normalisation_agreement < 1e-3


def test_gell_mann_oakes_renner(pion_ti_solved, chiral_ti):
    m, n = pion_ti_solved
    f92 = n.decay_constant / math.sqrt(2)
    cond = chiral_ti.condensate_cbrt() ** 3               # −⟨q̄q⟩⁰ at ζ
    assert f92**2 * m**2 == pytest.approx(2 * M_LIGHT * cond, rel=0.05)


def test_goldberger_treiman_in_the_chiral_limit(chiral_ti):
    bs = bse.BoundState(chiral_ti.kernel, channels.get("pseudoscalar"), bse.BSEGrid(), chiral_ti)
    lead = search.Leading(bs)
    lead(0.0)
    norms = []
    for m in observables.CHIRAL_PROBES_GEV:
        lead(m)
        norms.append(_normalised(bs, m, lead.vec))
    n = observables.chiral_limit(*norms)
    assert n.normalisation_agreement < 1e-3
    e = observables.leading_e(n.amplitude)                 # √2 convention
    _, b0 = chiral_ti.dressing(bs.q2)
    gt = (n.decay_constant / math.sqrt(2)) * (e / math.sqrt(2)) / b0[None, :]   # 92 MeV convention
    assert np.max(np.abs(gt - 1)) < 1e-3


def test_iterative_and_dense_eigenvalues_agree_on_a_small_grid(light_hard):
    grid = bse.BSEGrid(widths=(8.0, 3.0, 6.0, 6.0), n_z=4)
    bs = bse.BoundState(light_hard.kernel, channels.get("pseudoscalar"), grid, light_hard)
    it = bs.eigen(0.138, k=2)[0]
    dense = bs.eigen_dense(0.138)[0]
    assert np.allclose(it.real, dense[:2].real, atol=1e-10)


def test_grid_convergence_of_pion_mass_and_decay_constant(pion_ti, pion_ti_solved, light_ti):
    m, n = pion_ti_solved
    fine = bse.BoundState(light_ti.kernel, channels.get("pseudoscalar"),
                          bse.BSEGrid(widths=(4.0, 0.8, 2.0, 2.0), n_z=12), light_ti)
    m2, n2 = _solve(fine, m)
    assert abs(m2 / m - 1) < 1e-4
    assert abs(n2.decay_constant / n.decay_constant - 1) < 1e-4


def test_vector_normalisations_agree(mt_ti, light_ti):
    bs = bse.BoundState(mt_ti, channels.get("vector"), bse.BSEGrid(), light_ti)
    m, n = _solve(bs, 0.72)
    assert n.normalisation_agreement < 1e-3
    assert abs(n.norm_phase - 1) < 1e-8


def test_results_do_not_depend_on_the_translation_invariant_regulator(light_ti):
    """Λ_R² → ∞ limit reached (team sheet: show stability as Λ_R grows): Λ_R² = 1e6 and
    1e8 GeV² (integrals to 1e5 Λ_R²) give the same pion to 1e-5."""
    out = []
    for lr in (1e6, 1e8):
        k = mt_kernel("translation-invariant", regulator_gev2=lr, grid_end_gev2=1e5 * lr)
        sol = light_ti if lr == 1e6 else gap.solve(k, M_LIGHT, ZETA)
        out.append(_solve(bse.BoundState(k, channels.get("pseudoscalar"), bse.BSEGrid(), sol), 0.1366))
    (m1, n1), (m2, n2) = out
    assert abs(m2 / m1 - 1) < 1e-5
    assert abs(n2.decay_constant / n1.decay_constant - 1) < 1e-5

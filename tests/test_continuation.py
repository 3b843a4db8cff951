"""Propagators at complex momenta q + ηP: the shifted (quark-routed) solve and the
direct continuation, their covariance and their agreement.

Sources (analytic theorems): Poincaré covariance — S⁻¹(x) = iγ·x A(x²) + B(x²), so one A
for the γ·q_T and γ·P̂ parts, no σ_μν part, equal A, B at equal x²; translation invariance
of the regulated loop — for a real shift the solve must reproduce the translated
real-axis solution; the surface term iγ·c δ of a linearly divergent integral under a
shift c with a hard cutoff, δ = Z₂² 3C_F g(Λ²)Λ²/(32π² A(Λ²)) (team sheet, derived by
expanding the shifted ball to first order in c).
"""

import numpy as np
import pytest

from conftest import M_LIGHT, ZETA, mt_kernel
from models_for_tests import TAME_PARAMS
from rlmeson.quark import gap, routed
from rlmeson.model import ladder
from rlmeson.numerics import quadrature as qd
from rlmeson.model.kernel import Kernel

GRID_WIDTHS = (3.0, 1.2, 3.0, 3.0)  # finer in the infrared than the BSE default: these tests interpolate


def _grid(kernel, n_z=16, widths=GRID_WIDTHS):
    return ladder.LadderGrid(qd.radial_grid(1e-4, kernel.q2_max, widths, 8), n_z)


@pytest.fixture(scope="module")
def tame_ti():
    k = Kernel("models_for_tests:tame", TAME_PARAMS, regularisation="translation-invariant", grid_end_gev2=1e11)
    return k, gap.solve(k, M_LIGHT, ZETA)


@pytest.fixture(scope="module")
def tame_hard():
    k = Kernel("models_for_tests:tame", TAME_PARAMS, regularisation="hard-cutoff")
    return k, gap.solve(k, M_LIGHT, ZETA)


@pytest.fixture(scope="module")
def shifted_ti(mt_ti, light_ti):
    return routed.ShiftedSolver(light_ti, _grid(mt_ti))


@pytest.fixture(scope="module")
def shifted_ti_fine(mt_ti, light_ti):
    """Finer in the transition zone: for the tests that interpolate off the nodes or
    compare with the real axis at shifted points."""
    return routed.ShiftedSolver(light_ti, _grid(mt_ti, widths=(3.0, 0.6, 3.0, 3.0)))


def _direct(sol, sp):
    a, b = sol.dressing(sp.x2.ravel())
    return a.reshape(sp.x2.shape), b.reshape(sp.x2.shape)


def _low(sp, q2max=50.0):
    return sp.q2 < q2max


def _all(sp):
    return np.ones(sp.q2.shape, dtype=bool)


@pytest.mark.parametrize("mass", [0.3, 0.7])
def test_shifted_propagator_is_covariant(shifted_ti, mass):
    sp = shifted_ti.solve(mass, 0.5)
    sel = _all(sp)
    assert np.max(np.abs(sp.A_transverse / sp.A_longitudinal - 1)[:, sel]) < 1e-6
    assert np.max(np.abs(sp.tensor_part)) < 1e-12 * np.max(np.abs(sp.X))


def test_equal_x2_from_different_masses_gives_equal_dressing(shifted_ti_fine):
    rad = shifted_ti_fine.grid.radial
    s1, s2 = shifted_ti_fine.solve(0.3, 0.5), shifted_ti_fine.solve(0.6, 0.5)
    x2 = s1.x2  # (k, q) at M = 0.3; reach the same points from M = 0.6
    m2 = 0.6 * 0.5
    q2_2 = x2.real + m2**2
    z_2 = x2.imag / (2 * m2 * np.sqrt(q2_2))
    ok = (np.abs(z_2) < 0.8) & (s1.q2[None, :] > 0.05) & (s1.q2[None, :] < 10)
    a2, b2 = s2.dressing_at(rad, q2_2[ok], z_2[ok])
    assert ok.sum() > 20
    assert np.max(np.abs(a2 / s1.A_transverse[ok] - 1)) < 1e-6
    assert np.max(np.abs(b2 / s1.B[ok] - 1)) < 1e-6


@pytest.mark.parametrize("mass", [0.3, 0.6])
def test_real_shift_reproduces_the_translated_real_axis_solution(shifted_ti_fine, light_ti, mass):
    """P = iM P̂ with imaginary M is a real translation: S(q + c) = S_real((q + c)²)."""
    sp = shifted_ti_fine.solve(-1j * mass, 0.5)
    a, b = light_ti.dressing(sp.x2.real.ravel())
    a, b = a.reshape(sp.x2.shape), b.reshape(sp.x2.shape)
    sel = _low(sp)
    assert np.max(np.abs(sp.A_transverse / a - 1)[:, sel]) < 1e-6
    assert np.max(np.abs(sp.B / b - 1)[:, sel]) < 2e-6


@pytest.mark.parametrize("mass", [0.3, 0.5])
def test_shifted_and_direct_agree_for_an_interaction_regular_at_zero(tame_ti, mass):
    k, sol = tame_ti
    sp = routed.ShiftedSolver(sol, _grid(k, widths=(3.0, 0.6, 3.0, 3.0))).solve(mass, 0.5)
    a, b = _direct(sol, sp)
    sel = _low(sp)
    assert np.max(np.abs(sp.A_transverse / a - 1)[:, sel]) < 1e-6
    assert np.max(np.abs(sp.B / b - 1)[:, sel]) < 1e-6


def test_direct_continuation_departs_when_g_of_zero_is_finite(shifted_ti, light_ti):
    """The documented failure of the direct route for Maris–Tandy (g(0) ≠ 0): a real
    difference in A, far above the quadrature precision, absent for the tame model."""
    sp = shifted_ti.solve(0.3, 0.5)
    a, _ = _direct(light_ti, sp)
    dev = np.max(np.abs(sp.A_transverse / a - 1)[:, _low(sp)])
    # measured 3e-4 (README, "Continuation"); the band, a decade each side, only
    # excludes agreement at the quadrature level (≤ 1e-6, the tame model) and an O(1) error
    assert 5e-5 < dev < 5e-3


@pytest.mark.parametrize("reg", ["translation-invariant", "hard-cutoff"])
def test_at_zero_mass_both_reproduce_the_real_axis(reg):
    """M → 0: the shifted solve, on the real-axis solve's own radial nodes and quadrature,
    returns the real-axis solution; the direct evaluation does so by construction.
    (The shifted kernel interpolates a different function between nodes than the gap
    rows do, so this needs the finer radial grid used here; the largest deviation, 2e-9,
    sits at the node next to the zone boundary at 100 GeV², all others are ≤ 1e-11.)"""
    k = mt_kernel(reg)
    sol = gap.solve(k, M_LIGHT, ZETA, gap.GapGrid(widths=(2.0, 0.9, 1.8, 1.8), angular_half=64))
    sp = routed.ShiftedSolver(sol, ladder.LadderGrid(sol.radial, 4, angular_half=64)).solve(0.0, 0.5)
    a, b = sol.dressing(sp.q2)
    assert np.max(np.abs(sp.A_transverse / a[None] - 1)) < 3e-9
    assert np.max(np.abs(sp.B / b[None] - 1)) < 1e-9
    ad, bd = _direct(sol, sp)
    assert np.max(np.abs(ad / a[None] - 1)) < 1e-12 and np.max(np.abs(bd / b[None] - 1)) < 1e-12


def test_hard_cutoff_surface_term_matches_the_closed_form(tame_hard):
    """The shifted loop applied to the covariant (direct) propagator differs from the
    direct self-energy by iγ·c δ: only the γ·P̂ part moves, by −ηMδ, with δ the closed form."""
    k, sol = tame_hard
    solver = routed.ShiftedSolver(sol, _grid(k), subtract_boundary=False)
    delta = routed.boundary_delta(sol)
    # measured δ ≈ 0.016 at Λ² = 1e5 GeV² (README); the band only excludes a vanished or
    # an order-one surface term -- its value is checked against the loop below, to 1e-3
    assert 0.005 < delta < 0.05
    mass, eta = 0.2, 0.5
    x2 = routed.shifted_x2(solver.q2, solver.z, mass, eta)
    a, b = sol.dressing(x2.ravel())
    a, b = a.reshape(x2.shape), b.reshape(x2.shape)
    cov = routed.covariant_inverse(solver.q2, solver.z, mass, eta, a, b)
    diff = solver.self_energy(cov) - (cov - solver.free_part(mass, eta))
    sel = (solver.q2 > 1e-3) & (solver.q2 < 10)
    measured = -diff[2][:, sel] / (eta * mass)
    assert np.max(np.abs(measured / delta - 1)) < 1e-3
    q = np.sqrt(solver.q2)[None, sel]
    others = max(np.max(np.abs(diff[0][:, sel])), np.max(np.abs(diff[1][:, sel] / q)), np.max(np.abs(diff[3])))
    assert others < 1e-3 * eta * mass * delta


def test_translation_invariant_has_no_surface_term(tame_ti):
    k, sol = tame_ti
    assert routed.boundary_delta(sol) == 0.0


def test_spacelike_twin_interpolates_the_real_axis_solution(pion_hard, light_hard):
    """At spacelike P both quark momenta are real Euclidean vectors, where the direct
    evaluation of the self-energy is the real-axis solution; the spacelike twin takes it
    from the solution's own interpolant on its nodes (``propagators.dress_on_axis``)
    instead.  Its leading eigenvalues at P² = 0.3 GeV² agree with the direct evaluation
    to ≤ 1e-6 (measured ≤ 4e-8 for the two leading eigenvalues of the pseudoscalar and
    vector at P² = 0.1 and 0.3 GeV²: the interpolant is good to ≤ 5e-6 in A and B, median 1e-7)
    — source: the gap equation's Nyström solution is defined off its nodes by the same
    quadrature (common practice)."""
    from rlmeson.meson import bse

    twin = pion_hard.spacelike_twin()
    exact = bse.BoundState(pion_hard.kernel, pion_hard.channel, pion_hard.grid, light_hard,
                           eta=pion_hard.eta, kernel_operator=pion_hard.ladder, continuation="direct")
    mass = 1j * np.sqrt(0.3)
    got, _ = twin.eigen(mass, k=2)
    ref, _ = exact.eigen(mass, k=2)
    assert np.max(np.abs(got - ref) / np.abs(ref)) < 1e-6

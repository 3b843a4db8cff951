"""The shifted continuation at any momentum partition η, for unequal flavours: each quark
on its own shifted momenta, flavour 1 at q + ηP, flavour 2 at q − (1−η)P.

Sources: Poincaré covariance — with a translation-invariant regularisation the BSE
eigenvalues, hence the mass, do not depend on how P is shared between the quark lines
(an exact property; checking it is common practice); the reflection x₄ → −x₄ maps the
family q + P/2 onto q − P/2 (an exact symmetry of the gap equation, used by the η = 1/2
path for one flavour); f_P M_P² = (m₁ + m₂) ρ_P, exact in rainbow-ladder (Maris, Roberts
& Tandy, PLB 420 (1998) 267, from memory); M_max(η) = min(|Im √s₁|/η, |Im √s₂|/(1−η))
from where each quark's momenta q ± … stay clear of its nearest singularity s_i
(geometry of the parabola x² = q² − η²M² + 2iηM q z, apex −η²M²).

The heavier quark, m(19 GeV) = 0.09 GeV, is a stand-in for the strange quark (not a fit).
Grids are reduced (6 z nodes, order-6 panels); the numbers quoted were measured on them.
With the hard cutoff (Λ² = 1e5 GeV², boundary term subtracted) the same unequal-mass
pseudoscalar moved by 7.8e-7 between η = 0.5 and 0.4 and by 1.8e-6 to 0.3, the pion by
1.5e-8 (0.4) and 6.2e-8 (0.3) — measured, not tested; on the default grid the kaon-like
state at its default η = 0.416 moved by 9e-10 to η = 0.316 (translation-invariant:
1.1e-8).  Its f M² = (m₁ + m₂)ρ residual with the hard cutoff is 1.66e-2, as for the pion
(README).
"""

import dataclasses

import numpy as np
import pytest

from conftest import ZETA, normalised_at
from rlmeson.meson import bse, observables, search
from rlmeson.model import channels
from rlmeson.quark import gap
from rlmeson.workflows import pipeline

GRID = bse.BSEGrid(n_z=6, order=6)
M_HEAVY = 0.09  # GeV at ζ = 19 GeV: a strange-like stand-in
M_MAX = 1.05    # below the light quark's M_max(1/2) = 1.07 GeV (README) and the heavier one's
#: Shifted gap solves converged to 1e-13 (floor ≈ 1e-14) where two routes are compared to
#: 1e-8: at the default 1e-11 the warm starts of the two routes leave S different at that
#: level, and the normalisation's slope dλ/dP² (from λ at M(1 ± 1e-3), Δλ ≈ 1e-4) turns it
#: into 7e-9 in f_π (measured; 1.7e-9 in f_ρ, 1e-11 in the masses).
TIGHT = 1e-13


_normalised = normalised_at


def _solve(bs, guess, step=0.15):
    sol = search.find_mass(bs, guess, M_MAX, step=step)
    return sol.mass_gev, _normalised(bs, sol.mass_gev, sol.eigenvector)


@pytest.fixture(scope="module")
def heavy_ti(mt_ti):
    return gap.solve(mt_ti, M_HEAVY, ZETA)


@pytest.fixture(scope="module")
def pion_half(mt_ti, light_ti):
    """The pion at η = 1/2 through the reflected path (one shifted solve per mass)."""
    bs = bse.BoundState(mt_ti, channels.get("pseudoscalar"), GRID, light_ti, shifted_tol=TIGHT)
    return bs, _solve(bs, 0.137)


@pytest.fixture(scope="module")
def kaonlike(mt_ti, light_ti, heavy_ti):
    """Light (flavour 1) and heavier (flavour 2) pseudoscalar at η = 1/2."""
    bs = bse.BoundState(mt_ti, channels.get("pseudoscalar"), GRID, light_ti, heavy_ti, eta=0.5)
    return bs, _solve(bs, 0.5)


def test_general_path_reproduces_the_reflected_pion_at_half(pion_half):
    """Reflection symmetry: flavour 2 solved on q − P/2 (negative fraction) gives what the
    reflection of the q + P/2 solve gives.  Measured: mass 2e-13, f 1.5e-10 (at the
    default shifted tolerance: 1e-11 and 7e-9, see TIGHT); the shifted propagators
    themselves agree to 2e-14 from equal starts."""
    bs, (mass, n) = pion_half
    general = bse.BoundState(bs.kernel, bs.channel, GRID, bs.quark1, reflect=False,
                             kernel_operator=bs.ladder, quark_operator=bs._qop, shifted_tol=TIGHT)
    assert bs._reflect and not general._reflect and general._shifted2 is not None
    m2, n2 = _solve(general, mass, step=0.01)
    assert abs(m2 / mass - 1) < 1e-8
    assert abs(n2.decay_constant / n.decay_constant - 1) < 1e-8


def test_general_path_reproduces_the_reflected_rho_at_half(mt_ti, light_ti):
    """As above for the vector channel (eight covariants, three polarisations).  Measured:
    mass 1e-14, f 9e-12 (default tolerance: 2e-12, 1.7e-9)."""
    grid = bse.BSEGrid(n_z=4, order=6)
    bs = bse.BoundState(mt_ti, channels.get("vector"), grid, light_ti, shifted_tol=TIGHT)
    sol = search.find_mass(bs, 0.73, M_MAX)
    n = _normalised(bs, sol.mass_gev, sol.eigenvector)
    general = bse.BoundState(mt_ti, channels.get("vector"), grid, light_ti, reflect=False,
                             kernel_operator=bs.ladder, quark_operator=bs._qop, shifted_tol=TIGHT)
    sol2 = search.find_mass(general, sol.mass_gev, M_MAX, step=0.01)
    n2 = _normalised(general, sol2.mass_gev, sol2.eigenvector)
    assert abs(sol2.mass_gev / sol.mass_gev - 1) < 1e-8
    assert abs(n2.decay_constant / n.decay_constant - 1) < 1e-8


def test_pion_mass_does_not_depend_on_eta(pion_half):
    """Poincaré covariance, translation-invariant regularisation: η = 0.5 against 0.4
    (``pipeline.eta_spread_of``, the function behind ``eta_spread_gev``).  The issue asks
    ≤ 1e-4; measured 1.8e-8, asserted 1e-6."""
    bs, (mass, _) = pion_half
    eta2, spread = pipeline.eta_spread_of(bs, mass, lambda e: M_MAX)
    assert eta2 == pytest.approx(0.4)
    assert spread / mass < 1e-6


def test_unequal_mass_pseudoscalar_does_not_depend_on_eta(kaonlike):
    """Poincaré covariance with two flavours, each on its own shifted family: η = 0.5
    against 0.4.  The issue asks ≤ 1e-3; measured 8.7e-7 (0.4), 4.1e-7 (0.6), 2.0e-6
    (0.3): asserted 1e-5."""
    bs, (mass, _) = kaonlike
    eta2, spread = pipeline.eta_spread_of(bs, mass, lambda e: M_MAX)
    assert eta2 == pytest.approx(0.4)
    assert spread / mass < 1e-5


def test_unequal_mass_vector_does_not_depend_on_eta(mt_ti, light_ti, heavy_ti):
    """Poincaré covariance in the vector channel with unequal masses (a K*-like state),
    default grid: η = 0.5 against 0.4.  The issue asks ≤ 1e-3; measured 8.5e-7 (1.6e-7
    for the equal-mass ρ).  The spread is a resolution diagnostic: with 4 z nodes and
    order-6 panels both move by 2e-4, with 8 nodes and order 6 by 1e-5."""
    bs = bse.BoundState(mt_ti, channels.get("vector"), bse.BSEGrid(), light_ti, heavy_ti, eta=0.5)
    mass = search.find_mass(bs, 0.93, M_MAX, step=0.02).mass_gev
    eta2, spread = pipeline.eta_spread_of(bs, mass, lambda e: M_MAX)
    assert eta2 == pytest.approx(0.4)
    assert spread / mass < 1e-5


def test_unequal_mass_axial_identity(kaonlike):
    """f_P M_P² = (m₁ + m₂) ρ_P for the light–heavier pseudoscalar, translation-invariant
    regularisation (Maris, Roberts & Tandy 1998).  The issue asks ≤ 1e-3; measured 5.0e-6
    at η = 0.5 (4.9e-6 at 0.4, 5.6e-6 at 0.6) on this grid: asserted 5e-5."""
    bs, (mass, n) = kaonlike
    msum = bs.quark1.mass_gev + bs.quark2.mass_gev
    lhs = n.decay_constant * mass**2
    assert abs((lhs - msum * n.condensate) / lhs) < 5e-5
    assert n.normalisation_agreement < 1e-5  # Nakanishi = canonical; measured 3.6e-7


@pytest.mark.parametrize("fixture", ["light_ti", "light_hard"])
def test_negative_fraction_is_the_reflection_of_the_positive_one(fixture, request):
    """The second quark's family q − (1−η)P solved as the shift by −(1−η) equals the
    reflection x₄ → −x₄ of the solve at +(1−η) (coefficients (s₀, s₁, −s₂, −s₃) at −z),
    here at η = 0.4, with the hard cutoff's boundary term too.  Measured 2.6e-14 (TI) and
    2.3e-14 (hard cutoff) relative to S at each radial node: the two solves differ only by
    rounding, as an exact symmetry of the discretised equation should."""
    from rlmeson.model import ladder
    from rlmeson.quark import propagators, routed

    sol = request.getfixturevalue(fixture)
    grid = ladder.LadderGrid(GRID.radial(sol.kernel.q2_max), 6)
    solver = routed.ShiftedSolver(sol, grid)
    minus = solver.solve(0.5, -0.6).coefficients_of_S()
    plus = solver.solve(0.5, 0.6).coefficients_of_S()
    scale = np.max(np.abs(plus), axis=(0, 1))  # per radial node (S falls like 1/q)
    assert np.max(np.abs(minus - propagators.reflected(plus)) / scale) < 1e-12


def _quark_result(sol, s_gev2, flavour):
    """A QuarkResult with a given confirmed nearest singularity (M_max at η = 1/2 from it)."""
    s = None if s_gev2 is None else complex(s_gev2)
    m_max = float("inf") if s is None else 2.0 * abs(np.sqrt(s).imag)
    return pipeline.QuarkResult(flavour=flavour, key=flavour, solution=sol,
                                mass_function_at_zero_gev=sol.mass_function_at_zero(),
                                max_bound_state_mass_gev=m_max, singularity_gev2=s,
                                singularity_check=None if s is None else 0.01,
                                condensate_cbrt_gev=None, seconds=0.0, from_cache=False)


def test_default_eta_maximises_the_accessible_mass(light_ti, heavy_ti):
    """The default η of unequal flavours maximises M_max(η) = min(a₁/η, a₂/(1−η)) —
    checked against a brute-force scan; equal flavours get 1/2; without a known
    singularity the dressed masses M(0) weight it."""
    q1 = _quark_result(light_ti, -0.198 + 0.319j, "l")   # Maris–Tandy light quark (README)
    q2 = _quark_result(heavy_ti, -0.30 + 0.52j, "s")     # an illustrative, farther one
    meson = pipeline.MesonConfig("k", "pseudoscalar", ("l", "s"))
    eta, how = pipeline.meson_eta(meson, q1, q2)
    grid = np.linspace(0.01, 0.99, 9801)
    a1, a2 = (abs(np.sqrt(q.singularity_gev2).imag) for q in (q1, q2))
    reach = np.minimum(a1 / grid, a2 / (1 - grid))
    assert abs(eta - grid[np.argmax(reach)]) < 2e-4 and "singularit" in how
    assert pipeline.mass_limit(q1, q2, eta) == pytest.approx(reach.max(), rel=3e-4)  # the scan's step
    assert pipeline.mass_limit(q1, q2, eta) > pipeline.mass_limit(q1, q2, 0.5)
    assert pipeline.meson_eta(dataclasses.replace(meson, quarks=("l", "l")), q1, q1)[0] == 0.5
    assert pipeline.meson_eta(dataclasses.replace(meson, eta=0.3), q1, q2) == (0.3, "set in the config")
    unknown = _quark_result(heavy_ti, None, "s")
    eta_f, how_f = pipeline.meson_eta(meson, q1, unknown)
    m1, m2 = light_ti.mass_function_at_zero(), heavy_ti.mass_function_at_zero()
    assert eta_f == pytest.approx(m1 / (m1 + m2)) and "M1(0)" in how_f


def test_an_unequal_flavour_result_is_validated_unless_its_mass_moves_with_eta(light_ti):
    """The summary's ``validated`` for the shifted route with unequal flavours: true with
    an η spread at the level measured above, false (with the reason) when the mass moves
    by more than ETA_SPREAD_TOLERANCE; the direct route stays unvalidated."""
    n = observables.Normalised(mass_gev=0.5, amplitude=np.zeros(1), wave_function=np.zeros(1), norm_nakanishi=1.0,
                               norm_canonical=1.0, eigenvalue_slope=-1.0, decay_constant=0.1,
                               decay_constant_imag=0.0, condensate=0.5, condensate_imag=0.0)

    def summary(spread, continuation="shifted"):
        core = pipeline.BoundStateCore(mass_gev=0.5, chiral=False, normalised=n, next_eigenvalue=0.5,
                                       goldstone_residual=None, curve=search.EigenCurve(), evaluations=1,
                                       q2=np.zeros(1), z=np.zeros(1), shifted_residual=None,
                                       eta_spread_gev=spread, eta_spread_second_eta=None if spread is None else 0.32)
        return pipeline.MesonResult(name="k", channel="pseudoscalar", quarks=("l", "s"), key="k", core=core,
                                    coarse=None, convention="92", current_masses_gev=(0.004, 0.09), seconds=0.0,
                                    continuation=continuation, eta=0.42, eta_method="test").summary()

    good = summary(5e-9)
    assert good["validated"] is True and good["eta_spread_gev"] == 5e-9 and good["eta_spread_second_eta"] == 0.32
    bad = summary(0.5 * 2e-3)
    assert bad["validated"] is False and "moves" in bad["validation_reason"]
    assert summary(None)["eta_spread_gev"] is None
    direct = summary(None, "direct")
    assert direct["validated"] is False and "unequal flavours" in direct["validation_reason"]


@pytest.mark.parametrize("bad", ['"yes"', "1"])
def test_eta_spread_key_is_checked(bad):
    """The meson key ``eta_spread`` asks for the η spread where it is not computed by
    default (equal flavours): true/false only, one-line error otherwise; in the hash."""
    from rlmeson.io import config

    text = ('name = "x"\n[quarks.l]\ncurrent_mass_gev = 0.005\n'
            f'[[mesons]]\nname = "pi"\nchannel = "pseudoscalar"\neta_spread = {bad}\n')
    with pytest.raises(config.ConfigError, match="eta_spread"):
        config.parse(text)
    on = config.parse(text.replace(f"eta_spread = {bad}", "eta_spread = true"))
    off = config.parse(text.replace(f"eta_spread = {bad}\n", ""))
    assert on.mesons[0].eta_spread is True and off.mesons[0].eta_spread is None
    assert on.hash() != off.hash()


def test_eta_spread_on_request_for_equal_flavours():
    """An equal-flavour pion with ``eta_spread = true``: its mass again at η = 0.4 agrees
    with η = 1/2 to ≤ 1e-6 relative (Poincaré covariance; translation-invariant
    regularisation, reduced grid: measured 2.2e-7)."""
    import tomllib
    from pathlib import Path

    import rlmeson
    from rlmeson.workflows import pipeline

    raw = tomllib.loads((Path(__file__).resolve().parents[1] / "configs" / "mt-pion-ti.toml").read_text())
    raw["mesons"] = [dict(m, eta_spread=True) for m in raw["mesons"] if m["channel"] == "pseudoscalar"]
    cfg = rlmeson.load_config(raw, ["numerics.bse.order=6", "numerics.bse.z_points=4",
                                    "numerics.bse.angular_points=16", "output.error_bar=false"])
    res = pipeline.run(cfg, None)
    m = res.mesons[0].summary()
    assert m["eta_spread_gev"] is not None and m["eta_spread_second_eta"] != 0.5
    assert m["eta_spread_gev"] < 1e-6 * m["mass_gev"]

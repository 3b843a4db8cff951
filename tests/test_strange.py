"""The strange sector of the shipped configs (configs/mt-strange-ti.toml, translation-
invariant regularisation; mt-strange.toml, hard cutoff, for the recorded spreads), default
grids, through the pipeline (``solve_quark``, ``bound_state`` with the η spread).

Sources: Poincaré covariance (the mass does not depend on the momentum partition η with a
translation-invariant regularisation; an exact property, checking it is common practice);
f_K m_K² = (m_l + m_s) ρ_K, exact in rainbow-ladder (Maris, Roberts & Tandy, PLB 420
(1998) 267, from memory); PDG f_K/f_π = 155.7/130.2 = 1.196 (from memory); the K⁺, K*(892)⁺
and φ(1020) masses from the `particle` package; RL with these interactions misses vector
masses by several per cent, not always from below (common practice), hence 7% bands.

Measured on the default grids (m_s = 86.01 MeV TI, 84.33 MeV hard cutoff):
  TI: η spread (relative) of the pion 3.0e-10, the kaon 1.1e-8 (η = 0.419 against 0.319),
  the K* 1.4e-6, the ρ 1.5e-7, the φ 2.3e-6; the kaon's AV-WTI residual 1.4e-7;
  f_K/f_π = 0.106615/0.090363 = 1.1798 (−1.3% from 1.196); K* 0.92304 GeV (+3.5% from
  0.89188), φ 1.05896 GeV (+3.9% from 1.01946); the ρ 0.72576 GeV (−6.4% from 0.77526).
  Hard cutoff (mt-strange.toml; recorded, not asserted): η spread of the pion 4.8e-10,
  the kaon 4.0e-10, the K* 1.8e-6, the ρ 1.0e-7, the φ 2.2e-6 — no larger than with TI
  (the vectors' spread is the grid's, see test_eta.py); AV-WTI residual
  1.66e-2 (as for the pion: the cutoff's violation of the identity, README);
  f_K/f_π = 1.1774 (−1.5%), K* 0.93057 (+4.3%), φ 1.06597 (+4.6%), ρ 0.73470 (−5.2%).
Tolerances: the issue's (covariance ≤ 1e-3 / 1e-4, identity ≤ 1e-3, 5%, 7%); the
measured values lie far inside them, so these tests guard the physics, not the last digit.
Cost on two shared, busy cores: 20–75 s per default-grid state with its η spread.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from particle import Particle

import rlmeson
from rlmeson.workflows import pipeline

CONFIGS = Path(__file__).resolve().parents[1] / "configs"
PDG_FK_OVER_FPI = 155.7 / 130.2   # PDG (from memory)
SPREAD = ("pion", "kaon", "kstar")


def _gev(name: str) -> float:
    return Particle.from_name(name).mass / 1000.0


@pytest.fixture(scope="module")
def ti():
    """meson(name) -> the bound state (``pipeline.bound_state``, default grid, the η spread
    for the states whose tests need it; no λ(P²) figure data) and its current masses."""
    cfg = rlmeson.load_config(CONFIGS / "mt-strange-ti.toml")
    store = pipeline.store_of(cfg)
    quarks = {f.name: pipeline.solve_quark(cfg, f.name, store) for f in cfg.flavours}
    grid = pipeline.bse_grid_of(cfg)
    cache = {}

    def meson(name: str):
        if name not in cache:
            m = next(x for x in cfg.mesons if x.name == name)
            core = pipeline.bound_state(cfg, m, quarks, grid, eta_spread=name in SPREAD)
            cache[name] = core, sum(quarks[q].solution.mass_gev for q in m.quarks), \
                pipeline.meson_eta(m, quarks[m.quarks[0]], quarks[m.quarks[1]])[0]
        return cache[name]

    return meson


@pytest.mark.slow
def test_kaon_mass_is_the_charged_kaon_mass(ti):
    """The config's m_s was fitted (rlmeson.workflows.fit.tune_current_mass) to m_K⁺ of `particle`
    to 1e-7 in M²: a change of the code that moves the kaon is caught here (1e-5)."""
    core, _, _ = ti("kaon")
    assert core.mass_gev == pytest.approx(_gev("K+"), rel=1e-5)


@pytest.mark.slow
@pytest.mark.parametrize("name", ["kaon", "kstar"])
def test_unequal_flavour_masses_do_not_depend_on_eta(ti, name):
    """Poincaré covariance, TI regularisation, at the default η (≠ 1/2) against η ∓ 0.1;
    the issue asks ≤ 1e-3 relative."""
    core, _, eta = ti(name)
    assert eta != 0.5 and abs(core.eta_spread_second_eta - eta) == pytest.approx(0.1)
    assert core.eta_spread_gev / core.mass_gev < 1e-3


@pytest.mark.slow
def test_pion_mass_does_not_depend_on_eta(ti):
    """Equal flavours at η = 1/2 against 0.4; the issue asks ≤ 1e-4 relative."""
    core, _, eta = ti("pion")
    assert eta == 0.5 and core.eta_spread_gev / core.mass_gev < 1e-4


@pytest.mark.slow
def test_kaon_axial_vector_identity(ti):
    """f_K m_K² = (m_l + m_s) ρ_K with the TI regularisation (MRT 1998); the issue asks
    ≤ 1e-3."""
    core, msum, _ = ti("kaon")
    n = core.normalised
    lhs = n.decay_constant * core.mass_gev**2
    assert abs(lhs - msum * n.condensate) / lhs < 1e-3


@pytest.mark.slow
def test_fk_over_fpi(ti):
    """With m_s fixed by m_K, f_K/f_π within 5% of the PDG ratio 155.7/130.2."""
    ratio = ti("kaon")[0].normalised.decay_constant / ti("pion")[0].normalised.decay_constant
    assert abs(ratio / PDG_FK_OVER_FPI - 1) < 0.05


@pytest.mark.slow
@pytest.mark.parametrize("name,pdg", [("kstar", "K*(892)+"), ("phi", "phi(1020)")])
def test_vector_masses_within_seven_percent(ti, name, pdg):
    """K*(892) and φ(1020) (φ a pure s s̄ state) within 7% of `particle`, either side."""
    core, _, _ = ti(name)
    assert abs(core.mass_gev / _gev(pdg) - 1) < 0.07

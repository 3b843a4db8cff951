"""Exact derivatives of meson observables (rlmeson.workflows.sensitivity) against central finite
differences of the same lean solves (central finite differences: common practice).

Grid: Maris–Tandy as in configs/mt-pion.toml (hard cutoff, ω = 0.4 GeV, D = 0.933 GeV²,
m(19 GeV) = 3.74 MeV), the default gap grid and a reduced BSE grid (order-6 panels,
6 z nodes, as tests/test_eta.py).

Steps, from the measured plateau of |exact − FD|/|FD| (relative steps h/θ of 1e-2, 3e-3,
1e-3, 3e-4, 1e-4; shifted solves to 1e-13):
  pion mass   D: 1.2e-5, 1.0e-6, 1.2e-7, 2.3e-8, 1.5e-8   (truncation ∝ h² above 1e-3)
              m: 1.3e-5, 1.1e-6, 1.2e-7, 1.3e-8, 7.5e-8
              ω: 6.2e-5, 5.6e-6, 8.9e-7, 1.2e-8, 3.4e-7
  pion f      D: 4.2e-5, 3.7e-6, 3.3e-7, 1.8e-7, 3.2e-6   (noise ∝ 1/h below 3e-4: f carries
              m: 1.3e-6, 4.6e-7, 5.4e-6, 1.1e-5, 3.3e-5    ~3e-10 relative noise through
              ω: 9.9e-5, 9.5e-6, 1.7e-6, 6.3e-8, 3.3e-6    the finite-difference slope λ′)
so the steps below are 1e-3 (D, ω) and 3e-3 (m: f depends on m weakly, d ln f/d ln m ≈
0.025, which magnifies the noise), one pair of solves for both observables.
"""

from __future__ import annotations

import numpy as np
import pytest

from rlmeson.io import config
from rlmeson.workflows import sensitivity

D, OMEGA, M = "interaction.strength_gev2", "interaction.omega_gev", "quarks.l.current_mass_gev"
KEYS = [D, OMEGA, M]
#: relative steps (module docstring)
STEP = {D: 1e-3, OMEGA: 1e-3, M: 3e-3}
OVERRIDES = ["numerics.bse.order=6", "numerics.bse.z_points=6", "output.error_bar=false"]


@pytest.fixture(scope="module")
def cfg():
    return config.load(config_path(), overrides=OVERRIDES)


def config_path():
    from pathlib import Path

    return Path(__file__).resolve().parents[1] / "configs" / "mt-pion.toml"


@pytest.fixture(scope="module")
def pion(cfg):
    return sensitivity.observables_with_gradient(cfg, KEYS, [("pion", "mass_gev"), ("pion", "decay_constant_gev")])


def central_difference(cfg, key, rel, wanted, warm):
    x = sensitivity.key_value(cfg, key)
    h = rel * x
    vp = sensitivity.observables_with_gradient(sensitivity.with_value(cfg, key, x + h), [], wanted, warm=warm).values
    vm = sensitivity.observables_with_gradient(sensitivity.with_value(cfg, key, x - h), [], wanted, warm=warm).values
    return (vp - vm) / (2 * h)


def test_gradients_report_values_and_exact_method(cfg, pion):
    """The values are those of the pipeline's bound state on the same grid (the pion of
    mt-pion: 0.138 GeV by construction of its current mass), every derivative exact, the
    eigenvector pair biorthogonal and the checks of the diagnostics small."""
    assert pion.method == ("exact", "exact")
    assert pion.jacobian.shape == (2, 3)
    assert abs(pion.values[0] - 0.138) < 2e-3          # the config's fit target (from memory)
    d = pion.diagnostics["mesons"]["pion"]
    assert d["lambda_minus_one"] < 1e-12
    assert d["biorthogonality"] > 1e-3
    assert d["decay_constant_check"] < 1e-9
    # dλ/dM by perturbation against the pipeline's central difference of λ at M(1 ± 1e-3)
    assert abs(d["dlambda_dmass"] / d["dlambda_dmass_check"] - 1) < 1e-6


@pytest.mark.parametrize("key", KEYS)
def test_pion_mass_and_decay_constant_derivatives_match_central_differences(cfg, pion, key):
    """d m_π/dθ and d f_π/dθ for θ = D, ω, m: exact vs central differences ≤ 1e-5 relative."""
    j = KEYS.index(key)
    fd = central_difference(cfg, key, STEP[key], [("pion", "mass_gev"), ("pion", "decay_constant_gev")],
                            pion.state)
    assert abs(pion.jacobian[0, j] / fd[0] - 1) < 1e-5
    assert abs(pion.jacobian[1, j] / fd[1] - 1) < 1e-5


def test_failed_checks_fall_back_to_central_differences(cfg, pion, monkeypatch):
    """A meson whose solver checks fail (here: every check, the tolerance set below 0) is
    differentiated by central differences instead, labelled so, with the reason in its
    diagnostics; those agree with the exact derivative ≤ 1e-5 (step 1e-3, as above)."""
    monkeypatch.setattr(sensitivity, "CHECK_TOL", -1.0)
    g = sensitivity.observables_with_gradient(cfg, [D], [("pion", "mass_gev")], warm=pion.state)
    assert g.method == ("central-difference",)
    assert "shifted_tangent_residual_max" in g.diagnostics["mesons"]["pion"]["exact_derivative_rejected"]
    assert abs(g.jacobian[0, 0] / pion.jacobian[0, 0] - 1) < 1e-5


@pytest.mark.slow
def test_rho_mass_derivatives_match_central_differences(cfg, pion):
    """d m_ρ/dθ for θ = D, ω, m: exact vs central differences ≤ 1e-5 relative (and f_ρ)."""
    wanted = [("rho", "mass_gev"), ("rho", "decay_constant_gev")]
    g = sensitivity.observables_with_gradient(cfg, KEYS, wanted)
    assert g.method == ("exact", "exact")
    for j, key in enumerate(KEYS):
        fd = central_difference(cfg, key, STEP[key], wanted, g.state)
        assert abs(g.jacobian[0, j] / fd[0] - 1) < 1e-5
        assert abs(g.jacobian[1, j] / fd[1] - 1) < 1e-5


def test_eigenvalue_perturbation_matches_differences_at_fixed_mass(cfg):
    """uᵀ(∂A/∂θ)v/uᵀv with left and right eigenvectors equals the central difference of the
    leading eigenvalue at fixed P² = −M² (D and m; first-order perturbation theory of a
    simple eigenvalue: common practice)."""
    mass = 0.3   # off shell: λ ≠ 1
    keys = [D, M]
    lam, dlam, dlam_dm = sensitivity.eigenvalue_with_gradient(cfg, keys, "pion", mass)
    assert abs(lam - 1) > 1e-2
    for j, key in enumerate(keys):
        x = sensitivity.key_value(cfg, key)
        h = 1e-4 * x
        lp = sensitivity.eigenvalue_with_gradient(sensitivity.with_value(cfg, key, x + h), [], "pion", mass)[0]
        lm = sensitivity.eigenvalue_with_gradient(sensitivity.with_value(cfg, key, x - h), [], "pion", mass)[0]
        fd = (lp - lm).real / (2 * h)
        assert abs(dlam[j].real / fd - 1) < 1e-6, (key, dlam[j], fd)
    lp = sensitivity.eigenvalue_with_gradient(cfg, [], "pion", mass * (1 + 1e-4))[0]
    lm = sensitivity.eigenvalue_with_gradient(cfg, [], "pion", mass * (1 - 1e-4))[0]
    assert abs(dlam_dm.real / ((lp - lm).real / (2e-4 * mass)) - 1) < 1e-6


def test_unknown_key_and_meson_are_config_errors(cfg):
    with pytest.raises(config.ConfigError, match="interaction.nonsense"):
        sensitivity.observables_with_gradient(cfg, ["interaction.nonsense"], [("pion", "mass_gev")])
    with pytest.raises(config.ConfigError, match="kaon"):
        sensitivity.observables_with_gradient(cfg, [D], [("kaon", "mass_gev")])


@pytest.mark.slow
def test_values_equal_the_pipeline_bound_state(cfg, pion):
    """The lean path computes what ``pipeline.bound_state`` does (same grid, same η)."""
    from rlmeson.workflows import pipeline

    quarks = {"l": pipeline.solve_quark(cfg, "l", pipeline.store_of(cfg))}
    meson = next(m for m in cfg.mesons if m.name == "pion")
    core = pipeline.bound_state(cfg, meson, quarks, pipeline.bse_grid_of(cfg))
    conv = 1 / np.sqrt(2.0)
    assert abs(pion.values[0] / core.mass_gev - 1) < 1e-8
    assert abs(pion.values[1] / (core.normalised.decay_constant * conv) - 1) < 1e-7


UNEQUAL = """
name = "unequal"
[interaction]
model = "maris-tandy"
[kernel]
regularisation = "hard-cutoff"
[quarks.l]
current_mass_gev = 0.00374
[quarks.s]
current_mass_gev = 0.083
[[mesons]]
name = "kaon"
channel = "pseudoscalar"
quarks = ["l", "s"]
mass_guess_gev = 0.5
[numerics.bse]
order = 6
z_points = 6
[output]
error_bar = false
"""


@pytest.mark.slow
def test_unequal_flavour_derivatives_match_central_differences():
    """A light–strange pseudoscalar: each quark on its own shifted family (two tangent
    solves per direction), both current masses and D; exact vs central differences (step
    1e-3) ≤ 1e-5 relative (measured: ≤ 3e-7)."""
    cfg = config.parse(UNEQUAL)
    keys = [D, M, "quarks.s.current_mass_gev"]
    wanted = [("kaon", "mass_gev"), ("kaon", "decay_constant_gev")]
    g = sensitivity.observables_with_gradient(cfg, keys, wanted)
    assert g.method == ("exact", "exact")
    for j, key in enumerate(keys):
        fd = central_difference(cfg, key, 1e-3, wanted, g.state)
        assert np.all(np.abs(g.jacobian[:, j] / fd - 1) < 1e-5), (key, g.jacobian[:, j], fd)


CHIRAL = """
name = "chiral"
[interaction]
model = "maris-tandy"
[kernel]
regularisation = "hard-cutoff"
[quarks.c]
current_mass_gev = 0.0
[[mesons]]
name = "pi0"
channel = "pseudoscalar"
quarks = ["c", "c"]
[numerics.bse]
order = 6
z_points = 6
"""


def test_chiral_limit_falls_back_to_labelled_central_differences():
    """A chiral-limit Goldstone boson: M = 0 exactly (Goldstone's theorem), so dM/dD = 0; f
    is differentiated by central differences and labelled so; no derivative with
    respect to a zero current mass."""
    cfg = config.parse(CHIRAL)
    g = sensitivity.observables_with_gradient(cfg, [D], [("pi0", "mass_gev"), ("pi0", "decay_constant_gev")])
    assert g.method == ("central-difference", "central-difference")
    assert g.values[0] == 0.0 and g.jacobian[0, 0] == 0.0
    assert g.jacobian[1, 0] > 0   # a stronger interaction binds more: f grows with D
    with pytest.raises(config.ConfigError, match="quarks.c.current_mass_gev"):
        sensitivity.observables_with_gradient(cfg, ["quarks.c.current_mass_gev"], [("pi0", "mass_gev")])

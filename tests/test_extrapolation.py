"""Masses beyond the parabola (rlmeson.meson.extrapolate and its hook in pipeline.run).

Sources: analytic functions whose λ = 1 crossing is known in closed form (a rational
function: the fits contain it exactly; an exponential: they do not); for the physics, the
states that are directly accessible, with the accessible limit lowered by hand so that
the extrapolation has to reach past it (the direct mass is then the check; the issue asks
agreement within the quoted uncertainty).  TI Maris–Tandy (configs/mt-strange-ti.toml) on
a reduced BSE grid (order 6, 4 z nodes, 16 angular points), where both routes see the same
discretisation.  Measured on that grid: see each test.
"""

from __future__ import annotations

import json
import math
import tomllib
from pathlib import Path

import numpy as np
import pytest

import rlmeson
from rlmeson.meson import extrapolate, search
from rlmeson.workflows import pipeline

CONFIGS = Path(__file__).resolve().parents[1] / "configs"
REDUCED = ["numerics.bse.order=6", "numerics.bse.z_points=4", "numerics.bse.angular_points=16",
           "output.error_bar=false"]


def _samples(f, m_top, spacelike=extrapolate.SPACELIKE_GEV2):
    p2 = np.array(list(spacelike) + [-(x * m_top) ** 2 for x in extrapolate.TIMELIKE_FRACTIONS])
    return p2, f(p2)


def test_a_rational_eigenvalue_curve_is_continued_exactly():
    """λ(P²) = (0.6 − 0.9 P²)/(1 + 0.4 P²) (a [1/1] rational, contained in every fitted
    degree): λ = 1 at P² = −0.4/1.3, M = √(0.4/1.3) = 0.5547 GeV, from samples up to
    M = 0.38 GeV (a reach of 1.46, inside MAX_REACH).  Measured: 1e-15 from it, error 9e-15."""
    p2, lam = _samples(lambda x: (0.6 - 0.9 * x) / (1 + 0.4 * x), 0.40)
    e = extrapolate.extrapolate(p2, lam)
    exact = math.sqrt(0.4 / 1.3)
    assert e.mass_gev == pytest.approx(exact, rel=1e-8) and e.error_gev < 1e-8
    assert e.kept >= extrapolate.MIN_VARIANTS


def test_a_non_rational_curve_is_continued_within_its_error():
    """λ(P²) = 0.7 exp(−P²/0.8): λ = 1 at M² = 0.8 ln(1/0.7), M = 0.5342 GeV, from
    samples up to M = 0.38 GeV (a reach of 1.4, as for a state 40% above M_max).
    Measured: 1.5e-9 from it, error 1.7e-6 (the exponential is nearly rational here)."""
    p2, lam = _samples(lambda x: 0.7 * np.exp(-x / 0.8), 0.40)
    e = extrapolate.extrapolate(p2, lam)
    exact = math.sqrt(0.8 * math.log(1 / 0.7))
    assert abs(e.mass_gev - exact) <= max(e.error_gev, 1e-9) and e.error_gev < 1e-3 * exact


@pytest.mark.parametrize("f,why", [
    (lambda x: 1.2 - 0.5 * x, "accessible"),                  # crosses 1 among the samples
    (lambda x: 0.5 + 0.0 * x, "reach lambda = 1"),            # never crosses
    (lambda x: 0.5 - 0.01 * x, "reach lambda = 1"),           # crosses at M = 7 GeV: too far
])
def test_no_extrapolation_says_why(f, why):
    """A state already accessible, or a curve with no crossing within MAX_REACH of the
    samples, gives NotExtrapolable with the reason (the pipeline passes it on)."""
    p2, lam = _samples(f, 0.4)
    with pytest.raises(extrapolate.NotExtrapolable, match=why):
        extrapolate.extrapolate(p2, lam)


@pytest.fixture(scope="module")
def strange():
    cfg = rlmeson.load_config(CONFIGS / "mt-strange-ti.toml", REDUCED)
    store = pipeline.store_of(cfg)
    quarks = {f.name: pipeline.solve_quark(cfg, f.name, store) for f in cfg.flavours}
    return cfg, quarks, store


def _meson(cfg, name):
    return next(m for m in cfg.mesons if m.name == name)


@pytest.mark.slow
@pytest.mark.parametrize("name,limit", [("rho", 0.55), ("kaon", 0.35), ("kstar", 0.70)])
def test_extrapolated_masses_agree_with_direct_ones(strange, name, limit):
    """The ρ, the kaon and the K* found directly, then extrapolated from below a limit
    lowered to ``limit`` (reaches of 1.3–1.4).  The issue asks agreement within the
    quoted uncertainty; the uncertainty must also be informative (< 5% of the mass).
    Measured on the reduced grid: ρ 0.72535 → 0.72434 ± 0.018, kaon 0.49373 → 0.49373 ±
    4e-5 (off by 2.5e-7), K* 0.92246 → 0.92048 ± 0.015; 34–55 s each on two busy cores."""
    cfg, quarks, store = strange
    direct = pipeline.solve_meson(cfg, _meson(cfg, name), quarks, store, eta_spread=False).core.mass_gev
    ex = pipeline.extrapolate_meson(cfg, _meson(cfg, name), quarks, limit_gev=limit)
    assert ex.extrapolation.accessible_mass_gev < limit < direct
    assert abs(ex.mass_gev - direct) <= ex.extrapolation.error_gev
    assert ex.extrapolation.error_gev < 0.05 * direct


@pytest.mark.slow
def test_run_extrapolates_a_state_above_the_limit(monkeypatch):
    """pipeline.run with every search limit lowered to 0.6 GeV (monkeypatched
    ``mass_limit``): the pion is solved, the ρ lies above and comes back extrapolated,
    in the summary (``extrapolated``: true, flavours, η; no decay constant) and the table;
    lowered to 0.1 GeV, the ρ cannot be reached by any continuation and the run fails
    with the search's message and the extrapolation's reason.  Measured: ρ 0.72584 ± 0.0094
    (direct 0.72535); about 60–100 s on two busy cores."""
    from rlmeson import cli

    raw = tomllib.loads((CONFIGS / "mt-pion-ti.toml").read_text())
    for m in raw["mesons"]:
        m.pop("mass_guess_gev")        # a guess above the lowered limit is refused (ConfigError)
    light = rlmeson.load_config(raw, REDUCED)
    real = pipeline.mass_limit
    monkeypatch.setattr(pipeline, "mass_limit", lambda q1, q2, eta: min(0.6, real(q1, q2, eta)))
    # no store: the limit is monkeypatched, not part of any key, and a ρ solved below the
    # real limit by another test must not be served from the cache
    res = pipeline.run(light, None)
    assert [m.name for m in res.mesons] == ["pion"] and [e.name for e in res.extrapolated] == ["rho"]
    summ = json.loads(json.dumps(res.summary(), allow_nan=False))
    pion, rho = summ["mesons"]
    assert pion["extrapolated"] is False and pion["flavours"] == ["l", "l"]
    assert rho["extrapolated"] is True and rho["flavours"] == ["l", "l"] and rho["eta"] == 0.5
    assert rho["decay_constant_gev"] is None and rho["validated"] is False
    assert 0.6 < rho["mass_gev"] and rho["mass_error_gev"] < 0.05 * rho["mass_gev"]
    assert "extrapolated" in cli._table(res)
    monkeypatch.setattr(pipeline, "mass_limit", lambda q1, q2, eta: min(0.1, real(q1, q2, eta)))
    raw["mesons"] = [m for m in raw["mesons"] if m["name"] == "rho"]
    with pytest.raises(search.NoBoundState, match="no extrapolation beyond M_max either"):
        pipeline.run(rlmeson.load_config(raw, REDUCED))

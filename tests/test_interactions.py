"""Effective interactions: the published forms, complex arguments, user models.

Sources: the Maris–Tandy (PRC 60, 055214, 1999) and Qin–Chang (PRC 84, 042202, 2011)
forms and parameters as recorded on the team sheet (from memory), re-evaluated here
independently with mpmath; Schwarz reflection g(s*) = g(s)* (an analytic theorem for a
function real on the positive axis whose cuts are placed symmetrically).
"""

import math
import sys
import types

import mpmath as mp

mp.mp.dps = 40
import numpy as np
import pytest

from rlmeson.model import interactions
from rlmeson.model.kernel import Kernel


def _reference(model, s, p):
    """g(s) from the published formula in mpmath (real s ≥ 0)."""
    s = mp.mpf(s)
    w2 = mp.mpf(p["omega_gev"]) ** 2
    lam2 = mp.mpf(p["lambda_qcd_gev"]) ** 2
    gm = mp.mpf(12) / (33 - 2 * p["flavours"])
    mt2 = mp.mpf(p["gluon_mass_scale_gev"]) ** 2
    f = (1 - mp.exp(-s / (4 * mt2))) / s
    uv = 8 * mp.pi**2 * gm * f / mp.log(p["tau"] + (1 + s / lam2) ** 2)
    if model == "maris-tandy":
        ir = 4 * mp.pi**2 / w2**3 * p["strength_gev2"] * s * mp.exp(-s / w2)
    else:
        ir = 8 * mp.pi**2 / w2**2 * p["strength_gev2"] * mp.exp(-s / w2)
    return float(ir + uv)


@pytest.mark.parametrize("model", ["maris-tandy", "qin-chang"])
def test_published_form_on_the_real_axis(model):
    p = interactions.get(model).defaults()
    s = np.array([1e-7, 1e-3, 0.05, 0.3, 1.0, 7.0, 60.0, 1e3, 1e5])
    g = np.asarray(interactions.evaluate(model, p, s))
    ref = np.array([_reference(model, x, p) for x in s])
    assert np.allclose(g, ref, rtol=1e-12, atol=0)


def test_defaults_are_the_published_parameters():
    mt = interactions.get("maris-tandy").defaults()
    assert (mt["omega_gev"], mt["strength_gev2"]) == (0.4, 0.933)
    qc = interactions.get("qin-chang").defaults()
    assert qc["omega_gev"] * qc["strength_gev2"] == pytest.approx(0.8**3)  # ωD = (0.8 GeV)³
    assert mt["tau"] == pytest.approx(math.e**2 - 1)
    assert mt["lambda_qcd_gev"] == 0.234 and mt["flavours"] == 4 and mt["gluon_mass_scale_gev"] == 0.5


@pytest.mark.parametrize("model", ["maris-tandy", "qin-chang"])
def test_schwarz_reflection(model, rng):
    p = interactions.get(model).defaults()
    s = rng.uniform(-1.5, 3.0, 200) + 1j * rng.uniform(-2.0, 2.0, 200)
    g = np.asarray(interactions.evaluate(model, p, s))
    gc = np.asarray(interactions.evaluate(model, p, s.conj()))
    assert np.max(np.abs(gc - g.conj()) / np.abs(g)) < 1e-12


def test_complex_continuation_matches_real_axis_and_branches():
    """Split and principal logarithms agree wherever Re s > −Λ²; both reduce to the
    real function on the positive axis."""
    p = interactions.get("maris-tandy").defaults()
    lam2 = p["lambda_qcd_gev"] ** 2
    s = np.array([0.5 + 0.0j, 2.0 + 1e-14j, -0.5 * lam2 + 0.3j, 0.2 - 0.9j])
    split = np.asarray(interactions.uv_tail(s, p))
    principal = np.asarray(interactions.uv_tail(s, p, principal_log=True))
    assert np.allclose(split, principal, rtol=1e-13)
    real = np.asarray(interactions.uv_tail(np.array([0.5, 2.0]), p))
    assert np.allclose(split[:2].real, real, rtol=1e-13)
    # left of the branch points, across the cut of the principal form, they differ
    far = np.array([-3.0 * lam2 + 2.0 * lam2 * math.sqrt(p["tau"]) * 1j])
    assert abs(interactions.uv_tail(far, p)[0] - interactions.uv_tail(far, p, principal_log=True)[0]) > 1e-6


def test_soft_factor_has_no_zero_over_zero():
    p = interactions.get("maris-tandy").defaults()
    g0 = float(interactions.evaluate("maris-tandy", p, np.array([0.0]))[0])
    expect = 8 * math.pi**2 * 12 / 25 / (4 * 0.25) / math.log(math.e**2)   # ℱ(0) = 1/(4 m_t²)
    assert g0 == pytest.approx(expect, rel=1e-14)


def test_user_interaction_by_module_and_function(monkeypatch):
    mod = types.ModuleType("my_gluon_model")
    mod.g = lambda s, p: p["c"] / (s + 1.0)
    monkeypatch.setitem(sys.modules, "my_gluon_model", mod)
    k = Kernel("my_gluon_model:g", {"c": 2.0})
    assert float(k.g(np.array([1.0]))[0]) == pytest.approx(1.0)


def test_translation_invariant_regulator_multiplies_g():
    p = interactions.get("maris-tandy").defaults()
    hard = Kernel("maris-tandy", p, regularisation="hard-cutoff")
    ti = Kernel("maris-tandy", p, regularisation="translation-invariant", regulator_gev2=1e6)
    s = np.array([1.0, 1e6, 1e8])
    assert np.allclose(np.asarray(ti.g(s)), np.asarray(hard.g(s)) * 1e6 / (s + 1e6), rtol=1e-14)

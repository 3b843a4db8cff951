"""Interactions used only by the tests (loaded as user models, 'models_for_tests:...').

``tame``: the Maris–Tandy form with its ultraviolet tail multiplied by s/(s + 1 GeV²),
so that g(0) = 0.  For such an interaction the direct continuation (real loop momentum,
complex gluon momentum) stays analytic below M ≈ 0.6 GeV and must agree with the
shifted one; the tail keeps a hard cutoff's surface term alive.
"""

from rlmeson.model import interactions


def tame(s, p):
    ir = interactions.get("maris-tandy").g(s, {**p, "uv_strength": 0.0})
    return ir + interactions.uv_tail(s, p) * s / (s + 1.0)


TAME_PARAMS = interactions.get("maris-tandy").defaults()

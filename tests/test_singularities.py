"""Complex singularities of the propagator and the accessible bound-state mass.

Sources: the free propagator 1/(iγ·p + m) has its only singularity at p² = −m², so the
parabola of a bound state with η = 1/2 reaches it at M = 2m (threshold; analytic);
geometry of the parabola q² − η²M² + 2iηMqz (definition).
"""

import pytest

from conftest import ZETA
from rlmeson import gap, singularities
from rlmeson.kernel import Kernel


def test_free_quark_threshold_is_twice_the_mass():
    s = gap.solve(Kernel("free", {}), 0.3, ZETA)
    sing = singularities.find(s)
    assert sing, "the pole at p² = −m² must be found"
    assert sing[0].s_gev2 == pytest.approx(-0.09 + 0j, abs=1e-9)
    m_max, _ = singularities.max_bound_state_mass(s, 0.5)
    assert m_max == pytest.approx(0.6, rel=1e-8)


def test_maris_tandy_singularity_is_a_zero_on_the_boundary_parabola(light_hard):
    m_max, sing = singularities.max_bound_state_mass(light_hard, 0.5)
    assert sing is not None and sing.residual < 1e-8
    s0 = sing.s_gev2
    assert s0.imag > 0 and s0.real < 0                    # complex-conjugate pair, timelike side
    eta = 0.5
    y = (eta * m_max) ** 2
    assert s0.real == pytest.approx(s0.imag**2 / (4 * y) - y, abs=1e-10)  # on the boundary
    # a parabola slightly smaller leaves it outside, slightly larger encloses it
    for m, inside in ((0.99 * m_max, False), (1.01 * m_max, True)):
        yy = (eta * m) ** 2
        assert (s0.real >= s0.imag**2 / (4 * yy) - yy) == inside
    assert 0.8 < m_max < 1.4                               # well above the ρ (common practice)


def test_asking_beyond_m_max_names_it(light_hard):
    from rlmeson import bse, channels

    bs = bse.BoundState(light_hard.kernel, channels.get("vector"), bse.BSEGrid(n_z=4), light_hard,
                        continuation="direct", max_mass=1.0)
    with pytest.raises(ValueError, match="M_max = 1"):
        bs.propagators(1.2)


def test_shifted_continuation_confirms_the_maris_tandy_zero(light_ti):
    """The zero found with the direct continuation is a zero of the analytic (shifted)
    continuation too: D = s A² + B² nearly vanishes there (analytic continuation is
    unique; the direct one differs from it only by a few 1e-4 here)."""
    _, sing = singularities.max_bound_state_mass(light_ti, 0.5)
    check = singularities.check_with_shifted(light_ti, sing, 0.5)
    assert check is not None and check < 0.1


def test_shifted_solve_converges_from_the_taylor_start_beyond_m_max(light_ti):
    """Just past M_max the parabola encloses the zero of S⁻¹ and the covariant Taylor
    start is poor (relative residual of order one); the damped Newton solve must still
    converge without help from solutions at other masses (common practice: a globalised
    Newton step keeps a poor start from wandering)."""
    from rlmeson import bse, ladder, routed

    m_max, _ = singularities.max_bound_state_mass(light_ti, 0.5)
    lg = ladder.LadderGrid(bse.BSEGrid().radial(light_ti.kernel.q2_max), 16)
    sp = routed.ShiftedSolver(light_ti, lg).solve(1.03 * m_max, 0.5)
    assert sp.residuals[0] > 0.1            # the start really is poor
    assert sp.residuals[-1] < 1e-10 and sp.iterations < 30

"""Shared fixtures: solved quarks and bound-state problems are expensive, so they are
built once per session.  Every fixture uses the package defaults unless it says
otherwise."""

from __future__ import annotations

import os

# one BLAS thread, as the CLI sets (rlmeson/cli.py): BLAS threads fight JAX's thread pool
# for the two cores and slowed ARPACK up to 30× on a loaded machine
for _var in ("OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")
os.environ.setdefault("RLMESON_CACHE", os.path.join(os.path.dirname(__file__), "..", ".cache", "test-store"))

import numpy as np  # noqa: E402
import pytest  # noqa: E402

import rlmeson  # noqa: E402,F401
from rlmeson.meson import bse
from rlmeson.model import channels, interactions
from rlmeson.quark import gap
from rlmeson.model.kernel import Kernel  # noqa: E402

ZETA = 19.0
M_LIGHT = 0.00374  # GeV at ζ = 19 GeV: the light mass of the published Maris–Tandy fit (from memory)


def mt_kernel(regularisation="hard-cutoff", **kw):
    par = interactions.get("maris-tandy").defaults()
    par.update(kw.pop("params", {}))
    return Kernel("maris-tandy", par, regularisation=regularisation, **kw)


@pytest.fixture(scope="session")
def mt_hard():
    return mt_kernel("hard-cutoff")


@pytest.fixture(scope="session")
def mt_ti():
    return mt_kernel("translation-invariant")


@pytest.fixture(scope="session")
def chiral_hard(mt_hard):
    return gap.solve(mt_hard, 0.0, ZETA)


@pytest.fixture(scope="session")
def light_hard(mt_hard):
    return gap.solve(mt_hard, M_LIGHT, ZETA)


@pytest.fixture(scope="session")
def chiral_ti(mt_ti):
    return gap.solve(mt_ti, 0.0, ZETA)


@pytest.fixture(scope="session")
def light_ti(mt_ti):
    return gap.solve(mt_ti, M_LIGHT, ZETA)


@pytest.fixture(scope="session")
def pion_ti(mt_ti, light_ti):
    return bse.BoundState(mt_ti, channels.get("pseudoscalar"), bse.BSEGrid(), light_ti)


@pytest.fixture(scope="session")
def pion_hard(mt_hard, light_hard):
    return bse.BoundState(mt_hard, channels.get("pseudoscalar"), bse.BSEGrid(), light_hard)


@pytest.fixture(scope="session")
def rng():
    return np.random.default_rng(20261201)


#: A run with the three kinds of meson the figures must handle (chiral-limit Goldstone
#: boson, massive pseudoscalar, vector) on a reduced BSE grid, default regularisation
#: (translation-invariant, so that the regulator cut of the figures is exercised).
FIGURE_RUN_CFG = """
name = "figure-check"
[quarks.c]
current_mass_gev = 0.0
[quarks.l]
current_mass_gev = 0.005
[[mesons]]
name = "pi0"
channel = "pseudoscalar"
quarks = ["c", "c"]
[[mesons]]
name = "pi"
channel = "pseudoscalar"
quarks = ["l", "l"]
[[mesons]]
name = "rho"
channel = "vector"
quarks = ["l", "l"]
[numerics.bse]
order = 6
z_points = 6
[output]
error_bar = false
"""


@pytest.fixture(scope="session")
def figure_run(tmp_path_factory):
    """(run directory, stdout) of `rlmeson run` on FIGURE_RUN_CFG."""
    from rlmeson import cli

    d = tmp_path_factory.mktemp("figure-run")
    cfg = d / "figure-check.toml"
    cfg.write_text(FIGURE_RUN_CFG)
    out = d / "run"
    import contextlib
    import io

    buf = io.StringIO()
    with contextlib.redirect_stdout(buf), contextlib.redirect_stderr(io.StringIO()):
        code = cli.main(["run", str(cfg), "--out", str(out), "--quiet"])
    assert code == 0, buf.getvalue()
    return out, buf.getvalue()


def run_cli(args):
    """(exit code, stdout, stderr) of the command line run in this process."""
    import contextlib
    import io

    from rlmeson import cli

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = cli.main([str(a) for a in args])
    return code, out.getvalue(), err.getvalue()


def normalised_at(bs, mass, vec):
    """The normalised amplitude at ``mass`` from eigenvector ``vec`` (λ at the masses of
    the eigenvalue derivative, then both normalisations), as the pipeline does."""
    from rlmeson.meson import observables, search

    lead = search.Leading(bs)
    lam = {}
    for m in observables.derivative_masses(mass):
        lead.vec = vec
        lam[m] = lead(m)
    return observables.normalise(bs, mass, vec, lam)

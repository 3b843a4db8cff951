"""Exact derivatives of meson observables with respect to model parameters (for fits).

For a bound state λ(P² = −M²; θ) = 1 of the operator A(M; θ) = Z₂² K(θ) G₀(M; θ)
(``bse``), with right and left eigenvectors A v = λ v, uᵀA = λ uᵀ:

* dλ/dθ = uᵀ(∂A/∂θ)v / uᵀv (first-order eigenvalue perturbation), and likewise ∂λ/∂M;
  dM/dθ = −(∂λ/∂θ)/(∂λ/∂M) from λ(−M²; θ) = 1.
* ∂A/∂θ has three parts: the factor Z₂² (through Z₂), the ladder kernel K (its
  radial–angular moments differentiated by forward mode in the interaction parameters,
  ``ladder.moments_with_tangents``) and G₀, which depends on θ and M through the quark
  propagators at q + ηP and q − (1−η)P.
* Those come from the shifted gap solve X = F(θ, M) − Z₂² K_q(θ) X⁻¹ (``routed``):
  implicit differentiation, one linear solve with its exact JAX linearisation (GMRES,
  preconditioned like the Newton steps) per direction.  Its inputs Z₂, Z₄m and the
  hard cutoff's boundary term δ come from the real-axis gap equation, differentiated
  implicitly with its converged Newton Jacobian (as ``gap._chiral_z4`` does for Z₄), the
  self-energy rows differentiated in the interaction parameters by forward mode
  (``selfenergy.rows_with_tangents``); the current mass enters only there (B equation, Z₄m).
* The decay constant f = Z₂ N_c c(M) ∫tr[D χ] / √(λ′ L), χ = G₀ v, is differentiated
  exactly too: the eigenvector's derivative from (A − λ) dv = −(dA − dλ) v (GMRES; f
  does not depend on v's scale, so the component along v is irrelevant), the loop L and
  the projection by the chain rule, and the slope λ′ — which the pipeline takes as the
  central difference of λ at M(1 ± 10⁻³) (``observables.derivative_masses``) — through
  the eigenvalue perturbation at those two masses as well.

Everything is differentiated at fixed quadrature rules: the rules follow
``Kernel.resolution_gev`` (= ω for Maris–Tandy with ω < 0.5 GeV), whose integer grading
levels can jump as ω moves, a change at the level of the quadrature error.

What is evaluated is the lean path a fit needs: the gap equation, and per meson the
bound-state mass and f on the configured BSE grid, without the singularity location,
the second (error) grid, spectrum figures or the η spread.  Searches are limited to
2.2 M(0) (scaled to each quark's momentum fraction), the pipeline's bound where no
singularity is known.  The current mass of a chiral (m = 0) flavour, chiral-limit mesons
and the direct continuation are differentiated by central differences of warm-started
lean solves instead (``Gradients.method`` says so), and so is a meson whose linear solves
or eigenpairs miss ``CHECK_TOL`` (the reason is in its diagnostics).

Cost (Maris–Tandy, configs/mt-fit.toml, default grids, (m_π, f_π) with respect to
(D, m), warm-started, measured on a shared 2-core machine under load, upper bounds):
one call with derivatives ≈ 2 × a values-only call (≈ 6 s against ≈ 3 s); the first
call of a process ≈ 11–13 s (compilation).  Central differences would cost 4 extra.
"""

from __future__ import annotations

import dataclasses
import math
import time
from dataclasses import dataclass, field

import numpy as np
import scipy.linalg
import scipy.sparse.linalg as spla

from ..meson import bse, observables, search
from ..model import channels, ladder
from ..quark import gap, routed
from ..quark import propagators as props
from ..quark import selfenergy as se
from ..numerics._jax import jax, jnp
from ..model.channels import QUARK
from ..io.config import Config, ConfigError
from .pipeline import bse_grid_of, gap_grid_of, kernel_of, mass_guess
from ..model.kernel import C_F, N_C, Kernel

OBSERVABLES = ("mass_gev", "decay_constant_gev")

#: Root of λ(M) = 1 to this step in M (GeV): the derivatives are taken at the root, and
#: finite differences of the values need it far below their step.
MASS_XTOL = 1e-12
#: Relative residual of the shifted gap solves of the lean path (the pipeline's 1e-11
#: leaves noise of ~1e-9 in f through the central-difference slope λ′).
SHIFTED_TOL = 1e-13
#: Relative tolerance of the linear solves (shifted tangents, eigenvector derivative).
LINEAR_RTOL = 1e-12
#: Relative step of the central differences used where no exact derivative is
#: implemented (chiral limit, direct continuation) or its checks fail: inside the plateau
#: measured for the tests' derivatives (3e-4 .. 3e-3 of the parameter; below it the
#: ~3e-10 relative noise of f dominates, above it the truncation error).
FD_STEP = 1e-3


@dataclass(frozen=True)
class Gradients:
    values: np.ndarray          # (n_wanted,) the observables, GeV
    jacobian: np.ndarray        # (n_wanted, n_keys): d value / d parameter, in the config's units
    method: tuple[str, ...]     # per wanted observable: "exact" or "central-difference"
    diagnostics: dict           # eigen/solver residuals, eigenvector biorthogonality, timings
    state: object = field(default=None, repr=False)   # opaque warm-start state for the next call


# ----------------------------------------------------------------------------------------
# Keys

def parse_key(cfg: Config, key: str) -> tuple[str, str]:
    """("param", name) for ``interaction.<name>``, ("mass", flavour) for
    ``quarks.<flavour>.current_mass_gev``; ConfigError otherwise."""
    parts = str(key).split(".")
    params = cfg.interaction.param_dict()
    if len(parts) == 2 and parts[0] == "interaction" and parts[1] in params:
        return "param", parts[1]
    if len(parts) == 3 and parts[0] == "quarks" and parts[2] == "current_mass_gev":
        if parts[1] in {f.name for f in cfg.flavours}:
            return "mass", parts[1]
    allowed = ([f"interaction.{p}" for p in sorted(params)]
               + [f"quarks.{f.name}.current_mass_gev" for f in cfg.flavours])
    raise ConfigError("parameter", key, "one of " + ", ".join(allowed))


def key_value(cfg: Config, key: str) -> float:
    kind, name = parse_key(cfg, key)
    return float(cfg.interaction.param_dict()[name] if kind == "param" else cfg.flavour(name).current_mass_gev)


def with_value(cfg: Config, key: str, value: float) -> Config:
    """``cfg`` with one parameter replaced (no re-validation: for derivatives and fits)."""
    kind, name = parse_key(cfg, key)
    if kind == "param":
        params = tuple((k, float(value) if k == name else v) for k, v in cfg.interaction.params)
        return dataclasses.replace(cfg, interaction=dataclasses.replace(cfg.interaction, params=params))
    fl = tuple(dataclasses.replace(f, current_mass_gev=float(value)) if f.name == name else f
               for f in cfg.flavours)
    return dataclasses.replace(cfg, flavours=fl)


def _wanted(cfg: Config, wanted):
    out = []
    for item in wanted:
        try:
            name, obs = item
        except (TypeError, ValueError):
            raise ConfigError("wanted", item, "pairs (meson name, 'mass_gev' or 'decay_constant_gev')") from None
        meson = next((m for m in cfg.mesons if m.name == name), None)
        if meson is None:
            raise ConfigError("wanted", name, "the name of a meson listed in the config: "
                              + ", ".join(m.name for m in cfg.mesons))
        if obs not in OBSERVABLES:
            raise ConfigError("wanted", obs, "one of " + ", ".join(OBSERVABLES))
        out.append((meson, obs))
    return out


# ----------------------------------------------------------------------------------------
# The quark on the real axis and its tangents

@dataclass
class _QuarkTangents:
    """d(Z₂, Z₄m, δ) per key (zeros where a key does not touch this flavour)."""

    dz2: np.ndarray
    dz4m: np.ndarray
    ddelta: np.ndarray
    delta: float


@jax.jit
def _k_transpose(w, arrays):
    """Kᵀ w for the ladder operator K (a real matrix acting on complex vectors)."""
    def f(x):
        return ladder._apply(x.astype(jnp.complex128), *arrays).real

    x0 = jnp.zeros((2,) + w.shape)
    _, pull = jax.vjp(f, x0)
    r = pull(jnp.stack([w.real, w.imag]))[0]
    return r[0] + 1j * r[1]


def _quark_outputs(x, rbz, ral, mass, gl, q2, z2sq: bool, hard: bool, chiral: bool, lam2: float):
    """(Z₂, Z₄m, δ) from the real-axis unknowns x = (A, B, Z₂) (as gap.solve and
    routed.boundary_delta compute them)."""
    n = q2.shape[0]
    A, B, z2 = x[:n], x[n:2 * n], x[2 * n]
    den = q2 * A * A + B * B
    uv = q2 * A / den
    us = q2 * B / den
    zf = z2 * z2 if z2sq else 1.0
    z4m = 0.0 * z2 if chiral else mass - zf * (rbz @ us)
    if hard:
        al = z2 + zf * (ral @ uv)
        delta = zf * 3.0 * C_F * gl * lam2 / (32.0 * math.pi**2 * al)
    else:
        delta = 0.0 * z2
    return jnp.stack([z2, z4m, delta])


def _quark_tangents(sol: gap.GapSolution, flavour: str, specs, subtract_boundary: bool) -> _QuarkTangents:
    kern, grid, radial = sol.kernel, sol.grid, sol.radial
    q2 = sol.q2
    n = q2.size
    targets = gap._targets(radial, sol.zeta_gev)
    opts = dict(n_half=grid.angular_half, order=grid.fine_order)
    chiral = sol.chiral
    hard = kern.hard and subtract_boundary
    lam2 = float(kern.cutoff_gev2)
    nk = len(specs)
    dz2, dz4m, ddelta = np.zeros(nk), np.zeros(nk), np.zeros(nk)
    touched = [k for k, (kind, name) in enumerate(specs) if kind == "param" or name == flavour]
    x = jnp.asarray(np.concatenate([sol.A, sol.B, [sol.z2]]))
    jq2 = jnp.asarray(q2)
    params = [name for kind, name in specs if kind == "param"]
    rows = se.rows_with_tangents(kern, radial, targets, [{p: 1.0} for p in params], **opts)
    ra, rb = rows[0]
    drows = dict(zip(params, rows[1:]))
    if hard:
        rows_l = se.rows_with_tangents(kern, radial, np.array([lam2]), [{p: 1.0} for p in params], **opts)
        ral = rows_l[0][0][0]
        drows_l = {p: r[0][0] for p, r in zip(params, rows_l[1:])}
    else:
        ral = jnp.zeros(n)
    gl = jnp.asarray(float(np.real(kern.g(np.array([lam2]))[0]))) if hard else jnp.asarray(0.0)
    kw = dict(z2sq=kern.z2_squared, chiral=chiral, mu=0.0)
    mass = jnp.asarray(sol.mass_gev)
    qo = dict(q2=jq2, z2sq=kern.z2_squared, hard=hard, chiral=chiral, lam2=lam2)
    base = np.asarray(_quark_outputs(x, rb[n], ral, mass, gl, **qo))
    if not touched:
        return _QuarkTangents(dz2, dz4m, ddelta, float(base[2]))
    J = np.asarray(gap._jac(x, ra, rb, jq2, mass, **kw))
    lu = scipy.linalg.lu_factor(J)
    for k in touched:
        kind, name = specs[k]
        if kind == "param":
            dra, drb = drows[name]
            if hard:
                dral = drows_l[name]
                p, t = kern.jtangent({name: 1.0})
                dgl = jnp.real(jax.jvp(lambda pp: kern.form.g(jnp.asarray([lam2]), pp), (p,), (t,))[1][0])
            else:
                dral, dgl = jnp.zeros(n), jnp.asarray(0.0)
            dm = jnp.asarray(0.0)
        else:
            if chiral:
                raise NotImplementedError("current-mass derivative of a chiral-limit flavour")
            dra, drb = jnp.zeros_like(ra), jnp.zeros_like(rb)
            dral, dgl, dm = jnp.zeros(n), jnp.asarray(0.0), jnp.asarray(1.0)
        dF = jax.jvp(lambda a, b, m: gap._residual(x, a, b, jq2, m, **kw), (ra, rb, mass), (dra, drb, dm))[1]
        dx = -scipy.linalg.lu_solve(lu, np.asarray(dF))
        _, dout = jax.jvp(lambda xx, b, al, m, g: _quark_outputs(xx, b, al, m, g, **qo),
                          (x, rb[n], ral, mass, gl), (jnp.asarray(dx), drb[n], dral, dm, dgl))
        dz2[k], dz4m[k], ddelta[k] = np.asarray(dout)
    return _QuarkTangents(dz2, dz4m, ddelta, float(base[2]))


# ----------------------------------------------------------------------------------------
# Shifted (routed) propagators: tangents by implicit differentiation

def _shifted_tangents(solver: routed.ShiftedSolver, prop: routed.ShiftedPropagator, qt: _QuarkTangents,
                      dlam_q, z2sq: bool, diag: list, start=None):
    """dX/dθ for each key and dX/dM of a converged shifted solve; [n_keys + 1] arrays.
    ``start``: the same at a nearby mass, to start the linear solves from."""
    X = jnp.asarray(prop.X)
    mass, eta = prop.mass_gev, prop.eta
    sol = solver.sol
    arrays = solver.op.arrays
    t, ginv = solver._t, solver._ginv
    shape = prop.X.shape
    n = int(np.prod(shape))
    s = routed._invert(X, t, ginv)
    ks = np.asarray(ladder._apply(s, *arrays))
    zero = jnp.zeros(shape, dtype=complex)
    node_scale = np.sqrt(np.sum(np.abs(solver.free_part(mass, eta)) ** 2, axis=0))
    w = node_scale[None].repeat(shape[0], 0).ravel()

    def mv(u):
        v = jnp.asarray((u * w).reshape(shape))
        return np.asarray(routed._jvp(X, v, zero, solver.zf, t, ginv, arrays)).ravel() / w

    op = spla.LinearOperator((n, n), dtype=complex, matvec=mv)
    out = []
    for k in range(len(qt.dz2) + 1):
        if k < len(qt.dz2):
            drhs = routed._free_part(solver.q2, solver.z, mass, eta, qt.dz2[k], qt.dz4m[k])
            drhs[2] += eta * mass * qt.ddelta[k]
            dzf = 2.0 * sol.z2 * qt.dz2[k] if z2sq else 0.0
            dsig = dzf * ks
            if dlam_q[k] is not None:
                dsig = dsig + solver.zf * np.asarray(ladder._apply(s, jnp.asarray(dlam_q[k]), *arrays[1:]))
        else:  # M
            drhs = np.zeros(shape, dtype=complex)
            drhs[2] = eta * (solver.delta - sol.z2)
            dsig = 0.0
        b = (drhs + dsig)  # −∂R/∂θ, R = X − rhs − Z₂² K X⁻¹
        if not np.any(b):
            out.append(np.zeros(shape, dtype=complex))
            continue
        bw = b.ravel() / w
        x0 = None if start is None else start[k].ravel() / w
        du, info = spla.gmres(op, bw, x0=x0, rtol=LINEAR_RTOL, atol=0.0, restart=150, maxiter=20)
        res = float(np.linalg.norm(op.matvec(du) - bw) / np.linalg.norm(bw))
        diag.append(res)
        out.append((du * w).reshape(shape))
    return out


def _coeff_tangent(X, dX, z):
    t, ginv = routed._basis_arrays(z)
    return np.asarray(jax.jvp(lambda x: routed._invert(x, t, ginv), (jnp.asarray(X),), (jnp.asarray(dX),))[1])


def _g0_of(bs: bse.BoundState, sp, sm):
    """G₀ from S(q₊), S(q₋) matrices (``BoundState.g0``'s contraction)."""
    t = bs._basis
    chi = np.einsum("qkab,kimbc,qkcd->qkimad", sp, t, sm, optimize=True)
    rhs = np.einsum("kjmab,qkimba->qkji", t, chi, optimize=True)
    return np.einsum("kjJ,qkJi->qkji", bs._ginv, rhs, optimize=True)


# ----------------------------------------------------------------------------------------
# One mass point: eigenvectors and the first-order pieces

@dataclass
class _Point:
    mass: float
    lam: complex
    v: np.ndarray            # right eigenvector (flat)
    u: np.ndarray            # left eigenvector (flat)
    g0: np.ndarray
    dAv: list                # ∂A/∂θ_k v (flat), then ∂A/∂M v last
    dG0v: list               # ∂G₀/∂θ_k v (shape), then ∂G₀/∂M v
    dlam: np.ndarray         # ∂λ/∂θ_k then ∂λ/∂M
    residual_right: float
    residual_left: float
    biorthogonality: float   # |uᵀv| / (|u| |v|)
    dx: tuple = ()           # the shifted tangents (family 1, family 2 or None)


def _point(bs: bse.BoundState, mass: float, v, u0, tangents: dict, nk: int, diag: dict,
           lam: complex | None = None) -> _Point:
    """Right/left eigenvectors and ∂λ at one mass (the shifted solve at ``mass`` is made
    or taken from the BoundState's cache); ``lam`` given: ``v`` is already the right
    eigenvector there."""
    sp, sm, sol1, sol2 = bs.propagators(mass)
    g0 = bs.g0(mass)
    shape = bs.shape
    zf = bs.z2_factor
    arrays = bs.ladder.arrays
    jg0 = jnp.asarray(g0)
    if lam is None:
        vals, vecs = bs.eigen(mass, k=1, v0=v)
        lam, v = complex(vals[0]), vecs[:, 0]

    def amv(x):
        return np.asarray(bse._bse_matvec(jnp.asarray(x.reshape(shape)), jg0, zf, arrays)).reshape(-1)

    def atv(y):
        ky = _k_transpose(jnp.asarray(y.reshape(shape)), arrays)
        return zf * np.asarray(jnp.einsum("qkji,jkq->ikq", jg0, ky)).reshape(-1)

    op_t = spla.LinearOperator((bs.size, bs.size), matvec=atv, dtype=complex)
    lv, lvec = spla.eigs(op_t, k=1, which="LR", v0=u0, tol=1e-12, ncv=8, maxiter=5000)
    u = lvec[:, 0]
    res_r = float(np.linalg.norm(amv(v) - lam * v) / np.linalg.norm(v))
    res_l = float(np.linalg.norm(atv(u) - lam * u) / np.linalg.norm(u))
    diag.setdefault("left_right_eigenvalue_difference", []).append(abs(complex(lv[0]) - lam))
    uv = complex(np.sum(u * v))
    # quark tangents at this mass: dX per key and M for each shifted family
    q1, q2 = tangents["q"][0], tangents["q"][1]
    dlam_q = tangents["dlam_q"]
    z2sq = bs.kernel.z2_squared
    sdiag = diag.setdefault("shifted_tangent_residuals", [])
    start = tangents.get("start")
    dx1 = _shifted_tangents(bs._shifted, sol1, q1, dlam_q, z2sq, sdiag, start and start[0])
    dcp = [_coeff_tangent(sol1.X, d, bs.z) for d in dx1]
    dx2 = None
    if bs._reflect:
        dcm = [props.reflected(d) for d in dcp]
    else:
        dx2 = _shifted_tangents(bs._shifted2, sol2, q2, dlam_q, z2sq, sdiag, start and start[1])
        dcm = [_coeff_tangent(sol2.X, d, bs.z) for d in dx2]
    z = bs.z
    dG0v, dAv, dlam = [], [], []
    v3 = v.reshape(shape)
    chi = np.einsum("qkji,ikq->jkq", g0, v3)
    kchi = np.asarray(bs.ladder.apply(jnp.asarray(chi)))
    for k in range(nk + 1):
        dsp = props.matrices_from_coefficients(dcp[k], z)
        dsm = props.matrices_from_coefficients(dcm[k], z)
        dg0 = _g0_of(bs, dsp, sm) + _g0_of(bs, sp, dsm)
        dchi = np.einsum("qkji,ikq->jkq", dg0, v3)
        dav = zf * np.asarray(bs.ladder.apply(jnp.asarray(dchi)))
        if k < nk:
            dav = dav + tangents["dzf"][k] * kchi
            if tangents["dlam"][k] is not None:
                dav = dav + zf * np.asarray(ladder._apply(jnp.asarray(chi), jnp.asarray(tangents["dlam"][k]),
                                                          *arrays[1:]))
        dG0v.append(dchi)
        dAv.append(dav.reshape(-1))
        dlam.append(complex(np.sum(u * dav.reshape(-1)) / uv))
    return _Point(mass=mass, lam=lam, v=v, u=u, g0=g0, dAv=dAv, dG0v=dG0v, dlam=np.asarray(dlam),
                  residual_right=res_r, residual_left=res_l,
                  biorthogonality=abs(uv) / (np.linalg.norm(u) * np.linalg.norm(v)), dx=(dx1, dx2))


# ----------------------------------------------------------------------------------------
# The lean evaluation

@dataclass
class _Context:
    cfg: Config
    kern: Kernel
    specs: list
    quarks: dict            # flavour -> GapSolution
    qtan: dict              # flavour -> _QuarkTangents (None when values only)
    full_dlam: list
    timings: dict


def _eta(meson, m1, m2, warm_eta):
    if meson.quarks[0] == meson.quarks[1] and meson.eta in (None, 0.5):
        return 0.5
    if meson.eta is not None:
        return float(meson.eta)
    return warm_eta if warm_eta is not None else m1 / (m1 + m2)


def _guess(meson, ch, sols, m_max):
    if meson.mass_guess_gev is not None:
        return meson.mass_guess_gev
    if ch.name == "pseudoscalar":       # M(0) is not needed: no evaluation of it
        return mass_guess(ch.name, (sols[0].mass_gev, sols[1].mass_gev), (0.0, 0.0), m_max)
    return mass_guess(ch.name, (sols[0].mass_gev, sols[1].mass_gev),
                      (sols[0].mass_function_at_zero(), sols[1].mass_function_at_zero()), m_max)


def _is_exact(cfg, meson, specs, quarks) -> bool:
    sols = [quarks[q] for q in meson.quarks]
    if cfg.bse.continuation != "shifted":
        return False
    if all(s.chiral for s in sols) and meson.channel == "pseudoscalar":
        return False
    return not any(kind == "mass" and cfg.flavour(name).current_mass_gev == 0.0 for kind, name in specs)


def _prepare(cfg: Config, keys, mesons, warm: dict):
    """Gap solutions of the flavours the mesons need and, for the mesons differentiated
    exactly, the kernel's and the quarks' tangents."""
    t0 = time.perf_counter()
    specs = [parse_key(cfg, k) for k in keys]
    theta = np.array([key_value(cfg, k) for k in keys])
    kern = kernel_of(cfg)
    need = sorted({q for m in mesons for q in m.quarks})
    quarks = {}
    for f in need:
        g = warm.get("quarks", {}).get(f)
        quarks[f] = gap.solve(kern, cfg.flavour(f).current_mass_gev, cfg.renormalisation_point_gev,
                              gap_grid_of(cfg), guess=g if g is not None and g.q2.size else None)
    timings = {"gap": time.perf_counter() - t0}
    exact = {m.name: _is_exact(cfg, m, specs, quarks) for m in mesons}
    ctx = _Context(cfg=cfg, kern=kern, specs=specs, quarks=quarks, qtan={}, full_dlam=[], timings=timings)
    if any(exact.values()) and specs:
        t1 = time.perf_counter()
        grid = bse_grid_of(cfg)
        lgrid = _ladder_grid(kern, grid)
        sizes = [ladder.moment_sizes(channels.get(m.channel), -1.0, grid.n_z) for m in mesons if exact[m.name]]
        sizes.append(ladder.moment_sizes(QUARK, 1.0, grid.n_z))
        n_l, n_s = max(s[0] for s in sizes), max(s[1] for s in sizes)
        params = [name for kind, name in specs if kind == "param"]
        dl = iter(ladder.moments_with_tangents(kern, lgrid, n_l, n_s, [{p: 1.0} for p in params])[1:])
        ctx.full_dlam = [next(dl) if kind == "param" else None for kind, _ in specs]
        timings["kernel_tangents"] = time.perf_counter() - t1
        t1 = time.perf_counter()
        for f in need:
            ctx.qtan[f] = _quark_tangents(quarks[f], f, specs, True)
        timings["quark_tangents"] = time.perf_counter() - t1
    return ctx, theta, exact


def observables_with_gradient(cfg: Config, keys, wanted, store=None, warm=None) -> Gradients:
    """The wanted observables and their derivatives with respect to ``keys`` (config keys:
    ``interaction.<parameter>``, ``quarks.<flavour>.current_mass_gev``).

    ``wanted``: (meson name, "mass_gev" | "decay_constant_gev"); the decay constant in the
    config's convention.  ``warm``: the ``state`` of a previous call (same config apart
    from parameter values) to start the solves from.  ``store`` is accepted for the
    pipeline's interface and not used: nothing of this lean path is cached on disk."""
    t0 = time.perf_counter()
    keys = list(keys)
    items = _wanted(cfg, wanted)
    mesons = []
    for m, _ in items:
        if m not in mesons:
            mesons.append(m)
    warm = warm if isinstance(warm, dict) else {}
    ctx, theta, exact = _prepare(cfg, keys, mesons, warm)
    specs, quarks, timings = ctx.specs, ctx.quarks, ctx.timings
    diagnostics = {"mesons": {}}
    results = {}
    new_state = {"keys": keys, "theta": theta, "quarks": quarks, "mesons": {}}
    qop = None
    for m in mesons:
        t1 = time.perf_counter()
        wm = warm.get("mesons", {}).get(m.name)
        if exact[m.name] and specs:
            res, st, qop = _meson_exact(ctx, m, wm, warm, theta, qop)
            bad = _failed_checks(res["diagnostics"])
            if bad:   # keep the values; differentiate this meson by central differences
                exact[m.name] = False
                res["diagnostics"]["exact_derivative_rejected"] = bad
        else:
            res, st, qop = _meson_values(ctx, m, wm, warm, theta, qop)
        res["seconds"] = time.perf_counter() - t1
        results[m.name] = res
        new_state["mesons"][m.name] = st
        diagnostics["mesons"][m.name] = res["diagnostics"]
    conv = observables.CONVENTIONS[cfg.output.decay_constant_convention]
    values = np.empty(len(items))
    jac = np.zeros((len(items), len(keys)))
    method = []
    fd_needed = []
    for i, (m, obs) in enumerate(items):
        r = results[m.name]
        factor = 1.0 if obs == "mass_gev" else conv
        values[i] = r[obs] * factor
        if exact[m.name] and specs:
            jac[i] = np.asarray(r["d_" + obs]) * factor
            method.append("exact")
        else:
            fd_needed.append(i)
            method.append("central-difference")
    if fd_needed and specs:
        t1 = time.perf_counter()
        sub = [wanted[i] for i in fd_needed]
        jac[fd_needed] = _central_differences(cfg, keys, sub, new_state)
        timings["central_differences"] = time.perf_counter() - t1
    new_state["values"] = values
    new_state["jacobian"] = jac
    timings["total"] = time.perf_counter() - t0
    diagnostics["timings"] = timings
    diagnostics["quark_residuals"] = {f: s.residual for f, s in quarks.items()}
    return Gradients(values=values, jacobian=jac, method=tuple(method), diagnostics=diagnostics, state=new_state)


#: The exact derivatives of a meson are used only if every linear solve and eigenpair
#: behind them is accurate to this (relative residuals; measured ≤ 1e-11 throughout).
CHECK_TOL = 1e-8
_CHECKS = ("shifted_tangent_residual_max", "eigenvector_derivative_residual_max", "eigen_residual_left",
           "eigen_residual_right", "left_right_eigenvalue_difference")


def _failed_checks(diag: dict) -> str:
    bad = [f"{k} = {diag[k]:.2e}" for k in _CHECKS if not diag.get(k, 0.0) <= CHECK_TOL]
    return "; ".join(bad) + f" (above {CHECK_TOL:g})" if bad else ""


def _central_differences(cfg, keys, wanted, state):
    cols = []
    for k in keys:
        x = key_value(cfg, k)
        if x == 0.0 and parse_key(cfg, k)[0] == "mass":
            raise ConfigError(k, x, "a positive current mass (no derivative at the chiral limit)")
        h = FD_STEP * abs(x) if x != 0 else FD_STEP
        vp = observables_with_gradient(with_value(cfg, k, x + h), [], wanted, warm=state).values
        vm = observables_with_gradient(with_value(cfg, k, x - h), [], wanted, warm=state).values
        cols.append((vp - vm) / (2 * h))
    return np.stack(cols, axis=1) if cols else np.zeros((len(wanted), 0))


def _ladder_grid(kern, grid):
    return ladder.LadderGrid(grid.radial(kern.q2_max), grid.n_z, grid.angular_half, grid.fine_order)


def _bound_state(ctx: _Context, meson, wm, qop):
    cfg = ctx.cfg
    sols = (ctx.quarks[meson.quarks[0]], ctx.quarks[meson.quarks[1]])
    m1 = abs(sols[0].mass_function_at_zero())
    m2 = abs(sols[1].mass_function_at_zero())
    eta = _eta(meson, m1, m2, (wm or {}).get("eta"))
    m_max = min(2.2 * m1 * (0.5 / eta), 2.2 * m2 * (0.5 / (1.0 - eta)))
    ch = channels.get(meson.channel)
    bs = bse.BoundState(ctx.kern, ch, bse_grid_of(cfg), sols[0], sols[1] if meson.quarks[1] != meson.quarks[0] else None,
                        eta=eta, continuation=cfg.bse.continuation, max_mass=m_max, quark_operator=qop,
                        shifted_tol=SHIFTED_TOL)
    if wm and bs._shifted is not None:
        bs._history = [h for h in wm.get("history", []) if h.eta == bs.eta]
        bs._history2 = [h for h in wm.get("history2", [])]
    return bs, ch, sols, eta, m_max


def _predicted_mass(wm, warm, theta):
    if not wm or wm.get("mass") is None:
        return None
    m = wm["mass"]
    d = wm.get("dmass")
    old = warm.get("theta")
    if d is not None and old is not None and len(old) == len(theta) and len(d) == len(theta):
        m = m + float(np.dot(d, theta - old))
    return m if m > 0 else None


def _find(bs, meson, ch, sols, m_max, wm, warm, theta):
    pred = _predicted_mass(wm, warm, theta)
    # the channel's charge parity where C is a symmetry, as the run; if an opposite-C state
    # leads, the left eigenvector's check fails and the derivative falls back (CHECK_TOL)
    parity = ch.c_parity if search.charge_symmetric(bs) else None
    if pred is not None and pred < m_max:
        return search.find_mass(bs, pred, m_max, step=0.01, xtol=MASS_XTOL, parity=parity)
    return search.find_mass(bs, _guess(meson, ch, sols, m_max), m_max, xtol=MASS_XTOL, parity=parity)


def _state_of(bs, mass, vec, u, eta, dmass):
    return {"mass": mass, "vec": vec, "u": u, "eta": eta, "dmass": dmass,
            "history": list(getattr(bs, "_history", []) or []), "history2": list(getattr(bs, "_history2", []) or [])}


def _meson_values(ctx, meson, wm, warm, theta, qop):
    """Mass and f only (no derivatives), as ``pipeline.bound_state`` computes them."""
    bs, ch, sols, eta, m_max = _bound_state(ctx, meson, wm, qop)
    chiral = sols[0].chiral and sols[1].chiral and ch.name == "pseudoscalar"
    if chiral:
        norms = [_normalise(bs, m, None)[0] for m in observables.CHIRAL_PROBES_GEV]
        nrm = observables.chiral_limit(*norms)
        mass, vec = 0.0, None
    else:
        sol = _find(bs, meson, ch, sols, m_max, wm, warm, theta)
        mass = sol.mass_gev
        nrm, vec, _, _ = _normalise(bs, mass, sol.eigenvector)
    res = {"mass_gev": mass, "decay_constant_gev": nrm.decay_constant,
           "diagnostics": {"eta": eta, "search_limit_gev": m_max, "shifted_residual": bs.shifted_residual,
                           "normalisation_agreement": nrm.normalisation_agreement}}
    return res, _state_of(bs, mass, vec, (wm or {}).get("u"), eta, (wm or {}).get("dmass")), bs._qop


def _normalise(bs, mass, vec):
    """As ``pipeline._normalise_at``: the eigenvector refined at ``mass``, λ and
    eigenvectors at the derivative masses, then ``observables.normalise``."""
    vals, vecs = bs.eigen(mass, k=1, v0=vec)
    v = vecs[:, 0]
    lam, side = {}, {}
    for m in observables.derivative_masses(mass):
        lv, lw = bs.eigen(m, k=1, v0=v)
        lam[m] = float(lv[0].real)
        side[m] = (complex(lv[0]), lw[:, 0])
    return observables.normalise(bs, mass, v, lam), v, side, complex(vals[0])


def _tangents(ctx, meson, bs, sols) -> dict:
    """The tangents shared by every mass point of one meson: the quarks', the kernels'
    (sliced to each operator's moments) and that of the factor Z₂²."""
    nk = len(ctx.specs)
    n_l_b, n_s_b = bs.ladder.arrays[0].shape[2], bs.ladder.arrays[0].shape[1]
    n_l_q, n_s_q = bs._qop.arrays[0].shape[2], bs._qop.arrays[0].shape[1]
    dlam_b = [None if d is None else d[:, :n_s_b, :n_l_b] for d in ctx.full_dlam]
    dlam_q = [None if d is None else d[:, :n_s_q, :n_l_q] for d in ctx.full_dlam]
    qt1, qt2 = ctx.qtan[meson.quarks[0]], ctx.qtan[meson.quarks[1]]
    z21, z22 = sols[0].z2, sols[1].z2
    dzf = [(qt1.dz2[k] * z22 + z21 * qt2.dz2[k]) if ctx.kern.z2_squared else 0.0 for k in range(nk)]
    return {"q": (qt1, qt2), "dlam_q": dlam_q, "dlam": dlam_b, "dzf": dzf}


def eigenvalue_with_gradient(cfg: Config, keys, meson_name: str, mass_gev: float):
    """(λ, ∂λ/∂θ per key, ∂λ/∂M) of the leading eigenvalue of the meson's BSE at fixed
    P² = −M² (``mass_gev``), by first-order perturbation with left and right
    eigenvectors; with ``keys`` empty only λ is computed.  The check of the method
    against differences of λ at fixed M (tests) and a tool for diagnostics."""
    keys = list(keys)
    meson = _wanted(cfg, [(meson_name, "mass_gev")])[0][0]
    ctx, _, exact = _prepare(cfg, keys, [meson], {})
    bs, ch, sols, eta, m_max = _bound_state(ctx, meson, None, None)
    if not keys:
        return complex(bs.eigen(mass_gev, k=1)[0][0]), np.zeros(0), None
    if not exact[meson.name]:
        raise NotImplementedError("exact eigenvalue derivatives need the shifted continuation and no chiral-limit mass key")
    nk = len(keys)
    pt = _point(bs, mass_gev, None, None, _tangents(ctx, meson, bs, sols), nk, {})
    return pt.lam, pt.dlam[:nk], pt.dlam[nk]


def _meson_exact(ctx, meson, wm, warm, theta, qop):
    t0 = time.perf_counter()
    bs, ch, sols, eta, m_max = _bound_state(ctx, meson, wm, qop)
    nk = len(ctx.specs)
    sol = _find(bs, meson, ch, sols, m_max, wm, warm, theta)
    mass = sol.mass_gev
    nrm, v, side, lam0 = _normalise(bs, mass, sol.eigenvector)
    t_search = time.perf_counter() - t0
    tangents = _tangents(ctx, meson, bs, sols)
    qt1, qt2 = tangents["q"]
    diag = {}
    u0 = (wm or {}).get("u")
    if u0 is not None and np.shape(u0) != (bs.size,):
        u0 = None
    pt = _point(bs, mass, v, u0, tangents, nk, diag, lam=lam0)
    mpm = observables.derivative_masses(mass)
    tangents["start"] = pt.dx
    side_pts = [_point(bs, m, side[m][1], pt.u, tangents, nk, diag, lam=side[m][0]) for m in mpm]
    t_points = time.perf_counter() - t0 - t_search
    # mass
    dlam_th = pt.dlam[:nk].real
    dlam_m = pt.dlam[nk].real
    dmass = -dlam_th / dlam_m
    # decay constant
    df = _decay_constant_tangent(bs, ch, pt, side_pts, mass, dmass, nrm, sols, qt1, qt2, diag)
    t_f = time.perf_counter() - t0 - t_search - t_points
    diag.update({
        "eta": eta, "search_limit_gev": m_max, "shifted_residual": bs.shifted_residual,
        "lambda_minus_one": abs(pt.lam - 1.0),
        "eigen_residual_right": pt.residual_right, "eigen_residual_left": pt.residual_left,
        "biorthogonality": pt.biorthogonality,
        "dlambda_dmass": float(dlam_m),
        "dlambda_dmass_check": float(-2.0 * mass * nrm.eigenvalue_slope),
        "normalisation_agreement": nrm.normalisation_agreement,
        "seconds": {"search_and_normalisation": t_search, "eigen_perturbation": t_points, "decay_constant": t_f},
    })
    diag["shifted_tangent_residual_max"] = max(diag.pop("shifted_tangent_residuals", [0.0]) or [0.0])
    diag["left_right_eigenvalue_difference"] = max(diag["left_right_eigenvalue_difference"])
    res = {"mass_gev": mass, "decay_constant_gev": nrm.decay_constant, "d_mass_gev": dmass,
           "d_decay_constant_gev": df, "diagnostics": diag}
    return res, _state_of(bs, mass, pt.v, pt.u, eta, dmass), bs._qop


def _decay_constant_tangent(bs, ch, pt: _Point, side_pts, mass, dmass, nrm, sols, qt1, qt2, diag):
    """d f/dθ (√2 convention) for each key, exact (module docstring)."""
    nk = len(dmass)
    shape = bs.shape
    W = observables.integration_weights(bs)
    pair = observables.conjugate_pairing(ch, bs.z)
    from ..numerics.dirac import rest_frame_vectors

    qh, ph = rest_frame_vectors(bs.z)
    tr = np.einsum("mab,kimba->ki", ch.decay_projector(ph[0]), ch.basis(qh, ph))

    def lraw(a, c):
        return N_C * np.einsum("kq,ikq,kij,jkq->", W, a, pair, c) / ch.polarisations

    def praw(c):
        return np.einsum("kq,ki,ikq->", W, tr, c)

    v = pt.v.reshape(shape)
    g0 = pt.g0
    chi = np.einsum("qkji,ikq->jkq", g0, v)
    mp, mm = side_pts[1].mass, side_pts[0].mass
    dp2 = -(mp * mp) + mm * mm
    slope = (side_pts[1].lam.real - side_pts[0].lam.real) / dp2
    L = lraw(v, chi)
    P = praw(chi)
    fz = sols[0].z2 ** 0.5 * sols[1].z2 ** 0.5
    cm = ch.decay_factor(mass)
    fc = fz * N_C * cm / ch.polarisations * P / np.sqrt(complex(slope * L))
    diag["decay_constant_check"] = abs(abs(fc) - nrm.decay_constant) / nrm.decay_constant
    h = 1e-6
    dlnc_dm = (np.log(ch.decay_factor(mass * (1 + h))) - np.log(ch.decay_factor(mass * (1 - h)))).real / (2 * h * mass)
    zf = bs.z2_factor
    arrays = bs.ladder.arrays
    jg0 = jnp.asarray(g0)
    lam = pt.lam
    uv = complex(np.sum(pt.u * pt.v))

    def shifted_op(x):
        ax = np.asarray(bse._bse_matvec(jnp.asarray(x.reshape(shape)), jg0, zf, arrays)).reshape(-1)
        return ax - lam * x

    op = spla.LinearOperator((bs.size, bs.size), matvec=shifted_op, dtype=complex)
    out = np.zeros(nk)
    dv_res = []
    h_rel = mp / mass - 1.0
    for k in range(nk):
        dm = dmass[k]
        dav = pt.dAv[k] + dm * pt.dAv[nk]
        dg0v = pt.dG0v[k] + dm * pt.dG0v[nk]
        dlam_tot = complex(np.sum(pt.u * dav) / uv)
        rhs = -(dav - dlam_tot * pt.v)
        rhs = rhs - pt.v * complex(np.sum(pt.u * rhs) / uv)
        if np.linalg.norm(rhs) > 0:
            dv, info = spla.gmres(op, rhs, rtol=1e-11, atol=0.0, restart=200, maxiter=20)
            dv_res.append(float(np.linalg.norm(op.matvec(dv) - rhs) / np.linalg.norm(rhs)))
        else:
            dv = np.zeros_like(rhs)
        dv3 = dv.reshape(shape)
        dchi = dg0v + np.einsum("qkji,ikq->jkq", g0, dv3)
        dP = praw(dchi)
        dL = lraw(dv3, chi) + lraw(v, dchi)
        dlp = side_pts[1].dlam[k].real + side_pts[1].dlam[nk].real * (1 + h_rel) * dm
        dlm = side_pts[0].dlam[k].real + side_pts[0].dlam[nk].real * (1 - h_rel) * dm
        ddp2 = -2.0 * (mp * mp - mm * mm) / mass * dm
        dslope = (dlp - dlm) / dp2 - slope * ddp2 / dp2
        dlnfz = 0.5 * (qt1.dz2[k] / sols[0].z2 + qt2.dz2[k] / sols[1].z2)
        dln = dlnfz + dlnc_dm * dm + dP / P - 0.5 * dslope / slope - 0.5 * dL / L
        out[k] = abs(fc) * float(np.real(dln))
    diag["eigenvector_derivative_residual_max"] = max(dv_res) if dv_res else 0.0
    return out

"""Fitting model inputs to observables through the pipeline (no stage internals).

``tune_current_mass`` adjusts one flavour's m^ζ until a meson's mass hits a target:
secant steps in m on M², which is nearly linear in m for a pseudo-Goldstone boson.

``run_fit`` is ``rlmeson fit``: the parameters of a ``[fit]`` table (``fitspec``) moved by
``scipy.optimize.least_squares`` (trust region with bounds) on the residuals
(achieved − target)/uncertainty, with the Jacobian supplied.  Derivatives come from
``rlmeson.workflows.sensitivity.observables_with_gradient`` (exact) or, with ``derivatives =
"central"``, from ``observables_with_gradient`` here: central differences of warm-started
evaluations.  An evaluation computes only what the targets need (the gap solution of
each flavour involved, warm-started from the previous point; mass and normalisation of
each meson on the configured grid; no error grid, no spectrum, no singularity search for
pseudoscalars), and keeps the ladder kernels of the last interactions (they do not
depend on the current masses).
"""

from __future__ import annotations

import dataclasses
import math
import time
from dataclasses import dataclass, field

import numpy as np

from . import pipeline
from ..io.config import Config, ConfigError


@dataclass(frozen=True)
class TuneResult:
    current_mass_gev: float
    meson_mass_gev: float      # evaluated at current_mass_gev
    steps: list[tuple[float, float]]
    converged: bool


def _with_mass(cfg: Config, flavour: str, m: float) -> Config:
    fl = tuple(dataclasses.replace(f, current_mass_gev=m) if f.name == flavour else f for f in cfg.flavours)
    return dataclasses.replace(cfg, flavours=fl)


def meson_mass(cfg: Config, meson_name: str, store=None) -> float:
    meson = next((m for m in cfg.mesons if m.name == meson_name), None)
    if meson is None:
        raise ConfigError("mesons", meson_name, "the name of a meson listed in the config")
    quarks = {q: pipeline.solve_quark(cfg, q, store) for q in set(meson.quarks)}
    return pipeline.bound_state(cfg, meson, quarks, pipeline.bse_grid_of(cfg)).mass_gev


def tune_current_mass(cfg: Config, flavour: str, meson_name: str, target_gev: float,
                      rtol: float = 1e-7, max_steps: int = 12, store=None) -> TuneResult:
    m0 = cfg.flavour(flavour).current_mass_gev
    if m0 <= 0:
        raise ConfigError(f"quarks.{flavour}.current_mass_gev", m0, "a positive starting value for the fit")
    steps = []

    def residual(m):
        mm = meson_mass(_with_mass(cfg, flavour, m), meson_name, store)
        steps.append((m, mm))
        return mm**2 - target_gev**2

    x0 = m0
    y0 = residual(x0)
    x1 = x0 * target_gev**2 / (y0 + target_gev**2)   # M² ∝ m to leading order
    y1 = residual(x1)
    converged = abs(y1) < 2 * rtol * target_gev**2
    while not converged and len(steps) < max_steps + 2 and y1 != y0:
        x0, y0, x1 = x1, y1, x1 - y1 * (x1 - x0) / (y1 - y0)
        if not x1 > 0:
            break
        y1 = residual(x1)
        converged = abs(y1) < 2 * rtol * target_gev**2
    best = min(steps, key=lambda s: abs(s[1] - target_gev))
    return TuneResult(current_mass_gev=best[0], meson_mass_gev=best[1], steps=steps, converged=converged)


# ----------------------------------------------------------------------------------------
# Evaluating the targets' observables (warm-started), and their central-difference gradient

#: Relative step of the central differences (measured: on the MT pion, d m_pi/dD and
#: d f_pi/dm agree between steps 1e-3 and 3e-4 to ~1e-5 relative; below ~1e-4 the mass
#: root's tolerance, 1e-9 GeV, dominates).
CENTRAL_STEP = 1e-3


@dataclass
class Warm:
    """What carries over between evaluations: gap solutions (Newton starting points),
    meson masses (search brackets), reference singularities.  (Ladder operators are kept
    in-process by ``ladder.build`` itself, per kernel, channel and grid.)"""

    gap: dict = field(default_factory=dict)
    masses: dict = field(default_factory=dict)
    reference: dict = field(default_factory=dict)

    def child(self) -> "Warm":
        """A copy whose gap/masses may move without touching this one."""
        return Warm(dict(self.gap), dict(self.masses), self.reference)


@dataclass(frozen=True)
class Gradients:
    values: np.ndarray            # (n_wanted,)
    jacobian: np.ndarray | None   # (n_wanted, n_keys): d value / d key
    method: str
    diagnostics: dict
    state: object


def _wanted_meson(cfg: Config, name: str):
    m = next((x for x in cfg.mesons if x.name == name), None)
    if m is None:
        raise ConfigError("mesons", name, "the name of a meson listed in the config")
    return m


def _quick_quark(cfg: Config, flavour: str, warm: Warm, store, full: bool, near=None) -> pipeline.QuarkResult:
    """The gap solution (warm-started) as a QuarkResult.  Without ``full`` no singularity
    is searched (a pseudoscalar's search is then bounded by 2.2 M(0)); with it the
    nearest singularity of a full ``pipeline.solve_quark`` at the first point (cached in
    the store) is carried along, scaled with M(0)² (it moves with the dressed mass)."""
    from ..quark import gap

    kern = pipeline.kernel_of(cfg)
    grid = pipeline.gap_grid_of(cfg)
    mass = cfg.flavour(flavour).current_mass_gev
    guess = warm.gap.get(flavour, near)   # the flavour's last solution, else the one just solved
    try:
        sol = gap.solve(kern, mass, cfg.renormalisation_point_gev, grid, guess=guess)
    except RuntimeError:
        if guess is None:
            raise
        sol = gap.solve(kern, mass, cfg.renormalisation_point_gev, grid)
    warm.gap[flavour] = sol
    m0 = sol.mass_function_at_zero()
    sing = check = None
    m_max = float("inf")
    if full:
        if flavour not in warm.reference:
            ref = pipeline.solve_quark(cfg, flavour, store)
            warm.reference[flavour] = (ref.mass_function_at_zero_gev, ref.singularity_gev2, ref.singularity_check)
        m0_ref, s_ref, check = warm.reference[flavour]
        if s_ref is not None:
            sing = complex(s_ref) * (m0 / m0_ref) ** 2
            m_max = 2.0 * abs(np.sqrt(sing).imag)
    return pipeline.QuarkResult(flavour=flavour, key="", solution=sol, mass_function_at_zero_gev=m0,
                                max_bound_state_mass_gev=m_max, singularity_gev2=sing, singularity_check=check,
                                condensate_cbrt_gev=None, seconds=0.0, from_cache=False)


def observables(cfg: Config, wanted, warm: Warm | None = None, store=None) -> tuple[np.ndarray, Warm, dict]:
    """The observables ``wanted`` — (meson name, "mass_gev" | "decay_constant_gev") pairs,
    decay constants in the config's convention — of ``cfg``; returns (values, warm state,
    diagnostics)."""
    from ..meson import bse, observables as obs, search
    from ..model import channels

    warm = Warm() if warm is None else warm
    names = list(dict.fromkeys(m for m, _ in wanted))
    mesons = [_wanted_meson(cfg, n) for n in names]
    full = {f: False for m in mesons for f in m.quarks}
    for m in mesons:
        if m.channel != "pseudoscalar":
            full.update({f: True for f in m.quarks})
    quarks = {}
    for f in sorted(full, key=lambda f: cfg.flavour(f).current_mass_gev):   # lighter first: a start for heavier
        quarks[f] = _quick_quark(cfg, f, warm, store, full[f], near=quarks[max(quarks, key=lambda x: cfg.flavour(
            x).current_mass_gev)].solution if quarks else None)
    kern, grid = pipeline.kernel_of(cfg), pipeline.bse_grid_of(cfg)
    factor = obs.CONVENTIONS[cfg.output.decay_constant_convention]
    got, diag = {}, {}
    for m in mesons:
        q1, q2 = quarks[m.quarks[0]], quarks[m.quarks[1]]
        ch = channels.get(m.channel)
        eta = pipeline.meson_eta(m, q1, q2)[0]
        m_max = pipeline.mass_limit(q1, q2, eta)
        bs = bse.BoundState(kern, ch, grid, q1.solution, q2.solution if q2 is not q1 else None, eta=eta,
                            continuation=cfg.bse.continuation, max_mass=m_max)   # operators: ladder.build keeps them
        # the leading state of the channel's charge parity where C is a symmetry (as the run)
        parity = ch.c_parity if search.charge_symmetric(bs) else None
        previous = warm.masses.get(m.name)
        if previous is not None and previous < m_max:
            sol = search.find_mass(bs, previous, m_max, step=0.02, parity=parity)
        else:
            sol = search.find_mass(bs, m.mass_guess_gev or pipeline._guess(ch.name, q1, q2, m_max), m_max,
                                   parity=parity)
        warm.masses[m.name] = sol.mass_gev
        nrm = pipeline._normalise_at(bs, search.Leading(bs, parity), sol.mass_gev, sol.eigenvector)
        got[(m.name, "mass_gev")] = sol.mass_gev
        got[(m.name, "decay_constant_gev")] = nrm.decay_constant * factor
        diag[m.name] = {"bse_evaluations": sol.evaluations, "normalisation_agreement": nrm.normalisation_agreement,
                        "search_limit_gev": m_max}
    return np.array([got[tuple(w)] for w in wanted], dtype=float), warm, diag


def _config_with(cfg: Config, key: str, value: float) -> Config:
    from ..io.config import apply_overrides, from_dict

    return from_dict(apply_overrides(cfg.to_dict(), [f"{key}={float(value)!r}"]), source=cfg.source)


def _key_value(cfg: Config, key: str) -> float:
    from .fitspec import _value_of

    v = _value_of(cfg, key)
    if v is None:
        raise ConfigError("keys", key, "an interaction parameter or a flavour's current mass")
    return float(v)


def observables_with_gradient(cfg: Config, keys, wanted, store=None, warm=None,
                              step: float = CENTRAL_STEP) -> Gradients:
    """The observables ``wanted`` (see ``observables``) and their derivatives with respect
    to the config ``keys`` by central differences of warm-started evaluations (one-sided
    where a step would leave a key's allowed range); the same signature as the exact
    ``rlmeson.workflows.sensitivity.observables_with_gradient``."""
    t0 = time.perf_counter()
    vals, warm, diag = observables(cfg, wanted, warm, store)
    jac = central_jacobian(cfg, keys, wanted, vals, warm, store, step)
    diag = {**diag, "seconds": time.perf_counter() - t0, "relative_step": step}
    return Gradients(values=vals, jacobian=jac, method=CENTRAL_METHOD, diagnostics=diag, state=warm)


CENTRAL_METHOD = "central differences of warm-started evaluations"


def central_jacobian(cfg: Config, keys, wanted, vals, warm: Warm, store=None, step: float = CENTRAL_STEP):
    """d(observables)/d(keys) by central differences around ``cfg`` (whose observables are
    ``vals``), each side warm-started from ``warm`` (left unchanged)."""
    jac = np.zeros((len(vals), len(keys)))
    for j, key in enumerate(keys):
        x = _key_value(cfg, key)
        h = step * (abs(x) if x != 0 else 1e-3)
        sides = []
        for s in (+1, -1):
            try:
                sides.append((s, _config_with(cfg, key, x + s * h)))
            except ConfigError:
                continue
        if not sides:
            raise ConfigError(key, x, f"a value that can be moved by ±{h:g} for the finite differences")
        ys = {s: observables(c, wanted, warm.child(), store)[0] for s, c in sides}
        if len(ys) == 2:
            jac[:, j] = (ys[1] - ys[-1]) / (2 * h)
        else:
            (s, y), = ys.items()
            jac[:, j] = s * (y - vals) / h
    return jac


def gradient_function(derivatives: str):
    """``observables_with_gradient`` of the chosen method ("exact" or "central")."""
    if derivatives == "exact":
        from . import sensitivity

        return sensitivity.observables_with_gradient
    return observables_with_gradient


# ----------------------------------------------------------------------------------------
# The least-squares fit

class FitFailed(RuntimeError):
    """The fit could not be evaluated at its starting point."""


@dataclass
class FitResult:
    spec: object                  # fitspec.FitSpec
    parameters: np.ndarray
    achieved: np.ndarray
    jacobian: np.ndarray          # d observable / d parameter at the solution (chain rule applied)
    converged: bool
    status: str
    iterations: int
    evaluations: int
    history: list
    seconds: float
    method: str
    config: Config = field(repr=False)
    start_hash: str = ""

    @property
    def residuals(self) -> np.ndarray:
        t = self.spec.targets
        return (self.achieved - np.array([x.value for x in t])) / np.array([x.uncertainty for x in t])

    @property
    def chi2(self) -> float:
        return float(np.sum(self.residuals ** 2))

    def covariance(self) -> np.ndarray:
        """(Jᵀ W J)⁻¹ with W = diag(1/σ²): the parameters' covariance propagated from the
        targets' uncertainties (pseudo-inverse where Jᵀ W J is singular)."""
        sig = np.array([x.uncertainty for x in self.spec.targets])
        jr = self.jacobian / sig[:, None]
        return np.linalg.pinv(jr.T @ jr)

    def sensitivities(self) -> np.ndarray:
        """d ln observable / d ln parameter at the solution."""
        return self.jacobian * self.parameters[None, :] / self.achieved[:, None]

    def to_json(self) -> dict:
        from .. import __version__

        sp = self.spec
        names = [p.key for p in sp.parameters]
        cov = self.covariance()
        err = np.sqrt(np.clip(np.diag(cov), 0.0, None))
        with np.errstate(invalid="ignore", divide="ignore"):
            corr = cov / np.outer(err, err)
        sens = self.sensitivities()
        return {
            "package": "rlmeson", "package_version": __version__, "kind": "fit",
            "config": sp.name, "config_hash": self.start_hash, "fitted_config_hash": self.config.hash(),
            "units": "GeV (parameters in the units of their config keys; decay constants in the config's "
                     "convention)",
            "decay_constant_convention": sp.convention,
            "derivatives": sp.derivatives, "derivatives_method": self.method,
            "parameters": {n: float(v) for n, v in zip(names, self.parameters)},
            "linked": {p.linked_key: {"follows": p.key, "product": p.linked_product,
                                      "value": p.linked_product / float(v)}
                       for p, v in zip(sp.parameters, self.parameters) if p.linked_key},
            "start": {n: p.start for n, p in zip(names, sp.parameters)},
            "bounds": {n: [p.lower, p.upper] for n, p in zip(names, sp.parameters)},
            "targets": {t.name: {"meson": t.meson, "observable": t.observable, "target": t.value,
                                 "uncertainty": t.uncertainty, "achieved": float(a), "pull": float(r),
                                 "source": t.source}
                        for t, a, r in zip(sp.targets, self.achieved, self.residuals)},
            "chi2": self.chi2, "converged": self.converged, "status": self.status,
            "iterations": self.iterations, "evaluations": self.evaluations,
            "sensitivities": {t.name: {n: _clean(sens[i, j]) for j, n in enumerate(names)}
                              for i, t in enumerate(sp.targets)},
            "sensitivities_definition": "d ln observable / d ln parameter at the solution",
            "jacobian": {t.name: {n: _clean(self.jacobian[i, j]) for j, n in enumerate(names)}
                         for i, t in enumerate(sp.targets)},
            "parameter_uncertainties": {n: _clean(e) for n, e in zip(names, err)},
            "correlation": {a: {b: _clean(corr[i, j]) for j, b in enumerate(names)} for i, a in enumerate(names)},
            "covariance": {a: {b: _clean(cov[i, j]) for j, b in enumerate(names)} for i, a in enumerate(names)},
            "uncertainty_method": "covariance (J^T W J)^-1, W = diag(1/uncertainty^2), J at the solution",
            "history": self.history,
            "seconds": self.seconds,
        }


def _clean(x):
    x = float(x)
    return x if math.isfinite(x) else None


#: The fit stops when the Gauss–Newton step (inside the bounds) is below this fraction of
#: the parameters (scaled by their starting values).  The observables' numerical noise
#: (mass roots to 1e-9 GeV, ~1e-8 relative) divided by sensitivities d ln O/d ln p ~ 0.1
#: moves the parameters by ~1e-7 (measured: the closure fit's last steps wander by
#: 5e-8 once chi2 < 1e-10), so steps below this are noise; 1e-6 is 100 times below the
#: closure test's 1e-4.
GAUSS_NEWTON_TOL = 1e-6


class _Converged(Exception):
    def __init__(self, x):
        super().__init__("converged")
        self.x = x


def run_fit(spec, store=None, progress=None, gradient=None) -> FitResult:
    """Least squares (scipy trust region 'trf' with the bounds) on (achieved − target)/σ,
    Jacobian from ``gradient`` (default: by ``spec.derivatives``), in parameters scaled by
    their starting magnitudes; every evaluation is recorded in ``history``."""
    from scipy.optimize import least_squares

    t0 = time.perf_counter()
    say = progress or (lambda _msg: None)
    grad = gradient or gradient_function(spec.derivatives)
    params = spec.parameters
    wanted = tuple((t.meson, t.observable) for t in spec.targets)
    tv = np.array([t.value for t in spec.targets])
    sig = np.array([t.uncertainty for t in spec.targets])
    scale = np.array([abs(p.start) if p.start != 0 else (p.upper - p.lower) for p in params])
    keys = spec.config_keys
    state = {"warm": None, "method": ""}
    cache: dict[tuple, dict] = {}
    history: list[dict] = []
    start_hash = spec.config_at(spec.start).hash()

    def chain(theta, jk):
        cols, i = [], 0
        for p, v in zip(params, theta):
            d = p.chain(v)
            cols.append(sum(c * jk[:, i + n] for n, c in enumerate(d)))
            i += len(d)
        return np.stack(cols, axis=1)

    def evaluate(u, need_jac):
        theta = np.asarray(u, dtype=float) * scale
        key = tuple(theta.tolist())
        hit = cache.get(key)
        if hit is not None and (hit["jac"] is not None or not need_jac or not hit["ok"]):
            return hit
        t1 = time.perf_counter()
        if hit is not None and spec.derivatives == "central":     # values known: the differences only
            cfg = spec.config_at(theta)
            jk = central_jacobian(cfg, keys, wanted, hit["values"], hit["warm"], store)
            hit["jac"] = chain(theta, jk)
            state["method"] = CENTRAL_METHOD
            history[hit["record"]]["jacobian_evaluated"] = True
            history[hit["record"]]["derivatives_method"] = [CENTRAL_METHOD]
            history[hit["record"]]["seconds"] += time.perf_counter() - t1
            return hit
        entry = {"ok": False, "values": None, "jac": None, "warm": None, "record": len(history)}
        try:
            cfg = spec.config_at(theta)
            if need_jac or spec.derivatives == "exact":
                g = grad(cfg, keys, wanted, store=store, warm=state["warm"])
                state["warm"], state["method"] = g.state, g.method
                entry.update(ok=True, values=np.asarray(g.values, float), jac=chain(theta, np.asarray(g.jacobian)))
            else:
                vals, warm, _ = observables(cfg, wanted, state["warm"], store)
                state["warm"] = warm
                entry.update(ok=True, values=vals, warm=warm.child())
        except ConfigError:
            raise
        except Exception as e:  # noqa: BLE001  (a trial point without a bound state: the step shrinks)
            if not history:
                raise FitFailed(f"at the starting point: {type(e).__name__}: {' '.join(str(e).split())}") from e
            entry["message"] = f"{type(e).__name__}: {' '.join(str(e).split())}"
        r = (entry["values"] - tv) / sig if entry["ok"] else None
        rec = {"evaluation": len(history) + 1, "parameters": dict(zip((p.key for p in params), theta.tolist())),
               "jacobian_evaluated": entry["jac"] is not None, "ok": entry["ok"],
               "seconds": time.perf_counter() - t1}
        if entry["jac"] is not None:         # how each derivative was obtained at this step
            m = state["method"]
            rec["derivatives_method"] = list(m) if isinstance(m, (list, tuple)) else [m]
        if entry["ok"]:
            rec.update(observables={t.name: float(v) for t, v in zip(spec.targets, entry["values"])},
                       residuals={t.name: float(x) for t, x in zip(spec.targets, r)}, chi2=float(np.sum(r ** 2)))
            say(f"step {rec['evaluation']}: " + ", ".join(f"{k} = {v:.8g}" for k, v in rec["parameters"].items())
                + " -> " + ", ".join(f"{k} = {v:.7g}" for k, v in rec["observables"].items())
                + f"; chi2 = {rec['chi2']:.4g} [{rec['seconds']:.1f} s]")
        else:
            rec["message"] = entry["message"]
            say(f"step {rec['evaluation']}: " + ", ".join(f"{k} = {v:.8g}" for k, v in rec["parameters"].items())
                + f" -> failed ({entry['message']}); the step is shortened")
        history.append(rec)
        cache[key] = entry
        return entry

    def fun(u):
        e = evaluate(u, False)
        return (e["values"] - tv) / sig if e["ok"] else np.full(len(tv), np.inf)

    def jac(u):
        e = evaluate(u, True)
        j = e["jac"] * scale[None, :] / sig[:, None]
        r = (e["values"] - tv) / sig
        du = np.linalg.lstsq(j, -r, rcond=None)[0]
        inside = np.all(lo <= u + du) and np.all(u + du <= hi)
        if inside and np.all(np.abs(du) <= GAUSS_NEWTON_TOL * np.maximum(np.abs(u), 1.0)):
            raise _Converged(np.array(u, dtype=float))
        return j

    lo = np.array([p.lower for p in params]) / scale
    hi = np.array([p.upper for p in params]) / scale
    u0 = np.array(spec.start) / scale
    try:
        res = least_squares(fun, u0, jac=jac, bounds=(lo, hi), method="trf", x_scale=1.0,
                            xtol=1e-10, ftol=1e-12, gtol=1e-12, max_nfev=spec.max_iterations)
        x, converged, message = res.x, bool(res.status > 0), str(res.message)
    except _Converged as done:
        x, converged = done.x, True
        message = (f"the Gauss-Newton step from this point is below {GAUSS_NEWTON_TOL:g} of the parameters "
                   "(inside the bounds)")
    theta = x * scale
    final = evaluate(x, True)
    if not final["ok"]:
        raise FitFailed(f"at the solution: {final.get('message')}")
    cfg = spec.config_at(theta)
    return FitResult(spec=spec, parameters=theta, achieved=final["values"], jacobian=final["jac"],
                     converged=converged, status=message, iterations=sum(h["jacobian_evaluated"] for h in history),
                     evaluations=len(history), history=history, seconds=time.perf_counter() - t0,
                     method=state["method"], config=cfg, start_hash=start_hash)


# ----------------------------------------------------------------------------------------
# Outputs: fit.json, the fitted config, the report, the figure

FIT_JSON, FITTED_CONFIG, REPORT, FIGURE = "fit.json", "fitted.toml", "report.txt", "fit.png"


def _toml_value(v) -> str:
    import json

    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int):
        return str(v)
    if isinstance(v, float):
        return repr(v)
    if isinstance(v, str):
        return json.dumps(v, ensure_ascii=False)
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    raise TypeError(f"no TOML form for {type(v).__name__}")


def _toml_key(k: str) -> str:
    import re

    return k if re.fullmatch(r"[A-Za-z0-9_-]+", k) else _toml_value(k)


def config_toml(d: dict, header: str = "") -> str:
    """A config dict (TOML layout: scalars, tables, arrays of tables) as TOML text."""
    lines = [f"# {h}" for h in header.splitlines()]

    def table(prefix, t):
        scalars = {k: v for k, v in t.items() if not isinstance(v, dict) and not _is_aot(v)}
        if prefix and (scalars or not any(isinstance(v, dict) for v in t.values())):
            lines.append(f"\n[{prefix}]")
        for k, v in scalars.items():
            lines.append(f"{_toml_key(k)} = {_toml_value(v)}")
        for k, v in t.items():
            name = f"{prefix}.{_toml_key(k)}" if prefix else _toml_key(k)
            if isinstance(v, dict):
                table(name, v)
            elif _is_aot(v):
                for item in v:
                    lines.append(f"\n[[{name}]]")
                    for kk, vv in item.items():
                        lines.append(f"{_toml_key(kk)} = {_toml_value(vv)}")
    table("", d)
    return "\n".join(lines).lstrip("\n") + "\n"


def _is_aot(v) -> bool:
    return isinstance(v, list) and bool(v) and all(isinstance(x, dict) for x in v)


def fitted_config_text(result: FitResult) -> str:
    """The fitted config as TOML (no [fit] table): ``rlmeson run`` on it reproduces the
    fit's observables; checked to read back to the same config hash."""
    import tomllib

    from ..io.config import from_dict

    d = result.config.to_dict()
    d["description"] = (f"fitted by rlmeson fit from {result.spec.name}: "
                        + ", ".join(f"{k} = {v:.10g}" for k, v in zip((p.key for p in result.spec.parameters),
                                                                      result.parameters)))
    header = (f"Written by rlmeson fit ({result.spec.name}, config hash {result.start_hash}): the fitted\n"
              f"parameters; `rlmeson run` on this file reproduces the fit's observables.")
    text = config_toml(d, header)
    if from_dict(tomllib.loads(text)).hash() != result.config.hash():
        raise RuntimeError("the fitted config does not read back to the fitted parameters")
    return text


def _methods_used(fj: dict) -> str:
    """The derivative methods the steps of a fit actually used (from its history)."""
    used = sorted({str(m) for h in fj.get("history", []) for m in (h.get("derivatives_method") or [])})
    return " and ".join(used) if used else "none"


def report_lines(fj: dict) -> list[str]:
    """A one-screen text report of a fit (from its fit.json content)."""
    names = list(fj["parameters"])
    state = "converged" if fj["converged"] else "NOT converged"
    out = [f"fit of {fj['config']} (config hash {fj['config_hash']}, rlmeson {fj['package_version']}): "
           f"{len(names)} parameter(s) to {len(fj['targets'])} target(s)",
           f"  {state} after {fj['iterations']} iterations, {fj['evaluations']} evaluations, "
           f"{fj['seconds']:.1f} s; chi2 = {fj['chi2']:.4g}; derivatives: {fj['derivatives']} requested, "
           f"{_methods_used(fj)} used",
           f"  {fj['status']}",
           f"  {'parameter':<30}{'start':>13}{'fitted':>15}{'± (1 sigma)':>13}   bounds"]
    for n in names:
        e = fj["parameter_uncertainties"].get(n)
        b = fj["bounds"][n]
        out.append(f"  {n:<30}{fj['start'][n]:>13.7g}{fj['parameters'][n]:>15.9g}"
                   f"{'—' if e is None else format(e, '.2e'):>13}   [{b[0]:g}, {b[1]:g}]")
    for k, l in fj.get("linked", {}).items():
        out.append(f"  {k:<30}{'':>13}{l['value']:>15.9g}   (= {l['product']:g} / {l['follows']})")
    out.append(f"  {'target':<30}{'target':>13}{'± (unc.)':>11}{'achieved':>15}{'pull':>9}")
    for n, t in fj["targets"].items():
        out.append(f"  {n:<30}{t['target']:>13.7g}{t['uncertainty']:>11.2g}{t['achieved']:>15.9g}"
                   f"{t['pull']:>9.2g}")
    out.append("  sensitivities d ln O / d ln p: " + "; ".join(
        f"{t}: " + ", ".join(f"{p.split('.')[-1] if p.startswith('interaction') else p.split('.')[1] + ' mass'}"
                             f" {_fmt(v)}" for p, v in s.items()) for t, s in fj["sensitivities"].items()))
    if len(names) > 1:
        out.append("  correlation: " + "; ".join(f"{a} / {b} {_fmt(fj['correlation'][a][b])}"
                                                 for i, a in enumerate(names) for b in names[i + 1:]))
    out.append(f"  decay constants in the {fj['decay_constant_convention']} MeV convention; GeV throughout")
    return out


def _fmt(v) -> str:
    return "—" if v is None else f"{v:.4g}"


def write_outputs(result: FitResult, out_dir) -> dict:
    """fit.json, fitted.toml, report.txt and fit.png into ``out_dir`` (each atomically);
    returns the fit.json content."""
    import json
    from pathlib import Path

    from ..io import plots
    from ..io.store import atomic_write_text

    out = Path(out_dir)
    fj = result.to_json()
    fj["fitted_config"] = FITTED_CONFIG
    fj["figure"] = FIGURE
    atomic_write_text(out / FITTED_CONFIG, fitted_config_text(result))
    plots.fit_figure(fj, out / FIGURE)
    text = "\n".join(report_lines(fj)) + "\n"
    atomic_write_text(out / REPORT, text)
    atomic_write_text(out / FIT_JSON, json.dumps(fj, indent=2, allow_nan=False) + "\n")
    return fj


# ----------------------------------------------------------------------------------------
# The Python API: ``rlmeson.fit(cfg)`` calls ``fit``

def fit(cfg, overrides=(), cache: bool = True, out=None, progress=None):
    """Fit the ``[fit]`` parameters of ``cfg`` (a path, a dict of the TOML layout, or a
    ``rlmeson.workflows.fitspec.FitSpec``) to its targets by least squares; returns a
    ``FitResult`` (``.parameters``, ``.achieved``, ``.converged``,
    ``.history``, ``.covariance()``, ``.config`` the fitted config, ``.to_json()`` what
    fit.json holds).  ``out``: also write fit.json, fitted.toml, report.txt and fit.png
    there.  ``progress``: called with one line per evaluation."""
    from . import fitspec as _spec

    if isinstance(cfg, dict):
        spec = _spec.from_config_dict(cfg, overrides)
    elif isinstance(cfg, _spec.FitSpec):
        spec = cfg
    else:
        spec = _spec.load(cfg, overrides)
    if out is not None:                    # the destination is checked before the work
        from ..io.store import writable_directory

        out = writable_directory(out)
    result = run_fit(spec, pipeline.store_of(spec.config_at(spec.start), cache), progress)
    if out is not None:
        write_outputs(result, out)
    return result

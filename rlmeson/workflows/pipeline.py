"""The one entry point that runs the chain for a resolved config:

    config → kernel + grids → quark (real axis, singularities) → bound states
           → normalisation → observables, identities, error bars

with the quark and meson stages cached in the content-addressed HDF5 store under keys
derived from the physics inputs.  The CLI, fits and scans call ``solve_quark``,
``solve_meson`` and ``run`` and never reach into the stages.
"""

from __future__ import annotations

import functools
import math
import time
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from .. import __version__
from ..meson import bse, extrapolate, observables, search
from ..model import channels
from ..quark import gap, quarkplane, singularities
from ..io.config import Config, ConfigError, MesonConfig, meson_label
from ..model.kernel import N_C, Kernel
from ..io.store import Store

Progress = Callable[[str], None]


#: |D|/norm below which the shifted continuation confirms a singularity (the one
#: threshold, derived and labelled at ``quarkplane.CONFIRMED``).
SINGULARITY_CONFIRMED = quarkplane.CONFIRMED


def _quiet(_msg: str) -> None:
    pass


def kernel_of(cfg: Config) -> Kernel:
    k = cfg.kernel
    return Kernel(model=cfg.interaction.model, params=cfg.interaction.param_dict(),
                  regularisation=k.regularisation, cutoff_gev2=k.cutoff_gev2,
                  regulator_gev2=k.regulator_gev2, grid_end_gev2=k.grid_end_gev2,
                  z2_squared=k.z2_squared)


def gap_grid_of(cfg: Config) -> gap.GapGrid:
    g = cfg.gap
    return gap.GapGrid(q2_min=g.q2_min_gev2, widths=tuple(g.panel_widths), order=g.order,
                       angular_half=g.angular_points)


def bse_grid_of(cfg: Config) -> bse.BSEGrid:
    b = cfg.bse
    return bse.BSEGrid(q2_min=b.q2_min_gev2, widths=tuple(b.panel_widths), order=b.order,
                       n_z=b.z_points, angular_half=b.angular_points)


def source_hash(directory) -> str:
    """sha256 over the relative paths and bytes of the ``.py`` files in ``directory`` and
    its subpackages."""
    import hashlib
    from pathlib import Path

    digest = hashlib.sha256()
    for f in sorted(Path(directory).rglob("*.py")):
        digest.update(f.relative_to(Path(directory)).as_posix().encode() + b"\0" + f.read_bytes() + b"\0")
    return digest.hexdigest()[:16]


@functools.lru_cache(maxsize=1)
def package_source_hash() -> str:
    """``source_hash`` of this package (once per process): an edited checkout gets new
    cache keys even without a version bump."""
    from pathlib import Path

    return source_hash(Path(__file__).resolve().parents[1])


def user_module_hash(model: str) -> str:
    """sha256 of the whole source file of a user interaction's module (constants and
    helpers included); modules it imports and data files it reads are not tracked."""
    import hashlib
    import inspect
    import sys

    from ..model import interactions

    fn = interactions.get(model).g
    module = sys.modules.get(getattr(fn, "__module__", None) or "")
    try:
        src = inspect.getsource(module) if module is not None else inspect.getsource(fn)
    except (OSError, TypeError):
        try:
            src = inspect.getsource(fn)
        except (OSError, TypeError):
            src = repr(fn)
    return hashlib.sha256(src.encode()).hexdigest()[:16]


def _code_tag(cfg: Config) -> str:
    """What besides the physics inputs decides a cached result: the package version, a
    hash of the package's source files and, for a user interaction ``module:function``,
    a hash of that function's whole module."""
    tag = f"{__version__}:{package_source_hash()}"
    if ":" in cfg.interaction.model:
        tag += ":" + user_module_hash(cfg.interaction.model)
    return tag


def stage_key(cfg: Config, key: str) -> str:
    """A stage's cache key: its physics hash combined with ``_code_tag``."""
    import hashlib

    return hashlib.sha256(f"{key}|{_code_tag(cfg)}".encode()).hexdigest()[:20]


def store_of(cfg: Config, use_cache: bool = True) -> Store | None:
    if not use_cache:
        return None
    return Store(cfg.output.cache_dir) if cfg.output.cache_dir else Store()


# ----------------------------------------------------------------------------------------
# Quark stage

@dataclass(frozen=True)
class QuarkResult:
    flavour: str
    key: str
    solution: gap.GapSolution = field(repr=False)
    mass_function_at_zero_gev: float
    max_bound_state_mass_gev: float       # η = 1/2, from the nearest singularity found
    singularity_gev2: complex | None
    singularity_check: float | None       # |D|/norm there with the shifted continuation
    condensate_cbrt_gev: dict | None       # {"zeta": .., "1": .., "2": ..} in the chiral limit
    seconds: float
    from_cache: bool
    # cross-check: the zero found with the direct continuation (not analytic when g(0) ≠ 0)
    direct_singularity_gev2: complex | None = None
    direct_max_mass_gev: float | None = None
    # the analytic object the singularity was taken from (quarkplane): where it was sampled
    # and its error on held-out samples
    plane_region_mass_gev: float | None = None
    plane_holdout_error: float | None = None

    @property
    def confirmed(self) -> bool:
        return self.singularity_check is not None and self.singularity_check < SINGULARITY_CONFIRMED

    @property
    def search_limit_gev(self) -> float:
        """The largest mass a bound-state search may probe: M_max when the singularity is
        confirmed, otherwise a generous bound (the direct estimate is not trusted)."""
        if self.singularity_gev2 is None:
            return 2.2 * abs(self.mass_function_at_zero_gev)
        if self.confirmed:
            return self.max_bound_state_mass_gev
        return max(1.3 * self.max_bound_state_mass_gev, 1.8 * self.mass_function_at_zero_gev)

    def m_max_status(self) -> str:
        if self.singularity_gev2 is None:
            return ("no zero of p^2 A^2 + B^2 found within |p^2| <= "
                    f"{quarkplane.WINDOW_GEV2:g} GeV^2 of the analytic continuation; bound-state "
                    f"searches may go up to 2.2 M(0) = {self.search_limit_gev:.4g} GeV")
        if self.confirmed:
            return ("zero of p^2 A^2 + B^2 of the AAA approximant of the shifted continuation, confirmed by a "
                    f"shifted solve just beyond M_max (|D|/norm = {self.singularity_check:.2g} there)")
        zero = (f"not confirmed: the approximant has a zero at p^2 = {self.singularity_gev2.real:.4g} "
                f"+ {self.singularity_gev2.imag:.4g} i GeV^2 (M = {self.max_bound_state_mass_gev:.4g} GeV)")
        limit = f"bound-state searches may go up to {self.search_limit_gev:.4g} GeV"
        if self.singularity_check is None:
            return f"{zero}, but the shifted gap equation did not converge there to check it; {limit}"
        return (f"{zero} where the shifted continuation is regular (|D|/norm = {self.singularity_check:.2g}); "
                f"{limit}")

    def singularity_report(self) -> dict:
        """The propagator's nearest singularity and M_max as reported (the one place that
        reads ``singularity_gev2``, ``singularity_check`` and ``max_bound_state_mass_gev``):
        an unconfirmed zero is not reported as the singularity but under ``rejected_…``;
        the direct continuation's zero is reported beside it as a cross-check."""
        sing = self.singularity_gev2
        point = None if sing is None else {"re": float(sing.real), "im": float(sing.imag)}
        direct = self.direct_singularity_gev2
        out = {
            "nearest_singularity_gev2": point if self.confirmed else None,
            "nearest_singularity_method": (
                "zero of p^2 A^2 + B^2 of rational (AAA) approximants of A and B built from the shifted "
                "continuation on a parabola clear of it (analytic continuation), confirmed by a shifted solve "
                f"just beyond M_max (|D|/norm below {SINGULARITY_CONFIRMED:g})"),
            "singularity_shifted_check": _finite(self.singularity_check),
            "singularity_approximant_region_mass_gev": _finite(self.plane_region_mass_gev),
            "singularity_approximant_holdout_error": _finite(self.plane_holdout_error),
            "max_bound_state_mass_gev": _finite(self.max_bound_state_mass_gev) if self.confirmed else None,
            "max_bound_state_mass_eta": 0.5,
            "max_bound_state_mass_status": self.m_max_status(),
            "bound_state_search_limit_gev": _finite(self.search_limit_gev),
            "direct_continuation_singularity_gev2": (None if direct is None else
                                                     {"re": float(direct.real), "im": float(direct.imag)}),
            "direct_continuation_max_bound_state_mass_gev": _finite(self.direct_max_mass_gev),
        }
        if sing is not None and not self.confirmed:
            out["rejected_singularity_gev2"] = point
            out["rejected_singularity_max_bound_state_mass_gev"] = _finite(self.max_bound_state_mass_gev)
            out["rejected_singularity_reason"] = (
                "the approximant has a zero here but the shifted continuation is regular there"
                if self.singularity_check is not None else
                "the approximant has a zero here; the shifted gap equation did not converge there to check it")
        return out

    def inputs(self) -> dict:
        """The resolved inputs this quark was computed from (model, parameters, scales, grid)."""
        s = self.solution
        k = s.kernel
        kern = {"regularisation": k.regularisation, "regularisation_scale_gev2": k.scale_gev2,
                "kernel_carries_z2_squared": k.z2_squared}
        if k.hard:
            kern["cutoff_gev2"] = k.cutoff_gev2
        else:
            kern.update(regulator_gev2=k.regulator_gev2, grid_end_gev2=k.grid_end_gev2)
        g = s.grid
        return {
            "interaction": {"model": k.model, "parameters": {n: float(v) for n, v in sorted(k.params.items())}},
            "kernel": kern,
            "renormalisation_point_gev": s.zeta_gev,
            "current_mass_gev": s.mass_gev,
            "gap_grid": {"q2_min_gev2": g.q2_min, "panel_widths_ln_q2": list(g.widths), "order": g.order,
                         "angular_points": g.angular_half, "nodes": int(s.radial.size),
                         "q2_max_gev2": float(k.q2_max)},
            "conventions": QUARK_CONVENTIONS,
        }

    def summary(self) -> dict:
        s = self.solution
        k = s.kernel
        out = {
            "flavour": self.flavour,
            "inputs": self.inputs(),
            "Z2": s.z2,
            "Zm": s.zm,
            "Z4": s.z4,
            "Z4_method": ("m → 0 limit of d(Z4 m)/dm by implicit differentiation of the chiral solve"
                          if s.chiral else "Z4 m = m − Z2^2 Sigma_B(zeta^2) (renormalisation B(zeta^2) = m)"),
            "current_mass_gev": s.mass_gev,
            "renormalisation_point_gev": s.zeta_gev,
            "mass_function_at_zero_gev": self.mass_function_at_zero_gev,
            "mass_function_at_zero_method": "linear extrapolation of M evaluated directly at p^2 = 1e-4, 2e-4 GeV^2",
            "residual": s.residual,
            "iterations": s.iterations,
            **self.singularity_report(),
            "regularisation": k.regularisation,
            "regularisation_scale_gev2": k.scale_gev2,
            "kernel_carries_z2_squared": k.z2_squared,
            "grid_points": int(s.radial.size),
            "notes": list(s.notes),
            "seconds": self.seconds,
            "from_cache": self.from_cache,
        }
        if self.condensate_cbrt_gev is not None:
            lam, nf = condensate_evolution_inputs(k)
            out["minus_qbarq_cbrt_gev"] = self.condensate_cbrt_gev["zeta"]
            out["minus_qbarq_cbrt_1gev_gev"] = self.condensate_cbrt_gev["1"]
            out["minus_qbarq_cbrt_2gev_gev"] = self.condensate_cbrt_gev["2"]
            out["minus_qbarq_definition"] = ("(-<qbar q>)^(1/3) in the chiral limit, -<qbar q> = Z4 N_c "
                                             "∫_q tr S(q) over the regularised domain; first at zeta, then "
                                             "evolved to 1 and 2 GeV")
            out["minus_qbarq_evolution"] = {
                "order": "one loop", "factor": "[ln(mu/Lambda_QCD)/ln(zeta/Lambda_QCD)]^gamma_m on -<qbar q>",
                "lambda_qcd_gev": lam, "n_f": nf, "gamma_m": 12.0 / (33.0 - 2.0 * nf)}
        return out


#: What the quark outputs assume (Euclidean conventions of the package).
QUARK_CONVENTIONS = {
    "metric": "Euclidean",
    "propagator": "S(p) = 1/(i gamma.p A(p^2) + B(p^2)); M = B/A, Z = 1/A",
    "gauge": "Landau",
    "renormalisation": "A(zeta^2) = 1, B(zeta^2) = m(zeta)",
    "units": "GeV",
}


def condensate_evolution_inputs(k: Kernel) -> tuple[float, float]:
    """(Λ_QCD [GeV], n_f) used by the one-loop evolution of the condensate
    (``gap.GapSolution.condensate_cbrt``: the model's parameters, else 0.234 GeV and 4)."""
    return float(k.params.get("lambda_qcd_gev", 0.234)), float(k.params.get("flavours", 4.0))


def _finite(x):
    return None if x is None or not math.isfinite(x) else float(x)


def _quark_arrays(s: gap.GapSolution):
    return {"q2": s.q2, "A": s.A, "B": s.B, "residuals": np.asarray(s.residuals)}


def _claim(store: Store | None, kind: str, key: str, progress: Progress):
    """Hold a stage entry while it is looked up, computed and written (``Store.claim``:
    processes sharing a store never compute the same entry twice at once)."""
    import contextlib

    return contextlib.nullcontext() if store is None else store.claim(kind, key, waiting=progress)


def solve_quark(cfg: Config, flavour: str, store: Store | None = None,
                progress: Progress = _quiet, cross_check: bool = True) -> QuarkResult:
    """Real-axis gap equation, M(0), singularities (and condensates when chiral).
    ``cross_check`` False: no scan of the direct continuation for its zeros (a
    cross-check of the singularity; for scans); such an entry is stored apart, and a full
    entry also serves it."""
    with _claim(store, "quark", stage_key(cfg, cfg.quark_key(flavour)), progress):
        return _solve_quark(cfg, flavour, store, progress, cross_check)


def _solve_quark(cfg: Config, flavour: str, store: Store | None, progress: Progress,
                 cross_check: bool = True) -> QuarkResult:
    t0 = time.perf_counter()
    key = stage_key(cfg, cfg.quark_key(flavour))
    lean = key + "x"                    # the entry without the direct cross-check
    kern = kernel_of(cfg)
    grid = gap_grid_of(cfg)
    mass = cfg.flavour(flavour).current_mass_gev
    zeta = cfg.renormalisation_point_gev
    if store is not None:
        hit = store.get("quark", key)
        if hit is None and not cross_check:
            hit = store.get("quark", lean)
        if hit is not None:
            progress(f"quark {flavour}: from cache")
            return _quark_from_entry(hit, kern, grid, flavour, key, mass, zeta, t0)
    progress(f"quark {flavour}: solving the gap equation (m = {mass:g} GeV, zeta = {zeta:g} GeV)")
    sol = gap.solve(kern, mass, zeta, grid)
    m0 = sol.mass_function_at_zero()
    direct_m_max, direct = None, None
    if cross_check:
        progress(f"quark {flavour}: scanning the direct continuation for complex singularities (cross-check)")
        direct_m_max, direct = singularities.max_bound_state_mass(sol, 0.5)
    progress(f"quark {flavour}: continuing the shifted solution analytically to locate its singularities")
    loc = quarkplane.locate(sol, None if direct is None else direct_m_max, 0.5)
    sing = loc.nearest
    m_max = float("inf") if sing is None else sing.max_mass(0.5)
    check = loc.check
    cond = None
    if sol.chiral:
        cond = {"zeta": sol.condensate_cbrt(), "1": sol.condensate_cbrt(1.0), "2": sol.condensate_cbrt(2.0)}
    plane_info = dict(direct_singularity_gev2=None if direct is None else complex(direct.s_gev2),
                      direct_max_mass_gev=None if direct is None else float(direct_m_max),
                      plane_region_mass_gev=loc.plane.samples.mass_gev,
                      plane_holdout_error=loc.plane.holdout_error)
    res = QuarkResult(flavour=flavour, key=key, solution=sol, mass_function_at_zero_gev=m0,
                      max_bound_state_mass_gev=m_max,
                      singularity_gev2=None if sing is None else complex(sing.s_gev2),
                      singularity_check=check,
                      condensate_cbrt_gev=cond, seconds=time.perf_counter() - t0, from_cache=False,
                      **plane_info)
    if store is not None:
        attrs = {"z2": sol.z2, "z4m": sol.z4m, "z4": sol.z4, "iterations": sol.iterations, "notes": list(sol.notes),
                 "mass_gev": mass, "zeta_gev": zeta, "m0_gev": m0, "m_max_gev": _finite(m_max),
                 "singularity": None if sing is None else [sing.s_gev2.real, sing.s_gev2.imag],
                 "singularity_check": check,
                 "direct_singularity": (None if direct is None else
                                        [float(direct.s_gev2.real), float(direct.s_gev2.imag)]),
                 "direct_m_max_gev": None if direct is None else _finite(direct_m_max),
                 "plane_region_mass_gev": loc.plane.samples.mass_gev,
                 "plane_holdout_error": loc.plane.holdout_error,
                 "condensate_cbrt_gev": cond, "regularisation": kern.label, "version": __version__,
                 "config_key": key, "grid": {"points": int(sol.radial.size), "edges": list(sol.radial.edges)}}
        store.try_put("quark", key if cross_check else lean, _quark_arrays(sol), attrs)
    return res


def _quark_from_entry(entry, kern, grid, flavour, key, mass, zeta, t0) -> QuarkResult:
    a = entry.attrs
    radial = grid.radial(kern.q2_max)
    arr = entry.arrays
    if arr["q2"].shape != radial.q2.shape or not np.allclose(arr["q2"], radial.q2, rtol=1e-12):
        raise RuntimeError("cached quark solution does not match its grid")
    sol = gap.GapSolution(kernel=kern, grid=grid, radial=radial, mass_gev=mass, zeta_gev=zeta,
                          q2=radial.q2, A=arr["A"], B=arr["B"], z2=a["z2"], z4m=a["z4m"], z4=a["z4"],
                          iterations=a["iterations"], residuals=tuple(arr["residuals"].tolist()),
                          seconds=0.0, notes=tuple(a.get("notes") or ()))
    sing = a.get("singularity")
    m_max = a.get("m_max_gev")
    return QuarkResult(flavour=flavour, key=key, solution=sol, mass_function_at_zero_gev=a["m0_gev"],
                       max_bound_state_mass_gev=float("inf") if m_max is None else m_max,
                       singularity_gev2=None if sing is None else complex(*sing),
                       singularity_check=a.get("singularity_check"),
                       condensate_cbrt_gev=a.get("condensate_cbrt_gev"),
                       seconds=time.perf_counter() - t0, from_cache=True,
                       direct_singularity_gev2=(None if a.get("direct_singularity") is None
                                                else complex(*a["direct_singularity"])),
                       direct_max_mass_gev=a.get("direct_m_max_gev"),
                       plane_region_mass_gev=a.get("plane_region_mass_gev"),
                       plane_holdout_error=a.get("plane_holdout_error"))


# ----------------------------------------------------------------------------------------
# Meson stage

@dataclass(frozen=True)
class BoundStateCore:
    """What one grid gives for one meson (decay constants and ρ in the √2 convention)."""

    mass_gev: float
    chiral: bool
    normalised: observables.Normalised = field(repr=False)
    next_eigenvalue: float | None
    goldstone_residual: float | None
    curve: search.EigenCurve = field(repr=False)
    evaluations: int
    q2: np.ndarray = field(repr=False)
    z: np.ndarray = field(repr=False)
    shifted_residual: float | None
    #: the leading SPECTRUM_K eigenvalues λ_i(P² = −M²) at a few masses: (masses (n,), λ (n, k))
    spectrum: tuple[np.ndarray, np.ndarray] | None = field(default=None, repr=False)
    spacelike: tuple[np.ndarray, np.ndarray] | None = field(default=None, repr=False)   # (P² > 0, λ)
    #: |M(η₂) − M(η)| and η₂ (``eta_spread``), when computed
    eta_spread_gev: float | None = None
    eta_spread_second_eta: float | None = None
    #: C = ±1 of each spectrum eigenvalue (same shape as spectrum[1]); 0 where charge
    #: conjugation is not a symmetry (unequal flavours, η ≠ 1/2)
    spectrum_c: np.ndarray | None = field(default=None, repr=False)
    #: C of the state found, from its eigenvector (None where C is not a symmetry)
    c_parity: int | None = None
    excitation: int = 0


def _singularity_distance(q: QuarkResult) -> float | None:
    """|Im √s| of a quark's confirmed nearest singularity s (M_max(η) = |Im √s|/η), or None."""
    if q.singularity_gev2 is None or not q.confirmed:
        return None
    return float(abs(np.sqrt(complex(q.singularity_gev2)).imag))


def meson_eta(meson: MesonConfig, q1: QuarkResult, q2: QuarkResult) -> tuple[float, str]:
    """The momentum partition of a meson (flavour 1 at q + ηP, flavour 2 at q − (1−η)P)
    and how it was chosen: the config's ``eta``; 1/2 for equal flavours; otherwise the η
    that maximises M_max(η) = min(a₁/η, a₂/(1−η)), a_i = |Im √s_i| of each quark's nearest
    singularity, i.e. η = a₁/(a₁ + a₂) with M_max = a₁ + a₂; where a singularity is not
    known (not found or not confirmed), η = M₁(0)/(M₁(0) + M₂(0)), the dressed masses at
    p² = 0 (the singularity's distance scales roughly with them; current-mass weights
    would give η ≈ 0.04 for a light–strange pair and waste most of the reach)."""
    equal = meson.quarks[0] == meson.quarks[1]
    if meson.eta is None and equal or equal and meson.eta == 0.5:
        return 0.5, "equal flavours: eta = 1/2"
    if meson.eta is not None:
        return float(meson.eta), "set in the config"
    a1, a2 = _singularity_distance(q1), _singularity_distance(q2)
    if a1 is not None and a2 is not None:
        return a1 / (a1 + a2), ("maximises M_max(eta) = min(|Im sqrt s1|/eta, |Im sqrt s2|/(1 - eta)) over the "
                                "quarks' confirmed nearest singularities s1, s2: eta = a1/(a1 + a2)")
    m1, m2 = abs(q1.mass_function_at_zero_gev), abs(q2.mass_function_at_zero_gev)
    return m1 / (m1 + m2), ("a quark's nearest singularity is not known: eta = M1(0)/(M1(0) + M2(0)), "
                            "weighted by the dressed masses at p^2 = 0")


def mass_limit(q1: QuarkResult, q2: QuarkResult, eta: float) -> float:
    """The largest mass a search at partition η may probe: each quark's search limit
    (stated for η = 1/2, i.e. 2|Im √s|) scaled to its own fraction, η and 1 − η."""
    return min(q1.search_limit_gev * (0.5 / eta), q2.search_limit_gev * (0.5 / (1.0 - eta)))


def mass_guess(channel: str, current_masses: tuple[float, float], m0: tuple[float, float],
               m_max: float) -> float:
    """Where the mass search starts when the config gives no guess: for a pseudoscalar the
    Gell-Mann–Oakes–Renner-like scaling M² ≈ 2.5 GeV · (m₁ + m₂) (light quarks), capped;
    otherwise 0.8 (M₁(0) + M₂(0)); below M_max."""
    if channel == "pseudoscalar":
        msum = current_masses[0] + current_masses[1]
        return min(0.8 * m_max, max(0.05, math.sqrt(2.5 * max(msum, 2e-6))))
    return min(0.9 * m_max, 0.8 * (abs(m0[0]) + abs(m0[1])))


def _guess(channel: str, q1: QuarkResult, q2: QuarkResult, m_max: float) -> float:
    return mass_guess(channel, (q1.solution.mass_gev, q2.solution.mass_gev),
                      (q1.mass_function_at_zero_gev, q2.mass_function_at_zero_gev), m_max)


def check_mass_guess(cfg: Config, meson: MesonConfig, quarks: dict[str, QuarkResult]) -> None:
    """``mass_guess_gev`` must lie below the search limit of its quarks (a ConfigError
    naming the key otherwise); checked before the meson stage looks in the store."""
    q1, q2 = quarks[meson.quarks[0]], quarks[meson.quarks[1]]
    m_max = mass_limit(q1, q2, meson_eta(meson, q1, q2)[0])
    if meson.mass_guess_gev is not None and meson.mass_guess_gev >= m_max:
        i = cfg.mesons.index(meson) if meson in cfg.mesons else 0
        raise ConfigError(f"{meson_label(i, meson.name)}.mass_guess_gev", meson.mass_guess_gev,
                          f"below M_max = {m_max:.6g} GeV, the largest mass whose quark-momentum "
                          "parabola stays clear of the propagator's singularities")


def bound_state(cfg: Config, meson: MesonConfig, quarks: dict[str, QuarkResult],
                grid: bse.BSEGrid, progress: Progress = _quiet, spectrum: bool = False,
                eta_spread: bool = False, bracket: float = 0.15) -> BoundStateCore:
    """Mass, normalised amplitude and observables of one meson on one grid (and, with
    ``spectrum``, the leading eigenvalues at a few P² for the λ(P²) figure; with
    ``eta_spread``, the mass at a second momentum partition, ``eta_spread``).  ``bracket``:
    the relative half-width of the first bracket around the guess (small when the guess
    is the same state's mass on another grid)."""
    kern = kernel_of(cfg)
    q1, q2 = quarks[meson.quarks[0]], quarks[meson.quarks[1]]
    ch = channels.get(meson.channel)
    eta = meson_eta(meson, q1, q2)[0]
    m_max = mass_limit(q1, q2, eta)
    q2sol = q2.solution if q2 is not q1 else None
    bs = bse.BoundState(kern, ch, grid, q1.solution, q2sol, eta=eta,
                        continuation=cfg.bse.continuation, max_mass=m_max)
    chiral = (q1.solution.chiral and q2.solution.chiral and ch.name == "pseudoscalar"
              and not meson.excitation)
    goldstone = None
    # one flavour at η = 1/2: C is a symmetry and the search keeps to the channel's C
    parity = ch.c_parity if search.charge_symmetric(bs) else None
    lead = search.Leading(bs, parity)
    if chiral:
        goldstone = abs(lead(0.0) - 1.0)
        norms = [_normalise_at(bs, lead, m, lead.vec) for m in observables.CHIRAL_PROBES_GEV]
        nrm = observables.chiral_limit(*norms)
        mass, vec, curve, evals = 0.0, lead.vec, lead.curve, len(lead.curve.masses)
        m_eval = observables.CHIRAL_PROBES_GEV[0]
    else:
        check_mass_guess(cfg, meson, quarks)
        guess = meson.mass_guess_gev or _guess(ch.name, q1, q2, m_max)
        progress(f"{meson.name}: searching lambda(P^2) = 1 below M_max = {m_max:.4g} GeV")
        if meson.excitation:
            progress(f"{meson.name}: following the leading {meson.excitation + 1 + EXCITATION_SPARE} states "
                     f"from M = {EXCITATION_START_GEV:g} GeV for excitation {meson.excitation}")
            sol = search.find_excitation(bs, meson.excitation, EXCITATION_START_GEV, m_max, parity=parity,
                                         spare=EXCITATION_SPARE)
            lead = search.Follower(bs, sol.eigenvector, meson.excitation + 1 + EXCITATION_SPARE, parity)
        else:
            sol = search.find_mass(bs, guess, m_max, step=bracket, parity=parity)
        mass, vec, evals = sol.mass_gev, sol.eigenvector, sol.evaluations
        nrm = _normalise_at(bs, lead, mass, vec)
        curve = _merge(sol.curve, lead.curve)
        evals += len(lead.curve.masses)
        m_eval = mass
    vals, vecs = bs.eigen(m_eval, k=SPECTRUM_K if spectrum else 2, v0=vec)
    nxt = float(vals[1].real) if len(vals) > 1 else None
    shifted = bs.shifted_residual
    spec = _spectrum(bs, mass, m_max, m_eval, vals, vecs) if spectrum else None
    spec_c = None
    if spec is not None:
        spec, spec_c = spec[:2], spec[2]
    state_c = int(search.c_labels(bs, np.asarray(nrm.amplitude).reshape(-1, 1))[0]) if parity is not None else None
    space = _spacelike(bs) if spectrum else None
    spread = second = None
    if eta_spread and not chiral:
        progress(f"{meson.name}: the mass at a second momentum partition (eta spread)")
        from scipy.sparse.linalg import ArpackNoConvergence

        from ..quark.routed import ShiftedNotConverged

        try:
            got = eta_spread_of(bs, mass, lambda e: mass_limit(q1, q2, e))
        except (search.NoBoundState, ShiftedNotConverged, ArpackNoConvergence, FloatingPointError) as e:
            progress(f"{meson.name}: no eta spread: {e}")
            got = None
        if got is not None:
            second, spread = got
    return BoundStateCore(mass_gev=mass, chiral=chiral, normalised=nrm, next_eigenvalue=nxt,
                          goldstone_residual=goldstone, curve=curve, evaluations=evals,
                          q2=bs.q2, z=bs.z, shifted_residual=shifted, spectrum=spec, spacelike=space,
                          eta_spread_gev=spread, eta_spread_second_eta=second, spectrum_c=spec_c,
                          c_parity=state_c, excitation=int(meson.excitation))


#: An excited state (``excitation`` > 0) is found by following this many states more
#: than its own number by eigenvector overlap (``search.find_excitation``) from
#: EXCITATION_START_GEV upwards.
EXCITATION_SPARE = 2
EXCITATION_START_GEV = 0.02

#: The second momentum partition of the η spread lies this far from the meson's η (on the
#: side that leaves the larger M_max), and the mass must stay below ETA_SPREAD_ROOM of it.
ETA_SPREAD_STEP = 0.1
ETA_SPREAD_ROOM = 0.95
#: Relative η spread above which a shifted result is not called validated: the
#: translation-invariant regularisation gives ≤ 1e-6 on the default grid (tests/test_eta.py).
ETA_SPREAD_TOLERANCE = 1e-3


def eta_spread_of(bs: bse.BoundState, mass: float, limit: Callable[[float], float],
                  step: float = ETA_SPREAD_STEP) -> tuple[float, float] | None:
    """(η₂, |M(η₂) − M(η)|): the bound-state mass found again at a second partition
    η₂ = η ∓ ``step`` (kernels shared with ``bs``; the search starts from ``mass`` with a
    1% bracket).  Poincaré covariance makes M independent of η, so the spread measures the
    numerical (and, with a hard cutoff, regularisation) violation of it.  None when neither
    η ± step leaves the mass below ETA_SPREAD_ROOM × M_max(η₂)."""
    options = [e for e in (bs.eta - step, bs.eta + step) if 0.0 < e < 1.0]
    options = [e for e in options if mass < ETA_SPREAD_ROOM * limit(e)]
    if not options or not mass > 0:
        return None
    eta2 = max(options, key=limit)
    other = bs.with_eta(eta2, max_mass=limit(eta2))
    m2 = search.find_mass(other, mass, limit(eta2), step=0.01).mass_gev
    return float(eta2), float(abs(m2 - mass))


#: Eigenvalues per point of the λ(P²) spectrum drawn for a meson (the leading one and
#: the next two), and the masses, as fractions of the bound-state mass, where they are
#: evaluated besides the mass itself (P² = 0 up to past the crossing; the last point is
#: M + max(0.2 M, SPECTRUM_BEYOND_GEV), so that a light pion's curve shows its slope).
SPECTRUM_K = 3
SPECTRUM_FRACTIONS = (0.0, 0.6, 1.1)
SPECTRUM_BEYOND_GEV = 0.15
#: ARPACK tolerance of the spectrum points (a figure's data, not a result)
SPECTRUM_TOL = 1e-7
#: For a chiral-limit Goldstone boson (crossing at P² = 0): masses in GeV.
SPECTRUM_CHIRAL_GEV = (0.0, 0.1, 0.2, 0.3)


def _spectrum(bs, mass: float, m_max: float, m_eval: float, vals, vecs) -> tuple[np.ndarray, ...]:
    """λ_1..λ_k at a handful of masses from P² = 0 to past the crossing (the figure's
    data), with the C-parity of each (``search.c_labels``: 0 where C is no symmetry).  Points are solved outwards from the bound state, each starting from the sum of
    the k eigenvectors of the nearest point already solved; a point where a solve fails
    or that lies beyond M_max is left out (the curve is a picture, not a result)."""
    from scipy.sparse.linalg import ArpackNoConvergence

    from ..quark.routed import ShiftedNotConverged

    targets = (SPECTRUM_CHIRAL_GEV if mass == 0.0 else
               tuple(f * mass for f in SPECTRUM_FRACTIONS) + (mass + max(0.2 * mass, SPECTRUM_BEYOND_GEV),))
    points = {float(m_eval): np.asarray(vals[:SPECTRUM_K], dtype=complex)}
    start = {float(m_eval): np.asarray(vecs).sum(axis=1)}
    labels = {float(m_eval): search.c_labels(bs, np.asarray(vecs)[:, :SPECTRUM_K])}
    for m in sorted(targets, key=lambda x: abs(x - m_eval)):
        if m >= 0.98 * m_max or m in points:
            continue
        near = min(start, key=lambda x: abs(x - m))
        try:
            v, w = bs.eigen(m, k=SPECTRUM_K, v0=start[near], tol=SPECTRUM_TOL)
        except (ShiftedNotConverged, ArpackNoConvergence, ValueError, FloatingPointError):
            continue
        if len(v) == SPECTRUM_K and np.all(np.isfinite(v)):
            points[float(m)] = np.asarray(v, dtype=complex)
            start[float(m)] = np.asarray(w).sum(axis=1)
            labels[float(m)] = search.c_labels(bs, w)
    ms = np.array(sorted(points))
    return ms, np.stack([points[m] for m in ms]), np.stack([labels[m] for m in ms])


#: Spacelike points of the λ(P²) figure, P² in GeV².
SPECTRUM_SPACELIKE_GEV2 = (0.1, 0.3)


def _spacelike(bs) -> tuple[np.ndarray, np.ndarray] | None:
    """λ_1..λ_k at spacelike P² (``SPECTRUM_SPACELIKE_GEV2``) with the direct continuation,
    exact there (``bse.BoundState.spacelike_twin``); None if a solve fails (a picture)."""
    from scipy.sparse.linalg import ArpackNoConvergence

    twin = bs.spacelike_twin()
    vals, start = [], None
    try:
        for p2 in SPECTRUM_SPACELIKE_GEV2:
            v, w = twin.eigen(1j * float(np.sqrt(p2)), k=SPECTRUM_K, v0=start, tol=SPECTRUM_TOL)
            if len(v) != SPECTRUM_K or not np.all(np.isfinite(v)):
                return None
            vals.append(np.asarray(v, dtype=complex))
            start = np.asarray(w).sum(axis=1)
    except (ArpackNoConvergence, ValueError, FloatingPointError):
        return None
    return np.asarray(SPECTRUM_SPACELIKE_GEV2, dtype=float), np.stack(vals)


def _normalise_at(bs, lead: search.Leading, mass: float, vec) -> observables.Normalised:
    """Eigenvector at ``mass`` (refined from ``vec``), λ at the derivative masses, normalised."""
    lead.vec = vec
    lead(mass)
    vec = lead.vec
    lam = {}
    for m in observables.derivative_masses(mass):
        lead.vec = vec
        lam[m] = lead(m)
    return observables.normalise(bs, mass, vec, lam)


def _merge(a: search.EigenCurve, b: search.EigenCurve) -> search.EigenCurve:
    out = search.EigenCurve()
    for m, l in zip(a.masses + b.masses, a.eigenvalues + b.eigenvalues):
        if m not in out.masses:
            out.add(m, l)
    return out


@dataclass(frozen=True)
class MesonResult:
    name: str
    channel: str
    quarks: tuple[str, str]
    key: str
    core: BoundStateCore = field(repr=False)
    coarse: BoundStateCore | None = field(repr=False)
    convention: str
    current_masses_gev: tuple[float, float]
    seconds: float
    from_cache: bool = False
    continuation: str = "shifted"
    eta: float = 0.5
    eta_method: str | None = None

    @property
    def factor(self) -> float:
        return observables.CONVENTIONS[self.convention]

    def route_check(self) -> tuple[bool, list[str]]:
        """Whether the result came through a route the README calls validated (the shifted
        continuation, any flavours, 0 < η < 1: tests/test_eta.py), and why not; a mass
        that moves with η by more than ETA_SPREAD_TOLERANCE is not validated."""
        why = []
        if self.continuation != "shifted":
            if self.quarks[0] != self.quarks[1]:
                why.append("unequal flavours through the direct continuation, which is not validated for "
                           "them (README, Limitations)")
            why.append("direct continuation: a cross-check route, not the analytic continuation where "
                       "g(0) != 0 (README, 'Continuation to complex momenta')")
        spread = self.core.eta_spread_gev
        if spread is not None and self.core.mass_gev > 0 and spread > ETA_SPREAD_TOLERANCE * self.core.mass_gev:
            why.append(f"the mass moves by {spread / self.core.mass_gev:.1e} (relative) between eta = {self.eta:.4g} "
                       f"and {self.core.eta_spread_second_eta:.4g}: Poincare covariance violated beyond "
                       f"{ETA_SPREAD_TOLERANCE:g}")
        return not why, why

    def c_parity_summary(self) -> dict:
        """The state's charge parity (from its eigenvector), which excitation of its channel
        it is, and the leading eigenvalues at its mass each with its C."""
        c = self.core
        ch = channels.get(self.channel)
        out = {"excitation": c.excitation,
               "excitation_method": ("the leading state of the channel's C crossing lambda = 1" if not c.excitation
                                     else "the n-th state of the channel's C to cross lambda = 1 as M rises, each "
                                          "state followed across P^2 by eigenvector overlap (n = excitation)"),
               "c_parity": c.c_parity}
        if c.c_parity is None:
            out["c_parity_method"] = ("none: charge conjugation is a symmetry only for one flavour at eta = 1/2"
                                      if self.quarks[0] != self.quarks[1] or self.eta != 0.5 else
                                      "not stored with this result")
        else:
            out["c_parity_method"] = ("<Gamma, Gamma_C>/<Gamma, Gamma> of the amplitude, Gamma_C(q;P) = C Gamma^T(-q;P) "
                                      f"C^-1, C = gamma_2 gamma_4; the search keeps to C = {ch.c_parity:+d} "
                                      f"(J^PC = {ch.jpc})")
        if c.spectrum is not None and c.spectrum_c is not None:
            ms, lam = c.spectrum
            i = int(np.argmin(np.abs(ms - (c.mass_gev if c.mass_gev > 0 else ms[0]))))
            out["eigenvalues_at_mass"] = [
                {"lambda": float(l.real), "c_parity": int(k) if k else None}
                for l, k in zip(lam[i], c.spectrum_c[i])]
            out["eigenvalues_at_mass_gev"] = float(ms[i])
        return out

    def summary(self) -> dict:
        c, n = self.core, self.core.normalised
        f = None if n.decay_constant is None else n.decay_constant * self.factor
        ok, why = self.route_check()
        out = {
            "name": self.name,
            "channel": self.channel,
            "jpc": channels.get(self.channel).jpc,
            "quarks": list(self.quarks),
            "current_masses_gev": list(self.current_masses_gev),
            "continuation": self.continuation,
            "flavours": list(self.quarks),
            "eta": self.eta,
            "eta_method": self.eta_method,
            "eta_spread_gev": self.core.eta_spread_gev,
            "eta_spread_second_eta": self.core.eta_spread_second_eta,
            "eta_spread_method": (
                "|M(eta2) - M(eta)| with eta2 = eta -/+ " f"{ETA_SPREAD_STEP:g}, same grid: zero by Poincare covariance"
                if self.core.eta_spread_gev is not None else
                "not computed: by default only for unequal flavours; none in the chiral limit (M = 0), when "
                "neither eta -/+ " f"{ETA_SPREAD_STEP:g} leaves the mass below M_max, or when the search there fails"),
            "validated": ok,
            "validation_reason": "; ".join(why) if why else (
                "shifted continuation, each quark on its own shifted momenta (eta-independence and the "
                "axial-vector identity tested for unequal flavours)"),
            "mass_gev": c.mass_gev,
            "mass_method": ("chiral limit: M = 0 by Goldstone's theorem (not solved for); "
                            "see goldstone_residual = |lambda(P^2 = 0) - 1|" if c.chiral else
                            "root of lambda(P^2 = -M^2) = 1"),
            "mass_error_gev": None,
            "extrapolated": False,
            "decay_constant_gev": f,
            "decay_constant_error_gev": None,
            "decay_constant_convention": observables.CONVENTION_LABELS[self.convention],
            "decay_constant_sqrt2_convention_gev": n.decay_constant,
            "eigenvalue_slope_gev-2": n.eigenvalue_slope,
            "normalisation": "nakanishi",
            "normalisation_agreement": n.normalisation_agreement,
            "norm_sign": int(round(float(np.real(n.norm_phase)))),
            "next_eigenvalue": c.next_eigenvalue,
            **self.c_parity_summary(),
            "bse_evaluations": c.evaluations,
            "seconds": self.seconds,
            "from_cache": self.from_cache,
        }
        if c.chiral:
            out["goldstone_residual"] = c.goldstone_residual
            out["chiral_limit_method"] = ("normalisation and observables extrapolated in M^2 to M = 0 from "
                                          "off-shell solutions at M = " +
                                          ", ".join(f"{m:g}" for m in observables.CHIRAL_PROBES_GEV) + " GeV")
        if self.coarse is not None:
            if not c.chiral:
                out["mass_error_gev"] = abs(c.mass_gev - self.coarse.mass_gev)
            if n.decay_constant is not None and self.coarse.normalised.decay_constant is not None:
                out["decay_constant_error_gev"] = (abs(n.decay_constant - self.coarse.normalised.decay_constant)
                                                   * self.factor)
            out["error_estimate"] = "difference to a second, coarser grid"
        if n.condensate is not None:
            rho = n.condensate * self.factor
            out["in_meson_condensate_gev2"] = rho
            out["in_meson_condensate_convention"] = out["decay_constant_convention"]
            out["in_meson_condensate_sqrt2_convention_gev2"] = n.condensate
            msum = sum(self.current_masses_gev)
            if c.chiral or msum == 0.0:
                out["awti_residual"] = None
            else:
                lhs = f * c.mass_gev**2
                out["awti_residual"] = (lhs - msum * rho) / lhs
            out["awti_residual_definition"] = "(f M^2 - (m1 + m2) rho)/(f M^2), exact in rainbow-ladder"
        return out


def _core_to_store(prefix: str, c: BoundStateCore, arrays: dict, attrs: dict) -> None:
    n = c.normalised
    arrays[f"{prefix}amplitude"] = n.amplitude
    arrays[f"{prefix}wave_function"] = n.wave_function
    arrays[f"{prefix}q2"] = c.q2
    arrays[f"{prefix}z"] = c.z
    ms, ls = c.curve.sorted()
    arrays[f"{prefix}curve"] = np.stack([ms, ls])
    if c.spectrum is not None:
        arrays[f"{prefix}spectrum_mass"], arrays[f"{prefix}spectrum"] = c.spectrum
    if c.spectrum_c is not None:
        arrays[f"{prefix}spectrum_c"] = np.asarray(c.spectrum_c, dtype=np.int8)
    if c.spacelike is not None:
        arrays[f"{prefix}spacelike_p2"], arrays[f"{prefix}spacelike"] = c.spacelike
    attrs[f"{prefix}core"] = {
        "mass_gev": c.mass_gev, "chiral": c.chiral, "next_eigenvalue": c.next_eigenvalue,
        "goldstone_residual": c.goldstone_residual, "evaluations": c.evaluations,
        "shifted_residual": c.shifted_residual,
        "norm_nakanishi": [n.norm_nakanishi.real, n.norm_nakanishi.imag],
        "norm_canonical": [n.norm_canonical.real, n.norm_canonical.imag],
        "norm_phase": [complex(n.norm_phase).real, complex(n.norm_phase).imag],
        "eigenvalue_slope": n.eigenvalue_slope, "decay_constant": n.decay_constant,
        "decay_constant_imag": n.decay_constant_imag, "condensate": n.condensate,
        "condensate_imag": n.condensate_imag,
        "eta_spread_gev": c.eta_spread_gev, "eta_spread_second_eta": c.eta_spread_second_eta,
        "c_parity": c.c_parity, "excitation": c.excitation}


def _core_from_store(prefix: str, arrays: dict, attrs: dict) -> BoundStateCore:
    a = attrs[f"{prefix}core"]
    n = observables.Normalised(
        mass_gev=a["mass_gev"], amplitude=arrays[f"{prefix}amplitude"],
        wave_function=arrays[f"{prefix}wave_function"], norm_nakanishi=complex(*a["norm_nakanishi"]),
        norm_canonical=complex(*a["norm_canonical"]), eigenvalue_slope=a["eigenvalue_slope"],
        decay_constant=a["decay_constant"], decay_constant_imag=a["decay_constant_imag"],
        condensate=a["condensate"], condensate_imag=a["condensate_imag"],
        norm_phase=complex(*a["norm_phase"]))
    curve = search.EigenCurve()
    for m, lam in arrays[f"{prefix}curve"].T:
        curve.add(m, lam)
    spec = None
    if f"{prefix}spectrum_mass" in arrays and f"{prefix}spectrum" in arrays:
        spec = (np.asarray(arrays[f"{prefix}spectrum_mass"]), np.asarray(arrays[f"{prefix}spectrum"]))
    space = None
    if f"{prefix}spacelike_p2" in arrays and f"{prefix}spacelike" in arrays:
        space = (np.asarray(arrays[f"{prefix}spacelike_p2"]), np.asarray(arrays[f"{prefix}spacelike"]))
    return BoundStateCore(mass_gev=a["mass_gev"], chiral=a["chiral"], normalised=n,
                          next_eigenvalue=a["next_eigenvalue"], goldstone_residual=a["goldstone_residual"],
                          curve=curve, evaluations=a["evaluations"], q2=arrays[f"{prefix}q2"],
                          z=arrays[f"{prefix}z"], shifted_residual=a["shifted_residual"], spectrum=spec, spacelike=space,
                          eta_spread_gev=a.get("eta_spread_gev"), eta_spread_second_eta=a.get("eta_spread_second_eta"),
                          spectrum_c=(np.asarray(arrays[f"{prefix}spectrum_c"], dtype=int)
                                      if f"{prefix}spectrum_c" in arrays else None),
                          c_parity=a.get("c_parity"), excitation=int(a.get("excitation") or 0))


#: First bracket of the error-grid search, relative to the fine grid's mass (the two
#: differ by < 1e-4 on the shipped grids; a wider bracket is grown if needed).
COARSE_BRACKET = 0.01


def solve_meson(cfg: Config, meson: MesonConfig, quarks: dict[str, QuarkResult],
                store: Store | None = None, progress: Progress = _quiet,
                eta_spread: bool | None = None, spectrum: bool = True) -> MesonResult:
    """One meson on the configured grid, plus (``output.error_bar``) a coarser grid.
    ``eta_spread``: also find the mass at a second momentum partition (``eta_spread_of``);
    None: the meson's ``eta_spread``, else for unequal flavours only (where covariance is
    the check that matters; it costs less than the mass search).  ``spectrum`` False: no
    λ(P²) figure data (spectrum and spacelike points, ~40% of the meson's time), for
    scans; such an entry is stored apart, and a full entry also serves it."""
    # one lock for every variant (error bar, η spread, spectrum) of the meson's entry
    with _claim(store, "meson", stage_key(cfg, cfg.meson_key(meson)), progress):
        return _solve_meson(cfg, meson, quarks, store, progress, eta_spread, spectrum)


def _solve_meson(cfg: Config, meson: MesonConfig, quarks: dict[str, QuarkResult],
                 store: Store | None, progress: Progress, eta_spread: bool | None,
                 spectrum: bool = True) -> MesonResult:
    t0 = time.perf_counter()
    check_mass_guess(cfg, meson, quarks)  # before the store: a warm cache must not hide it
    if eta_spread is None:       # the meson's choice, else for unequal flavours only
        eta_spread = meson.eta_spread if meson.eta_spread is not None else meson.quarks[0] != meson.quarks[1]
    key = stage_key(cfg, cfg.meson_key(meson) + ("e" if cfg.output.error_bar else "n") + ("s" if eta_spread else ""))
    masses = tuple(quarks[q].solution.mass_gev for q in meson.quarks)
    eta, eta_method = meson_eta(meson, quarks[meson.quarks[0]], quarks[meson.quarks[1]])
    common = dict(name=meson.name, channel=meson.channel, quarks=meson.quarks, key=key,
                  convention=cfg.output.decay_constant_convention, current_masses_gev=masses,
                  continuation=cfg.bse.continuation, eta=eta, eta_method=eta_method)
    lean = key + "l"                    # the entry without the λ(P²) figure data
    if store is not None:
        hit = store.get("meson", key)
        if hit is not None and not {"spectrum_mass", "spectrum"} <= set(hit.arrays):
            hit = None   # an entry written before the λ(P²) spectrum was stored: recompute
        if hit is None and not spectrum:
            hit = store.get("meson", lean)
        if hit is not None:
            progress(f"{meson.name}: from cache")
            coarse = _core_from_store("coarse_", hit.arrays, hit.attrs) if "coarse_core" in hit.attrs else None
            return MesonResult(core=_core_from_store("", hit.arrays, hit.attrs), coarse=coarse,
                               seconds=time.perf_counter() - t0, from_cache=True, **common)
    grid = bse_grid_of(cfg)
    progress(f"{meson.name}: building the {meson.channel} kernel and solving")
    core = bound_state(cfg, meson, quarks, grid, progress, spectrum=spectrum, eta_spread=eta_spread)
    coarse = None
    if cfg.output.error_bar:
        progress(f"{meson.name}: second, coarser grid for the error estimate")
        coarse = bound_state(cfg, MesonConfig(meson.name, meson.channel, meson.quarks, meson.eta,
                                              core.mass_gev or meson.mass_guess_gev, meson.excitation),
                             quarks, grid.coarser(), bracket=COARSE_BRACKET)
    res = MesonResult(core=core, coarse=coarse, seconds=time.perf_counter() - t0, **common)
    if store is not None:
        arrays, attrs = {}, {"version": __version__, "meson_key": key, "channel": meson.channel}
        _core_to_store("", core, arrays, attrs)
        if coarse is not None:
            _core_to_store("coarse_", coarse, arrays, attrs)
        store.try_put("meson", key if spectrum else lean, arrays, attrs)
    return res


# ----------------------------------------------------------------------------------------
# Beyond the parabola

@dataclass(frozen=True)
class ExtrapolatedMeson:
    """A state whose λ(P²) = 1 crossing lies above M_max: its mass estimated by rational
    continuation of λ(P²) from where it is accessible (``extrapolate``).  There is no
    amplitude there, hence no decay constant, normalisation or identity check."""

    name: str
    channel: str
    quarks: tuple[str, str]
    current_masses_gev: tuple[float, float]
    continuation: str
    eta: float
    eta_method: str | None
    limit_gev: float
    extrapolation: extrapolate.Extrapolation = field(repr=False)
    reason: str
    seconds: float
    convention: str = "92"
    from_cache: bool = False
    c_parity: int | None = None    # the charge parity the samples were restricted to

    @property
    def mass_gev(self) -> float:
        return self.extrapolation.mass_gev

    def summary(self) -> dict:
        e = self.extrapolation
        return {
            "name": self.name,
            "channel": self.channel,
            "jpc": channels.get(self.channel).jpc,
            "quarks": list(self.quarks),
            "flavours": list(self.quarks),
            "current_masses_gev": list(self.current_masses_gev),
            "continuation": self.continuation,
            "eta": self.eta,
            "eta_method": self.eta_method,
            "eta_spread_gev": None,
            "eta_spread_second_eta": None,
            "eta_spread_method": "not computed: the mass is extrapolated",
            "validated": False,
            "validation_reason": (f"mass extrapolated beyond M_max = {self.limit_gev:.4g} GeV by rational "
                                  "continuation of lambda(P^2): no amplitude, decay constant or identity check"),
            "extrapolated": True,
            "extrapolation_reason": self.reason,
            "excitation": 0,
            "c_parity": self.c_parity,
            "max_bound_state_mass_gev": self.limit_gev,
            "mass_gev": e.mass_gev,
            "mass_method": "lambda(P^2 = -M^2) = 1 of rational continuations of lambda(P^2) (see extrapolation)",
            "mass_error_gev": e.error_gev,
            "error_estimate": "spread of the rational continuations (degrees and fitted ranges)",
            "extrapolation": e.summary(),
            "decay_constant_gev": None,
            "decay_constant_error_gev": None,
            "decay_constant_convention": observables.CONVENTION_LABELS[self.convention],
            "normalisation_agreement": None,
            "next_eigenvalue": None,
            "seconds": self.seconds,
            "from_cache": self.from_cache,
        }


def extrapolate_meson(cfg: Config, meson: MesonConfig, quarks: dict[str, QuarkResult],
                      progress: Progress = _quiet, limit_gev: float | None = None,
                      reason: str = "") -> ExtrapolatedMeson:
    """The mass of a state above M_max (``limit_gev`` overrides M_max: to validate on
    accessible states) by rational continuation of its leading λ(P²), sampled spacelike
    and timelike below the limit.  ``extrapolate.NotExtrapolable`` says why not."""
    t0 = time.perf_counter()
    if meson.excitation:
        raise extrapolate.NotExtrapolable("only ground states are extrapolated (the leading eigenvalue), "
                                          f"not excitation {meson.excitation}")
    q1, q2 = quarks[meson.quarks[0]], quarks[meson.quarks[1]]
    eta, eta_method = meson_eta(meson, q1, q2)
    limit = mass_limit(q1, q2, eta) if limit_gev is None else float(limit_gev)
    if not math.isfinite(limit):
        raise extrapolate.NotExtrapolable("M_max is not finite: the state is accessible")
    ch = channels.get(meson.channel)
    bs = bse.BoundState(kernel_of(cfg), ch, bse_grid_of(cfg), q1.solution,
                        q2.solution if q2 is not q1 else None, eta=eta,
                        continuation=cfg.bse.continuation, max_mass=limit)
    # the leading state of the channel's charge parity where C is a symmetry (as the search)
    parity = ch.c_parity if search.charge_symmetric(bs) else None
    solver = (extrapolate.plain_eigen if parity is None else
              (lambda b, m, k, v0, tol: search.eigen(b, m, k=k, v0=v0, tol=tol, parity=parity)))
    progress(f"{meson.name}: sampling lambda(P^2) below M_max = {limit:.4g} GeV to extrapolate past it")
    p2, lam = extrapolate.sample(bs, limit, eigen=solver)
    ex = extrapolate.extrapolate(p2, lam)
    progress(f"{meson.name}: extrapolated M = {ex.mass_gev:.4f} ± {ex.error_gev:.1g} GeV")
    return ExtrapolatedMeson(name=meson.name, channel=meson.channel, quarks=meson.quarks,
                             current_masses_gev=(q1.solution.mass_gev, q2.solution.mass_gev),
                             continuation=cfg.bse.continuation, eta=eta, eta_method=eta_method, limit_gev=limit,
                             extrapolation=ex, reason=reason, seconds=time.perf_counter() - t0,
                             convention=cfg.output.decay_constant_convention,
                             c_parity=parity if solver is not extrapolate.plain_eigen else None)


# ----------------------------------------------------------------------------------------
# A whole run

@dataclass(frozen=True)
class RunResult:
    config: Config
    quarks: dict[str, QuarkResult]
    mesons: list[MesonResult]
    seconds: float
    #: states above M_max whose masses were extrapolated (``extrapolate_meson``); after
    #: ``mesons`` in the summary's list (exports pair ``mesons`` with its first entries)
    extrapolated: list[ExtrapolatedMeson] = field(default_factory=list)

    def inputs(self) -> dict:
        """The resolved config (defaults filled in, in the nesting of the TOML file) and
        the conventions every number of the run is reported in."""
        conv = self.config.output.decay_constant_convention
        kern = {**self.config.kernel.relevant(), "regularisation_scale_gev2": kernel_of(self.config).scale_gev2}
        return {**self.config.to_dict(), "kernel": kern, "conventions": {
            **QUARK_CONVENTIONS,
            "rest_frame": "P = (0, 0, 0, iM), P^2 = -M^2 on shell; q^ = (0, 0, sqrt(1 - z^2), z)",
            "decay_constant": observables.CONVENTION_LABELS[conv],
            "amplitude": ("normalised Bethe-Salpeter amplitude in the same convention as f (Nakanishi "
                          "normalisation; divided by sqrt 2 in the 92 MeV convention)"),
            "colours": N_C,
        }}

    def summary(self) -> dict:
        k = kernel_of(self.config)
        first = self.config.flavours[0].name
        return {
            "config": self.config.name,
            "config_hash": self.config.hash(),
            "package": "rlmeson",
            "package_version": __version__,
            "regularisation": k.regularisation,
            "regularisation_scale_gev2": k.scale_gev2,
            "regularisation_description": k.label,
            "continuation": self.config.bse.continuation,
            "inputs": self.inputs(),
            "quark": self.quarks[first].summary(),
            "quarks": {n: q.summary() for n, q in self.quarks.items()},
            "mesons": [m.summary() for m in self.mesons] + [e.summary() for e in self.extrapolated],
            "seconds": self.seconds,
        }


def run(cfg: Config, store: Store | None = None, progress: Progress = _quiet,
        lean: bool = False) -> RunResult:
    """Every quark and meson of ``cfg``; ``lean`` (scans): without the λ(P²) figure data
    and the direct continuation's cross-check of the singularity (the results are the same;
    those diagnostics are absent from the summary)."""
    t0 = time.perf_counter()
    needed = [f.name for f in cfg.flavours]
    quarks = {n: solve_quark(cfg, n, store, progress, cross_check=not lean) for n in needed}
    mesons, beyond = [], []
    for i, m in enumerate(cfg.mesons):
        try:
            try:
                mesons.append(solve_meson(cfg, m, quarks, store, progress, spectrum=not lean))
            except search.NoBoundState as e:   # above M_max: extrapolate, or say why not
                progress(f"{m.name}: {e}")
                try:
                    beyond.append(extrapolate_meson(cfg, m, quarks, progress, reason=str(e)))
                except extrapolate.NotExtrapolable as why:
                    raise search.NoBoundState(f"{e}; no extrapolation beyond M_max either: {why}") from None
        except (ConfigError, KeyboardInterrupt):
            raise
        except Exception as e:  # say which meson could not be computed
            if e.args and isinstance(e.args[0], str):
                e.args = (f"{meson_label(i, m.name)}: {e.args[0]}", *e.args[1:])
            raise
    return RunResult(config=cfg, quarks=quarks, mesons=mesons, seconds=time.perf_counter() - t0,
                     extrapolated=beyond)


__all__ = ["run", "solve_quark", "solve_meson", "bound_state", "kernel_of"]


# ----------------------------------------------------------------------------------------
# The quark on the complex plane (for exports)

#: z nodes of the region samples.
REGION_Z_POINTS = 16


def region_grid_of(cfg: Config) -> bse.BSEGrid:
    """The grid of the exported complex region: the gap equation's radial panels (the node
    interpolation beyond the approximant's window is then as accurate as the real axis's,
    measured 2e-6; the BSE's wider panels give 7e-4 at 10 GeV²), the BSE's lowest q², and
    REGION_Z_POINTS Chebyshev nodes in z."""
    b, g = cfg.bse, cfg.gap
    return bse.BSEGrid(q2_min=b.q2_min_gev2, widths=tuple(g.panel_widths), order=g.order,
                       n_z=REGION_Z_POINTS, angular_half=b.angular_points)


def quark_plane(cfg: Config, quark: QuarkResult, region_mass_gev: float, eta: float = 0.5,
                store: Store | None = None, progress: Progress = _quiet) -> quarkplane.QuarkPlane:
    """The dressed quark on the parabola with apex −η²M² (M = ``region_mass_gev``): shifted
    samples (cached) and their rational approximants and singularities."""
    grid = region_grid_of(cfg)
    kern = kernel_of(cfg)
    radial = grid.radial(kern.q2_max)
    key = stage_key(cfg, f"{cfg.quark_key(quark.flavour)}|plane|{region_mass_gev!r}|{eta!r}|"
                         f"{REGION_Z_POINTS}|{radial.edges!r}|{radial.order}")
    samples = None
    if store is not None:
        hit = store.get("plane", key)
        if hit is not None and hit.attrs.get("config_key") == key:
            a = hit.arrays
            samples = quarkplane.RegionSamples(
                mass_gev=hit.attrs["mass_gev"], eta=hit.attrs["eta"], radial=radial, q2=a["q2"], z=a["z"],
                A=a["A"], B=a["B"], A_longitudinal=a["A_longitudinal"], residual=hit.attrs["residual"],
                seconds=0.0)
            progress(f"quark {quark.flavour}: complex-plane samples from cache")
    if samples is None:
        progress(f"quark {quark.flavour}: shifted gap equation on the parabola of M = {region_mass_gev:g} GeV")
        samples = quarkplane.sample(quark.solution, region_mass_gev, eta, n_z=REGION_Z_POINTS, grid=grid)
        if store is not None:
            store.try_put("plane", key, {"q2": samples.q2, "z": samples.z, "A": samples.A, "B": samples.B,
                                         "A_longitudinal": samples.A_longitudinal},
                          {"mass_gev": samples.mass_gev, "eta": samples.eta, "residual": samples.residual,
                           "config_key": key, "version": __version__})
    progress(f"quark {quark.flavour}: rational approximants (AAA) and their zeros")
    return quarkplane.build(quark.solution, samples)

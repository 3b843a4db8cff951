"""The dressed quark on the complex p² plane as an analytic object.

A bound state of mass M with momentum fraction η probes the quark at x² = q² − η²M² +
2iηM q z, the interior of a parabola with apex −η²M².  ``sample`` solves the gap
equation there with the shifted (quark-routed) continuation (``routed``), the analytic
continuation of the real-axis solution, on the (z, q) nodes of a grid.  ``build`` turns
those samples and the real-axis solution into

* a rational approximant per dressing function (A and B) in barycentric form,
  built with the AAA algorithm (``scipy.interpolate.AAA``; Nakatsukasa, Sète &
  Trefethen, SIAM J. Sci. Comput. 40 (2018) A1494) on the part of the region with
  |p²| ≤ ``window_gev2``, with its error measured on held-out samples;
* the propagator's nearest singularities: zeros of D(s) = s A(s)² + B(s)² of the
  approximants (Newton on the rational functions), each checked against the shifted
  samples themselves (|D|/(|s||A|² + |B|²) interpolated from the nodes), and the
  largest accessible bound-state mass M_max(η) = |Im √s₀| / η.

The rational form r(s) = Σ_j w_j f_j/(s − s_j) / Σ_j w_j/(s − s_j) needs only the
support points s_j, values f_j and weights w_j, so another code can rebuild it in a
few lines (README, "Propagator files").
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np

from .gap import GapSolution
from ..numerics import rational
from ..numerics.rational import Rational, aaa  # noqa: F401  (re-exported: the fit used here)

#: Default half-width of the approximant's window in |p²| (GeV²): where the dynamical
#: mass is generated and the nearest singularities lie; beyond it the functions are
#: slow logarithms and the node interpolation is the representation.
WINDOW_GEV2 = 4.0
#: The AAA fit: relative tolerance against the largest |f| in the window and the most
#: support points.  The samples are accurate to about 1e-7 (covariance residual) and the
#: fit stops at AAA_MAX_TERMS before it can chase their noise (measured: held-out errors
#: the same with 50 and 100 terms, and 5× faster).
AAA_RTOL = rational.AAA_RTOL
AAA_MAX_TERMS = rational.AAA_MAX_TERMS
#: The fit uses samples out to FIT_MARGIN × the window; errors are quoted inside it.
FIT_MARGIN = 2.0
#: |D|/(|s||A|² + |B|²), from a shifted solve at 1.01 M_max, below which a zero of the
#: approximants' D is confirmed.  Measured at the analytic zeros: 0.005 (Maris–Tandy, hard
#: cutoff), 0.012 (translation-invariant; Qin–Chang); at the direct continuation's artefact
#: for Qin–Chang 0.44.  0.1 sits an order of magnitude above the first and well below the
#: second.  It confirms that a zero exists there, not its location to better than
#: |Δs| ≈ 0.1 · norm/|D′| ≈ 0.06 GeV² (|D′| ≈ 3.3, norm ≈ 2.1 measured at the Maris–Tandy
#: zero); the location is the approximant's, stable to 1e-4 between sample sets.
CONFIRMED = 0.1


# ----------------------------------------------------------------------------------------
# Samples of the shifted continuation

@dataclass(frozen=True)
class RegionSamples:
    """A, B from the shifted continuation on the nodes of the parabola with apex −η²M²."""

    mass_gev: float
    eta: float
    radial: object = field(repr=False)        # quadrature.RadialGrid of the q nodes
    q2: np.ndarray = field(repr=False)        # (n_q,)
    z: np.ndarray = field(repr=False)         # (n_z,)
    A: np.ndarray = field(repr=False)         # (n_z, n_q), from the γ·q_T part
    B: np.ndarray = field(repr=False)
    A_longitudinal: np.ndarray = field(repr=False)
    residual: float                           # shifted solve, relative
    seconds: float

    @property
    def x2(self) -> np.ndarray:
        q = np.sqrt(self.q2)[None, :]
        m = self.eta * self.mass_gev
        return self.q2[None, :] - m * m + 2j * m * q * self.z[:, None]

    @property
    def apex_gev2(self) -> float:
        return -(self.eta * self.mass_gev) ** 2

    @property
    def covariance_residual(self) -> np.ndarray:
        """|A(γ·P̂ part) − A(γ·q_T part)| / |A| per node: zero for an exact continuation."""
        return np.abs(self.A_longitudinal - self.A) / np.abs(self.A)

    def coordinates(self, s) -> tuple[np.ndarray, np.ndarray]:
        """(q², z) of the node coordinates at complex p² = s (the parabola's own map)."""
        s = np.asarray(s, dtype=complex)
        m = self.eta * self.mass_gev
        q2 = s.real + m * m
        with np.errstate(divide="ignore", invalid="ignore"):
            z = s.imag / (2.0 * m * np.sqrt(np.maximum(q2, 0.0)))
        return q2, z

    def inside(self, s) -> np.ndarray:
        """Whether s lies in the sampled part of the region (inside the parabola and
        within the grid's momenta)."""
        q2, z = self.coordinates(s)
        return (q2 >= self.q2[0]) & (q2 <= self.q2[-1]) & (np.abs(z) <= 1.0)


def sample(sol: GapSolution, mass_gev: float, eta: float = 0.5, n_z: int = 16, grid=None,
           solver=None) -> RegionSamples:
    """Solve the shifted gap equation at bound-state mass ``mass_gev`` (reached by
    continuation from 0.6 M, where the covariant start is good)."""
    from ..numerics.grids import BSEGrid
    from ..model import ladder
    from . import routed

    t0 = time.perf_counter()
    if solver is None:
        grid = grid or BSEGrid()
        solver = routed.ShiftedSolver(sol, ladder.LadderGrid(grid.radial(sol.kernel.q2_max), n_z))
    start = solver.solve(0.6 * mass_gev, eta)
    sp = solver.solve(mass_gev, eta, guess=start)
    return RegionSamples(mass_gev=float(mass_gev), eta=float(eta), radial=solver.grid.radial,
                         q2=np.asarray(sp.q2),
                         z=np.asarray(sp.z), A=np.asarray(sp.A_transverse), B=np.asarray(sp.B),
                         A_longitudinal=np.asarray(sp.A_longitudinal), residual=float(sp.residuals[-1]),
                         seconds=time.perf_counter() - t0)


def interpolate_samples(samples: RegionSamples, s) -> tuple[np.ndarray, np.ndarray]:
    """A, B at complex s inside the sampled region by interpolation on the nodes
    (Chebyshev in z, the panels' Lagrange interpolation in ln q²)."""
    from ..numerics import quadrature as qd

    q2, z = samples.coordinates(s)
    q2, z = np.ravel(q2), np.ravel(z)
    n = samples.z.size
    _, w = qd.chebyshev_u_nodes(n)
    u_nodes = qd.chebyshev_u(n - 1, samples.z)
    uz = qd.chebyshev_u(n - 1, z)
    out = []
    for f in (samples.A, samples.B):
        mom = (2.0 / np.pi) * np.einsum("k,km,kq->mq", w, u_nodes, f)
        rad = samples.radial.interpolate(mom, np.log(q2))
        out.append(np.einsum("pm,mp->p", uz, rad).reshape(np.shape(s)))
    return out[0], out[1]


# ----------------------------------------------------------------------------------------
# The analytic object

@dataclass(frozen=True)
class Singularity:
    s_gev2: complex                 # upper half plane; its conjugate is one too
    check: float | None             # |D|/norm there from the shifted samples (None: outside them)
    residue_sigma_s: complex | None  # residue of σ_S = B/D at s₀ (from the approximants)

    def max_mass(self, eta: float = 0.5) -> float:
        return float(abs(np.sqrt(complex(self.s_gev2)).imag) / eta)

    @property
    def confirmed(self) -> bool:
        return self.check is not None and self.check < CONFIRMED


@dataclass(frozen=True)
class QuarkPlane:
    """A, B on the complex plane: samples, approximants, their errors and the poles."""

    samples: RegionSamples = field(repr=False)
    A: Rational = field(repr=False)
    B: Rational = field(repr=False)
    window_gev2: float
    holdout_error: float            # max relative error of A, B on held-out samples
    real_axis_error: float          # max relative error on the real axis (off the fit points)
    singularities: tuple[Singularity, ...]
    seconds: float

    def D(self, s):
        s = np.asarray(s, dtype=complex)
        a, b = rational.evaluate([self.A, self.B], s)
        return s * a * a + b * b



def _thin(points: np.ndarray, spacing: float) -> np.ndarray:
    """Indices of points at least about ``spacing`` × (|s| + 0.1) apart (clusters of nearly
    equal points carry no information and make the AAA least-squares step ill-posed)."""
    scale = spacing * (np.abs(points) + 0.1)
    key = np.round(points.real / scale) + 1j * np.round(points.imag / scale)
    _, idx = np.unique(np.round(key.real) + 1e6 * np.round(key.imag), return_index=True)
    return np.sort(idx)


def noise_tolerance(samples: RegionSamples, window_gev2: float = WINDOW_GEV2) -> float:
    """The AAA tolerance the samples support: 3 × the median covariance residual of the
    samples in the fit domain (their noise; a tighter fit only adds pole–zero pairs that
    fit it), kept within [1e-8, 1e-4].  Measured medians: ~4e-7 translation-invariant,
    ~2e-5 hard cutoff (Maris–Tandy, region M = 0.7 GeV)."""
    sel = np.abs(samples.x2) <= FIT_MARGIN * window_gev2
    res = samples.covariance_residual[sel]
    return float(np.clip(3.0 * np.median(res), 1e-8, 1e-4)) if res.size else AAA_RTOL


def build(sol: GapSolution, samples: RegionSamples, window_gev2: float = WINDOW_GEV2,
          rtol: float | None = None, max_terms: int = AAA_MAX_TERMS) -> QuarkPlane:
    """Approximants of A and B on the window, validated on held-out points, and the
    zeros of D nearest to the region.  ``rtol`` None: ``noise_tolerance``."""
    t0 = time.perf_counter()
    if rtol is None:
        rtol = noise_tolerance(samples, window_gev2)
    x2 = samples.x2.ravel()
    # fit on twice the window (a rational fit is least accurate at the edge of its
    # data), quote the errors inside it
    keep = np.abs(x2) <= FIT_MARGIN * window_gev2
    pts, a_s, b_s = x2[keep], samples.A.ravel()[keep], samples.B.ravel()[keep]
    idx = _thin(pts, 0.01)
    mask = np.zeros(pts.size, bool)
    mask[idx[::2]] = True                      # fit on every other thinned sample ...
    held = np.zeros(pts.size, bool)
    held[idx[1::2]] = True                     # ... and measure on the rest
    held &= np.abs(pts) <= window_gev2
    # the real axis, where the gap solution is most accurate: dense on ln p²
    q_lo = max(float(sol.q2[0]), 1e-4)
    real = np.geomspace(q_lo, FIT_MARGIN * window_gev2, 160)
    real_check = np.sqrt(real[:-1] * real[1:])
    real_check = real_check[real_check <= window_gev2]
    ra, rb = sol.dressing(np.concatenate([real, real_check]))
    ra, rb = np.asarray(ra, complex), np.asarray(rb, complex)
    n = real.size
    fit_pts = np.concatenate([pts[mask], real])
    # one set of support points and weights for A and B (set-valued AAA): half the cost
    # to evaluate, and the approximants' poles are common to both
    def spurious(poles):    # where the data say A and B are finite: the sampled region, the real axis
        dom = np.abs(poles) <= FIT_MARGIN * window_gev2
        on_axis = (np.abs(poles.imag) <= 1e-3 * np.abs(poles)) & (poles.real >= 0)
        return dom & (samples.inside(poles) | on_axis)

    A, B = aaa(fit_pts, [np.concatenate([a_s[mask], ra[:n]]), np.concatenate([b_s[mask], rb[:n]])],
               rtol, max_terms, spurious=spurious)

    def err(f, s, v):
        return float(np.max(np.abs(f(s) - v) / np.abs(v))) if v.size else 0.0

    hold = max(err(A, pts[held], a_s[held]), err(B, pts[held], b_s[held]))
    real_err = max(err(A, real_check, ra[n:]), err(B, real_check, rb[n:]))
    plane = QuarkPlane(samples=samples, A=A, B=B, window_gev2=window_gev2, holdout_error=hold,
                       real_axis_error=real_err, singularities=(), seconds=0.0)
    sings = _zeros_of_d(plane, sol)
    return QuarkPlane(samples=samples, A=A, B=B, window_gev2=window_gev2, holdout_error=hold,
                      real_axis_error=real_err, singularities=tuple(sings),
                      seconds=time.perf_counter() - t0 + samples.seconds)


def _zeros_of_d(plane: QuarkPlane, sol: GapSolution, n_scan: int = 40) -> list[Singularity]:
    """Zeros of D = sA² + B² of the approximants in the upper half of the window, from
    the local minima of |D|/norm on a scan, refined by Newton; each checked against the
    shifted samples (interpolated there) when it lies inside them."""
    w = plane.window_gev2
    re = np.linspace(-w, 0.5 * w, n_scan)
    im = np.linspace(1e-3 * w, w, n_scan)
    grid = re[:, None] + 1j * im[None, :]
    s = grid.ravel()
    a, b = plane.A(s), plane.B(s)
    with np.errstate(all="ignore"):
        val = np.log(np.abs(s * a * a + b * b) / (np.abs(s) * np.abs(a) ** 2 + np.abs(b) ** 2))
    val = np.where(np.isfinite(val), val, np.inf).reshape(grid.shape)
    cands = []
    for i in range(n_scan):
        for j in range(n_scan):
            nb = val[max(0, i - 1):i + 2, max(0, j - 1):j + 2]
            if np.isfinite(val[i, j]) and val[i, j] <= nb.min():
                cands.append(grid[i, j])
    found: list[Singularity] = []
    for s0 in cands:
        z = _newton(plane, complex(s0))
        if z is None or z.imag < -1e-10 * max(abs(z), 1.0) or abs(z) > plane.window_gev2:
            continue
        z = complex(z.real, abs(z.imag))        # a zero on the timelike axis: keep Im ≥ 0
        if any(abs(z - f.s_gev2) < 1e-6 * max(abs(z), 1e-3) for f in found):
            continue
        found.append(Singularity(s_gev2=z, check=_check(plane, z), residue_sigma_s=_residue(plane, z)))
    found.sort(key=lambda f: f.max_mass())
    return found


def _newton(plane: QuarkPlane, s: complex, steps: int = 40, tol: float = 1e-11) -> complex | None:
    """A zero of D near s: Newton until the step is below ``tol``·|s| (or stagnates at the
    rational's rounding floor); accepted when |D|/norm < 1e-9 there."""

    def scaled(x):
        a, b = rational.evaluate([plane.A, plane.B], np.array([x]))
        a, b = complex(a[0]), complex(b[0])
        return (x * a * a + b * b), abs(x) * abs(a) ** 2 + abs(b) ** 2

    last = np.inf
    for _ in range(steps):
        d, _ = scaled(s)
        dd = complex((plane.D(s + 1e-7) - plane.D(s - 1e-7)) / 2e-7)
        if dd == 0 or not np.isfinite(dd):
            return None
        step = -d / dd
        if abs(step) > 0.2 * max(abs(s), 0.05):
            step *= 0.2 * max(abs(s), 0.05) / abs(step)
        s += step
        if abs(step) < tol * max(abs(s), 1e-3) or abs(step) >= last:
            break
        last = abs(step) if abs(step) < 1e-6 * max(abs(s), 1e-3) else np.inf
    d, nrm = scaled(s)
    return s if np.isfinite(d) and abs(d) / nrm < 1e-9 else None


def _residue(plane: QuarkPlane, s0: complex) -> complex:
    """Residue of σ_S = B/D at a simple zero of D: B(s₀)/D'(s₀)."""
    h = 1e-7 * max(abs(s0), 1.0)
    dd = complex((plane.D(s0 + h) - plane.D(s0 - h)) / (2 * h))
    return complex(plane.B(s0)) / dd


def _check(plane: QuarkPlane, s0: complex) -> float | None:
    """|D|/norm at s₀ with A, B interpolated from the shifted samples (None when s₀ lies
    outside them)."""
    smp = plane.samples
    if not bool(smp.inside(np.array([s0]))[0]):
        return None
    a, b = interpolate_samples(smp, np.array([s0]))
    a, b = complex(a[0]), complex(b[0])
    return float(abs(s0 * a * a + b * b) / (abs(s0) * abs(a) ** 2 + abs(b) ** 2))



# ----------------------------------------------------------------------------------------
# The nearest singularity of a quark, for the quark stage

@dataclass(frozen=True)
class Located:
    """The outcome of ``locate``: the analytic object, the nearest zero of D found from
    it (or None) and the shifted-continuation check there."""

    plane: QuarkPlane
    nearest: Singularity | None
    check: float | None          # |D|/norm at it from a shifted solve just beyond M_max
    seconds: float

    @property
    def confirmed(self) -> bool:
        return self.check is not None and self.check < CONFIRMED


def region_mass_guess(sol: GapSolution, direct_max_mass: float | None) -> float:
    """A bound-state mass whose parabola stays clear of the nearest singularity: 1.3 M(0)
    (the singularities of these interactions lie near M_max ≈ 2 M(0), common practice),
    or 0.8 of the direct continuation's estimate when that is smaller."""
    m0 = abs(sol.mass_function_at_zero())
    guess = 1.3 * m0 if m0 > 1e-3 else 0.5
    if direct_max_mass is not None and np.isfinite(direct_max_mass) and direct_max_mass > 0:
        guess = min(guess, 0.8 * direct_max_mass)
    return float(guess)


def locate(sol: GapSolution, direct_max_mass: float | None = None, eta: float = 0.5,
           n_z: int = 16, grid=None) -> Located:
    """Sample the shifted continuation on a parabola that stays clear of the nearest
    singularity, continue it analytically (AAA), take the nearest zero of D and check it
    with a shifted solve just beyond the mass it allows (``singularities.check_with_shifted``).

    If the zero found would lie inside the sampled parabola the samples are redone at 0.8
    of the mass it allows (samples beyond M_max are not trustworthy: the loop then runs
    over the singularity)."""
    from ..numerics.grids import BSEGrid
    from ..model import ladder
    from . import routed, singularities

    t0 = time.perf_counter()
    grid = grid or BSEGrid()
    solver = routed.ShiftedSolver(sol, ladder.LadderGrid(grid.radial(sol.kernel.q2_max), n_z))
    mass = region_mass_guess(sol, direct_max_mass)
    for _ in range(3):
        plane = build(sol, sample(sol, mass, eta, solver=solver))
        cands = plane.singularities
        near = min(cands, key=lambda x: x.max_mass(eta)) if cands else None
        if near is None or near.max_mass(eta) > 1.05 * mass:
            break
        mass = 0.8 * near.max_mass(eta)
    check = None
    # the nearest zero, checked; only if the shifted solution is regular there (the zero is
    # the approximant's artefact) the next one is tried — never past a zero whose check
    # could not be made (at most two checks: each is two shifted solves)
    for cand in sorted(plane.singularities, key=lambda x: x.max_mass(eta))[:2]:
        c = singularities.check_with_shifted(
            sol, singularities.Singularity(s_gev2=cand.s_gev2, residual=0.0), eta, solver=solver)
        if near is cand or (c is not None and c < CONFIRMED):
            near, check = cand, c
        if c is None or c < CONFIRMED:
            break
    return Located(plane=plane, nearest=near, check=check, seconds=time.perf_counter() - t0)

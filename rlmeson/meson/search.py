"""The bound-state mass: λ(P² = −M²) = 1 by a bracketing root finder, with the λ(P²)
curve kept and failure modes that say what happened.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


class NoBoundState(RuntimeError):
    """No eigenvalue reaches 1 in the accessible mass range."""


@dataclass
class EigenCurve:
    """λ(M) evaluations in the order they were made (the leading eigenvalue)."""

    masses: list[float] = field(default_factory=list)
    eigenvalues: list[float] = field(default_factory=list)

    def add(self, m: float, lam: float):
        self.masses.append(float(m))
        self.eigenvalues.append(float(lam))

    def sorted(self) -> tuple[np.ndarray, np.ndarray]:
        o = np.argsort(self.masses)
        return np.asarray(self.masses)[o], np.asarray(self.eigenvalues)[o]


@dataclass(frozen=True)
class MassSolution:
    mass_gev: float
    eigenvector: np.ndarray = field(repr=False)
    curve: EigenCurve = field(repr=False)
    evaluations: int
    bracket: tuple[float, float]


def charge_symmetric(bs) -> bool:
    """Whether charge conjugation is a symmetry of the bound-state problem: one flavour
    (the same quark solution on both lines) at η = 1/2."""
    q1, q2 = bs.quark1, bs.quark2
    same = q2 is q1 or (q1.mass_gev == q2.mass_gev and np.array_equal(q1.A, q2.A)
                        and np.array_equal(q1.B, q2.B))
    return bool(same and bs.eta == 0.5)


def charge_parities(bs, vecs) -> np.ndarray:
    """⟨Γ, Γ_C⟩/⟨Γ, Γ⟩ of each column of ``vecs`` (±1 for C eigenstates)."""
    vecs = np.asarray(vecs).reshape(bs.size, -1)
    return np.array([bs.channel.charge_parity(vecs[:, i].reshape(bs.shape), bs.z)
                     for i in range(vecs.shape[1])])


def c_labels(bs, vecs, tol: float = 1e-6) -> np.ndarray:
    """C = ±1 of each eigenvector (column) where charge conjugation is a symmetry; 0 where
    it is not, or where a vector is not a C eigenstate to ``tol``."""
    vecs = np.asarray(vecs).reshape(bs.size, -1)
    if not charge_symmetric(bs):
        return np.zeros(vecs.shape[1], dtype=int)
    c = charge_parities(bs, vecs)
    return np.where(np.abs(np.abs(c) - 1.0) < tol, np.sign(c), 0).astype(int)


def eigen(bs, mass: float, k: int = 1, v0=None, tol: float = 1e-12, parity: int | None = None):
    """Leading k eigenpairs of the BSE at P² = −M², restricted to the states of charge
    parity ``parity`` (None: all).  The restriction is exact: the operator is sandwiched
    between the projectors (1 ± Ĉ)/2, which commute with it (``charge_symmetric``), so
    opposite-C states become zero modes instead of competing for the leading places."""
    if parity is None:
        return bs.eigen(mass, k=k, v0=v0, tol=tol)
    import scipy.sparse.linalg as spla

    op = bs.operator(mass)
    shape, ch, z, sign = bs.shape, bs.channel, bs.z, float(parity)

    def proj(v):
        v = np.asarray(v).reshape(shape)
        return (0.5 * (v + sign * ch.charge_conjugate(v, z))).reshape(-1)

    lin = spla.LinearOperator(op.shape, matvec=lambda v: proj(op.matvec(proj(v))), dtype=complex)
    if v0 is not None:
        v0 = proj(v0)
        if not np.linalg.norm(v0) > 0:
            v0 = None
    if v0 is None:                      # a fixed start: the same bits in every process
        from .bse import start_vector

        v0 = proj(start_vector(op.shape[0]))
    ncv = max(2 * k + 6, 8)
    vals, vecs = spla.eigs(lin, k=k, which="LR", v0=v0, tol=tol, ncv=ncv, maxiter=5000)
    order = np.argsort(-vals.real)
    return vals[order], vecs[:, order]


class Leading:
    """λ(M) with warm-started eigenvectors; records the curve.  ``parity``: only states of
    that charge parity (``eigen``)."""

    def __init__(self, bs, parity: int | None = None):
        self.bs = bs
        self.parity = parity
        self.curve = EigenCurve()
        self.vec = None
        self.vecs: dict[float, np.ndarray] = {}

    def _solve(self, m: float):
        vals, vecs = eigen(self.bs, m, k=1, v0=self.vec, parity=self.parity)
        return vals[0], vecs[:, 0]

    def __call__(self, m: float) -> float:
        val, self.vec = self._solve(m)
        lam = float(val.real)
        if not np.isfinite(lam):
            raise FloatingPointError(f"eigenvalue at M = {m} is not finite")
        self.vecs[float(m)] = self.vec
        self.curve.add(m, lam)
        return lam


class Follower(Leading):
    """λ(M) of one state followed by eigenvector overlap: at each mass the k leading
    eigenpairs are solved and the one closest to the previous eigenvector is kept (a
    state's λ is then not lost to another that overtakes it)."""

    def __init__(self, bs, vec, k: int, parity: int | None = None):
        super().__init__(bs, parity)
        self.vec = np.asarray(vec)
        self.k = int(k)
        self.overlaps: list[float] = []

    def _solve(self, m: float):
        vals, vecs = eigen(self.bs, m, k=self.k, v0=self.vec, parity=self.parity)
        ov = overlaps(self.vec[:, None], vecs)[0]
        j = int(np.argmax(ov))
        self.overlaps.append(float(ov[j]))
        return vals[j], vecs[:, j]


def overlaps(a, b) -> np.ndarray:
    """|⟨a_i, b_j⟩|/(‖a_i‖ ‖b_j‖) for the columns of a and b."""
    a = np.asarray(a) / np.linalg.norm(a, axis=0)
    b = np.asarray(b) / np.linalg.norm(b, axis=0)
    return np.abs(a.conj().T @ b)


def follow(previous, vecs) -> tuple[np.ndarray, np.ndarray]:
    """(j, o): new column j[i] continues previous column i, o[i] their overlap — the
    assignment maximising the total overlap (one new state per old one).  Sorting by
    eigenvalue instead would swap the labels of two states whose λ cross."""
    from scipy.optimize import linear_sum_assignment

    ov = overlaps(previous, vecs)
    rows, cols = linear_sum_assignment(-ov)
    out = np.full(ov.shape[0], -1)
    out[rows] = cols
    got = np.zeros(ov.shape[0])
    got[rows] = ov[rows, cols]
    return out, got


@dataclass
class TrackedStates:
    """λ of k states followed across a mass scan: ``values[i]`` the Re λ of state i (labelled
    by its place at the first mass) at ``masses``; ``crossings`` (mass interval, state) in
    the order they cross λ = 1."""

    masses: list[float]
    values: list[list[float]]
    crossings: list[tuple[float, float, int]]
    vectors: list[np.ndarray] = field(repr=False)   # (size, k) per mass, columns in label order
    min_overlap: float = 1.0


def track(bs, m_lo: float, m_hi: float, k: int, *, parity: int | None = None, step: float = 0.05,
          min_step: float = 0.004, good: float = 0.8, stop_after: int | None = None,
          tol: float = 1e-8) -> TrackedStates:
    """The k leading states (of charge parity ``parity``) from M = ``m_lo`` up to ``m_hi``,
    each followed by eigenvector overlap (``follow``); a step whose overlaps fall below
    ``good`` is halved (down to ``min_step``).  States with λ ≥ 1 already at ``m_lo`` are
    counted as crossed below it (in the order of their λ).  Stops once ``stop_after``
    states have crossed."""
    vals, vecs = eigen(bs, m_lo, k=k, parity=parity, tol=tol)
    masses, values, vectors = [m_lo], [list(vals.real)], [vecs]
    crossings = [(0.0, m_lo, i) for i in range(k) if vals[i].real >= 1.0]
    worst = 1.0
    m, h = m_lo, step
    while m < m_hi and (stop_after is None or len(crossings) < stop_after):
        m_new = min(m + h, m_hi)
        v2, w2 = eigen(bs, m_new, k=k, v0=vectors[-1].sum(axis=1), parity=parity, tol=tol)
        perm, ov = follow(vectors[-1], w2)
        if ov.min() < good and h > min_step:
            h = 0.5 * h
            continue
        worst = min(worst, float(ov.min()))
        lam = v2.real[perm]
        new_cross = []
        for i in range(k):
            a, b = values[-1][i] - 1.0, lam[i] - 1.0
            if a < 0 <= b or a >= 0 > b:
                at = m + (m_new - m) * a / (a - b)      # linear estimate, for the order only
                new_cross.append((at, i))
        for at, i in sorted(new_cross):
            crossings.append((m, m_new, i))
        masses.append(m_new)
        values.append(list(lam))
        vectors.append(w2[:, perm])
        m = m_new
        h = min(step, 2.0 * h)
    return TrackedStates(masses=masses, values=[list(v) for v in np.asarray(values).T],
                         crossings=crossings, vectors=vectors, min_overlap=worst)


def find_excitation(bs, n: int, m_lo: float, m_max: float, *, parity: int | None = None,
                    xtol: float = 1e-9, spare: int = 2) -> MassSolution:
    """The n-th state (n = 0 the ground state) to cross λ = 1 as M rises from ``m_lo``,
    among the states of charge parity ``parity``: the n + 1 + ``spare`` leading states are
    followed by overlap (``track``) up to 0.999 M_max, and the n-th crossing is refined on
    the state that made it (``Follower``).  ``NoBoundState`` says how many crossed."""
    k = n + 1 + spare
    hi = 0.999 * m_max
    tr = track(bs, m_lo, hi, k, parity=parity, stop_after=n + 1)
    if len(tr.crossings) <= n:
        top = [max(v) for v in tr.values]
        raise NoBoundState(
            f"excitation {n} of the {bs.channel.name} BSE is not reached below M_max = {m_max:.4g} GeV: "
            f"{len(tr.crossings)} state(s) cross lambda = 1 for M in [{m_lo:.4g}, {hi:.4g}] GeV; the largest "
            f"lambda of the next state followed is {sorted(top)[::-1][len(tr.crossings)] if len(top) > len(tr.crossings) else float('nan'):.6g}")
    a, b, i = tr.crossings[n]
    if a == 0.0:
        raise NoBoundState(f"state {i} of the {bs.channel.name} BSE has lambda >= 1 already at M = {m_lo:.4g} GeV")
    ia = tr.masses.index(a)
    fol = Follower(bs, tr.vectors[ia][:, i], k, parity)
    f_lo = fol(a) - 1.0
    start = fol.vec
    f_hi = fol(b) - 1.0
    if f_lo * f_hi > 0:
        raise NoBoundState(f"the {bs.channel.name} state followed from M = {a:.4g} to {b:.4g} GeV did not "
                           "keep its crossing of lambda = 1 when re-solved")
    fol.vec = start
    m = _bracketed_root(fol, a, f_lo, b, f_hi, xtol)
    vec = fol.vecs.get(m)
    if vec is None:
        fol(m)
        vec = fol.vec
    curve = EigenCurve()
    for mm, ll in zip(tr.masses, tr.values[i]):
        curve.add(mm, ll)
    for mm, ll in zip(fol.curve.masses, fol.curve.eigenvalues):
        curve.add(mm, ll)
    return MassSolution(mass_gev=m, eigenvector=vec, curve=curve,
                        evaluations=len(tr.masses) * 1 + len(fol.curve.masses), bracket=(a, b))


def find_mass(bs, guess: float, m_max: float, *, step: float = 0.15, xtol: float = 1e-9,
              m_floor: float = 1e-3, parity: int | None = None) -> MassSolution:
    """Root of λ(M) − 1 for M in (m_floor, m_max), starting near ``guess``, for the leading
    state of charge parity ``parity`` (None: the leading state).

    A bracket is grown geometrically from the guess (λ usually rises with M); if none is
    found below M_max, ``NoBoundState`` gives the largest λ reached and M_max.
    """
    lead = Leading(bs, parity)
    if not 0 < guess < m_max:
        guess = 0.5 * m_max
    lo, hi = guess * (1 - step), min(guess * (1 + step), 0.999 * m_max)
    f_lo, f_hi = lead(lo) - 1.0, lead(hi) - 1.0
    it = 0
    while f_lo * f_hi > 0 and it < 40:
        it += 1
        if f_lo > 0 and f_hi > 0:  # both above 1: go down
            if lo <= m_floor:
                break
            hi, f_hi = lo, f_lo
            lo = max(m_floor, lo * (1 - 2 * step))
            f_lo = lead(lo) - 1.0
        else:  # both below 1: go up
            if hi >= 0.999 * m_max:
                break
            lo, f_lo = hi, f_hi
            hi = min(0.999 * m_max, hi * (1 + 2 * step))
            f_hi = lead(hi) - 1.0
    if f_lo * f_hi > 0:
        ms, ls = lead.curve.sorted()
        raise NoBoundState(
            f"no eigenvalue of the {bs.channel.name} BSE reaches 1 for M in "
            f"[{ms.min():.4g}, {ms.max():.4g}] GeV: the largest λ reached is {ls.max():.6g}; "
            f"M_max = {m_max:.4g} GeV")
    m = _bracketed_root(lead, lo, f_lo, hi, f_hi, xtol)
    vec = lead.vecs.get(m)
    if vec is None:
        lead(m)
        vec = lead.vec
    return MassSolution(mass_gev=m, eigenvector=vec, curve=lead.curve,
                        evaluations=len(lead.curve.masses), bracket=(lo, hi))


def _bracketed_root(f, lo, f_lo, hi, f_hi, xtol, max_iter=60):
    """Root of f(M) − 1 in [lo, hi] by inverse interpolation in P² = −M² (λ is close to
    linear in M²), kept inside the bracket, bisecting when a step does not shrink it."""
    pts = [(lo * lo, f_lo), (hi * hi, f_hi)]
    a, fa, b, fb = lo * lo, f_lo, hi * hi, f_hi
    x = None
    for _ in range(max_iter):
        if len(pts) >= 3:
            (x0, y0), (x1, y1), (x2, y2) = pts[-3:]
            try:
                x = (x0 * y1 * y2 / ((y0 - y1) * (y0 - y2)) + x1 * y0 * y2 / ((y1 - y0) * (y1 - y2))
                     + x2 * y0 * y1 / ((y2 - y0) * (y2 - y1)))
            except ZeroDivisionError:
                x = None
        if x is None or not (min(a, b) < x < max(a, b)):
            x = b - fb * (b - a) / (fb - fa)
        if not (min(a, b) < x < max(a, b)):
            x = 0.5 * (a + b)
        fx = f(np.sqrt(x)) - 1.0
        pts.append((x, fx))
        if fx == 0.0:
            return float(np.sqrt(x))
        if fa * fx < 0:
            b, fb = x, fx
        else:
            a, fa = x, fx
        step = abs(pts[-1][0] - pts[-2][0]) if len(pts) > 1 else abs(b - a)
        if step < 2 * xtol * np.sqrt(x) or abs(b - a) < 2 * xtol * np.sqrt(x):
            return float(np.sqrt(x))
        x = None
    return float(np.sqrt(x if x is not None else 0.5 * (a + b)))

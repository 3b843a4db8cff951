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


class Leading:
    """λ(M) with warm-started eigenvectors; records the curve."""

    def __init__(self, bs):
        self.bs = bs
        self.curve = EigenCurve()
        self.vec = None
        self.vecs: dict[float, np.ndarray] = {}

    def __call__(self, m: float) -> float:
        vals, vecs = self.bs.eigen(m, k=1, v0=self.vec)
        lam = float(vals[0].real)
        if not np.isfinite(lam):
            raise FloatingPointError(f"eigenvalue at M = {m} is not finite")
        self.vec = vecs[:, 0]
        self.vecs[float(m)] = self.vec
        self.curve.add(m, lam)
        return lam


def find_mass(bs, guess: float, m_max: float, *, step: float = 0.15, xtol: float = 1e-9,
              m_floor: float = 1e-3) -> MassSolution:
    """Root of λ(M) − 1 for M in (m_floor, m_max), starting near ``guess``.

    A bracket is grown geometrically from the guess (λ usually rises with M); if none is
    found below M_max, ``NoBoundState`` gives the largest λ reached and M_max.
    """
    lead = Leading(bs)
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

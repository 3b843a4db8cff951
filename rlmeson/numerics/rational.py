"""Rational functions in barycentric form and the AAA algorithm that builds them
(pure numpy/scipy: the readers use this module without the solvers)."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: Defaults of ``aaa`` (the quark plane's choice, ``quarkplane``): relative tolerance
#: against the largest |f| and the largest number of support points.
AAA_RTOL = 1e-10
AAA_MAX_TERMS = 50


@dataclass(frozen=True)
class Rational:
    """r(s) = Σ_j w_j f_j/(s − s_j) / Σ_j w_j/(s − s_j) (exact at the support points)."""

    support: np.ndarray   # s_j (complex)
    values: np.ndarray    # f_j = r(s_j)
    weights: np.ndarray   # w_j

    def __call__(self, s) -> np.ndarray:
        return evaluate([self], s)[0]

    def derivative(self, s, h: float = 1e-6) -> np.ndarray:
        """dr/ds by a complex central difference (r is analytic away from its poles)."""
        s = np.asarray(s, dtype=complex)
        step = h * np.maximum(np.abs(s), 1.0)
        return (self(s + step) - self(s - step)) / (2.0 * step)

    def residues(self, poles) -> np.ndarray:
        """Residues at simple poles p: N(p)/D'(p) of the barycentric numerator and
        denominator (D' = −Σ w_j/(p − s_j)²)."""
        d = np.asarray(poles, complex)[:, None] - self.support[None, :]
        return np.sum(self.weights * self.values / d, axis=1) / -np.sum(self.weights / d**2, axis=1)

    def poles(self) -> np.ndarray:
        """Zeros of the denominator Σ w_j/(s − s_j): a generalised eigenvalue problem."""
        import scipy.linalg as sla

        m = self.support.size
        a = np.zeros((m + 1, m + 1), dtype=complex)
        a[0, 1:] = self.weights
        a[1:, 0] = 1.0
        a[1:, 1:] = np.diag(self.support)
        b = np.eye(m + 1, dtype=complex)
        b[0, 0] = 0.0
        ev = sla.eigvals(a, b)
        return ev[np.isfinite(ev)]


def evaluate(rationals, s, chunk: int = 16384) -> list[np.ndarray]:
    """Several rational functions with the same support points and weights (``aaa``
    with several value arrays) at the points s: one Cauchy matrix for all of them."""
    s = np.asarray(s, dtype=complex)
    flat = s.ravel()
    first = rationals[0]
    if any(r.support.shape != first.support.shape or not np.array_equal(r.support, first.support)
           or not np.array_equal(r.weights, first.weights) for r in rationals[1:]):
        return [evaluate([r], s, chunk)[0] for r in rationals]
    wf = np.stack([r.weights * r.values for r in rationals] + [first.weights], axis=1)   # (m, k + 1)
    out = np.empty((len(rationals), flat.size), complex)
    for i in range(0, flat.size, chunk):
        d = flat[i:i + chunk, None] - first.support[None, :]
        with np.errstate(divide="ignore", invalid="ignore"):
            inv = 1.0 / (d.real * d.real + d.imag * d.imag)
            c = np.empty_like(d)
            c.real = d.real * inv
            c.imag = -d.imag * inv                                       # 1/d
            nd = c @ wf                                                     # numerators, denominator
            r = nd[:, :-1] / nd[:, -1:]                                     # (P, k)
        hit = ~np.all(np.isfinite(r), axis=1)                               # at a support point
        if hit.any():
            j = np.argmin(np.abs(d[hit]), axis=1)
            r[hit] = np.stack([x.values[j] for x in rationals], axis=1)
        out[:, i:i + chunk] = r.T
    return [o.reshape(s.shape) for o in out]


def _weights(z, fs, scale, idx):
    """Barycentric weights for the support points ``idx``: the smallest right singular
    vector of the stacked, scaled Loewner matrices on the other points."""
    import scipy.linalg as sla

    free = np.ones(z.size, bool)
    free[idx] = False
    with np.errstate(divide="ignore", invalid="ignore"):
        c = 1.0 / (z[free][:, None] - z[idx][None, :])
        loewner = np.concatenate([(f[free][:, None] - f[idx][None, :]) * c / sc for f, sc in zip(fs, scale)])
    _, _, vh = sla.svd(loewner, full_matrices=False, check_finite=False)
    return vh[-1].conj()


def aaa(points, values, rtol: float = AAA_RTOL, max_terms: int = AAA_MAX_TERMS, spurious=None):
    """The AAA algorithm (Nakatsukasa, Sète & Trefethen 2018): greedy choice of support
    points where the current approximant is worst, weights from the smallest singular
    vector of the Loewner matrix on the remaining points; stops when the error on the
    data is below ``rtol`` × max |f| or at ``max_terms`` support points.

    ``spurious``: a function of an array of poles returning a mask of those that cannot
    be (e.g. inside the region where the data say the function is finite: pole–zero
    pairs that fit noise).  The support point nearest each is removed and the weights
    recomputed on the rest, up to three times (the clean-up of the published method).

    ``values`` one array: one ``Rational``.  A list of arrays: a list of ``Rational``
    with common support points and weights (the set-valued variant: the Loewner matrices
    of all functions, each scaled by its largest |f|, stacked), evaluated together by
    ``evaluate`` at the cost of one.

    The same algorithm as ``scipy.interpolate.AAA`` (the tests compare the two), written
    out here to take the thin SVD: scipy's full one costs O(N²) per step (10–20 s for
    the ~400 points of a region on two busy cores, about 1 s with the thin one)."""
    import scipy.linalg as sla

    single = not isinstance(values, (list, tuple))
    z = np.asarray(points, complex).ravel()
    fs = [np.asarray(v, complex).ravel() for v in ([values] if single else values)]
    scale = [np.max(np.abs(f)) or 1.0 for f in fs]
    free = np.ones(z.size, bool)
    rs = [np.full(f.shape, np.mean(f)) for f in fs]
    cols = []
    idx: list[int] = []
    w = np.ones(1, complex)
    for _ in range(min(max_terms, z.size - 1)):
        err = np.max([np.abs(f - r) / sc for f, r, sc in zip(fs, rs, scale)], axis=0)
        j = int(np.argmax(np.where(free, err, -1.0)))
        idx.append(j)
        free[j] = False
        with np.errstate(divide="ignore", invalid="ignore"):
            cols.append(1.0 / (z - z[j]))
        c = np.stack(cols, axis=1)[free]                       # Cauchy matrix (N', m)
        with np.errstate(invalid="ignore"):
            loewner = np.concatenate([(f[free][:, None] - f[idx][None, :]) * c / sc
                                      for f, sc in zip(fs, scale)])
        _, _, vh = sla.svd(loewner, full_matrices=False, check_finite=False)
        w = vh[-1].conj()
        den = c @ w
        rs = []
        for f in fs:
            r = f.copy()
            r[free] = (c @ (w * f[idx])) / den
            rs.append(r)
        if max(np.max(np.abs(f - r)) / sc for f, r, sc in zip(fs, rs, scale)) <= rtol:
            break
    for _ in range(3 if spurious is not None else 0):
        poles = Rational(z[idx], fs[0][idx], np.asarray(w, complex)).poles()
        bad = poles[np.asarray(spurious(poles), bool)] if poles.size else poles
        if bad.size == 0 or len(idx) <= bad.size + 1:
            break
        drop = {idx[int(np.argmin(np.abs(z[idx] - p)))] for p in bad}
        idx = [j for j in idx if j not in drop]
        w = _weights(z, fs, scale, idx)
    out = [Rational(support=z[idx].copy(), values=f[idx].copy(), weights=np.asarray(w, complex)) for f in fs]
    return out[0] if single else out

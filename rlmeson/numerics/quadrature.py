"""Quadrature rules: radial panels, target-adapted product integration, angular maps and
Chebyshev tools.  Pure numpy; nothing here knows about physics.

Radial variable.  Loop integrals run over t = ln q².  The unknown functions of a solve
(propagator dressing, amplitudes) live on the Gauss–Legendre nodes of a set of panels in
t and are interpolated inside a panel by the Lagrange polynomial through that panel's
nodes.  Kernels, by contrast, can be sharply peaked at q ≈ p (the infrared Gaussian of
the interaction is a few per cent wide in ln q² at p² ~ 10–10³ GeV²), so for every
external momentum p ("target") the integral over q is done on a finer rule: the panel
boundaries plus breakpoints graded geometrically towards t_p on both sides, each
sub-panel with its own Gauss–Legendre nodes, and the unknown interpolated there
(product integration).  This decouples the resolution of the kernel from the number of
unknowns.

Angular variable.  The relative angle θ between p and q (x = cos θ) is integrated with
∫ sin²θ dθ on [0, π], mapped on each half by θ = (π/2)·sinh(αu)/sinh(α), which puts
nodes at spacing ≈ θ* next to the end and spaces them geometrically further out; θ* is
set per (p, q) pair from the kernel's feature scale.  The rule is symmetric under
θ → π − θ, so that functions of √p² at complex p² come out even in √p².
"""

from __future__ import annotations

from dataclasses import dataclass
import math
from functools import lru_cache

import numpy as np


# ----------------------------------------------------------------------------------------
# Gauss rules and Lagrange interpolation

@lru_cache(maxsize=64)
def gauss_legendre(n: int) -> tuple[np.ndarray, np.ndarray]:
    """Nodes and weights on [0, 1]."""
    x, w = np.polynomial.legendre.leggauss(n)
    return (x + 1.0) / 2.0, w / 2.0


def lagrange_weights(nodes: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Barycentric Lagrange weights L_j(x) for the polynomial through ``nodes``.

    nodes: (..., n); x: (...,).  Returns (..., n).  Exact (to rounding) at the nodes.
    """
    nodes = np.asarray(nodes, dtype=float)
    x = np.asarray(x, dtype=float)
    n = nodes.shape[-1]
    diff = nodes[..., :, None] - nodes[..., None, :]
    diff = diff + np.eye(n)
    bw = 1.0 / np.prod(diff, axis=-1)  # barycentric weights (..., n)
    d = x[..., None] - nodes
    hit = np.abs(d) < 1e-300
    d = np.where(hit, 1.0, d)
    t = bw / d
    L = t / np.sum(t, axis=-1, keepdims=True)
    anyhit = np.any(hit, axis=-1, keepdims=True)
    return np.where(anyhit, hit.astype(float), L)


# ----------------------------------------------------------------------------------------
# Radial panels

@dataclass(frozen=True)
class RadialGrid:
    """Gauss–Legendre panels in t = ln q² (q² in GeV²).

    ``edges`` are the panel boundaries (increasing).  Nodes are ordered panel by panel.
    ``t_nodes``/``t_weights`` integrate functions of t; ``q2`` are the node momenta.
    """

    edges: tuple[float, ...]
    order: int

    @property
    def n_panels(self) -> int:
        return len(self.edges) - 1

    @property
    def size(self) -> int:
        return self.n_panels * self.order

    def _nodes(self):
        e = np.asarray(self.edges)
        x, w = gauss_legendre(self.order)
        h = np.diff(e)
        t = e[:-1, None] + h[:, None] * x[None, :]
        wt = h[:, None] * w[None, :]
        return t, wt

    @property
    def t_nodes(self) -> np.ndarray:
        return self._nodes()[0].ravel()

    @property
    def t_weights(self) -> np.ndarray:
        return self._nodes()[1].ravel()

    @property
    def q2(self) -> np.ndarray:
        return np.exp(self.t_nodes)

    @property
    def t_min(self) -> float:
        return self.edges[0]

    @property
    def t_max(self) -> float:
        return self.edges[-1]

    def interpolation(self, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Node indices (..., order) and Lagrange weights (..., order) at points t.

        Points outside [t_min, t_max] are extrapolated from the end panels (they are only
        ever given zero quadrature weight by the rules below).
        """
        t = np.asarray(t, dtype=float)
        e = np.asarray(self.edges)
        k = np.clip(np.searchsorted(e, t, side="right") - 1, 0, self.n_panels - 1)
        tn, _ = self._nodes()
        idx = k[..., None] * self.order + np.arange(self.order)
        L = lagrange_weights(tn[k], t)
        return idx, L

    def interpolate(self, values: np.ndarray, t: np.ndarray) -> np.ndarray:
        """Interpolate node values (last axis = nodes) to points t."""
        idx, L = self.interpolation(t)
        return np.sum(np.asarray(values)[..., idx] * L, axis=-1)


#: Zone boundaries (GeV²) of the radial grids: infrared | mass generation and onset of
#: running | perturbative tail | far ultraviolet.
ZONE_BREAKS = (0.1, 100.0, 1e4)


def radial_grid(q2_min: float, q2_max: float, widths, order: int,
                breaks=ZONE_BREAKS) -> RadialGrid:
    """Panels in t = ln q² in zones split at ``breaks`` (GeV²), each zone with panels no
    wider than its entry of ``widths`` (in units of t; one width per zone).

    The second zone holds the dynamical mass generation and the onset of the
    perturbative running (the functions change fastest there); the infrared zone is
    suppressed by the measure q⁴, and the ultraviolet zones are slow power laws.
    """
    widths = tuple(widths)
    if len(widths) != len(breaks) + 1:
        raise ValueError(f"need {len(breaks) + 1} panel widths, got {len(widths)}")
    a, b = math.log(q2_min), math.log(q2_max)
    cuts = [a]
    zone_w = []
    for w, hi in zip(widths, [math.log(x) for x in breaks] + [b]):
        hi = min(hi, b)
        if hi > cuts[-1]:
            cuts.append(hi)
            zone_w.append(w)
    edges = [cuts[0]]
    for lo, hi, w in zip(cuts[:-1], cuts[1:], zone_w):
        n = max(1, math.ceil((hi - lo) / w - 1e-9))
        edges.extend(np.linspace(lo, hi, n + 1)[1:].tolist())
    return RadialGrid(tuple(edges), order)


# ----------------------------------------------------------------------------------------
# Target-adapted product-integration rules

@dataclass(frozen=True)
class FineRule:
    """For each target: quadrature points t_f (T, F), weights w_f (T, F) in t, and the
    interpolation (T, F, order) from the radial nodes."""

    t: np.ndarray
    w: np.ndarray
    idx: np.ndarray
    lag: np.ndarray

    @property
    def q2(self) -> np.ndarray:
        return np.exp(self.t)


def fine_rule(grid: RadialGrid, t_targets: np.ndarray, h_min: np.ndarray,
              levels: int = 18, order: int = 6, h_max: float = 2.0) -> FineRule:
    """Product-integration rule on the grid's domain, graded towards each target.

    t_targets: (T,) centres in t; h_min: (T,) the smallest sub-panel width next to the
    centre (in t).  Breakpoints t_c ± h_max·2^{−k} (k = 0..levels) are kept where wider
    than h_min, merged with the panel edges, and every sub-panel gets ``order``
    Gauss–Legendre nodes.  Shapes are fixed: dropped breakpoints collapse onto the centre
    and give zero-width sub-panels.
    """
    tc = np.asarray(t_targets, dtype=float).ravel()
    hm = np.broadcast_to(np.asarray(h_min, dtype=float), tc.shape)
    e = np.asarray(grid.edges)
    lo, hi = e[0], e[-1]
    k = np.arange(levels + 1)
    d = h_max * 2.0 ** (-k)  # (K,)
    keep = d[None, :] >= hm[:, None]
    dd = np.where(keep, d[None, :], 0.0)
    inner = np.concatenate([tc[:, None] - dd, tc[:, None], tc[:, None] + dd], axis=1)
    inner = np.clip(inner, lo, hi)
    bp = np.concatenate([np.broadcast_to(e, (tc.size, e.size)), inner], axis=1)
    bp = np.sort(bp, axis=1)
    a, b = bp[:, :-1], bp[:, 1:]
    x, w = gauss_legendre(order)
    h = b - a
    t = a[..., None] + h[..., None] * x
    wt = h[..., None] * w
    t = t.reshape(tc.size, -1)
    wt = wt.reshape(tc.size, -1)
    idx, lag = grid.interpolation(t)
    return FineRule(t=t, w=wt, idx=idx, lag=lag)


# ----------------------------------------------------------------------------------------
# Angular rule for the relative angle

@lru_cache(maxsize=16)
def angular_tables(n_half: int, depth: int = 40) -> dict[str, np.ndarray]:
    """The angular rule for θ* = 2^{−j}, j = 0..depth, as tables over (j, node).

    Keys: ``half`` = sin²(θ/2), ``x`` = cos θ, ``s2w`` = sin²θ × weight.  A pair whose
    feature scale is θ* uses level j = ⌈log₂(1/θ*)⌉ (``angular_level``), so the
    trigonometry is computed once per process, never per pair.
    """
    ts = 2.0 ** (-np.arange(depth + 1, dtype=float))
    theta, w = angular_rule(ts, n_half)
    return {"half": np.sin(theta / 2.0) ** 2, "x": np.cos(theta), "s2w": np.sin(theta) ** 2 * w}


def angular_level(theta_star: np.ndarray, depth: int = 40) -> np.ndarray:
    ts = np.clip(np.asarray(theta_star, dtype=float), 2.0 ** (-depth), 1.0)
    return np.ceil(-np.log2(ts) - 1e-12).astype(np.int32).clip(0, depth)


def angular_rule(theta_star: np.ndarray, n_half: int = 40) -> tuple[np.ndarray, np.ndarray]:
    """Nodes θ (..., 2 n_half) and weights for ∫_0^π dθ f(θ) (the sin²θ is the caller's).

    Each half [0, π/2], [π/2, π] uses θ = (π/2) sinh(αu)/sinh(α) from its end point, with
    α chosen so that the first node spacing is about θ*; the rule is symmetric under
    θ → π − θ.
    """
    ts = np.asarray(theta_star, dtype=float)
    u, wu = gauss_legendre(n_half)
    # first spacing ≈ (π/2) α u₁ / sinh α  ⇒ solve for α with θ* on a log scale.
    ratio = np.clip(np.pi / 2.0 / np.maximum(ts, 1e-12), 1.0, 1e12)
    alpha = np.arcsinh(ratio)  # sinh α ≈ ratio: node spacing near 0 ≈ (π/2)/sinh α · α·du
    alpha = np.maximum(alpha, 1e-3)[..., None]
    th = (np.pi / 2.0) * np.sinh(alpha * u) / np.sinh(alpha)
    dth = (np.pi / 2.0) * alpha * np.cosh(alpha * u) / np.sinh(alpha) * wu
    theta = np.concatenate([th, np.pi - th[..., ::-1]], axis=-1)
    weight = np.concatenate([dth, dth[..., ::-1]], axis=-1)
    return theta, weight


# ----------------------------------------------------------------------------------------
# Chebyshev polynomials of the second kind (the 4D hyperspherical harmonics' zonal part)

def chebyshev_u(n_max: int, z: np.ndarray) -> np.ndarray:
    """U_0..U_{n_max}(z), stacked on the last axis."""
    z = np.asarray(z)
    out = np.empty(z.shape + (n_max + 1,), dtype=np.result_type(z, float))
    out[..., 0] = 1.0
    if n_max >= 1:
        out[..., 1] = 2.0 * z
    for n in range(2, n_max + 1):
        out[..., n] = 2.0 * z * out[..., n - 1] - out[..., n - 2]
    return out


def chebyshev_u_nodes(n: int) -> tuple[np.ndarray, np.ndarray]:
    """Gauss–Chebyshev (second kind) rule: ∫_{-1}^{1} √(1−z²) f(z) dz ≈ Σ w_k f(z_k),
    exact for polynomials of degree ≤ 2n − 1.  Nodes in decreasing order."""
    k = np.arange(1, n + 1)
    ang = k * np.pi / (n + 1)
    return np.cos(ang), np.pi / (n + 1) * np.sin(ang) ** 2


def times_z_power(n_max: int, b: int) -> np.ndarray:
    """Matrix A with z^b U_m(z) = Σ_l A[m, l] U_l(z) for m ≤ n_max (l ≤ n_max + b)."""
    size = n_max + b + 1
    a = np.eye(size)[: n_max + 1]
    for _ in range(b):
        new = np.zeros_like(a)
        # z U_l = (U_{l+1} + U_{l-1})/2
        new[:, 1:] += 0.5 * a[:, :-1]
        new[:, :-1] += 0.5 * a[:, 1:]
        a = new
    return a

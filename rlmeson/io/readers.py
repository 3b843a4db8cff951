"""Readers for the exchange files (``exchange``): netCDF-4 or plain HDF5, opened with
h5py alone (both formats keep the same variable names at the root).

``open_propagator(path)`` evaluates A, B, σ_V, σ_S and M

* at real p² ≥ 0 on the exported range by Lagrange interpolation in ln p² on the
  solution's own panels (accuracy: README, "Files for other codes");
* at complex p² inside the exported parabola through the rational approximant where
  |p²| ≤ its window, and by interpolation of the region nodes (Chebyshev-U in z,
  Lagrange in ln q²) beyond it;

and refuses, with a ``ValueError`` naming the point and the region, anything outside.
``open_amplitude(path)`` evaluates the normalised Bethe–Salpeter amplitude's covariant
coefficients at any (q², z) on the exported range.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np

from ..numerics import quadrature as qd
from ..numerics.rational import Rational, evaluate


def _open(path):
    import h5py

    p = Path(path)
    if not p.is_file():
        raise ValueError(f"{path}: no such file")
    try:
        return h5py.File(p, "r")
    except OSError as e:
        raise ValueError(f"{path}: not an HDF5/netCDF-4 file ({e})") from None


def _attr(h, name, default=None):
    v = h.attrs.get(name, default)
    if isinstance(v, bytes):
        v = v.decode()
    if isinstance(v, np.ndarray) and v.size == 1 and v.dtype.kind in "fiu":
        v = v.item()
    return v


def _read(path, quantity: str, what: str):
    """(open h5py file, its global attributes) of an exchange file of this ``quantity``."""
    h = _open(path)
    got = _attr(h, "quantity")
    if got != quantity:
        h.close()
        raise ValueError(f"{path}: not {what} file (quantity = {got!r})")
    return h, {k: _attr(h, k) for k in h.attrs}


def _panels(attrs, edges: str, order: str) -> qd.RadialGrid:
    """The radial panel grid recorded in a file's attributes."""
    return qd.RadialGrid(tuple(np.asarray(attrs[edges]).tolist()), int(attrs[order]))


def _complex(h, name):
    return np.asarray(h[f"{name}_re"][()]) + 1j * np.asarray(h[f"{name}_im"][()])


def _lagrange(radial: qd.RadialGrid, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Node indices and Lagrange weights (P, order) at points t of a panel grid: the same
    interpolant as ``RadialGrid.interpolation``, with the barycentric weights of the
    reference Gauss–Legendre nodes computed once (they differ between panels only by a
    factor that cancels)."""
    e = np.asarray(radial.edges)
    n = radial.order
    k = np.clip(np.searchsorted(e, t, side="right") - 1, 0, e.size - 2)
    u = (t - e[k]) / (e[k + 1] - e[k])
    x, _ = qd.gauss_legendre(n)
    bw = 1.0 / np.prod(x[:, None] - x[None, :] + np.eye(n), axis=1)
    d = u[:, None] - x[None, :]
    hit = d == 0.0
    with np.errstate(divide="ignore", invalid="ignore"):
        w = bw / d
        lag = w / np.sum(w, axis=1, keepdims=True)
    rows = hit.any(axis=1)
    lag[rows] = hit[rows]
    return k[:, None] * n + np.arange(n), lag


def _interpolate(radial: qd.RadialGrid, values: np.ndarray, t: np.ndarray, chunk: int = 65536):
    """values (f, nodes) at points t: (f, P), in chunks of bounded memory."""
    out = np.empty((values.shape[0], t.size), values.dtype)
    for i in range(0, t.size, chunk):
        idx, lag = _lagrange(radial, t[i:i + chunk])
        out[:, i:i + chunk] = np.einsum("fpk,pk->fp", values[:, idx], lag)
    return out


class Propagator:
    """A dressed quark read from an exchange file (see the module doc)."""

    def __init__(self, path):
        h, self.attrs = _read(path, "quark_propagator", "a propagator")
        with h:
            self.path = str(path)
            self.p2 = np.asarray(h["p2"][()])
            self._real = {k: np.asarray(h[k][()]) for k in ("A", "B")}
            self._radial = _panels(self.attrs, "real_axis_ln_p2_panel_edges", "real_axis_panel_order")
            self.has_region = "region_A_re" in h
            if self.has_region:
                self.region_mass_gev = float(self.attrs["region_mass_gev"])
                self.eta = float(self.attrs["region_eta"])
                self.window_gev2 = float(self.attrs["approximant_window_gev2"])
                self._rz = np.asarray(h["region_z"][()])
                self._rq2 = np.asarray(h["region_q2"][()])
                self._rA, self._rB = _complex(h, "region_A"), _complex(h, "region_B")
                self._rradial = _panels(self.attrs, "region_ln_q2_panel_edges", "region_panel_order")
                self.approximants = {f: Rational(_complex(h, f"aaa_{f}_support"), _complex(h, f"aaa_{f}_values"),
                                                 _complex(h, f"aaa_{f}_weights")) for f in ("A", "B")}
                self.singularities = _complex(h, "singularity_p2")

    # -- where values exist ---------------------------------------------------------------
    def _region_coordinates(self, s):
        m = self.eta * self.region_mass_gev
        q2 = s.real + m * m
        with np.errstate(divide="ignore", invalid="ignore"):
            z = np.where(q2 > 0, s.imag / (2.0 * m * np.sqrt(np.maximum(q2, 1e-300))), np.inf)
        return q2, z

    def _on_axis(self, s):
        """Points served by the real-axis solution: real p² from the first node on."""
        return (s.imag == 0) & (s.real >= self.p2[0])

    def _check(self, s):
        real = self._on_axis(s)
        bad = real & (s.real > self.p2[-1])
        if self.has_region:
            q2, z = self._region_coordinates(s)
            inside = (q2 >= self._rq2[0]) & (q2 <= self._rq2[-1]) & (np.abs(z) <= 1.0)
            bad |= ~real & ~inside
        else:
            bad |= ~real
        if bad.any():
            p = s.ravel()[np.argmax(bad.ravel())]
            where = f"real p^2 in [{self.p2[0]:.3g}, {self.p2[-1]:.3g}] GeV^2"
            if self.has_region:
                where += (f", or complex p^2 inside the parabola with apex {-(self.eta * self.region_mass_gev) ** 2:.4g}"
                          f" GeV^2 and q^2 = Re p^2 + {(self.eta * self.region_mass_gev) ** 2:.4g} in "
                          f"[{self._rq2[0]:.3g}, {self._rq2[-1]:.3g}] GeV^2")
            else:
                where += " (this file has no complex region: export it with a region)"
            raise ValueError(f"p^2 = {p.real:.6g}{p.imag:+.6g}i GeV^2 lies outside the exported region: {where}")

    # -- evaluation -----------------------------------------------------------------------
    def dressing(self, p2) -> tuple[np.ndarray, np.ndarray]:
        """A(p²), B(p²) (complex arrays) at real or complex p²."""
        s = np.atleast_1d(np.asarray(p2, dtype=complex))
        self._check(s)
        a = np.empty(s.shape, complex)
        b = np.empty(s.shape, complex)
        real = self._on_axis(s)
        if real.any():
            a[real], b[real] = _interpolate(self._radial, np.stack([self._real["A"], self._real["B"]]),
                                            np.log(s.real[real]))
        cplx = ~real
        if cplx.any():
            near = cplx & (np.abs(s) <= self.window_gev2)
            if near.any():
                a[near], b[near] = evaluate([self.approximants["A"], self.approximants["B"]], s[near])
            far = cplx & ~near
            if far.any():
                a[far], b[far] = self._interpolate_region(s[far])
        shape = np.shape(p2)
        return a.reshape(shape), b.reshape(shape)

    def _interpolate_region(self, s):
        """A, B at complex s by the region nodes: Chebyshev-U in z, Lagrange in ln q²
        (both functions at once, in chunks of bounded memory)."""
        q2, z = self._region_coordinates(s)
        if not hasattr(self, "_region_moments"):
            n = self._rz.size
            _, w = qd.chebyshev_u_nodes(n)
            u_nodes = qd.chebyshev_u(n - 1, self._rz)
            mom = (2.0 / np.pi) * np.einsum("k,km,fkq->qfm", w, u_nodes, np.stack([self._rA, self._rB]))
            self._region_moments = mom                       # (q, 2, m)
        mom = self._region_moments
        n = mom.shape[-1]
        out = np.empty((2, s.size), complex)
        for i in range(0, s.size, 16384):
            sl = slice(i, i + 16384)
            idx, lag = _lagrange(self._rradial, np.log(q2[sl]))              # (P, order)
            radial = np.einsum("pk,pkfm->pfm", lag, mom[idx])                # (P, 2, m)
            uz = qd.chebyshev_u(n - 1, z[sl])                               # (P, m)
            out[:, sl] = np.einsum("pm,pfm->fp", uz, radial)
        return out[0], out[1]

    def A(self, p2):
        return self.dressing(p2)[0]

    def B(self, p2):
        return self.dressing(p2)[1]

    def M(self, p2):
        a, b = self.dressing(p2)
        return b / a

    def sigma_v(self, p2):
        a, b = self.dressing(p2)
        return a / (np.asarray(p2) * a * a + b * b)

    def sigma_s(self, p2):
        a, b = self.dressing(p2)
        return b / (np.asarray(p2) * a * a + b * b)


class Amplitude:
    """A normalised Bethe–Salpeter amplitude read from an exchange file."""

    def __init__(self, path):
        h, self.attrs = _read(path, "bethe_salpeter_amplitude", "an amplitude")
        with h:
            self.path = str(path)
            self.q2 = np.asarray(h["q2"][()])
            self.z = np.asarray(h["z"][()])
            self.moments = _complex(h, "moments")          # (covariant, m, q)
            labels = h["covariant_label"][()]
            self.covariants = [x.decode() if isinstance(x, bytes) else str(x) for x in labels]
            self._radial = _panels(self.attrs, "ln_q2_panel_edges", "panel_order")
        self.mass_gev = float(self.attrs["mass_gev"])
        self.summary = json.loads(self.attrs.get("meson_summary", "{}"))

    def __call__(self, q2, z) -> np.ndarray:
        """Coefficients F_i(q², z) of the covariants, shape (n_covariants, *broadcast shape)."""
        q2, z = np.broadcast_arrays(np.asarray(q2, float), np.asarray(z, float))
        if np.any(q2 < self.q2[0]) or np.any(q2 > self.q2[-1]) or np.any(np.abs(z) > 1):
            raise ValueError(f"(q^2, z) outside the exported range: q^2 in [{self.q2[0]:.3g}, {self.q2[-1]:.3g}] "
                             "GeV^2, |z| <= 1")
        n = self.z.size
        rad = self._radial.interpolate(self.moments, np.log(q2.ravel()))   # (i, m, P)
        uz = qd.chebyshev_u(n - 1, z.ravel())                               # (P, m)
        return np.einsum("pm,imp->ip", uz, rad).reshape((-1,) + q2.shape)


def open_propagator(path) -> Propagator:
    return Propagator(path)


def open_amplitude(path) -> Amplitude:
    return Amplitude(path)


class Run:
    """A run directory written by ``rlmeson run``: its summary, resolved config and files."""

    def __init__(self, path):
        self.path = Path(path)
        try:
            self.summary = json.loads((self.path / "summary.json").read_text(encoding="utf-8"))
        except (OSError, ValueError) as e:
            raise ValueError(f"{path}: not a run directory of rlmeson (summary.json: {type(e).__name__})") from None
        if not isinstance(self.summary, dict) or self.summary.get("package") != "rlmeson":
            raise ValueError(f"{path}: not a run directory of rlmeson")
        self.quarks = dict(self.summary.get("quarks") or {})
        self.mesons = {m["name"]: m for m in self.summary.get("mesons") or []}

    @property
    def config(self):
        """The resolved config of the run (from results.h5), as a ``config.Config``."""
        import h5py

        from . import config

        with h5py.File(self.path / "results.h5", "r") as h:
            return config.from_dict(json.loads(h.attrs["config"]), source=str(self.path / "results.h5"))

    def propagator(self, flavour: str) -> Propagator:
        """The run's real-axis propagator file of ``flavour`` (``rlmeson export`` adds the
        complex region)."""
        return Propagator(self.path / f"propagator_{flavour}.nc")

    def amplitude(self, meson: str) -> Amplitude:
        return Amplitude(self.path / f"amplitude_{meson}.nc")

    def __repr__(self) -> str:
        return (f"Run({str(self.path)!r}: {self.summary.get('config')}, quarks {list(self.quarks)}, "
                f"mesons {list(self.mesons)})")


def open_run(path) -> Run:
    return Run(path)

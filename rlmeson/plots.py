"""Figures from results (matplotlib, non-interactive backend; files written atomically)."""

from __future__ import annotations

import numpy as np

from .store import atomic_path


def _plt():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def _save(fig, path):
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format="png", dpi=120, bbox_inches="tight")
    _plt().close(fig)


def mass_function(quarks: dict, path) -> None:
    """M(p²) and Z(p²) = 1/A on a log momentum axis, one curve per flavour."""
    plt = _plt()
    fig, (a1, a2) = plt.subplots(1, 2, figsize=(10, 4))
    for name, q in quarks.items():
        s = q.solution
        lab = f"{name}: m(ζ) = {1e3 * s.mass_gev:.3g} MeV"
        a1.loglog(s.q2, np.abs(s.M), label=lab)
        a2.semilogx(s.q2, s.Z, label=lab)
    a1.set_xlabel("p² [GeV²]")
    a1.set_ylabel("M(p²) [GeV]")
    a2.set_xlabel("p² [GeV²]")
    a2.set_ylabel("Z(p²) = 1/A(p²)")
    reg = next(iter(quarks.values())).solution.kernel.label
    fig.suptitle(f"dressed quark, {reg}", fontsize=9)
    a1.legend(fontsize=8)
    _save(fig, path)


def eigenvalue_curve(meson, path) -> None:
    """λ(P²) of the leading eigenvalue with the crossing λ = 1 marked."""
    plt = _plt()
    ms, ls = meson.core.curve.sorted()
    fig, ax = plt.subplots(figsize=(5, 4))
    ax.plot(-ms**2, ls, "o-", ms=3)
    ax.axhline(1.0, color="k", lw=0.6)
    m = meson.core.mass_gev
    ax.axvline(-m * m, color="r", lw=0.6, label=f"M = {m:.5f} GeV")
    ax.set_xlabel("P² [GeV²]")
    ax.set_ylabel("λ(P²)")
    ax.set_title(f"{meson.name} ({meson.channel})", fontsize=9)
    ax.legend(fontsize=8)
    _save(fig, path)


def leading_amplitudes(meson, labels, path) -> None:
    """The leading Chebyshev moment (m = 0 for components even in z, m = 1 for odd ones)
    of each covariant's coefficient against q²."""
    from .export import moments

    plt = _plt()
    core = meson.core
    mom = moments(core.normalised.amplitude * meson.factor, core.z)  # (i, m, q)
    fig, ax = plt.subplots(figsize=(6, 4))
    for i, lab in enumerate(labels):
        m = int(np.argmax(np.abs(mom[i, :2]).max(axis=-1)))
        ax.loglog(core.q2, np.abs(mom[i, m]) + 1e-300, label=f"{lab}  (m = {m})")
    ax.set_xlabel("q² [GeV²]")
    ax.set_ylabel("|leading Chebyshev moment|")
    ax.set_title(f"{meson.name}: normalised amplitude ({meson.convention} MeV convention)", fontsize=9)
    ax.legend(fontsize=7)
    _save(fig, path)

"""Figures from results (matplotlib, non-interactive backend; files written atomically).

Meson figures are drawn from a run's ``results.h5`` (``read_run``), so that ``rlmeson
run`` and ``rlmeson plot DIR [DIR ...]`` (which redraws without solving and overlays
several runs) go through the same code.  The format follows the file suffix (``.png``,
``.pdf``, ``.svg``).  Tick locators are set explicitly on every axis (at most
``MAX_TICKS`` labelled ticks, no labelled minor ticks) so that labels do not collide.

Figures:
* ``mass_function``: M(p²) and Z(p²), ζ² marked, model and parameters in the title;
  values above the regulator scale Λ_R² (translation-invariant regularisation, where the
  dressing flattens as an artefact of the regulator) are left out by default.
* ``eigenvalue_spectrum``: the leading three eigenvalues λ_i(P²) from spacelike P² through 0 to past the
  crossing λ = 1, which is marked at P² = −M².
* ``amplitudes``: the leading amplitudes against q² up to ``AMPLITUDE_Q2_MAX`` at
  z = 0, 0.5, 0.9, with sign — E, F, G, H for pseudoscalars, the covariants' coefficients
  otherwise.
"""

from __future__ import annotations

import json
import textwrap
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .store import atomic_path

FORMATS = ("png", "pdf", "svg")
MAX_TICKS = 7
AMPLITUDE_Q2_MAX = 20.0      # GeV²
AMPLITUDE_Z = (0.0, 0.5, 0.9)
EFGH_UNITS = {"E": "1", "F": "GeV⁻¹", "G": "GeV⁻³", "H": "GeV⁻²"}


class PlotError(ValueError):
    """A figure cannot be drawn as asked (unknown format, missing results)."""


def figure_format(path) -> str:
    """The format a figure file is written in: its suffix (png, pdf or svg)."""
    fmt = Path(path).suffix.lower().lstrip(".")
    if fmt not in FORMATS:
        raise PlotError(f"figure file {str(path)!r}: the suffix must be one of "
                        + ", ".join("." + f for f in FORMATS))
    return fmt


def _plt():
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    return plt


def _save(fig, path) -> Path:
    fmt = figure_format(path)
    with atomic_path(path) as tmp:
        fig.savefig(tmp, format=fmt, dpi=120, bbox_inches="tight")
    _plt().close(fig)
    return Path(path)


def tidy(ax) -> None:
    """Explicit tick locators: ≤ MAX_TICKS labelled major ticks, unlabelled minor ticks."""
    from matplotlib import ticker

    for axis, scale in ((ax.xaxis, ax.get_xscale()), (ax.yaxis, ax.get_yscale())):
        if scale == "log":
            axis.set_major_locator(ticker.LogLocator(base=10.0, numticks=MAX_TICKS - 1))
            axis.set_minor_locator(ticker.LogLocator(base=10.0, subs=(), numticks=MAX_TICKS - 1))
            axis.set_major_formatter(ticker.LogFormatterSciNotation(labelOnlyBase=True))
        else:
            axis.set_major_locator(ticker.MaxNLocator(nbins=MAX_TICKS - 2, steps=[1, 2, 2.5, 5, 10]))
            axis.set_minor_locator(ticker.NullLocator())
        axis.set_minor_formatter(ticker.NullFormatter())


def _units(name: str) -> str:
    for suffix, unit in (("_gev2", "\u00a0GeV²"), ("_gev", "\u00a0GeV")):
        if name.endswith(suffix):
            return name[: -len(suffix)] + "\u00a0=\u00a0{:g}" + unit
    return name + "\u00a0=\u00a0{:g}"


def model_text(model: str, params: dict) -> str:
    """'maris-tandy: omega = 0.4 GeV, strength = 0.933 GeV², …' (parameters in units)."""
    body = ", ".join(_units(k).format(float(v)) for k, v in sorted(params.items()))
    return f"{model}: {body}" if body else model


# ----------------------------------------------------------------------------------------
# Data the figures need (from a result object or from results.h5)

@dataclass
class QuarkData:
    label: str
    q2: np.ndarray
    M: np.ndarray
    Z: np.ndarray
    above_regulator: np.ndarray
    zeta_gev: float
    mass_gev: float
    regulator_gev2: float | None   # Λ_R² (translation-invariant), None for a hard cutoff


@dataclass
class MesonData:
    name: str
    channel: str
    mass_gev: float
    chiral: bool
    convention: str
    q2: np.ndarray
    z: np.ndarray
    labels: list[str]
    moments: np.ndarray            # (component, m, q), complex
    units: list[str]
    component_note: str
    curve_mass: np.ndarray
    curve_eigenvalue: np.ndarray
    spectrum_mass: np.ndarray | None = None
    spectrum: np.ndarray | None = None     # (point, k), complex
    spacelike_p2: np.ndarray | None = None  # P² > 0 (GeV²)
    spacelike: np.ndarray | None = None     # (point, k), complex


@dataclass
class RunData:
    label: str
    model: str
    regularisation: str
    quarks: dict[str, QuarkData] = field(default_factory=dict)
    mesons: dict[str, MesonData] = field(default_factory=dict)


def quark_data(q, label: str | None = None) -> QuarkData:
    """From a ``pipeline.QuarkResult``."""
    from .export import above_regulator_scale

    s = q.solution
    k = s.kernel
    return QuarkData(label=label or q.flavour, q2=s.q2, M=s.M, Z=s.Z,
                     above_regulator=above_regulator_scale(k, s.q2), zeta_gev=s.zeta_gev,
                     mass_gev=s.mass_gev, regulator_gev2=None if k.hard else k.regulator_gev2)


def _moments(values: np.ndarray, z: np.ndarray) -> np.ndarray:
    from .export import moments

    return moments(values, z)


def read_run(where) -> RunData:
    """The figures' data from a run directory (or its ``results.h5``) written by ``rlmeson run``."""
    import h5py

    path = Path(where)
    if path.is_dir():
        path = path / "results.h5"
    if not path.is_file():
        raise PlotError(f"{str(where)!r}: no results.h5 there (a directory written by 'rlmeson run')")
    with h5py.File(path, "r") as h:
        summ = json.loads(h.attrs["summary"])
        inputs = json.loads(h.attrs["inputs"]) if "inputs" in h.attrs else {}
        inter = dict(inputs.get("interaction", {}))
        model = model_text(inter.pop("model", "?"), inter)
        reg_scale = summ.get("regularisation_scale_gev2")
        ti = summ.get("regularisation") == "translation-invariant"
        run = RunData(label=f"{summ.get('config', path.parent.name)} [{str(summ.get('config_hash', ''))[:8]}]",
                      model=model, regularisation=summ.get("regularisation_description", ""))
        for name, g in h.get("quarks", {}).items():
            q2 = g["q2"][()]
            above = g["above_regulator_scale"][()] if "above_regulator_scale" in g else np.zeros(q2.shape, bool)
            run.quarks[name] = QuarkData(label=name, q2=q2, M=g["M"][()], Z=g["Z"][()], above_regulator=above,
                                         zeta_gev=float(g.attrs["renormalisation_point_gev"]),
                                         mass_gev=float(g.attrs["current_mass_gev"]),
                                         regulator_gev2=float(reg_scale) if ti else None)
        for name, g in h.get("mesons", {}).items():
            ms = json.loads(g.attrs["summary"])
            z = g["z"][()]
            if "EFGH_re" in g:
                vals = g["EFGH_re"][()] + 1j * g["EFGH_im"][()]
                labels = list("EFGH")
                units = [EFGH_UNITS[c] for c in labels]
                note = "Γ = γ₅[iE + γ·P F + γ·q q·P G + σ_μν q_μ P_ν H]"
                if "EFGH_note" in g.attrs:
                    note += f" (at M = {float(g.attrs['EFGH_mass_gev']):g} GeV, off shell)"
            else:
                vals = g["amplitude_re"][()] + 1j * g["amplitude_im"][()]
                labels = json.loads(g.attrs["covariants"])
                units = ["1"] * len(labels)
                note = "coefficients of the covariants"
            spec_m = g["spectrum_mass"][()] if "spectrum_mass" in g else None
            spec = g["spectrum_re"][()] + 1j * g["spectrum_im"][()] if "spectrum_re" in g else None
            run.mesons[name] = MesonData(
                name=name, channel=ms["channel"], mass_gev=float(ms["mass_gev"]),
                chiral="goldstone_residual" in ms, convention=str(g.attrs.get("convention", "")),
                q2=g["q2"][()], z=z, labels=labels, moments=_moments(vals, z), units=units,
                component_note=note, curve_mass=g["curve_mass"][()], curve_eigenvalue=g["curve_eigenvalue"][()],
                spectrum_mass=spec_m, spectrum=spec,
                spacelike_p2=g["spacelike_p2"][()] if "spacelike_p2" in g else None,
                spacelike=g["spacelike_re"][()] + 1j * g["spacelike_im"][()] if "spacelike_re" in g else None)
    return run


# ----------------------------------------------------------------------------------------
# Figures

def mass_function_figure(quarks: list[QuarkData], title: str, cut_above_regulator: bool = True):
    """M(p²) and Z(p²) on a log momentum axis, one curve per quark, ζ² marked."""
    plt = _plt()
    fig, (a1, a2) = plt.subplots(1, 2, figsize=(10, 4.2))
    cut = None
    signed = any(np.any(q.M < 0) for q in quarks)
    for q in quarks:
        keep = ~q.above_regulator if cut_above_regulator else np.ones(q.q2.shape, bool)
        if cut_above_regulator and q.regulator_gev2 is not None:
            cut = q.regulator_gev2 if cut is None else min(cut, q.regulator_gev2)
        lab = f"{q.label}: m(ζ) = {1e3 * q.mass_gev:.4g} MeV"
        (a1.semilogx if signed else a1.loglog)(q.q2[keep], q.M[keep], label=lab)
        a2.semilogx(q.q2[keep], q.Z[keep], label=lab)
    zetas = sorted({q.zeta_gev for q in quarks})
    for ax in (a1, a2):
        for zeta in zetas:
            ax.axvline(zeta * zeta, color="0.4", lw=0.8, ls="--")
        ax.set_xlabel("p² [GeV²]")
        tidy(ax)
    for zeta in zetas:
        a1.annotate(f"ζ² = ({zeta:g} GeV)²", (zeta * zeta, 0.97), xycoords=("data", "axes fraction"),
                    rotation=90, ha="right", va="top", fontsize=7, color="0.3")
    a1.set_ylabel("M(p²) [GeV]")
    a2.set_ylabel("Z(p²) = 1/A(p²)")
    if cut is not None:
        a2.text(0.03, 0.97, f"cut at Λ_R² = {cut:g} GeV²\n(regulator scale)", transform=a2.transAxes,
                ha="left", va="top", fontsize=7, color="0.3")
    a1.legend(fontsize=7)
    fig.suptitle("\n".join(textwrap.wrap(title.replace(" GeV", "\u00a0GeV"), 110)), fontsize=8)
    return fig


def _marks(n_runs):
    colours = [f"C{i}" for i in range(10)]
    styles = ["-", "--", ":", "-."]

    def style(series: int, run: int) -> dict:
        if n_runs == 1:
            return {"color": colours[series % 10], "ls": "-"}
        return {"color": colours[run % 10], "ls": styles[series % 4]}

    return style


def eigenvalue_spectrum_figure(mesons: list[tuple[str, MesonData]]):
    """λ₁, λ₂, λ₃ against P² from 0 to past the crossing; the crossing marked."""
    plt = _plt()
    fig, ax = plt.subplots(figsize=(6, 4.2))
    style = _marks(len(mesons))
    for r, (label, m) in enumerate(mesons):
        pre = f"{label}: " if len(mesons) > 1 else ""
        if m.spectrum is not None and len(m.spectrum_mass):
            p2 = -m.spectrum_mass**2
            lam = m.spectrum.real
            if m.spacelike is not None and len(m.spacelike_p2):    # P² > 0 continues the curves
                order = np.argsort(np.concatenate([p2, m.spacelike_p2]))
                p2 = np.concatenate([p2, m.spacelike_p2])[order]
                lam = np.concatenate([lam, m.spacelike.real])[order]
            for i in range(lam.shape[1]):
                ax.plot(p2, lam[:, i], marker="o", ms=3, **style(i, r),
                        label=f"{pre}Re λ{i + 1}")
        ax.plot(-m.curve_mass**2, m.curve_eigenvalue, ls="none", marker=".", ms=3, color="0.5",
                label=f"{pre}root search (λ₁)" if r == 0 else None)
        p2 = -m.mass_gev**2
        ax.axvline(p2, lw=0.8, **(style(0, r) if len(mesons) > 1 else {"color": "r"}))
        ax.plot([p2], [1.0], marker="x", ms=8, color="r")
        text = ("Goldstone: λ₁(0) = 1" if m.chiral else f"λ₁ = 1 at P² = −M², M = {m.mass_gev:.5g} GeV")
        left = r == 0 and len(mesons) == 1 and p2 > np.mean(ax.get_xlim())
        ax.annotate(pre + text, (p2, 1.0), xytext=(-6 if left else 6, -14 - 11 * r), textcoords="offset points",
                    fontsize=7, ha="right" if left else "left")
    ax.axhline(1.0, color="k", lw=0.6)
    ax.set_xlabel("P² [GeV²]  (timelike: P² < 0)")
    ax.set_ylabel("eigenvalue λ(P²)")
    m0 = mesons[0][1]
    ax.set_title(f"{m0.name} ({m0.channel}): Bethe–Salpeter eigenvalues", fontsize=9)
    ax.legend(fontsize=7, loc="lower left")
    tidy(ax)
    return fig


def _at_z(m: MesonData, zs) -> np.ndarray:
    """Components at the given z from the Chebyshev-U moments: (component, len(zs), q)."""
    from ..numerics import quadrature as qd

    u = qd.chebyshev_u(m.moments.shape[1] - 1, np.asarray(zs, dtype=float))  # (z, m)
    return np.einsum("km,imq->ikq", u, m.moments)


def amplitudes_figure(mesons: list[tuple[str, MesonData]], n_panels: int = 4):
    """The leading amplitudes at z = 0, 0.5, 0.9 against q² (log x) up to 20 GeV², with sign."""
    plt = _plt()
    m0 = mesons[0][1]
    keep0 = m0.q2 <= AMPLITUDE_Q2_MAX
    vals0 = _at_z(m0, AMPLITUDE_Z)
    if m0.labels == list("EFGH"):
        order = list(range(4))
    else:  # the covariants with the largest coefficients
        size = np.abs(vals0[:, :, keep0]).max(axis=(1, 2))
        order = sorted(np.argsort(-size)[:n_panels].tolist())
    fig, axes = plt.subplots(2, 2, figsize=(9, 6.5), squeeze=False)
    style = _marks(len(mesons))
    for ax, i in zip(axes.flat, order):
        # the part that carries the component (a coefficient can be imaginary, e.g. iE of γ₅)
        imag = np.abs(vals0[i].imag).max() > np.abs(vals0[i].real).max()
        for r, (label, m) in enumerate(mesons):
            keep = m.q2 <= AMPLITUDE_Q2_MAX
            vals = _at_z(m, AMPLITUDE_Z)
            part = vals[i].imag if imag else vals[i].real
            for k, zv in enumerate(AMPLITUDE_Z):
                lab = (f"{label}: " if len(mesons) > 1 else "") + f"z = {zv:g}"
                ax.semilogx(m.q2[keep], part[k, keep], label=lab, **style(k, r))
        ax.axhline(0.0, color="k", lw=0.5)
        unit = m0.units[i]
        ax.set_ylabel(("Im " if imag else "") + f"{m0.labels[i]}" + ("" if unit == "1" else f" [{unit}]"))
        ax.set_xlabel("q² [GeV²]")
        tidy(ax)
    for ax in list(axes.flat)[len(order):]:
        ax.set_visible(False)
    axes.flat[0].legend(fontsize=7)
    what = "M = 0, chiral limit" if m0.chiral else f"M = {m0.mass_gev:.5g} GeV"
    fig.suptitle(f"{m0.name} ({m0.channel}, {what}): normalised amplitude; {m0.component_note}\n"
                 f"convention {m0.convention}", fontsize=8)
    fig.tight_layout()
    return fig


# ----------------------------------------------------------------------------------------
# Files

def mass_function(quarks: list[QuarkData], title: str, path, cut_above_regulator: bool = True) -> Path:
    return _save(mass_function_figure(quarks, title, cut_above_regulator), path)


def draw_runs(runs: list[RunData], out_dir, fmt: str = "png", cut_above_regulator: bool = True) -> list[Path]:
    """The figures of one run, or of several overlaid (M(p²) of all; for each meson name,
    its spectrum and amplitudes across the runs that have it).  Returns the files."""
    out = Path(out_dir)
    if fmt not in FORMATS:
        raise PlotError(f"figure format {fmt!r}: one of " + ", ".join(FORMATS))
    files = []
    several = len(runs) > 1
    quarks = []
    for r in runs:
        for q in r.quarks.values():
            quarks.append(QuarkData(**{**q.__dict__, "label": f"{r.label} {q.label}" if several else q.label}))
    models = {r.model for r in runs}
    title = (f"dressed quark — {runs[0].model}; {runs[0].regularisation}" if len(models) == 1 and not several
             else "dressed quark — " + "; ".join(f"{r.label}: {r.model}, {r.regularisation}" for r in runs))
    files.append(mass_function(quarks, title, out / f"mass_function.{fmt}", cut_above_regulator))
    names = []
    for r in runs:
        names += [n for n in r.mesons if n not in names]
    for n in names:
        ms = [(r.label, r.mesons[n]) for r in runs if n in r.mesons]
        files.append(_save(eigenvalue_spectrum_figure(ms), out / f"eigenvalues_{n}.{fmt}"))
        files.append(_save(amplitudes_figure(ms), out / f"amplitudes_{n}.{fmt}"))
    return files


#: Per-point labels of a scan (1/0 flags, C, n): variables of the Dataset, not figures.
SCAN_FLAGS = ("_extrapolated", "_validated", "_c_parity", "_excitation")


def scan_figures(ds, out_dir, fmt: str = "png") -> list[Path]:
    """One figure per observable of a scan Dataset (``scan.dataset``) against the first
    axis, a line per value of the second (if any); failed points are gaps."""
    plt = _plt()
    out_dir = Path(out_dir)
    dims = [d for d in ds["status"].dims]
    x = dims[0]
    files = []
    for name, var in ds.data_vars.items():
        if (name in ("status", "message", "config_hash") or name.endswith(SCAN_FLAGS)
                or not np.isfinite(var.values).any()):
            continue
        fig, ax = plt.subplots(figsize=(5.5, 4))
        if len(dims) == 1:
            ax.plot(ds[x].values, var.values, marker="o", ms=3)
        else:
            other = dims[1]
            for j, v in enumerate(ds[other].values):
                sel = var.isel({other: j})
                if sel.ndim > 1:               # further axes: their first value
                    sel = sel.isel({d: 0 for d in sel.dims if d != x})
                ax.plot(ds[x].values, sel.values, marker="o", ms=3, label=f"{ds[other].attrs['long_name']} = {v:g}")
            ax.legend(fontsize=7)
        xu = ds[x].attrs.get("units", "1")
        ax.set_xlabel(f"{ds[x].attrs['long_name']}" + ("" if xu == "1" else f" [{xu}]"))
        vu = var.attrs.get("units", "1")
        ax.set_ylabel(name + ("" if vu == "1" else f" [{vu}]"))
        ax.set_title(f"{ds.attrs.get('title', 'scan')}", fontsize=9)
        tidy(ax)
        files.append(_save(fig, out_dir / f"scan_{name}.{fmt}"))
    return files


def fit_figure(fj: dict, path) -> Path:
    """A fit's course from its fit.json content: |pull| of every target per evaluation
    (log scale; Jacobian points filled) and each parameter relative to its fitted value."""
    plt = _plt()
    hist = [h for h in fj["history"] if h.get("ok")]
    fig, (a1, a2) = plt.subplots(1, 2, figsize=(10, 4))
    n = [h["evaluation"] for h in hist]
    for t in fj["targets"]:
        y = [max(abs(h["residuals"][t]), 1e-16) for h in hist]
        line, = a1.plot(n, y, marker="o", ms=3, label=t)
        jn = [h["evaluation"] for h in hist if h["jacobian_evaluated"]]
        jy = [max(abs(h["residuals"][t]), 1e-16) for h in hist if h["jacobian_evaluated"]]
        a1.plot(jn, jy, "o", ms=6, mfc="none", color=line.get_color())
    a1.set_yscale("log")
    a1.set_xlabel("evaluation (circled: Jacobian evaluated)")
    a1.set_ylabel("|achieved − target| / uncertainty")
    a1.legend(fontsize=7)
    for p, v in fj["parameters"].items():
        a2.plot(n, [h["parameters"][p] / v for h in hist], marker="o", ms=3, label=p)
    a2.axhline(1.0, color="0.6", lw=0.8)
    a2.set_xlabel("evaluation")
    a2.set_ylabel("parameter / fitted value")
    a2.legend(fontsize=7)
    for ax in (a1, a2):
        tidy(ax)
    fig.suptitle(f"fit of {fj['config']}: chi2 = {fj['chi2']:.3g}, "
                 f"{'converged' if fj['converged'] else 'not converged'} after {fj['iterations']} iterations",
                 fontsize=9)
    return _save(fig, path)

"""Figures: produced for chiral-limit, massive and vector mesons, in the format the file
suffix asks for, with readable axes, regulator artefacts left out, and redrawn by
`rlmeson plot` from a run directory.

Sources: file signatures of PNG, PDF and SVG (the formats' specifications); readable axes
— a handful of labelled major ticks, no labelled minor ticks (common practice); the
bound-state condition λ₁(P² = −M²) = 1 with λ₁ rising towards the timelike side for a
ground state (common practice, PHYSICS.md); the regulator scale Λ_R² above which a
translation-invariant regularisation flattens the dressing (README).
"""


import h5py
import numpy as np
import pytest
from matplotlib import ticker

from rlmeson.io import plots
from conftest import run_cli

SIGNATURE = {"png": b"\x89PNG\r\n\x1a\n", "pdf": b"%PDF", "svg": b"<?xml"}


_main = run_cli


@pytest.fixture(scope="module")
def run_data(figure_run):
    return plots.read_run(figure_run[0])


def _readable(fig):
    """Every visible axis: ≤ MAX_TICKS labelled major ticks inside the view, spaced by at
    least 1/(MAX_TICKS + 1) of the axis, and no labelled minor ticks."""
    fig.canvas.draw()
    for ax in fig.axes:
        if not ax.get_visible():
            continue
        for axis, lim, scale in ((ax.xaxis, ax.get_xlim(), ax.get_xscale()),
                                 (ax.yaxis, ax.get_ylim(), ax.get_yscale())):
            lo, hi = sorted(lim)
            locs = [t for t in axis.get_majorticklocs() if lo <= t <= hi]
            assert 2 <= len(locs) <= plots.MAX_TICKS, (ax.get_ylabel(), locs)
            f = np.log10 if scale == "log" else (lambda x: np.asarray(x, dtype=float))
            frac = np.diff(f(np.array(locs))) / (f(hi) - f(lo))
            assert frac.min() >= 1.0 / (plots.MAX_TICKS + 1), (ax.get_ylabel(), locs)
            assert not any(t.get_text() for t in axis.get_minorticklabels())
            assert isinstance(axis.get_major_locator(), (ticker.MaxNLocator, ticker.LogLocator))


@pytest.mark.parametrize("meson", ["pi0", "pi", "rho"])
def test_meson_figures_are_written_with_readable_axes(figure_run, run_data, meson):
    out, _ = figure_run
    for stem in ("eigenvalues", "amplitudes"):
        assert (out / f"{stem}_{meson}.png").read_bytes()[:8] == SIGNATURE["png"]
    m = run_data.mesons[meson]
    for fig in (plots.eigenvalue_spectrum_figure([("", m)]), plots.amplitudes_figure([("", m)])):
        _readable(fig)
        plots._plt().close(fig)


def test_mass_function_readable_with_zeta_model_and_regulator_cut(run_data):
    quarks = list(run_data.quarks.values())
    fig = plots.mass_function_figure(quarks, "dressed quark — " + run_data.model)
    _readable(fig)
    title = fig._suptitle.get_text()
    assert "maris-tandy" in title and "omega" in title
    a1 = fig.axes[0]
    zeta2 = quarks[0].zeta_gev ** 2
    assert any(np.allclose(line.get_xdata(), zeta2) for line in a1.get_lines())           # ζ² marked
    reg = quarks[0].regulator_gev2
    assert reg is not None and quarks[0].q2.max() > 1e3 * reg
    data = [line for line in a1.get_lines() if len(line.get_xdata()) > 2]
    assert len(data) == 2 and max(line.get_xdata().max() for line in data) <= reg
    plots._plt().close(fig)
    fig = plots.mass_function_figure(quarks, "x", cut_above_regulator=False)
    assert max(np.max(line.get_xdata()) for line in fig.axes[0].get_lines()) > reg
    plots._plt().close(fig)


def test_results_flag_values_above_the_regulator_scale(figure_run):
    with h5py.File(figure_run[0] / "results.h5") as h:
        reg = h.attrs["regularisation_scale_gev2"]
        for name in ("c", "l"):
            g = h[f"quarks/{name}"]
            assert np.array_equal(g["above_regulator_scale"][()], g["q2"][()] > reg)
            assert g["above_regulator_scale"][()].any()


def test_spectrum_spans_the_crossing_with_three_eigenvalues(run_data):
    m = run_data.mesons["pi"]
    assert m.spectrum.shape[1] == 3 and 4 <= len(m.spectrum_mass) <= 8
    lam = m.spectrum.real
    assert m.spectrum_mass.min() == 0.0 and m.spectrum_mass.max() > 1.05 * m.mass_gev    # P² = 0 to past −M²
    at = np.argmin(abs(m.spectrum_mass - m.mass_gev))
    assert lam[at, 0] == pytest.approx(1.0, abs=1e-7)                                      # the bound state
    assert lam[0, 0] < 1.0 < lam[-1, 0] and np.all(np.diff(lam[:, 0]) > 0)
    assert np.all(lam[:, 1] < lam[:, 0]) and np.all(lam[:, 2] <= lam[:, 1])


def test_spectrum_continues_to_spacelike_momenta(run_data):
    """λ(P²) on the spacelike side (direct continuation, exact at real quark momenta): the
    leading eigenvalue keeps falling as P² grows past 0 (the kernel's strength falls with
    the quarks' momenta; common practice), below its value at P² = 0."""
    for name in ("pi", "rho"):
        m = run_data.mesons[name]
        assert m.spacelike_p2 is not None and np.all(m.spacelike_p2 > 0)
        lam = m.spacelike.real
        at0 = m.spectrum.real[np.argmin(m.spectrum_mass), 0]
        assert lam[0, 0] < at0 and np.all(np.diff(lam[:, 0]) < 0)
        assert np.all(np.abs(m.spacelike.imag) < 1e-8)                  # real at spacelike P


def test_pseudoscalar_amplitudes_in_the_efgh_basis_up_to_20_gev2(run_data):
    for name in ("pi", "pi0"):
        fig = plots.amplitudes_figure([("", run_data.mesons[name])])
        axes = [a for a in fig.axes if a.get_visible()]
        labels = [a.get_ylabel() for a in axes]
        assert [lab.replace("Im ", "").split(" [")[0] for lab in labels] == list("EFGH"), labels
        assert "[GeV⁻¹]" in labels[1] and "[GeV⁻³]" in labels[2] and "[GeV⁻²]" in labels[3]
        for ax in axes:
            xs = np.concatenate([line.get_xdata() for line in ax.get_lines() if len(line.get_xdata()) > 2])
            assert xs.max() <= plots.AMPLITUDE_Q2_MAX and xs.max() > 10.0
        plots._plt().close(fig)


@pytest.mark.parametrize("fmt", ["pdf", "svg"])
def test_plot_command_redraws_in_the_requested_format(figure_run, tmp_path, fmt):
    code, out, err = _main(["plot", figure_run[0], "--out", tmp_path, "--format", fmt])
    assert code == 0, err
    files = sorted(tmp_path.iterdir())
    assert {f.name for f in files} == {f"{s}.{fmt}" for s in ("mass_function", "eigenvalues_pi0", "amplitudes_pi0",
                                                              "eigenvalues_pi", "amplitudes_pi", "eigenvalues_rho",
                                                              "amplitudes_rho")}
    assert all(f.read_bytes()[:5].startswith(SIGNATURE[fmt]) for f in files)


def test_plot_command_overlays_two_runs(figure_run, tmp_path):
    code, _, err = _main(["plot", figure_run[0], figure_run[0], "--out", tmp_path])
    assert code == 0, err
    runs = [plots.read_run(figure_run[0])] * 2
    quarks = [q for r in runs for q in r.quarks.values()]
    fig = plots.mass_function_figure(quarks, "overlay")
    assert len([line for line in fig.axes[0].get_lines() if len(line.get_xdata()) > 2]) == 4
    plots._plt().close(fig)
    code, _, err = _main(["plot", figure_run[0], figure_run[0]])
    assert code == 2 and "--out" in err


def test_quark_plot_follows_the_suffix_and_rejects_unknown_ones(tmp_path):
    cfg = tmp_path / "q.toml"
    cfg.write_text('name = "q"\n[quarks.l]\ncurrent_mass_gev = 0.005\n')
    code, _, err = _main(["quark", cfg, "--plot", tmp_path / "m.pdf"])
    assert code == 0, err
    assert (tmp_path / "m.pdf").read_bytes()[:4] == SIGNATURE["pdf"]
    code, _, err = _main(["quark", cfg, "--plot", tmp_path / "m.jpg"])
    assert code == 2 and ".png" in err and not (tmp_path / "m.jpg").exists()


def test_spectrum_points_are_the_leading_eigenvalues_of_the_dense_matrix(mt_hard, light_hard):
    """The warm-started ARPACK solves of the figure's spectrum find the three eigenvalues
    with the largest real parts (reference: scipy.linalg.eig of the dense BSE matrix on a
    tiny grid; ARPACK tolerance 1e-7)."""
    from rlmeson.meson import bse
    from rlmeson.model import channels
    from rlmeson.workflows import pipeline

    tiny = bse.BSEGrid(order=4, n_z=4, widths=(12.0, 4.8, 10.0, 10.0))
    bs = bse.BoundState(mt_hard, channels.get("vector"), tiny, light_hard, max_mass=1.0)
    mass = 0.7
    vals, vecs = bs.eigen(mass, k=3)
    masses, lam = pipeline._spectrum(bs, mass, 1.0, mass, vals, vecs)[:2]
    assert len(masses) == 1 + len(pipeline.SPECTRUM_FRACTIONS) + 1
    ref = bs.eigen_dense(masses[0])[0][:3]      # P² = 0: the far end of the warm-start chain
    assert masses[0] == 0.0 and np.allclose(lam[0], ref, atol=1e-6), (lam[0], ref)

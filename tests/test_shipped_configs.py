"""Every shipped config runs end to end (a smoke test on a reduced BSE grid; marked slow:
about three minutes on two busy cores, plus 42 s and 67 s measured for mt-strange and
mt-strange-ti, five mesons each), and the paths the rest of the suite does not
take through `rlmeson run` (in the default suite, on the Maris–Tandy pion of mt-pion.toml
alone): an error bar from a second grid, the meson-stage cache (a hit, and a damaged
entry recomputed), exports that carry exactly the summary's numbers.

Sources: Maris & Tandy, PRC 60, 055214 (1999): m_π = 0.138 GeV, f_π = 0.131 GeV (√2
convention), m_ρ = 0.742 GeV (from memory); Goldstone's theorem, λ(P² = 0) = 1 in the
chiral limit (theorem; tolerance 1e-4 as in the team's checks); the vector ground state
lies above the pseudoscalar one for light quarks (common practice).  A reduced grid
(order 5/6, 4 z nodes, 12/16 angular points) moves m_π, f_π and m_ρ by at most 0.3%,
0.1% and 0.1% from the default grid (measured on mt-pion: 0.13767 vs 0.13802 GeV,
0.13154 vs 0.13153 GeV, 0.7343 vs 0.7347 GeV), and the default-grid values lie within 1%
of the published ones (README) -- hence 2% bands.
"""

from __future__ import annotations

import csv
import json
import math
import shutil
from pathlib import Path

import h5py
import numpy as np
import pytest

from conftest import run_cli

CONFIGS = Path(__file__).resolve().parents[1] / "configs"
SHIPPED = sorted(p.stem for p in CONFIGS.glob("*.toml"))

# a coarser BSE grid (the default panels; the second grid of an error bar is 1.5 times
# coarser still).  The gap grid stays the default: with order 5 and 12 angular points
# the shifted gap equation of demo-ladder does not converge at M = 0.13 GeV (measured).
REDUCED = """
[numerics.bse]
order = 6
z_points = 4
angular_points = 16
"""
WITH_ERROR_BAR = "mt-pion"
PUBLISHED = {"m_pi": 0.138, "f_pi_sqrt2": 0.131, "m_rho": 0.742}   # MT99 (from memory)
BAND = 0.02


def _reduced_copy(name: str, where: Path, only_first_meson: bool = False) -> Path:
    text = (CONFIGS / f"{name}.toml").read_text()
    if only_first_meson:
        first, *rest = text.split("[[mesons]]")
        text = first + "[[mesons]]" + rest[0] + "".join(r[r.index("\n["):] for r in rest[1:] if "\n[" in r)
    assert "[numerics" not in text, f"{name}: the smoke test appends its own numerics"
    error_bar = "true" if name == WITH_ERROR_BAR else "false"
    if "[output]" in text:
        text = text.replace("[output]\n", f"[output]\nerror_bar = {error_bar}\n", 1)
    else:
        text += f"\n[output]\nerror_bar = {error_bar}\n"
    p = where / f"{name}.toml"
    p.write_text(text + REDUCED)
    return p


_main = run_cli


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """{config name: (exit code, run directory, stderr)} for every shipped config."""
    d = tmp_path_factory.mktemp("shipped")
    mp = pytest.MonkeyPatch()
    mp.setenv("RLMESON_CACHE", str(d / "cache"))
    res = {}
    try:
        for name in SHIPPED:
            code, _, err = _main(["run", _reduced_copy(name, d), "--out", d / name, "--quiet"])
            res[name] = (code, d / name, err)
    finally:
        mp.undo()
    return res


@pytest.fixture(scope="module")
def pion(tmp_path_factory):
    """(config file, run directory, cache) of mt-pion.toml with its pion only, reduced
    BSE grid, error bar on."""
    d = tmp_path_factory.mktemp("mt-pion-only")
    cfgfile = _reduced_copy(WITH_ERROR_BAR, d, only_first_meson=True)
    mp = pytest.MonkeyPatch()
    mp.setenv("RLMESON_CACHE", str(d / "cache"))
    try:
        code, _, err = _main(["run", cfgfile, "--out", d / "run", "--quiet"])
    finally:
        mp.undo()
    assert code == 0, err
    return cfgfile, d / "run", d / "cache"


def _summary(run_dir: Path) -> dict:
    return json.loads((run_dir / "summary.json").read_text())


@pytest.mark.slow
@pytest.mark.parametrize("name", SHIPPED)
def test_shipped_config_runs_on_a_reduced_grid(runs, name):
    code, out, err = runs[name]
    assert code == 0, err
    s = _summary(out)
    import tomllib

    cfg = tomllib.loads((CONFIGS / f"{name}.toml").read_text())
    assert set(s["quarks"]) == set(cfg["quarks"])
    assert [m["name"] for m in s["mesons"]] == [m["name"] for m in cfg.get("mesons", [])]
    for q in s["quarks"].values():
        assert q["residual"] < 1e-10
    by_channel = {}
    for m in s["mesons"]:
        if "goldstone_residual" in m:           # chiral limit: Goldstone's theorem
            assert m["goldstone_residual"] < 1e-4
        else:
            assert 0.0 < m["mass_gev"] < 2.0 and math.isfinite(m["decay_constant_gev"])
        by_channel.setdefault(m["channel"], []).append(m["mass_gev"])
    if {"pseudoscalar", "vector"} <= set(by_channel):
        assert min(by_channel["vector"]) > max(by_channel["pseudoscalar"])


@pytest.mark.slow
def test_published_maris_tandy_rho_on_the_reduced_grid(runs):
    pi, rho = _summary(runs["mt-pion"][1])["mesons"]
    assert rho["mass_gev"] == pytest.approx(PUBLISHED["m_rho"], rel=BAND)
    assert pi["mass_gev"] == pytest.approx(PUBLISHED["m_pi"], rel=BAND)


@pytest.mark.slow
@pytest.mark.parametrize("name", SHIPPED)
def test_exported_values_equal_the_summary_for_every_config(runs, name):
    _check_exports(runs[name][1])


def test_published_pion_and_an_error_bar_from_a_second_grid(pion):
    """`error_bar = true`: |M − M_coarse| and |f − f_coarse| are reported, nonzero (the
    second grid really differs) and below the 2% the reduced grid is trusted to; the
    values agree with the published ones (module docstring)."""
    (pi,) = _summary(pion[1])["mesons"]
    assert pi["mass_gev"] == pytest.approx(PUBLISHED["m_pi"], rel=BAND)
    assert pi["decay_constant_sqrt2_convention_gev"] == pytest.approx(PUBLISHED["f_pi_sqrt2"], rel=BAND)
    assert pi["error_estimate"] == "difference to a second, coarser grid"
    assert 0.0 < pi["mass_error_gev"] < BAND * pi["mass_gev"]
    assert 0.0 < pi["decay_constant_error_gev"] < BAND * pi["decay_constant_gev"]


def test_exported_values_equal_the_summary(pion):
    _check_exports(pion[1])


def _check_exports(out: Path) -> None:
    import xarray as xr

    s = _summary(out)
    with h5py.File(out / "results.h5", "r") as h:
        assert h.attrs["config_hash"] == s["config_hash"]
        assert json.loads(h.attrs["summary"])["mesons"] == s["mesons"]
        for f, q in s["quarks"].items():
            g = h[f"quarks/{f}"]
            assert json.loads(g.attrs["summary"]) == q and g.attrs["current_mass_gev"] == q["current_mass_gev"]
            with xr.open_dataset(out / f"propagator_{f}.nc") as ds:
                np.testing.assert_array_equal(ds["M"].values, g["M"][()])
            with open(out / f"propagator_{f}.csv", newline="") as fh:
                rows = [r for r in csv.reader(line for line in fh if not line.startswith("#"))]
            col = next(i for i, c in enumerate(rows[0]) if c in ("M_gev", "M[GeV]"))
            np.testing.assert_allclose([float(r[col]) for r in rows[1:]], g["M"][()], rtol=1e-12)
        for m in s["mesons"]:
            g = h[f"mesons/{m['name']}"]
            assert json.loads(g.attrs["summary"]) == m
            with xr.open_dataset(out / f"amplitude_{m['name']}.nc") as ds:
                assert ds.attrs["mass_gev"] == m["mass_gev"]
                np.testing.assert_array_equal(ds["amplitude_re"].values, g["amplitude_re"][()])


def test_meson_stage_cache_hit_and_damaged_entry(pion, tmp_path):
    """A second run reads the meson from the cache with identical numbers; a damaged
    entry is reported in one warning line, recomputed, and gives the same numbers."""
    cfgfile, first_run, first_cache = pion
    cache = tmp_path / "cache"
    shutil.copytree(first_cache, cache)
    mp = pytest.MonkeyPatch()
    mp.setenv("RLMESON_CACHE", str(cache))
    try:
        code, _, err = _main(["run", cfgfile, "--out", tmp_path / "hit"])
        assert code == 0, err
        first, hit = _summary(first_run)["mesons"][0], _summary(tmp_path / "hit")["mesons"][0]
        assert hit["from_cache"] and not first["from_cache"] and "pion: from cache" in err
        strip = ("seconds", "from_cache")
        assert {k: v for k, v in hit.items() if k not in strip} == {k: v for k, v in first.items() if k not in strip}
        (path,) = sorted((cache / "meson").glob("*.h5"))
        data = bytearray(path.read_bytes())
        data[len(data) // 2: len(data) // 2 + 64] = b"\xff" * 64
        path.write_bytes(bytes(data))
        code, _, err = _main(["run", cfgfile, "--out", tmp_path / "again", "--quiet"])
        assert code == 0, err
        warns = [line for line in err.splitlines() if "warning" in line]
        assert len(warns) == 1 and warns[0].startswith("rlmeson: warning: invalid cache entry")
        again = _summary(tmp_path / "again")["mesons"][0]
        assert not again["from_cache"]
        assert again["mass_gev"] == pytest.approx(first["mass_gev"], rel=1e-9)
        assert again["decay_constant_gev"] == pytest.approx(first["decay_constant_gev"], rel=1e-9)
    finally:
        mp.undo()

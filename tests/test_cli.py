"""Command line and cache behaviour (the user's interface; sources: the documented
contract — one-line errors with exit code 2, a JSON object with the documented keys,
cache hits, misses and recovery)."""

import json
import subprocess
import sys

import h5py
import pytest

from rlmeson import cli
from rlmeson.io import config
from rlmeson.workflows import pipeline
from rlmeson.io.store import Store

QUARK_CFG = """
name = "cli-check"
[kernel]
regularisation = "hard-cutoff"
[quarks.l]
current_mass_gev = {mass}
"""

REQUIRED = {"Z2", "Zm", "current_mass_gev", "renormalisation_point_gev", "mass_function_at_zero_gev",
            "residual", "max_bound_state_mass_gev"}


def _write(tmp_path, text, name="c.toml"):
    p = tmp_path / name
    p.write_text(text)
    return p


def _run(args, capsys):
    code = cli.main([str(a) for a in args])
    out = capsys.readouterr()
    return code, out.out, out.err


def test_quark_json_has_the_documented_keys_and_chiral_extras(tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("RLMESON_CACHE", str(tmp_path / "cache"))
    code, out, _ = _run(["quark", _write(tmp_path, QUARK_CFG.format(mass=0.0)), "--json"], capsys)
    assert code == 0
    d = json.loads(out)
    assert REQUIRED | {"minus_qbarq_cbrt_gev", "minus_qbarq_cbrt_1gev_gev"} <= set(d)
    assert d["regularisation"] == "hard-cutoff" and d["residual"] < 1e-10
    code, out, _ = _run(["quark", _write(tmp_path, QUARK_CFG.format(mass=0.005), "m.toml"), "--json"], capsys)
    d = json.loads(out)
    assert REQUIRED <= set(d) and "minus_qbarq_cbrt_gev" not in d


def test_quark_summary_and_plot(tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("RLMESON_CACHE", str(tmp_path / "cache"))
    png = tmp_path / "m.png"
    code, out, _ = _run(["quark", _write(tmp_path, QUARK_CFG.format(mass=0.005)), "--plot", png], capsys)
    assert code == 0 and "Z2 =" in out and "M_max" in out
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


BAD = [
    ('name = "x"\n[quarks.l]\ncurrent_mass_gev = -1.0\n', "quarks.l.current_mass_gev"),
    ('name = "x"\n[interaction]\nomega_gev = 0.0\n[quarks.l]\ncurrent_mass_gev = 0.0\n', "interaction.omega_gev"),
    ('name = "x"\nfoo = 1\n[quarks.l]\ncurrent_mass_gev = 0.0\n', "foo"),
    ('name = "x"\n[quarks.l]\ncurrent_mass_gev = "light"\n', "quarks.l.current_mass_gev"),
    ('name = "x"\n[numerics.gap]\norder = 2\n[quarks.l]\ncurrent_mass_gev = 0.0\n', "numerics.gap.order"),
    ('name = "x"\n[numerics.bse]\nz_points = 7\n[quarks.l]\ncurrent_mass_gev = 0.0\n', "numerics.bse.z_points"),
    ('name = "x"\n[kernel]\nregularisation = "hard-cutoff"\n[renormalisation]\npoint_gev = 400.0\n[quarks.l]\ncurrent_mass_gev = 0.0\n',
     "renormalisation.point_gev"),
    ('name = "x"\n[kernel]\nregularisation = "lattice"\n[quarks.l]\ncurrent_mass_gev = 0.0\n', "kernel.regularisation"),
    ('name = "x"\n[quarks.l]\ncurrent_mass_gev = 0.0\n[[mesons]]\nname = "p"\nchannel = "tensor"\n', 'mesons["p"].channel'),
    ('name = "x"\n[interaction]\nmodel = "nosuch"\n[quarks.l]\ncurrent_mass_gev = 0.0\n', "interaction.model"),
    ('name = "x"\n[quarks.l]\ncurrent_mass_gev = 0.0\n[[mesons]]\nname = "p"\nchannel = "vector"\nquarks = ["l", "s"]\n',
     'mesons["p"].quarks'),
    ('name = "x"\n[quarks.l\n', "c.toml"),
]


@pytest.mark.parametrize("text,key", BAD)
def test_bad_config_is_one_line_with_exit_code_2(tmp_path, capsys, text, key):
    code, out, err = _run(["quark", _write(tmp_path, text), "--json"], capsys)
    assert code == 2 and out == ""
    assert err.count("\n") == 1 and key in err and "Traceback" not in err


def test_missing_file_and_bad_arguments(tmp_path, capsys):
    code, _, err = _run(["quark", tmp_path / "nope.toml"], capsys)
    assert code == 2 and err.count("\n") == 1
    code, _, err = _run(["frobnicate"], capsys)
    assert code == 2 and err.count("\n") == 1


def test_mass_guess_beyond_m_max_names_it(tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("RLMESON_CACHE", str(tmp_path / "cache"))
    text = QUARK_CFG.format(mass=0.005) + '[[mesons]]\nname = "v"\nchannel = "vector"\nmass_guess_gev = 5.0\n'
    code, _, err = _run(["run", _write(tmp_path, text), "--out", tmp_path / "o", "--quiet"], capsys)
    assert code == 2 and "M_max" in err and err.count("\n") == 1


def test_console_script_runs_without_a_traceback(tmp_path):
    p = _write(tmp_path, 'name = "x"\n[quarks.l]\ncurrent_mass_gev = -1.0\n')
    r = subprocess.run([sys.executable, "-m", "rlmeson", "quark", str(p)], capture_output=True, text=True)
    assert r.returncode == 2 and "Traceback" not in r.stderr


def test_quark_cache_hit_miss_and_recovery(tmp_path):
    store = Store(tmp_path / "cache")
    cfg = config.parse(QUARK_CFG.format(mass=0.005))
    first = pipeline.solve_quark(cfg, "l", store)
    second = pipeline.solve_quark(cfg, "l", store)
    assert not first.from_cache and second.from_cache
    assert second.solution.z2 == first.solution.z2 and (second.solution.B == first.solution.B).all()
    other = pipeline.solve_quark(config.parse(QUARK_CFG.format(mass=0.006)), "l", store)
    assert not other.from_cache
    path = store.path("quark", pipeline.stage_key(cfg, cfg.quark_key("l")))
    data = bytearray(path.read_bytes())
    data[len(data) // 2: len(data) // 2 + 64] = b"\xff" * 64
    path.write_bytes(bytes(data))
    with pytest.warns(UserWarning):
        again = pipeline.solve_quark(cfg, "l", store)
    assert not again.from_cache and again.solution.z2 == pytest.approx(first.solution.z2, abs=1e-14)
    with h5py.File(path) as h:                 # rewritten, valid, readable without the package
        assert "B" in h and "checksum" in h.attrs


def test_run_writes_outputs_and_summary(tmp_path, capsys, monkeypatch):
    monkeypatch.setenv("RLMESON_CACHE", str(tmp_path / "cache"))
    text = QUARK_CFG.format(mass=0.005) + '[[mesons]]\nname = "pi"\nchannel = "pseudoscalar"\n[output]\nerror_bar = false\n'
    out = tmp_path / "o"
    code, stdout, _ = _run(["run", _write(tmp_path, text), "--out", out, "--quiet"], capsys)
    assert code == 0 and "pseudoscalar" in stdout
    s = json.loads((out / "summary.json").read_text())
    assert s["regularisation"] == "hard-cutoff" and REQUIRED <= set(s["quark"])
    m = s["mesons"][0]
    for k in ("name", "channel", "mass_gev", "mass_error_gev", "decay_constant_gev", "decay_constant_convention",
              "eigenvalue_slope_gev-2", "normalisation_agreement", "awti_residual", "in_meson_condensate_gev2"):
        assert k in m
    with h5py.File(out / "results.h5") as h:
        assert "mesons/pi/amplitude_re" in h and "quarks/l/B" in h and "mesons/pi/EFGH_re" in h
    for f in ("mass_function.png", "eigenvalues_pi.png", "amplitudes_pi.png", "propagator_l.nc", "amplitude_pi.nc"):
        assert (out / f).stat().st_size > 0
    assert not list(out.glob("*.tmp"))


def test_no_bound_state_below_m_max_is_a_one_line_failure(tmp_path, capsys, monkeypatch):
    """A weak interaction binds no excited vector below M_max, and excitations are not
    extrapolated beyond it: one line that names the meson, the largest λ and M_max.  (Its
    ground state is extrapolated past M_max instead: tests/test_extrapolation.py.)"""
    monkeypatch.setenv("RLMESON_CACHE", str(tmp_path / "cache"))
    text = ('name = "weak"\n[kernel]\nregularisation = "hard-cutoff"\n[interaction]\nomega_gev = 0.4\nstrength_gev2 = 0.05\n'
            'uv_strength = 0.2\n[quarks.l]\ncurrent_mass_gev = 0.2\n[[mesons]]\nname = "v"\nchannel = "vector"\n'
            'excitation = 1\n[output]\nerror_bar = false\n')
    code, out, err = _run(["run", _write(tmp_path, text), "--out", tmp_path / "o", "--quiet"], capsys)
    assert code == 1 and err.count("\n") == 1
    assert "largest lambda" in err and "M_max" in err and "nan" not in err.lower()
    assert "no extrapolation beyond M_max either" in err
    assert err.startswith('rlmeson: NoBoundState: mesons["v"]: ')      # which meson, by name
    assert not (tmp_path / "o" / "summary.json").exists()

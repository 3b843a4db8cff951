"""Edges of the command line that used to fail late or quietly (issue 7), one test each.

Source: the documented contract (README, cli module docstring) -- bad input gives one
line naming the key or option, the value and what is allowed, and exit code 2, before
any computation; outputs are written whole or not at all; a cached result depends on
everything that produced it.  "Before any computation" is checked by JAX not having
been imported when the command returns (the numerics import it; reading and checking
the input does not).
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from rlmeson import cli
from rlmeson.io import config, store as st
from rlmeson.workflows import pipeline

ROOT = Path(__file__).resolve().parents[1]
LIGHT = 'name = "edge"\n[kernel]\nregularisation = "hard-cutoff"\n[quarks.l]\ncurrent_mass_gev = {mass}\n'


def _write(tmp_path, text, name="c.toml") -> Path:
    p = tmp_path / name
    p.write_text(text)
    return p


def _python(code: str, cwd, env=None, timeout=120):
    """Run ``code`` in a fresh interpreter (so that what it imported can be inspected)."""
    e = {**os.environ, **(env or {})}
    return subprocess.run([sys.executable, "-c", code], cwd=cwd, env=e, capture_output=True, text=True,
                          timeout=timeout)


def _main_without_jax(args, tmp_path, env=None):
    """cli.main(args) in a fresh interpreter: (exit code, stderr, whether jax got imported)."""
    code = ("import sys\nfrom rlmeson import cli\nrc = cli.main(%r)\n"
            "print(rc, 'jax' in sys.modules)" % [str(a) for a in args])
    r = _python(code, tmp_path, env)
    rc, jax = r.stdout.split()
    return int(rc), r.stderr, jax == "True"


def _one_line(err: str) -> bool:
    return err.count("\n") == 1 and "Traceback" not in err


@pytest.fixture(scope="module")
def warm_cache(tmp_path_factory):
    """A result cache holding the LIGHT quark (solved once for the tests below)."""
    root = tmp_path_factory.mktemp("warm") / "cache"
    cfg = config.parse(LIGHT.format(mass=0.005))
    pipeline.solve_quark(cfg, "l", st.Store(root))
    return root


def _copy_of(cache: Path, tmp_path: Path) -> Path:
    import shutil

    return Path(shutil.copytree(cache, tmp_path / "cache"))


# ----------------------------------------------------------------------------------------
# Item 5: --version, options named, mesons by name, conventions as numbers

def test_version_is_the_package_version(tmp_path):
    import rlmeson

    r = subprocess.run([sys.executable, "-m", "rlmeson", "--version"], capture_output=True, text=True, cwd=tmp_path)
    assert r.returncode == 0 and r.stdout.strip() == f"rlmeson {rlmeson.__version__}"


@pytest.mark.parametrize("flavour", ["", "s"])
def test_unknown_or_empty_flavour_names_the_option(tmp_path, flavour):
    rc, err, jax = _main_without_jax(["quark", _write(tmp_path, LIGHT.format(mass=0.005)), "--flavour", flavour],
                                     tmp_path)
    assert rc == 2 and _one_line(err) and err.startswith(f"rlmeson: --flavour {flavour!r}") and "one of l" in err
    assert not jax


def test_bad_meson_is_named_by_its_name_or_counted_from_one(tmp_path):
    text = LIGHT.format(mass=0.005) + '[[mesons]]\nname = "pi"\nchannel = "pseudoscalar"\n[[mesons]]\nchannel = "vector"\n'
    rc, err, jax = _main_without_jax(["run", _write(tmp_path, text)], tmp_path)
    assert rc == 2 and _one_line(err) and "mesons[2].name" in err and not jax
    text = LIGHT.format(mass=0.005) + '[[mesons]]\nname = "pi"\nchannel = "tensor"\n'
    rc, err, _ = _main_without_jax(["run", _write(tmp_path, text)], tmp_path)
    assert rc == 2 and 'mesons["pi"].channel' in err


# ----------------------------------------------------------------------------------------
# Item 7, checks after the work: --out and the cache location are checked first

@pytest.mark.parametrize("where", ["file", "inside-file", "proc", "foreign", "working-directory"])
def test_unusable_out_is_refused_before_any_work(tmp_path, where):
    (tmp_path / "afile").write_text("x")
    (tmp_path / "notes").mkdir()
    (tmp_path / "notes" / "mine.txt").write_text("keep me")
    (tmp_path / "summary.json").write_text('{"package": "rlmeson"}')     # even if it looks like a run
    out = {"file": tmp_path / "afile", "inside-file": tmp_path / "afile" / "run",
           "proc": Path("/proc/rlmeson-run"), "foreign": tmp_path / "notes", "working-directory": Path(".")}[where]
    text = LIGHT.format(mass=0.005)
    rc, err, jax = _main_without_jax(["run", _write(tmp_path, text), "--out", out], tmp_path)
    assert rc == 2 and _one_line(err) and err.startswith(f"rlmeson: --out {out}") and not jax
    assert (tmp_path / "notes" / "mine.txt").read_text() == "keep me"
    assert not [p for p in tmp_path.iterdir() if p.name.endswith(".tmp")]


def test_unusable_cache_location_is_refused_before_any_work(tmp_path):
    (tmp_path / "afile").write_text("x")
    text = LIGHT.format(mass=0.005)
    rc, err, jax = _main_without_jax(["quark", _write(tmp_path, text)], tmp_path,
                                     {"RLMESON_CACHE": str(tmp_path / "afile" / "store")})
    assert rc == 2 and "rlmeson: result cache ($RLMESON_CACHE) unusable" in err and not jax
    text += '[output]\ncache_dir = "afile/store"\n'
    rc, err, jax = _main_without_jax(["run", _write(tmp_path, text), "--out", tmp_path / "o"], tmp_path)
    assert rc == 2 and "[output] cache_dir" in err and str(tmp_path / "afile") in err and not jax
    assert not (tmp_path / "o").exists()


def test_a_store_that_fails_mid_run_warns_once_and_the_result_is_kept(tmp_path):
    """The store's root turns into a file after the check: the solve goes on."""
    blocked = tmp_path / "blocked"
    blocked.write_text("not a directory")
    cfg = config.parse(LIGHT.format(mass=0.005))
    with pytest.warns(st.StoreWarning, match="going on without caching") as rec:
        res = pipeline.solve_quark(cfg, "l", st.Store(blocked / "store"))
    assert len(rec) == 1 and res.solution.residual < 1e-10 and not res.from_cache


# ----------------------------------------------------------------------------------------
# Item 7, stale physics

def test_mass_guess_is_checked_before_the_meson_cache(tmp_path, warm_cache):
    """The same config must not exit 2 on an empty store and 0 on a warm one: a valid
    entry under the meson's key is not even read when mass_guess_gev is out of range."""
    store = st.Store(_copy_of(warm_cache, tmp_path))
    text = LIGHT.format(mass=0.005) + '[[mesons]]\nname = "v"\nchannel = "vector"\nmass_guess_gev = 5.0\n'
    cfg = config.parse(text)
    quarks = {"l": pipeline.solve_quark(cfg, "l", store)}
    assert quarks["l"].from_cache
    meson = cfg.mesons[0]
    key = pipeline.stage_key(cfg, cfg.meson_key(meson) + ("e" if cfg.output.error_bar else "n"))
    store.put("meson", key, {"x": np.zeros(1)}, {"planted": True})
    with pytest.raises(config.ConfigError) as e:
        pipeline.solve_meson(cfg, meson, quarks, store)
    assert e.value.key == 'mesons["v"].mass_guess_gev' and "M_max" in str(e.value)


USER_MODULE = '''
import jax.numpy as jnp

SCALE = {scale}


def g(s, p):
    return SCALE * p["d"] * jnp.exp(-s / 0.16)
'''


def test_user_module_constants_enter_the_cache_key(tmp_path, monkeypatch):
    """Only the function's source was hashed: a changed module constant was served stale."""
    mod = tmp_path / "usermod_key.py"
    mod.write_text(USER_MODULE.format(scale=1.0))
    monkeypatch.syspath_prepend(str(tmp_path))
    cfg = config.parse(LIGHT.format(mass=0.005) + '[interaction]\nmodel = "usermod_key:g"\nd = 1.0\n')
    before = pipeline.stage_key(cfg, cfg.quark_key("l"))
    mod.write_text(USER_MODULE.format(scale=2.0))      # the function itself is unchanged
    assert pipeline.stage_key(cfg, cfg.quark_key("l")) != before
    assert pipeline.user_module_hash("usermod_key:g") in pipeline._code_tag(cfg)


def test_package_source_edit_changes_the_code_tag(tmp_path):
    """An edited checkout must not reuse results: the code tag hashes the package files."""
    import shutil

    pkg = Path(pipeline.__file__).resolve().parents[1]          # the package, all its subpackages
    copy = tmp_path / "rlmeson"
    shutil.copytree(pkg, copy, ignore=shutil.ignore_patterns("__pycache__"))
    assert pipeline.source_hash(copy) == pipeline.source_hash(pkg) == pipeline.package_source_hash()
    with open(copy / "quark" / "gap.py", "a") as fh:          # an edit inside a subpackage
        fh.write("\n# an edit\n")
    assert pipeline.source_hash(copy) != pipeline.source_hash(pkg)
    assert pipeline.package_source_hash() in pipeline._code_tag(config.parse(LIGHT.format(mass=0.005)))


# ----------------------------------------------------------------------------------------
# Item 7, user functions checked; the console script finds them like python3 -m does

BAD_USER_MODULE = '''
import numpy as np


def g(s, p):
    return np.exp(-np.asarray(s))
'''


@pytest.mark.parametrize("launcher", ["console-script", "python-m"])
def test_user_module_in_working_directory_is_found_and_probed(tmp_path, launcher):
    (tmp_path / "usermod_probe.py").write_text(BAD_USER_MODULE)
    cfgfile = _write(tmp_path, LIGHT.format(mass=0.005) + '[interaction]\nmodel = "usermod_probe:g"\n')
    script = Path(sys.executable).parent / "rlmeson"
    cmd = [str(script)] if launcher == "console-script" else [sys.executable, "-m", "rlmeson"]
    if launcher == "console-script" and not script.exists():
        pytest.fail(f"the console script {script} is not installed (pip install -e .)")
    r = subprocess.run(cmd + ["quark", str(cfgfile), "--no-cache"], cwd=tmp_path, capture_output=True,
                       text=True, timeout=120)
    # found (not "an importable 'module:function'") and rejected by the probe, one line
    assert r.returncode == 2 and _one_line(r.stderr), r.stderr
    assert "interaction.model = 'usermod_probe:g'" in r.stderr and "traced" in r.stderr


# ----------------------------------------------------------------------------------------
# Item 3 and the small ones: the echo, warnings in one line, a UTF-8 BOM

def test_heavy_current_mass_prints_one_warning_line(tmp_path):
    """current_mass_gev = 4 is legal (up to 10 GeV) but prints a warning naming the key."""
    p = tmp_path / "heavy.toml"
    p.write_bytes(b"\xef\xbb\xbf" + LIGHT.format(mass=4).encode())      # with a byte-order mark
    proc = subprocess.Popen([sys.executable, "-m", "rlmeson", "quark", str(p), "--no-cache"], cwd=tmp_path,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    seen = []
    for line in proc.stderr:                  # a warning, not an error: the solve begins
        seen.append(line.rstrip("\n"))
        if "quark l: solving" in line:
            break
    proc.send_signal(signal.SIGTERM)          # (the heavy quark itself is not the point)
    proc.communicate(timeout=120)
    warns = [line for line in seen if "warning" in line]
    assert len(warns) == 1 and warns[0].startswith("rlmeson: warning: quarks.l.current_mass_gev = 4 GeV"), seen
    assert "rlmeson: current masses at zeta: l = 4000 MeV" in seen and "quark l: solving" in seen[-1]


def test_python_warnings_print_as_one_line(tmp_path, capsys, monkeypatch, warm_cache):
    """A damaged cache entry gives a StoreWarning: one 'rlmeson: warning:' line, no source path."""
    monkeypatch.setenv("RLMESON_CACHE", str(_copy_of(warm_cache, tmp_path)))
    cfgfile = _write(tmp_path, LIGHT.format(mass=0.005))
    cfg = config.load(cfgfile)
    path = st.Store(tmp_path / "cache").path("quark", pipeline.stage_key(cfg, cfg.quark_key("l")))
    path.write_bytes(path.read_bytes()[:200])
    capsys.readouterr()
    assert cli.main(["quark", str(cfgfile), "--json"]) == 0
    err = capsys.readouterr().err
    warns = [line for line in err.splitlines() if "warning" in line.lower()]
    assert len(warns) == 1 and warns[0].startswith("rlmeson: warning: invalid cache entry")
    assert "warnings.warn" not in err and ".py:" not in err


# ----------------------------------------------------------------------------------------
# Item 7, leftovers: a run is written whole into a fresh directory

def test_run_replaces_an_earlier_run_whole_and_clears_a_killed_runs_leftovers(tmp_path, monkeypatch, capsys,
                                                                             warm_cache):
    monkeypatch.setenv("RLMESON_CACHE", str(_copy_of(warm_cache, tmp_path)))
    out = tmp_path / "o"
    out.mkdir()
    (out / "summary.json").write_text(json.dumps({"package": "rlmeson", "config": "other"}))
    (out / "propagator_x.nc").write_bytes(b"from another config")
    dead = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"], capture_output=True, text=True)
    stale = tmp_path / f".o.{st._HOST}-{int(dead.stdout)}-{'a' * 16}.tmp"
    stale.mkdir()
    (stale / "results.h5").write_bytes(b"half")
    assert cli.main(["run", str(_write(tmp_path, LIGHT.format(mass=0.005))), "--out", str(out), "--quiet"]) == 0
    assert not (out / "propagator_x.nc").exists() and not stale.exists()
    summary = json.loads((out / "summary.json").read_text())
    assert summary["config"] == "edge" and (out / "propagator_l.nc").exists()
    assert [p.name for p in tmp_path.iterdir() if p.name.startswith(".")] == []
    assert not [p for p in (tmp_path / "cache").rglob("*.tmp")]


def test_terminated_run_leaves_no_temporary_output(tmp_path):
    """SIGTERM during the computation: exit 1, and neither the output directory nor its
    temporary sibling remains."""
    cfgfile = _write(tmp_path, LIGHT.format(mass=0.005) + '[[mesons]]\nname = "v"\nchannel = "vector"\n')
    env = {**os.environ, "RLMESON_CACHE": str(tmp_path / "cache")}
    proc = subprocess.Popen([sys.executable, "-m", "rlmeson", "run", str(cfgfile), "--out", str(tmp_path / "o")],
                            cwd=tmp_path, env=env, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    seen = []
    for line in proc.stderr:                  # wait until the solve has begun
        seen.append(line)
        if "quark l:" in line:
            break
    staged = [p for p in tmp_path.iterdir() if p.name.startswith(".o.")]
    proc.send_signal(signal.SIGTERM)
    _, err = proc.communicate(timeout=120)
    assert staged and proc.returncode == 1 and "rlmeson: interrupted" in err, "".join(seen) + err
    assert not (tmp_path / "o").exists() and not any(p.exists() for p in staged)


@pytest.mark.parametrize("where", ["directory", "inside-file", "proc"])
def test_unusable_plot_destination_is_refused_before_any_work(tmp_path, where):
    (tmp_path / "afile").write_text("x")
    plot = {"directory": tmp_path, "inside-file": tmp_path / "afile" / "m.png",
            "proc": Path("/proc/rlmeson-figures/m.png")}[where]
    rc, err, jax = _main_without_jax(["quark", _write(tmp_path, LIGHT.format(mass=0.005)), "--plot", plot], tmp_path)
    assert rc == 2 and _one_line(err) and err.startswith(f"rlmeson: --plot {plot}") and not jax


def test_a_swallowed_sigterm_still_stops_the_run():
    """While JAX is imported, the KeyboardInterrupt raised by the SIGTERM handler can land
    in JAX's garbage-collection callback, which ignores it (seen: the run then finished
    with exit code 0).  The signal is recorded, so the next progress step stops the run."""
    try:
        cli._terminate(signal.SIGTERM, None)
    except KeyboardInterrupt:
        pass                                   # what the callback does with it
    try:
        with pytest.raises(KeyboardInterrupt):
            cli._progress(True)("the next step")
    finally:
        cli._TERMINATED.clear()

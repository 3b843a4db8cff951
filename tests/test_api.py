"""The Python API (``rlmeson.load_config``, ``run``, ``open_run``), ``--set`` overrides and
``rlmeson show``: the same numbers as the command line, overrides validated like the
file and recorded in the config hash (behaviour of our own interface; the physics is
checked elsewhere)."""

import json
from pathlib import Path

import pytest

import rlmeson
from conftest import run_cli
from rlmeson.io.config import ConfigError


def test_overrides_are_validated_like_the_file_and_change_the_hash():
    base = rlmeson.load_config("configs/mt-pion.toml")
    cfg = rlmeson.load_config("configs/mt-pion.toml", ["interaction.omega_gev=0.45", "mesons.rho.mass_guess_gev=0.7",
                                                       "mesons.1.eta=0.4", "quarks.l.current_mass_gev=0.004"])
    assert cfg.interaction.param_dict()["omega_gev"] == 0.45 and cfg.flavours[0].current_mass_gev == 0.004
    assert cfg.mesons[1].mass_guess_gev == 0.7 and cfg.mesons[0].eta == 0.4
    assert cfg.hash() != base.hash()
    assert rlmeson.load_config(cfg.to_dict()).hash() == cfg.hash()          # recorded in the resolved config
    for bad, key in ((["interaction.omega_gev=-1"], "interaction.omega_gev"),
                     (["interaction.omega=1"], "interaction"),
                     (["mesons.kaon.eta=0.3"], "--set mesons.kaon.eta"),
                     (["nokey"], "--set")):
        with pytest.raises(ConfigError, match=key.replace(".", r"\.")):
            rlmeson.load_config("configs/mt-pion.toml", bad)


def test_bad_override_on_the_command_line_is_one_line():
    code, _, err = run_cli(["run", "configs/mt-pion.toml", "--set", "interaction.omega_gev=zero"])
    assert code == 2 and len(err.strip().splitlines()) == 1 and "interaction.omega_gev" in err


def test_open_run_and_show_report_the_run(figure_run):
    run_dir, _ = figure_run
    r = rlmeson.open_run(run_dir)
    summ = json.loads((run_dir / "summary.json").read_text())
    assert r.config.hash() == summ["config_hash"]
    assert set(r.mesons) == {m["name"] for m in summ["mesons"]}
    amp = r.amplitude("rho")
    assert amp.mass_gev == r.mesons["rho"]["mass_gev"]
    code, out, _ = run_cli(["show", run_dir])
    assert code == 0
    for m in summ["mesons"]:
        assert m["name"] in out and f"{m['mass_gev']:.6f}" in out
    code, _, err = run_cli(["show", run_dir / "results.h5"])
    assert code == 2 and "DIR" in err
    with pytest.raises(ValueError, match="not a run directory"):
        rlmeson.open_run(run_dir / "nothing")


def test_api_run_reproduces_the_command_line_run(figure_run):
    """``rlmeson.run`` on the run's own resolved config gives the numbers of summary.json
    (through the same pipeline and cache)."""
    run_dir, _ = figure_run
    r = rlmeson.open_run(run_dir)
    res = rlmeson.run(r.config)
    got = {m["name"]: m for m in res.summary()["mesons"]}
    for name, m in r.mesons.items():
        assert got[name]["mass_gev"] == m["mass_gev"] and got[name]["decay_constant_gev"] == m["decay_constant_gev"]


def test_run_directory_keeps_config_manifest_and_log(figure_run):
    """A run directory can be reproduced and audited from its own files: the resolved
    config (same hash), a manifest of what produced it, and the progress log."""
    from rlmeson.io import config

    run_dir, _ = figure_run
    summ = json.loads((run_dir / "summary.json").read_text())
    cfg = config.from_dict(json.loads((run_dir / "config.json").read_text()))
    assert cfg.hash() == summ["config_hash"]
    man = json.loads((run_dir / "manifest.json").read_text())
    assert man["config_hash"] == summ["config_hash"] and man["package_version"] == summ["package_version"]
    assert man["platform"]["numpy"] and man["timings_seconds"]["total"] > 0
    assert set(man["timings_seconds"]["mesons"]) == {m["name"] for m in summ["mesons"]}
    assert man["command"][:2] == ["rlmeson", "run"]
    log = (run_dir / "run.log").read_text().splitlines()
    assert log and all(line.startswith("[") for line in log)


@pytest.mark.parametrize("call", ["fit", "scan"])
def test_api_checks_the_destination_before_the_work(tmp_path, call):
    """``out`` that is an existing file: a one-line ValueError at once, before any solve
    (common practice: check destinations before the long work)."""
    import time

    blocker = tmp_path / "taken"
    blocker.write_text("a file, not a directory")
    cfg = Path(__file__).resolve().parents[1] / "configs" / ("mt-fit.toml" if call == "fit" else "demo-scan.toml")
    t0 = time.perf_counter()
    with pytest.raises(ValueError, match="out = .*taken.*a directory"):
        getattr(rlmeson, call)(cfg, out=blocker)
    assert time.perf_counter() - t0 < 5.0          # no solve ran (a solve takes longer)

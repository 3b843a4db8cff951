"""Parameter scans (``rlmeson scan``): axes, linked axes, every point a validated config,
failures recorded, the store as the journal, one Dataset over the axes.

Physics check along a current-mass axis: Gell-Mann–Oakes–Renner (m_π² ∝ m at small m,
so m_π²/m is nearly constant for light masses; common practice), and m_π grows with m.
"""

import json

import numpy as np
import pytest
import xarray as xr

from conftest import run_cli
from rlmeson import scan
from rlmeson.config import ConfigError

BASE = """
name = "scan-test"
[interaction]
model = "maris-tandy"
[quarks.l]
current_mass_gev = 0.004
[[mesons]]
name = "pion"
channel = "pseudoscalar"
[numerics.bse]
order = 6
z_points = 6
"""


def _scan(extra):
    import tomllib

    return scan.from_config_dict(tomllib.loads(BASE + extra))


def test_axes_points_and_linked_values():
    sc = _scan("""
[scan]
[[scan.axis]]
key = "quarks.l.current_mass_gev"
range = { start = 0.002, stop = 0.008, points = 3, spacing = "log" }
[[scan.axis]]
key = "interaction.omega_gev"
values = [0.4, 0.5]
linked = { key = "interaction.strength_gev2", product = 0.512 }
""")
    assert len(sc.points()) == 6
    assert np.allclose(sc.axes[0].values, [0.002, 0.004, 0.008])
    cfg = sc.config_at((0.004, 0.5))
    p = cfg.interaction.param_dict()
    assert cfg.flavours[0].current_mass_gev == 0.004 and p["omega_gev"] == 0.5
    assert p["strength_gev2"] == pytest.approx(0.512 / 0.5)          # ω D fixed (Qin–Chang family)
    assert len({sc.config_at(q).hash() for q in sc.points()}) == 6    # every point its own physics


@pytest.mark.parametrize("extra, key", [
    ("[scan]\n", "scan.axis"),
    ("[scan]\n[[scan.axis]]\nkey = \"quarks.l.current_mass_gev\"\nvalues = []\n", "scan.axis[1].values"),
    ("[scan]\n[[scan.axis]]\nkey = \"interaction.omegga\"\nvalues = [0.4]\n", "interaction"),
    ("[scan]\n[[scan.axis]]\nkey = \"quarks.l.current_mass_gev\"\nrange = { start = 0.01, stop = 0.01, points = 3 }\n",
     "scan.axis[1].range.stop"),
    ("[scan]\n[[scan.axis]]\nkey = \"quarks.l.current_mass_gev\"\nvalues = [-1.0]\n", "quarks.l.current_mass_gev"),
    ("[scan]\nworkers = 2\n[[scan.axis]]\nkey = \"quarks.l.current_mass_gev\"\nvalues = [0.004]\n", "scan.workers"),
])
def test_bad_scan_tables_name_the_key(extra, key):
    with pytest.raises(ConfigError, match=key.replace(".", r"\.").replace("[", r"\[").replace("]", r"\]")):
        _scan(extra)


def test_scan_config_still_runs_as_a_single_config():
    """A config with a [scan] table is a valid config for `rlmeson run` (the table is not
    part of a run's physics or hash)."""
    import tomllib

    from rlmeson import config

    d = tomllib.loads(BASE + "[scan]\n[[scan.axis]]\nkey = \"quarks.l.current_mass_gev\"\nvalues = [0.004]\n")
    assert config.from_dict(d).hash() == config.parse(BASE).hash()


def test_scan_command_end_to_end(tmp_path):
    """Three light masses: m_π rises with m and m_π²/m changes by less than 10% over a
    factor 4 in m (GMOR at small m, common practice); a point that cannot be solved (a
    mass guess beyond M_max) is recorded as failed and the scan goes on; a rerun is served
    from the store (the journal) with the same Dataset."""
    cfg = tmp_path / "scan.toml"
    cfg.write_text(BASE + f"""
[output]
cache_dir = "{tmp_path / 'store'}"
[scan]
[[scan.axis]]
key = "quarks.l.current_mass_gev"
values = [0.002, 0.004, 0.008]
""")
    code, out, err = run_cli(["scan", cfg, "--out", tmp_path / "s", "--quiet"])
    assert code == 0, err
    ds = xr.open_dataset(tmp_path / "s" / "scan.nc", engine="h5netcdf")
    assert list(ds["status"].values) == ["ok"] * 3
    m = ds["pion_mass_gev"].values
    mq = ds["quarks__l__current_mass_gev"].values
    assert np.all(np.diff(m) > 0)
    ratio = m**2 / mq
    assert ratio.max() / ratio.min() < 1.10
    assert ds["pion_mass_gev"].attrs["units"] == "GeV"
    ds.close()
    # the store is the journal: a second run recomputes nothing
    code, out, err = run_cli(["scan", cfg, "--out", tmp_path / "s2"])
    assert code == 0
    ds2 = xr.open_dataset(tmp_path / "s2" / "scan.nc", engine="h5netcdf")
    assert np.array_equal(ds2["pion_mass_gev"].values, m)
    ds2.close()
    first = json.loads((tmp_path / "s" / "scan.json").read_text())["points"]
    again = json.loads((tmp_path / "s2" / "scan.json").read_text())["points"]
    assert all(p["from_cache"] for p in again) and not any(p["from_cache"] for p in first)
    # a failing point is kept with its reason
    bad = tmp_path / "bad.toml"
    bad.write_text(BASE.replace('channel = "pseudoscalar"', 'channel = "pseudoscalar"\nmass_guess_gev = 1.5') + """
[scan]
[[scan.axis]]
key = "quarks.l.current_mass_gev"
values = [0.004]
""")
    code, out, err = run_cli(["scan", bad, "--out", tmp_path / "b", "--quiet"])
    assert code == 0
    pts = json.loads((tmp_path / "b" / "scan.json").read_text())["points"]
    assert pts[0]["status"] == "failed" and "mass_guess_gev" in pts[0]["message"]


def test_worker_processes_give_the_same_numbers(tmp_path):
    """`--workers 2` computes the points in separate processes (own caches) and gives the
    numbers of the in-process run to rounding: measured 1e-14 in M and 5e-11 in f (the
    order of floating-point sums differs between processes; f sees it through the
    finite-difference slope of its normalisation), so 1e-9."""
    text = BASE + """
[scan]
[[scan.axis]]
key = "quarks.l.current_mass_gev"
values = [0.002, 0.004]
"""
    results = {}
    for workers in (1, 2):
        cfg = tmp_path / f"w{workers}.toml"
        cfg.write_text(text.replace("[scan]", f"[output]\ncache_dir = \"{tmp_path / f'store{workers}'}\"\n[scan]"))
        code, _, err = run_cli(["scan", cfg, "--workers", workers, "--out", tmp_path / f"o{workers}", "--quiet"])
        assert code == 0, err
        with xr.open_dataset(tmp_path / f"o{workers}" / "scan.nc", engine="h5netcdf") as ds:
            results[workers] = ds["pion_mass_gev"].values.copy(), ds["pion_decay_constant_gev"].values.copy()
    for a, b in zip(results[1], results[2]):
        assert np.allclose(a, b, rtol=1e-9, atol=0)

"""Files for other codes (``rlmeson export``): netCDF-4 / HDF5 / CSV, readers, examples.

Sources: uniqueness of the analytic continuation (the reader's complex values must be
those of a fresh shifted solve at points it never saw); the netCDF-4 format is HDF5
(open standard: the file opens with h5py alone and with xarray alone); CF conventions
(open standard: every variable has ``units`` and ``long_name``).  Accuracies are the
measured ones quoted in the README ("Files for other codes").
"""

import json
import subprocess
import sys
from pathlib import Path

import h5py
import numpy as np
import pytest
import xarray as xr

from rlmeson.io import config, exchange, readers
from rlmeson.workflows import pipeline
from rlmeson.quark import quarkplane

ROOT = Path(__file__).resolve().parent.parent

CONFIG = """
name = "exchange-test"
description = "Maris-Tandy light quark and its pion (translation-invariant), for the export tests"

[interaction]
model = "maris-tandy"

[quarks.l]
current_mass_gev = 0.0037

[[mesons]]
name = "pion"
channel = "pseudoscalar"
mass_guess_gev = 0.138
"""
REGION_MASS = 0.7


@pytest.fixture(scope="module")
def exported(tmp_path_factory):
    out = tmp_path_factory.mktemp("exchange")
    cfg = config.parse(CONFIG)
    store = pipeline.store_of(cfg)
    q = pipeline.solve_quark(cfg, "l", store)
    plane = pipeline.quark_plane(cfg, q, REGION_MASS, 0.5, store)
    pion = pipeline.solve_meson(cfg, cfg.mesons[0], {"l": q}, store)
    radial = pipeline.bse_grid_of(cfg).radial(pipeline.kernel_of(cfg).q2_max)
    prop = exchange.propagator_dataset(cfg, q, plane)
    amp = exchange.amplitude_dataset(cfg, pion, radial)
    files = {}
    for fmt in ("netcdf", "hdf5"):
        files[("propagator", fmt)] = exchange.target(out, "propagator", "l", fmt)
        exchange.write(prop, files[("propagator", fmt)], fmt)
        files[("amplitude", fmt)] = exchange.target(out, "amplitude", "pion", fmt)
        exchange.write(amp, files[("amplitude", fmt)], fmt)
    files[("propagator", "csv")] = exchange.target(out, "propagator", "l", "csv")
    exchange.write_propagator_csv(cfg, q, files[("propagator", "csv")])
    (out / "exchange-test.toml").write_text(CONFIG)
    return {"cfg": cfg, "quark": q, "plane": plane, "pion": pion, "files": files, "dir": out}


@pytest.mark.parametrize("fmt", ["netcdf", "hdf5"])
def test_round_trip_keeps_every_array(exported, fmt):
    """export → read: the stored arrays are the computed ones, bit for bit."""
    r = readers.open_propagator(exported["files"][("propagator", fmt)])
    s, plane = exported["quark"].solution, exported["plane"]
    assert np.array_equal(r.p2, s.q2) and np.array_equal(r._real["A"], s.A) and np.array_equal(r._real["B"], s.B)
    assert np.array_equal(r._rA, plane.samples.A) and np.array_equal(r._rB, plane.samples.B)
    for f, rat in (("A", plane.A), ("B", plane.B)):
        got = r.approximants[f]
        assert np.array_equal(got.support, rat.support) and np.array_equal(got.weights, rat.weights)
        assert np.array_equal(got.values, rat.values)
    a = readers.open_amplitude(exported["files"][("amplitude", fmt)])
    core = exported["pion"].core
    stored = np.asarray(core.normalised.amplitude) * exported["pion"].factor
    # Chebyshev-U series through the z nodes and Lagrange through the q nodes reproduce
    # the node values (interpolation property)
    qq, zz = np.meshgrid(core.q2, core.z)
    assert np.allclose(a(qq, zz), stored, rtol=1e-9, atol=1e-12 * np.abs(stored).max())


def test_reader_on_the_real_axis_between_nodes(exported):
    """Off-node real p² against the self-energy evaluated there directly: README accuracy
    3e-6 (measured max 2.4e-6 near 7 GeV², median 1e-8)."""
    r = readers.open_propagator(exported["files"][("propagator", "netcdf")])
    s = exported["quark"].solution
    p2 = np.geomspace(s.q2[0] * 1.01, 1e3, 61)
    a, b = s.dressing(p2)
    ra, rb = r.dressing(p2)
    assert np.max(np.abs(ra - a) / np.abs(a)) < 3e-6
    assert np.max(np.abs(rb - b) / np.abs(b)) < 3e-6


def test_reader_at_complex_points_it_never_saw(exported):
    """A fresh shifted solve at M = 0.5 GeV puts new points inside the exported parabola
    (M = 0.7 GeV).  Through the approximant (|p²| ≤ 4 GeV²) measured max 2e-6, median
    5e-8; through the region nodes beyond it measured max 3e-6 (README)."""
    r = readers.open_propagator(exported["files"][("propagator", "netcdf")])
    cfg, s = exported["cfg"], exported["quark"].solution
    other = quarkplane.sample(s, 0.5, grid=pipeline.region_grid_of(cfg))
    x2 = other.x2
    q2r = x2.real + (0.5 * REGION_MASS) ** 2
    ok = (q2r >= r._rq2[0]) & (q2r <= r._rq2[-1]) & (q2r < 1e4)
    a, b = r.dressing(x2[ok])
    err = np.maximum(np.abs(a - other.A[ok]) / np.abs(other.A[ok]), np.abs(b - other.B[ok]) / np.abs(other.B[ok]))
    near = np.abs(x2[ok]) <= r.window_gev2
    assert near.sum() > 50 and (~near).sum() > 50
    assert err[near].max() < 1e-5 and np.median(err[near]) < 1e-6
    assert err[~near].max() < 1e-5


def test_reader_refuses_points_outside_the_region(exported):
    r = readers.open_propagator(exported["files"][("propagator", "hdf5")])
    apex = -(0.5 * REGION_MASS) ** 2
    with pytest.raises(ValueError, match="outside the exported region"):
        r.A(np.array([apex - 0.01 + 0j]))             # left of the apex
    with pytest.raises(ValueError, match="outside the exported region"):
        r.A(np.array([0.1 + 5.0j]))                     # beyond the parabola's side
    with pytest.raises(ValueError, match="outside the exported region"):
        r.A(np.array([1e30]))                          # beyond the real axis
    assert np.isfinite(r.A(np.array([apex + 0.01 + 0.01j]))).all()
    # the timelike real axis inside the parabola belongs to the region (Schwarz: real there)
    a = r.A(np.array([apex + 0.02]))
    assert abs(a.imag) < 1e-6 * abs(a)
    with pytest.raises(ValueError, match="no such file"):
        readers.open_propagator(exported["dir"] / "absent.nc")
    with pytest.raises(ValueError, match="not a propagator file"):
        readers.open_propagator(exported["files"][("amplitude", "netcdf")])


@pytest.mark.parametrize("kind", ["propagator", "amplitude"])
def test_files_are_self_describing(exported, kind):
    """Opens with xarray alone and with h5py alone; every variable has units and a long
    name; the file says what produced it (config hash, version) and its conventions."""
    path = exported["files"][(kind, "netcdf")]
    cfg = exported["cfg"]
    ds = xr.open_dataset(path, engine="h5netcdf")
    for name, var in ds.variables.items():
        assert "long_name" in var.attrs, name
        if var.dtype.kind in "fc":
            assert "units" in var.attrs, name
    assert ds.attrs["config_hash"] == cfg.hash()
    assert ds.attrs["package_version"] and ds.attrs["Conventions"].startswith("CF-")
    assert json.loads(ds.attrs["config"])["name"] == cfg.name
    if kind == "propagator":
        assert "Euclidean" in ds.attrs["conventions"] and "Landau" in ds.attrs["conventions"]
        assert ds.attrs["region_continuation"].startswith("shifted")
    else:
        assert "MeV" in ds.attrs["decay_constant_convention"]
    ds.close()
    with h5py.File(path, "r") as h:                      # netCDF-4 is HDF5
        assert h.attrs["config_hash"] == cfg.hash()
        phony = "This is a netCDF dimension but not a netCDF variable"   # netCDF-4's bare dimensions
        real = [n for n in h if h[n].dtype.kind in "fc" and phony not in str(h[n].attrs.get("NAME", ""))]
        assert real and all("units" in h[n].attrs for n in real)


def test_csv_is_the_real_axis_with_units(exported):
    path = exported["files"][("propagator", "csv")]
    lines = path.read_text().splitlines()
    header = next(l for l in lines if not l.startswith("#"))
    assert header.startswith("p2[GeV2],A[1],B[GeV],M[GeV]")
    data = np.loadtxt(path, delimiter=",", comments="#", skiprows=1 + sum(l.startswith("#") for l in lines))
    s = exported["quark"].solution
    assert np.array_equal(data[:, 0], s.q2) and np.array_equal(data[:, 1], s.A)
    assert exported["cfg"].hash() in lines[0]


def _rl(*args, cwd=None):
    return subprocess.run([sys.executable, "-m", "rlmeson", *args], capture_output=True, text=True,
                          cwd=cwd or ROOT, timeout=600)


@pytest.mark.parametrize("args, needle", [
    (["export", "no/such/place"], "SOURCE no/such/place"),
    (["export", "configs/mt-pion.toml", "--what", "everything"], "--what"),
    (["export", "configs/mt-pion.toml", "--format", "csv"], "--format csv"),
    (["export", "configs/mt-pion.toml", "--region-mass", "-1"], "--region-mass"),
    (["export", "configs/mt-pion.toml", "--flavour", "s"], "--flavour"),
    (["export", "configs/mt-pion.toml", "--format", "csv", "--what", "propagator", "--region-mass", "0.5"],
     "--region-mass"),
])
def test_bad_export_requests_are_one_line_errors(args, needle):
    p = _rl(*args)
    assert p.returncode == 2, p.stderr
    lines = p.stderr.strip().splitlines()
    assert len(lines) == 1 and needle in lines[0] and "Traceback" not in p.stderr


def test_export_command_writes_the_csv(exported, tmp_path):
    """The command end to end (the quark comes from the store the fixture filled)."""
    p = _rl("export", str(exported["dir"] / "exchange-test.toml"), "--what", "propagator", "--format", "csv",
            "--out", str(tmp_path / "o"), "--quiet")
    assert p.returncode == 0, p.stderr
    written = tmp_path / "o" / "propagator_l.csv"
    assert written.read_text() == exported["files"][("propagator", "csv")].read_text()


def test_interrupted_export_leaves_no_file(exported, tmp_path, monkeypatch):
    ds = exchange.propagator_dataset(exported["cfg"], exported["quark"], exported["plane"])

    def broken(self, path, **kw):
        Path(path).write_bytes(b"partial")
        raise KeyboardInterrupt

    monkeypatch.setattr(xr.Dataset, "to_netcdf", broken)
    with pytest.raises(KeyboardInterrupt):
        exchange.write_netcdf(ds, tmp_path / "p.nc")
    assert list(tmp_path.iterdir()) == []


@pytest.mark.parametrize("script", ["propagator_with_h5py.py", "propagator_with_xarray.py"])
def test_examples_read_without_the_package(exported, script):
    """The examples rebuild S at a complex point from the stored approximant with h5py or
    xarray only (rlmeson is blocked from importing) and agree with the reader."""
    path = exported["files"][("propagator", "netcdf")]
    block = "import sys; sys.modules['rlmeson'] = None; import runpy; sys.argv = sys.argv[1:]; " \
            "runpy.run_path(sys.argv[0], run_name='__main__')"
    p = subprocess.run([sys.executable, "-c", block, str(ROOT / "examples" / script), str(path), "-0.05", "0.1"],
                       capture_output=True, text=True, timeout=120)
    assert p.returncode == 0, p.stderr
    a = complex(readers.open_propagator(path).A(np.array([-0.05 + 0.1j]))[0])
    line = next(l for l in p.stdout.splitlines() if l.startswith("A"))
    val = complex(line.split("=", 1)[1].replace(" i", "j").replace(" ", "")) if "i" in line.split("=", 1)[1] \
        else complex(line.split("=", 1)[1].strip())
    assert abs(val - a) < 1e-10 * abs(a)


def test_export_from_a_run_directory_matches_the_run(figure_run, tmp_path):
    """SOURCE a run directory: the config is read back from results.h5, the mesons come
    from the store, and the exported amplitude and mass are the run's own."""
    from rlmeson import cli

    run_dir, _ = figure_run
    code = cli.main(["export", str(run_dir), "--what", "amplitude", "--format", "hdf5", "--out",
                     str(tmp_path), "--quiet"])
    assert code == 0
    summary = json.loads((run_dir / "summary.json").read_text())
    with h5py.File(run_dir / "results.h5", "r") as h:
        for m in summary["mesons"]:
            a = readers.open_amplitude(tmp_path / f"amplitude_{m['name']}.h5")
            assert a.mass_gev == m["mass_gev"]
            assert a.attrs["decay_constant_gev"] == m["decay_constant_gev"]
            assert a.attrs["config_hash"] == summary["config_hash"]
            stored = h[f"mesons/{m['name']}/amplitude_re"][()] + 1j * h[f"mesons/{m['name']}/amplitude_im"][()]
            qq, zz = np.meshgrid(a.q2, a.z)
            assert np.allclose(a(qq, zz), stored, rtol=1e-9, atol=1e-12 * np.abs(stored).max())


def test_region_beyond_m_max_is_refused_and_leaves_nothing(exported, tmp_path):
    """M_max is known only after the quark stage; a region past it is refused there, with
    one line naming the option and M_max, exit 2, and no output directory left behind."""
    p = _rl("export", str(exported["dir"] / "exchange-test.toml"), "--what", "propagator", "--region-mass", "5",
            "--out", str(tmp_path / "o"), "--quiet")
    assert p.returncode == 2
    line = p.stderr.strip().splitlines()[-1]
    assert "--region-mass 5" in line and "M_max" in line
    assert not (tmp_path / "o").exists()


def test_file_reports_only_the_confirmed_singularity(exported):
    """The nearest singularity in the file's attributes is the quark stage's confirmed one;
    the other zeros of the approximants are flagged as unconfirmed extrapolations."""
    q = exported["quark"]
    assert q.confirmed
    with h5py.File(exported["files"][("propagator", "netcdf")], "r") as h:
        flags = h["singularity_confirmed"][()]
        zeros = h["singularity_p2_re"][()] + 1j * h["singularity_p2_im"][()]
        assert flags.sum() == 1
        assert abs(zeros[flags == 1][0] - q.singularity_gev2) <= 1e-3 * abs(q.singularity_gev2)
        assert h.attrs["nearest_singularity_re_gev2"] == q.singularity_gev2.real
        assert h.attrs["max_bound_state_mass_gev"] == q.max_bound_state_mass_gev

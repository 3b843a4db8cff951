"""Command line: argument parsing, progress, exit codes.  No numerics here.

    rlmeson quark CONFIG [--flavour NAME] [--json] [--plot FILE.png|.pdf|.svg] [--no-cache]
    rlmeson run CONFIG [--out DIR] [--no-cache] [--quiet]
    rlmeson plot DIR [DIR ...] [--out DIR] [--format png|pdf|svg] [--uncut]
    rlmeson export SOURCE [--what ...] [--format ...] [--out DIR] [--region-mass GEV] [--flavour NAME]
    rlmeson show DIR
    rlmeson fit CONFIG [--out DIR] [--quiet] [--no-cache]
    rlmeson scan CONFIG [--out DIR] [--workers N] [--dask ADDRESS|local]
    (quark, run and export take --set KEY=VALUE overrides of config keys)

Exit codes: 0 success, 2 bad input (one line naming the key, the value and what is
allowed), 1 a computation that could not be completed (one line saying why).
Set RLMESON_DEBUG=1 to see tracebacks.
"""

from __future__ import annotations

import os

# Our dense linear algebra is small (ARPACK on vectors of a few thousand entries): BLAS
# threads only compete with JAX's own thread pool; measured 1.5–2× faster eigen-solves
# with one BLAS thread on 2 cores.  Set before NumPy loads its BLAS; a user's setting wins.
for _var in ("OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse
import json
import shutil
import signal
import sys
import time
import warnings
from pathlib import Path

from . import __version__

EXIT_OK, EXIT_FAILED, EXIT_BAD_INPUT = 0, 1, 2


class UsageError(Exception):
    pass


class _Parser(argparse.ArgumentParser):
    def error(self, message):  # one line, exit 2
        raise UsageError(message)


def _parser() -> argparse.ArgumentParser:
    p = _Parser(prog="rlmeson", description="Mesons in rainbow-ladder truncation.")
    p.add_argument("--version", action="version", version=f"rlmeson {__version__}")
    sub = p.add_subparsers(dest="command", required=True, parser_class=_Parser)
    q = sub.add_parser("quark", help="solve the gap equation and summarise the dressed quark")
    q.add_argument("config")
    q.add_argument("--flavour", help="flavour to solve (default: the first in the config)")
    q.add_argument("--json", action="store_true", help="print one JSON object on stdout")
    q.add_argument("--plot", metavar="FILE", help="draw M(p²) and Z(p²) (format from the suffix: .png, .pdf, .svg)")
    q.add_argument("--no-cache", action="store_true", help="neither read nor write the result cache")
    _add_set(q, "override a config key (dotted, e.g. interaction.omega_gev=0.45); repeatable")
    r = sub.add_parser("run", help="solve the quarks and every meson of the config, write outputs")
    r.add_argument("config")
    r.add_argument("--out", metavar="DIR", help="output directory (default runs/<name>-<hash>)")
    r.add_argument("--no-cache", action="store_true")
    r.add_argument("--quiet", action="store_true", help="no progress lines")
    _add_set(r, "override a config key (dotted, e.g. interaction.omega_gev=0.45); repeatable")
    g = sub.add_parser("plot", help="redraw the figures of runs from their results.h5 (overlaid if several)")
    g.add_argument("dirs", nargs="+", metavar="DIR", help="run directories written by 'rlmeson run'")
    g.add_argument("--out", metavar="DIR", help="where to write the figures (default: the run directory; "
                                                "needed for several runs)")
    g.add_argument("--format", default="png", help="png, pdf or svg (default png)")
    g.add_argument("--uncut", action="store_true", help="keep values above the regulator scale in M(p²)")
    e = sub.add_parser("export", help="write propagators (real axis, complex region, rational approximant) "
                                      "and amplitudes for other codes")
    e.add_argument("source", metavar="SOURCE", help="a run directory (written by 'rlmeson run') or a config file")
    e.add_argument("--what", choices=("propagator", "amplitude", "all"), default="all")
    e.add_argument("--format", choices=("netcdf", "hdf5", "csv"), default="netcdf",
                   help="netcdf (netCDF-4), hdf5 (plain HDF5) or csv (the propagator's real axis only)")
    e.add_argument("--out", metavar="DIR", default=".", help="directory for the files (default: here)")
    e.add_argument("--region-mass", metavar="GEV", type=_positive_gev,
                   help="bound-state mass M whose parabola (apex -M^2/4) the propagator is exported on "
                        "(default: the largest meson mass of the run, else 0.9 M_max)")
    e.add_argument("--flavour", help="only this flavour's propagator (default: every flavour)")
    e.add_argument("--no-cache", action="store_true")
    e.add_argument("--quiet", action="store_true")
    _add_set(e, "override a config key (dotted, e.g. interaction.omega_gev=0.45); repeatable")
    c = sub.add_parser("scan", help="run the config over the axes of its [scan] table")
    c.add_argument("config")
    c.add_argument("--out", metavar="DIR", help="output directory (default runs/<name>-scan-<hash>)")
    c.add_argument("--workers", type=int, default=None, metavar="N",
                   help="worker processes (default: one per core; 1: in this process); with --dask local, "
                        "the LocalCluster's workers")
    c.add_argument("--dask", metavar="ADDRESS", help="run the points on a dask.distributed scheduler at ADDRESS, "
                                                     "or 'local' for a LocalCluster (needs rlmeson[dask])")
    c.add_argument("--no-cache", action="store_true")
    c.add_argument("--quiet", action="store_true")
    _add_set(c, "override a config key of every point; repeatable")
    f = sub.add_parser("fit", help="fit the parameters of the config's [fit] table to its targets")
    f.add_argument("config")
    f.add_argument("--out", metavar="DIR", help="output directory (default runs/<name>-fit-<hash>)")
    f.add_argument("--no-cache", action="store_true")
    f.add_argument("--quiet", action="store_true", help="no progress lines")
    _add_set(f, "override a config key (dotted, e.g. fit.max_iterations=10); repeatable")
    w = sub.add_parser("show", help="print the summary of a run, fit or scan directory")
    w.add_argument("dir", metavar="DIR")
    return p


def _add_set(parser, help_text: str) -> None:
    parser.add_argument("--set", action="append", default=[], metavar="KEY=VALUE", help=help_text)


def _positive_gev(text: str) -> float:
    try:
        v = float(text)
    except ValueError:
        v = float("nan")
    if not (v > 0.0 and v < 100.0):
        raise argparse.ArgumentTypeError(f"{text!r}: allowed a mass in GeV, 0 < M < 100")
    return v


def _progress(quiet: bool, log: list | None = None):
    """A progress printer (stderr, unless quiet); every line also goes to ``log``."""
    t0 = time.perf_counter()

    def say(msg: str) -> None:
        _check_terminated()  # a SIGTERM whose exception was swallowed (see _terminate)
        line = f"[{time.perf_counter() - t0:7.1f} s] {msg}"
        if log is not None:
            log.append(line)
        if not quiet:
            print(line, file=sys.stderr, flush=True)

    return say


def _provenance(argv) -> dict:
    """What produced an output directory: package version, command, time, git commit,
    platform (the shared part of every manifest.json: run, fit, scan)."""
    import platform
    import subprocess
    from datetime import datetime, timezone
    from importlib import metadata

    from . import __version__

    def version(pkg):
        try:
            return metadata.version(pkg)
        except metadata.PackageNotFoundError:
            return None

    commit = None
    try:
        out = subprocess.run(["git", "-C", str(Path(__file__).resolve().parent), "rev-parse", "HEAD"],
                             capture_output=True, text=True, timeout=5)
        if out.returncode == 0:
            commit = out.stdout.strip()
            dirty = subprocess.run(["git", "-C", str(Path(__file__).resolve().parent), "status", "--porcelain",
                                    "--", "."], capture_output=True, text=True, timeout=5).stdout.strip()
            commit += "+uncommitted changes" if dirty else ""
    except (OSError, subprocess.SubprocessError):
        pass
    return {
        "package": "rlmeson", "package_version": __version__,
        "command": ["rlmeson", *map(str, argv)] if argv is not None else None,
        "created_utc": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "git_commit": commit,
        "platform": {"python": platform.python_version(), "machine": platform.machine(),
                     "system": platform.system(), **{p: version(p) for p in ("numpy", "scipy", "jax", "h5py",
                                                                            "xarray", "h5netcdf")}},
    }


def _manifest(cfg, result, argv) -> dict:
    """What produced a run: config hash, package version, platform, timings, git commit."""
    return {
        **_provenance(argv), "config": cfg.name, "config_hash": cfg.hash(),
        "timings_seconds": {"total": result.seconds,
                            "quarks": {n: q.seconds for n, q in result.quarks.items()},
                            "mesons": {m.name: m.seconds for m in [*result.mesons, *result.extrapolated]}},
        "from_cache": {"quarks": {n: q.from_cache for n, q in result.quarks.items()},
                       "mesons": {m.name: m.from_cache for m in [*result.mesons, *result.extrapolated]}},
    }


def _fmt(x, spec=".6g"):
    return "—" if x is None else format(x, spec)


def cmd_quark(args) -> int:
    from .io import config

    cfg = config.load(args.config, args.set)
    flavour = cfg.flavours[0].name if args.flavour is None else args.flavour
    if flavour not in {f.name for f in cfg.flavours}:
        raise UsageError(f"--flavour {flavour!r}: not a flavour of {args.config}; one of "
                         + ", ".join(f.name for f in cfg.flavours))
    if args.plot:
        _check_file_destination("--plot", Path(args.plot))
        from .io.store import remove_stale_temporaries

        remove_stale_temporaries(Path(args.plot).absolute().parent)  # a killed run's half-written figure
    _echo(cfg, config, quiet=False)
    _check_store(cfg, args.no_cache)
    from .workflows import pipeline  # the numerics (JAX) only after the input is checked
    from .io import plots
    if args.plot:
        _figure_format(plots, args.plot)   # before solving: a bad suffix is a usage error
    store = pipeline.store_of(cfg, not args.no_cache)
    say = _progress(args.json)
    res = pipeline.solve_quark(cfg, flavour, store, say)
    summ = res.summary()
    if args.plot:
        inter = summ["inputs"]["interaction"]
        title = (f"dressed quark '{flavour}' of {cfg.name} — {plots.model_text(inter['model'], inter['parameters'])}; "
                 f"{res.solution.kernel.label}")
        plots.mass_function([plots.quark_data(res)], title, args.plot)
        summ["plot"] = str(args.plot)
    if args.json:
        print(json.dumps(summ, allow_nan=False))
        return EXIT_OK
    s = res.solution
    lines = [
        f"quark '{flavour}' of {cfg.name}  [{s.kernel.label}; kernel {'with' if s.kernel.z2_squared else 'without'} Z2^2]",
        f"  m(zeta = {s.zeta_gev:g} GeV) = {1e3 * s.mass_gev:.6g} MeV" + ("   (chiral limit)" if s.chiral else ""),
        f"  Z2 = {s.z2:.8f}   Zm = {s.zm:.8f}   Z4 = {s.z4:.8f}",
        f"  M(0) = {res.mass_function_at_zero_gev:.6f} GeV",
    ]
    if "minus_qbarq_cbrt_gev" in summ:
        ev = summ["minus_qbarq_evolution"]
        lines.append(f"  (-<qbar q>)^(1/3) = {summ['minus_qbarq_cbrt_gev']:.5f} GeV at zeta, "
                     f"{summ['minus_qbarq_cbrt_1gev_gev']:.5f} GeV at 1 GeV, {summ['minus_qbarq_cbrt_2gev_gev']:.5f} GeV "
                     f"at 2 GeV (one-loop evolution, Lambda_QCD = {ev['lambda_qcd_gev']:g} GeV, n_f = {ev['n_f']:g})")
    sing = summ["nearest_singularity_gev2"]
    if sing is not None:
        lines.append(f"  nearest singularity p^2 = {sing['re']:.5f} ± {abs(sing['im']):.5f} i GeV^2  ->  "
                     f"M_max(eta=1/2) = {summ['max_bound_state_mass_gev']:.4f} GeV")
    else:
        lines.append(f"  M_max: {summ['max_bound_state_mass_status']}")
    lines.append(f"  residual {s.residual:.1e} after {s.iterations} Newton steps on {s.radial.size} nodes; "
                 f"{res.seconds:.2f} s" + (" (from cache)" if res.from_cache else ""))
    lines += [f"  note: {n}" for n in s.notes]
    if args.plot:
        lines.append(f"  figure: {args.plot}")
    print("\n".join(lines))
    return EXIT_OK


def _default_out(cfg) -> Path:
    return Path("runs") / f"{cfg.name}-{cfg.hash()[:8]}"


def cmd_run(args) -> int:
    from .io import config

    cfg = config.load(args.config, args.set)
    final = Path(args.out) if args.out else _default_out(cfg)
    out = _stage(final, "--out" if args.out else "the default output directory")  # checked before any work
    _echo(cfg, config, args.quiet)
    _check_store(cfg, args.no_cache)
    from .io import exchange, export, plots  # the numerics (JAX) only after the input is checked
    from .workflows import pipeline
    from .io.store import atomic_write_text
    store = pipeline.store_of(cfg, not args.no_cache)
    log: list[str] = []
    say = _progress(args.quiet, log)
    result = pipeline.run(cfg, store, say)
    summ = result.summary()
    say(f"writing {final}/")
    atomic_write_text(out / "config.json", json.dumps(cfg.to_dict(), indent=2, default=str) + "\n")
    atomic_write_text(out / "manifest.json", json.dumps(_manifest(cfg, result, getattr(args, "argv", None)),
                                                        indent=2, allow_nan=False) + "\n")
    export.write_results_h5(result, out / "results.h5")
    radial = pipeline.bse_grid_of(cfg).radial(pipeline.kernel_of(cfg).q2_max)
    for name, q in result.quarks.items():
        exchange.write_netcdf(exchange.propagator_dataset(cfg, q), out / f"propagator_{name}.nc")
        exchange.write_propagator_csv(cfg, q, out / f"propagator_{name}.csv")
    for m in result.mesons:
        exchange.write_netcdf(exchange.amplitude_dataset(cfg, m, radial), out / f"amplitude_{m.name}.nc")
    # the figures are drawn from results.h5, as `rlmeson plot` redraws them
    summ["figures"] = [f.name for f in plots.draw_runs([plots.read_run(out / "results.h5")], out)]
    atomic_write_text(out / "summary.json", json.dumps(summ, indent=2, allow_nan=False) + "\n")
    atomic_write_text(out / "run.log", "\n".join(log) + "\n")
    _check_terminated()
    _move_into_place(out, final)
    print(_table(result))
    print(f"\noutputs in {final}/ (summary.json, results.h5, figures, netCDF and CSV exports)")
    return EXIT_OK


def _config_of_source(source: str, args_set=()):
    """(config, meson masses of the run or None) of a run directory or a config file."""
    from .io import config

    src = Path(source)
    if src.is_dir():
        path = src / "results.h5"
        try:
            import h5py

            with h5py.File(path, "r") as h:
                cfg_dict = json.loads(h.attrs["config"])
                summ = json.loads(h.attrs["summary"])
        except (OSError, KeyError, ValueError) as e:
            raise UsageError(f"SOURCE {source}: not a run directory of rlmeson (cannot read {path}: "
                             f"{type(e).__name__})") from None
        cfg = config.from_dict(config.apply_overrides(cfg_dict, args_set), source=str(path))
        masses = {m["name"]: (m.get("mass_gev"), tuple(m.get("quarks") or ())) for m in summ.get("mesons", [])}
        return cfg, masses
    if src.is_file():
        return config.load(src, args_set), None
    raise UsageError(f"SOURCE {source}: neither a run directory nor a config file")


def _region_mass(args, cfg, quark, masses) -> float:
    """The exported parabola's mass: the option, else the largest bound-state mass made of
    this flavour (run summary, else the config's mass guesses), capped at 0.9 M_max; always
    below M_max, where the shifted continuation is the analytic one.  With M_max not
    confirmed, the default is capped at 1.3 M(0) (clear of the singularities of these
    interactions, which lie near 2 M(0)) and an explicit value cannot be checked (warned)."""
    m_max = quark.max_bound_state_mass_gev if quark.confirmed else None
    if args.region_mass is not None:
        if m_max is not None and args.region_mass >= m_max:
            raise UsageError(f"--region-mass {args.region_mass:g}: allowed below M_max = {m_max:.5g} GeV for "
                             f"flavour {quark.flavour} (beyond it the parabola encloses the propagator's "
                             "singularity)")
        if m_max is None:
            print(f"rlmeson: warning: --region-mass {args.region_mass:g} cannot be checked against M_max for "
                  f"flavour {quark.flavour} (its singularity is not confirmed)", file=sys.stderr)
        return args.region_mass
    if masses:
        cands = [m for m, qs in masses.values() if m and quark.flavour in qs]
    else:
        cands = [m.mass_guess_gev for m in cfg.mesons if m.mass_guess_gev and quark.flavour in m.quarks]
    top = 0.9 * m_max if m_max is not None else 1.3 * abs(quark.mass_function_at_zero_gev)
    return float(min(max(cands), top) if cands else top)


def cmd_export(args) -> int:
    cfg, masses = _config_of_source(args.source, args.set)
    if args.format == "csv" and args.what != "propagator":
        raise UsageError(f"--format csv: holds the propagator's real axis only; allowed with --what propagator "
                         f"(got --what {args.what})")
    if args.flavour is not None:
        if not args.flavour or args.flavour not in [f.name for f in cfg.flavours]:
            raise UsageError(f"--flavour {args.flavour!r}: allowed {', '.join(f.name for f in cfg.flavours)}")
    if args.what in ("amplitude", "all") and not cfg.mesons:
        raise UsageError(f"--what {args.what}: the config {cfg.name} lists no mesons")
    if args.region_mass is not None and (args.what == "amplitude" or args.format == "csv"):
        raise UsageError(f"--region-mass {args.region_mass:g}: applies to the propagator's complex region; "
                         "allowed with --what propagator or all and --format netcdf or hdf5")
    out = Path(args.out)
    if out.exists() and not out.is_dir():
        raise UsageError(f"--out {out}: exists and is not a directory")
    base = _nearest_existing(out)
    if not base.is_dir() or not os.access(base, os.W_OK | os.X_OK):
        raise UsageError(f"--out {out}: {base} cannot be written")
    created = not out.exists()
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise UsageError(f"--out {out}: cannot be created ({e.strerror or type(e).__name__})") from None
    try:
        return _export(args, cfg, masses, out)
    except BaseException:
        if created and out.is_dir() and not any(out.iterdir()):
            out.rmdir()                    # leave nothing behind a failed export
        raise


def _export(args, cfg, masses, out: Path) -> int:
    _check_store(cfg, args.no_cache)
    from .io import exchange  # the numerics (JAX) only after the input is checked
    from .workflows import pipeline

    store = pipeline.store_of(cfg, not args.no_cache)
    say = _progress(args.quiet)
    names = [args.flavour] if args.flavour else [f.name for f in cfg.flavours]
    if args.what in ("amplitude", "all"):
        names = list(dict.fromkeys(names + [q for m in cfg.mesons for q in m.quarks]))
    quarks = {n: pipeline.solve_quark(cfg, n, store, say) for n in names}
    props = [args.flavour] if args.flavour else [f.name for f in cfg.flavours]
    # every region checked before anything is written
    regions = ({n: _region_mass(args, cfg, quarks[n], masses) for n in props}
               if args.what in ("propagator", "all") and args.format != "csv" else {})
    written = []
    if args.what in ("propagator", "all"):
        for n in props:
            q = quarks[n]
            path = exchange.target(out, "propagator", n, args.format)
            if args.format == "csv":
                exchange.write_propagator_csv(cfg, q, path)
            else:
                plane = pipeline.quark_plane(cfg, q, regions[n], 0.5, store, say)
                exchange.write(exchange.propagator_dataset(cfg, q, plane), path, args.format)
            written.append(path)
    if args.what in ("amplitude", "all"):
        radial = pipeline.bse_grid_of(cfg).radial(pipeline.kernel_of(cfg).q2_max)
        for m in cfg.mesons:
            res = pipeline.solve_meson(cfg, m, quarks, store, say)
            path = exchange.target(out, "amplitude", m.name, args.format)
            exchange.write(exchange.amplitude_dataset(cfg, res, radial), path, args.format)
            written.append(path)
    for p in written:
        print(p)
    return EXIT_OK


def cmd_scan(args) -> int:
    """Every point of the [scan] axes through the pipeline; one Dataset, figures, a log."""
    import hashlib

    from .workflows import scans as scanning
    from .workflows.progress import bar

    sc = scanning.load(args.config, args.set)
    if args.workers is not None and not 1 <= args.workers <= 64:
        raise UsageError(f"--workers {args.workers}: allowed 1 to 64")
    if args.dask is not None:
        try:
            import dask.distributed  # noqa: F401
        except ImportError:
            raise UsageError(f"--dask {args.dask}: needs dask.distributed (pip install 'rlmeson[dask]')") from None
    tag = hashlib.sha256(json.dumps([sc.base, [a.__dict__ for a in sc.axes], sc.error_bar], sort_keys=True,
                                    default=str).encode()).hexdigest()[:8]
    final = Path(args.out) if args.out else Path("runs") / f"{sc.name}-scan-{tag}"
    out = _stage(final, "--out" if args.out else "the default output directory")
    first = sc.config_at(sc.points()[0])
    _check_store(first, args.no_cache)
    from .workflows import executors

    log: list[str] = []
    say = _progress(args.quiet, log)
    n = len(sc.points())
    ex = executors.make(args.workers, args.dask, n)
    say(f"scan of {sc.name}: {n} points over {', '.join(a.key for a in sc.axes)}; {ex.description}")
    with ex, bar(n, "point", args.quiet, log) as b:
        def each(i, total, r):
            _check_terminated()
            where = ", ".join(f"{a.key} = {v:g}" for a, v in zip(sc.axes, r.point))
            how = "failed — " + r.message if r.status != "ok" else (
                "ok, from the store" if r.from_cache else f"ok, computed {', '.join(r.computed)}")
            b.step(f"#{r.index + 1} ({where}): {how} [{r.seconds:.1f} s]")

        res = scanning.execute(sc, cache=not args.no_cache, progress=each, executor=ex)
    if "chiral_condensate_gev3" in res.dataset.attrs:
        say(f"GMOR: chiral condensate -<qbar q>^0 = {res.dataset.attrs['chiral_condensate_gev3']:.6g} GeV^3 at "
            f"zeta = {res.dataset.attrs['gmor_renormalisation_point_gev']:g} GeV")
    from .io.store import atomic_write_text

    res.write(out, {"command": ["rlmeson", *map(str, args.argv)], "package_version": __version__})
    atomic_write_text(out / "manifest.json", json.dumps(
        {**_provenance(getattr(args, "argv", None)), "config": sc.base.get("name"),
         "timings_seconds": {"total": getattr(res, "seconds", None)}}, indent=2, allow_nan=False, default=str) + "\n")
    atomic_write_text(out / "run.log", "\n".join(log) + "\n")
    _check_terminated()
    _move_into_place(out, final)
    failed = len(res.failed)
    print(f"{n - failed} of {n} points ok; outputs in {final}/ (scan.nc, scan.json, figures)")
    return EXIT_OK


def cmd_fit(args) -> int:
    """Least squares of the [fit] parameters on its targets; fit.json, the fitted config,
    a report and a figure."""
    from .io import config
    from .workflows import fitspec

    spec = fitspec.load(args.config, args.set)
    start = spec.config_at(spec.start)
    final = Path(args.out) if args.out else Path("runs") / f"{spec.name}-fit-{start.hash()[:8]}"
    out = _stage(final, "--out" if args.out else "the default output directory")  # checked before any work
    _echo(start, config, args.quiet)
    _check_store(start, args.no_cache)
    from .workflows import fit, pipeline
    from .workflows.progress import bar
    from .io.store import atomic_write_text

    store = pipeline.store_of(start, not args.no_cache)
    log: list[str] = []
    with bar(None, "fit step", args.quiet, log) as b:
        b.note(f"fit of {spec.name}: " + ", ".join(p.key for p in spec.parameters) + " to "
               + ", ".join(t.name for t in spec.targets) + f"; derivatives {spec.derivatives}")

        def say(msg):
            _check_terminated()
            b.step(msg.split(": ", 1)[-1] if msg.startswith("step ") else msg)

        try:
            result = fit.run_fit(spec, store, say)
        except fit.FitFailed as e:
            raise RuntimeError(str(e)) from None
    fj = fit.write_outputs(result, out)
    atomic_write_text(out / "manifest.json", json.dumps(
        {**_provenance(getattr(args, "argv", None)), "config": fj.get("config"), "config_hash": fj.get("config_hash"),
         "timings_seconds": {"total": result.seconds}}, indent=2, allow_nan=False) + "\n")
    atomic_write_text(out / "fit.log", "\n".join(log) + "\n")
    _check_terminated()
    _move_into_place(out, final)
    print("\n".join(fit.report_lines(fj)))
    print(f"\noutputs in {final}/ (fit.json, {fit.FITTED_CONFIG}, {fit.REPORT}, {fit.FIGURE}, fit.log); "
          f"`rlmeson run {final}/{fit.FITTED_CONFIG}` reproduces the fit")
    return EXIT_OK


def _show_fit(d: Path) -> int:
    from .workflows import fit

    try:
        fj = json.loads((d / "fit.json").read_text(encoding="utf-8"))
        if not isinstance(fj, dict) or fj.get("package") != "rlmeson":
            raise ValueError("not written by rlmeson")
        lines = fit.report_lines(fj)
    except (OSError, ValueError, KeyError, TypeError) as e:
        raise UsageError(f"DIR {d}: not a fit directory of rlmeson (fit.json: {type(e).__name__})") from None
    print("\n".join(lines))
    return EXIT_OK


def cmd_show(args) -> int:
    """The summary of a run directory, read from its summary.json (no numerics)."""
    d = Path(args.dir)
    if (d / "fit.json").is_file() and not (d / "summary.json").exists():
        return _show_fit(d)
    if (d / "scan.json").is_file() and not (d / "summary.json").exists():
        return _show_scan(d)
    try:
        summ = json.loads((d / "summary.json").read_text(encoding="utf-8"))
    except (OSError, ValueError) as e:
        raise UsageError(f"DIR {d}: not a run directory of rlmeson (summary.json: {type(e).__name__})") from None
    if not isinstance(summ, dict) or summ.get("package") != "rlmeson":
        raise UsageError(f"DIR {d}: not a run directory of rlmeson (summary.json not written by rlmeson)")
    print(f"{summ.get('config')}  (config hash {summ.get('config_hash')}, rlmeson {summ.get('package_version')})")
    print(f"  {summ.get('regularisation_description', summ.get('regularisation'))}")
    for name, q in (summ.get("quarks") or {}).items():
        mm = q.get("max_bound_state_mass_gev")
        print(f"  quark {name}: m(zeta) = {1e3 * q['current_mass_gev']:.6g} MeV, M(0) = "
              f"{q['mass_function_at_zero_gev']:.6f} GeV, M_max = {'—' if mm is None else f'{mm:.4f} GeV'}")
    conv = None
    for m in summ.get("mesons") or []:
        conv = m.get("decay_constant_convention")
        err = m.get("mass_error_gev")
        print(f"  {m['name']:<10}{m['channel']:<14}M = {m['mass_gev']:.6f} GeV"
              f"{'' if err is None else f' ± {err:.1e}'}   f = {_fmt(m['decay_constant_gev'], '.6f')} GeV"
              f"{'   (extrapolated)' if m.get('extrapolated') else ''}"
              f"{'' if m.get('validated', True) else '   (not validated: ' + str(m.get('validation_reason')) + ')'}")
    if conv:
        print(f"  decay constants: {conv}")
    return EXIT_OK


def _show_scan(d: Path) -> int:
    """The summary of a scan directory, from its scan.json (no numerics)."""
    try:
        doc = json.loads((d / "scan.json").read_text(encoding="utf-8"))
        points = doc["points"]
        axes = doc["axes"]
    except (OSError, ValueError, KeyError, TypeError) as e:
        raise UsageError(f"DIR {d}: not a scan directory of rlmeson (scan.json: {type(e).__name__})") from None
    ok = sum(p.get("status") == "ok" for p in points)
    cached = sum(bool(p.get("from_cache")) for p in points)
    print(f"scan {doc.get('scan')}: {len(points)} points over {', '.join(axes)}; {ok} ok, "
          f"{len(points) - ok} failed; {cached} from the store; {doc.get('executor', '')}")
    if "chiral_condensate_gev3" in doc:
        print(f"  chiral condensate -<qbar q>^0 = {doc['chiral_condensate_gev3']:.6g} GeV^3 at zeta = "
              f"{doc.get('gmor_renormalisation_point_gev')} GeV")
    mesons = sorted({m for p in points for m in (p.get("mesons") or {})})
    print("  " + "".join(f"{a.rsplit('.', 1)[-1][:16]:>17}" for a in axes)
          + "".join(f"{m + ' M':>12}{m + ' f':>12}" for m in mesons) + "  status")
    for p in points:
        row = "".join(f"{p['point'].get(a, float('nan')):>17.6g}" for a in axes)
        for m in mesons:
            v = (p.get("mesons") or {}).get(m) or {}
            row += "".join(f"{x:>12.6f}" if isinstance(x, (int, float)) else f"{'—':>12}"
                           for x in (v.get("mass_gev"), v.get("decay_constant_gev")))
        print(f"  {row}  {p.get('status')}{'' if p.get('status') == 'ok' else ': ' + str(p.get('message'))[:60]}")
    return EXIT_OK


def _table(result) -> str:
    """The results table: masses with their grid error, f (convention labelled), the
    normalisation agreement, the identity that checks each state (AV-WTI for a massive
    pseudoscalar, |λ(0) − 1| for a chiral-limit Goldstone boson) and the next eigenvalue;
    results through an unvalidated route are marked and explained below the table; the
    flavours, the momentum partition η and the mass's η spread |M(η₂) − M(η)| close each
    row; a mass extrapolated beyond M_max shows its extrapolation error and 'extrapolated'."""
    conv = result.config.output.decay_constant_convention
    rows = [f"{result.config.name}: {result.summary()['regularisation_description']}",
            f"{'meson':<10}{'channel':<14}{'M [GeV]':>12}{'± (grid)':>10}{'f [GeV]':>11}{'± (grid)':>10}"
            f"{'N agree':>9}{'identity':>17}{'next λ':>8}{'quarks':>8}{'η':>7}{'Δ_η M':>9}{'C':>4}{'n':>3}",
            "-" * 132]
    notes = []
    for m in [*result.mesons, *getattr(result, "extrapolated", [])]:
        s = m.summary()
        if s.get("extrapolated"):
            mass, err, ident = f"{s['mass_gev']:.6f}", _fmt(s["mass_error_gev"], ".1e"), "extrapolated"
        elif "goldstone_residual" in s:
            mass, err = "0 (chiral)", "—"
            ident = f"|λ(0)-1| {_fmt(s['goldstone_residual'], '.0e')}"
        else:
            mass, err = f"{s['mass_gev']:.6f}", _fmt(s["mass_error_gev"], ".1e")
            ident = "—" if s.get("awti_residual") is None else f"AV-WTI {s['awti_residual']:.1e}"
        name = m.name if s["validated"] else m.name + " *"
        if not s["validated"]:
            notes.append(f"* {m.name}: not validated: {s['validation_reason']}")
        rows.append(f"{name:<10}{m.channel:<14}{mass:>12}{err:>10}"
                    f"{_fmt(s['decay_constant_gev'], '.6f'):>11}{_fmt(s['decay_constant_error_gev'], '.1e'):>10}"
                    f"{_fmt(s['normalisation_agreement'], '.1e'):>9}{ident:>17}"
                    f"{_fmt(s['next_eigenvalue'], '.3f'):>8}{' '.join(s['flavours']):>8}{s['eta']:>7.3f}"
                    f"{_fmt(s.get('eta_spread_gev'), '.1e'):>9}"
                    f"{ {1: '+', -1: '-'}.get(s.get('c_parity'), '—'):>4}{_fmt(s.get('excitation'), 'd'):>3}")
    rows.append(f"decay constants in the {conv} MeV convention "
                f"({'f_pi ~ 92 MeV' if conv == '92' else 'f_pi ~ 131 MeV, sqrt 2 larger'}); "
                "± (grid): difference to a coarser grid (extrapolated: spread of the continuations); "
                "Δ_η M: the mass's change at a second momentum partition (— not computed); "
                "C: the state's charge parity (— unequal flavours: not a symmetry); n: its excitation")
    return "\n".join(rows + notes)


def _figure_format(plots, path) -> str:
    try:
        return plots.figure_format(path)
    except plots.PlotError as e:
        raise UsageError(str(e)) from None


def cmd_plot(args) -> int:
    """Redraw the figures of one or more runs from their results.h5 (no solving); with
    several runs, M(p²) and the figures of same-named mesons are overlaid."""
    from .io import plots

    fmt = args.format.lower()
    if fmt not in plots.FORMATS:
        raise UsageError(f"--format {args.format!r}: one of " + ", ".join(plots.FORMATS))
    try:
        runs = [plots.read_run(d) for d in args.dirs]
    except plots.PlotError as e:
        raise UsageError(str(e)) from None
    if args.out:
        out = Path(args.out)
    elif len(args.dirs) == 1:
        out = Path(args.dirs[0]) if Path(args.dirs[0]).is_dir() else Path(args.dirs[0]).parent
    else:
        raise UsageError("--out DIR is needed to overlay several runs")
    out.mkdir(parents=True, exist_ok=True)
    files = plots.draw_runs(runs, out, fmt, cut_above_regulator=not args.uncut)
    print("\n".join(str(f) for f in files))
    return EXIT_OK


# ----------------------------------------------------------------------------------------
# Before the work: echo, plausibility, destinations

def _echo(cfg, config, quiet: bool) -> None:
    """The resolved inputs (unless quiet) and the plausibility warnings (always)."""
    if not quiet:
        for line in config.describe(cfg):
            print(f"rlmeson: {line}", file=sys.stderr)
    for w in config.plausibility_warnings(cfg):
        print(f"rlmeson: warning: {w}", file=sys.stderr)
    sys.stderr.flush()


def _check_store(cfg, no_cache: bool) -> None:
    """The result cache must be usable before anything is computed (exit 2 otherwise)."""
    if no_cache:
        return
    from .io.store import Store

    store = Store(cfg.output.cache_dir) if cfg.output.cache_dir else Store()
    why = store.check_writable()
    if why is not None:
        source = ("[output] cache_dir" if cfg.output.cache_dir else
                  "$RLMESON_CACHE" if os.environ.get("RLMESON_CACHE") else "the default cache location")
        raise UsageError(f"result cache ({source}) unusable: {why}; choose another or run with --no-cache")


def _nearest_existing(path: Path) -> Path:
    p = path.absolute()
    while not p.exists() and p != p.parent:
        p = p.parent
    return p


def _check_file_destination(option: str, path: Path) -> None:
    """A file to be written later: not a directory, in a directory that can be written."""
    if path.is_dir():
        raise UsageError(f"{option} {path}: is a directory, not a file name")
    parent = _nearest_existing(path.parent)
    if not parent.is_dir():
        raise UsageError(f"{option} {path}: {parent} is not a directory")
    if not os.access(parent, os.W_OK | os.X_OK):
        raise UsageError(f"{option} {path}: {parent} cannot be written")
    try:
        path.absolute().parent.mkdir(parents=True, exist_ok=True)
    except OSError as e:
        raise UsageError(f"{option} {path}: cannot write there ({e.strerror or type(e).__name__})") from None


_STAGED: list[Path] = []   # fresh run directories not yet moved into place (removed on failure)


def _is_run_directory(d: Path) -> bool:
    try:
        return json.loads((d / "summary.json").read_text(encoding="utf-8")).get("package") == "rlmeson"
    except (OSError, ValueError, AttributeError):
        pass
    try:   # a fit directory (fit.json)
        return json.loads((d / "fit.json").read_text(encoding="utf-8")).get("package") == "rlmeson"
    except (OSError, ValueError, AttributeError):
        return False


def _stage(final: Path, option: str) -> Path:
    """Check the output directory and create the fresh one the run is written into.

    ``final`` may be absent, an empty directory or an earlier run (a summary.json written
    by rlmeson), which is then replaced as a whole; anything else is refused before any
    work, as is a place that cannot be written.  The fresh directory sits beside
    ``final`` under a temporary name; leftovers of killed runs there are removed."""
    from .io import store

    here = Path.cwd().resolve()
    if final.exists() and (final.resolve() == here or final.resolve() in here.parents):
        raise UsageError(f"{option} {final}: is the working directory or contains it (a run replaces its "
                         "output directory whole); choose another")
    if final.is_symlink() or final.exists():
        if not final.is_dir():
            raise UsageError(f"{option} {final}: exists and is not a directory")
        try:
            occupied = any(final.iterdir())
        except OSError as e:
            raise UsageError(f"{option} {final}: cannot be read ({e.strerror or type(e).__name__})") from None
        if occupied and not _is_run_directory(final):
            raise UsageError(f"{option} {final}: a non-empty directory that is not an rlmeson run "
                             "(no summary.json of rlmeson in it); choose a new or empty directory")
    parent = final.absolute().parent
    base = _nearest_existing(parent)
    if not base.is_dir():
        raise UsageError(f"{option} {final}: {base} is not a directory")
    try:
        parent.mkdir(parents=True, exist_ok=True)
        store.remove_stale_temporaries(parent)
        staged = store.temporary_directory(final)
    except OSError as e:
        raise UsageError(f"{option} {final}: cannot write there ({e.strerror or type(e).__name__})") from None
    _STAGED.append(staged)
    return staged


def _move_into_place(staged: Path, final: Path) -> None:
    """Replace ``final`` (absent, empty or an earlier run) by the finished run."""
    from .io import store

    old = None
    if final.exists():
        old = store.temporary_directory(final, create=False)
        os.rename(final, old)
    try:
        os.rename(staged, final)
    except OSError:
        if old is not None:
            os.rename(old, final)
        raise
    _STAGED.remove(staged)
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


def _discard_staged() -> None:
    while _STAGED:
        shutil.rmtree(_STAGED.pop(), ignore_errors=True)


def _one_line_warning(message, category, filename, lineno, file=None, line=None):
    text = " ".join(str(message).split())
    print(f"rlmeson: warning: {text}", file=file or sys.stderr, flush=True)


_TERMINATED: list[int] = []


def _terminate(signum, frame):
    """SIGTERM: stop like Ctrl-C.  The exception can be raised inside a callback that
    swallows it (JAX's garbage-collection hook, while JAX is imported), so the signal is
    also recorded and checked again at every progress step and before the output is
    moved into place."""
    _TERMINATED.append(signum)
    raise KeyboardInterrupt


def _check_terminated() -> None:
    if _TERMINATED:
        raise KeyboardInterrupt


def main(argv=None) -> int:
    """The command line (``rlmeson`` and ``python3 -m rlmeson``): parse, run, one-line
    errors and warnings, exit code; temporary output of an interrupted run is removed."""
    # like ``python3 -m rlmeson``, find a user interaction module in the working directory
    if "" not in sys.path and os.getcwd() not in sys.path:
        sys.path.append(os.getcwd())
    previous = None
    try:
        previous = signal.signal(signal.SIGTERM, _terminate)
    except ValueError:  # not the main thread
        pass
    try:
        with warnings.catch_warnings():
            warnings.showwarning = _one_line_warning
            return _main(argv)
    finally:
        _discard_staged()
        _TERMINATED.clear()
        if previous is not None:
            signal.signal(signal.SIGTERM, previous)


def _main(argv) -> int:
    from .io.config import ConfigError

    try:
        try:
            args = _parser().parse_args(argv)
            args.argv = list(sys.argv[1:] if argv is None else argv)
        except SystemExit as e:  # --help, --version
            return EXIT_OK if not e.code else EXIT_BAD_INPUT
        return {"quark": cmd_quark, "run": cmd_run, "plot": cmd_plot, "export": cmd_export,
                "show": cmd_show, "scan": cmd_scan, "fit": cmd_fit}[args.command](args)
    except (ConfigError, UsageError) as e:
        print(f"rlmeson: {e}", file=sys.stderr)
        return EXIT_BAD_INPUT
    except KeyboardInterrupt:
        print("rlmeson: interrupted", file=sys.stderr)
        return EXIT_FAILED
    except Exception as e:  # a computation that failed: one line, no traceback
        if os.environ.get("RLMESON_DEBUG"):
            raise
        msg = " ".join(str(e).split()) or type(e).__name__
        print(f"rlmeson: {type(e).__name__}: {msg}", file=sys.stderr)
        return EXIT_FAILED


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())

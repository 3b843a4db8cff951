"""Parameter scans: a grid of resolved configs, one pipeline run per point, gathered into
one xarray Dataset over the axes.

A ``[scan]`` table in a config declares the axes (our own layout)::

    [scan]
    error_bar = false       # the second, coarser grid per point: false (default), true, or
                            # a list of point numbers, e.g. [1, 10] (1 to N, as in the log)

    [[scan.axis]]
    key = "quarks.l.current_mass_gev"         # any config key, as for --set
    values = [0.002, 0.004, 0.008]            # explicit ...
    # range = { start = 0.002, stop = 0.02, points = 5, spacing = "log" }   # ... or a range

    [[scan.axis]]
    key = "interaction.omega_gev"
    values = [0.4, 0.5, 0.6]
    linked = { key = "interaction.strength_gev2", product = 0.512 }   # D = 0.512 / omega

Points are the Cartesian product of the axes.  Every point is a config of its own
(validated like a file, with its own hash), run through ``pipeline.run`` with the result
cache: the store is the journal, so a scan that was stopped recomputes no finished point.
A point that fails (no bound state, a solver that did not converge, a bad value) is kept
with its status and message; the scan goes on.
"""

from __future__ import annotations

import itertools
import math
import time
from dataclasses import dataclass

import numpy as np

from ..io.config import Config, ConfigError, apply_overrides, entry_table, finite_number, from_dict

STATUS_OK, STATUS_FAILED = "ok", "failed"
#: Per-meson observables of summary.json gathered as variables ``<meson>_<key>``.
MESON_KEYS = ("mass_gev", "mass_error_gev", "decay_constant_gev", "decay_constant_error_gev",
              "normalisation_agreement", "awti_residual", "in_meson_condensate_gev2", "next_eigenvalue",
              "eta_spread_gev",
              "extrapolated", "validated", "c_parity", "excitation")
QUARK_KEYS = ("mass_function_at_zero_gev", "max_bound_state_mass_gev", "Z2", "Z4", "minus_qbarq_cbrt_gev")
UNITS = {"gev": "GeV", "gev2": "GeV2", "gev-2": "GeV-2"}


@dataclass(frozen=True)
class Axis:
    key: str
    values: tuple[float, ...]
    linked_key: str | None = None
    linked_product: float | None = None

    @property
    def name(self) -> str:
        return self.key.replace(".", "__")

    def overrides(self, value: float) -> list[str]:
        out = [f"{self.key}={value!r}"]
        if self.linked_key is not None:
            out.append(f"{self.linked_key}={self.linked_product / value!r}")
        return out


@dataclass(frozen=True)
class Scan:
    base: dict                   # the config's TOML layout without [scan]
    axes: tuple[Axis, ...]
    error_bar: bool | tuple[int, ...]    # every point, none, or these point numbers (1 to N)
    name: str

    def points(self) -> list[tuple[float, ...]]:
        return list(itertools.product(*(a.values for a in self.axes)))

    def error_bar_at(self, index: int) -> bool:
        """Whether point ``index`` (0-based, in the order of ``points()``) gets the second,
        coarser grid (its number in ``[scan] error_bar`` is ``index + 1``)."""
        if isinstance(self.error_bar, bool):
            return self.error_bar
        return index + 1 in self.error_bar

    def config_at(self, point, error_bar: bool | None = None) -> Config:
        eb = (self.error_bar is True) if error_bar is None else error_bar
        over = [o for a, v in zip(self.axes, point) for o in a.overrides(v)]
        d = apply_overrides(self.base, over + [f"output.error_bar={'true' if eb else 'false'}"])
        return from_dict(d, source=f"scan point {dict(zip((a.key for a in self.axes), point))}")



def _axis(i: int, t) -> Axis:
    where = f"scan.axis[{i + 1}]"
    entry_table(where, t, ("key", "values", "range", "linked"), "a table with key and values or range")
    key = t.get("key")
    if not isinstance(key, str) or not key or key.startswith("scan"):
        raise ConfigError(f"{where}.key", key, "a dotted config key, e.g. quarks.l.current_mass_gev")
    if ("values" in t) == ("range" in t):
        raise ConfigError(where, sorted(t), "exactly one of values or range")
    if "values" in t:
        vals = t["values"]
        if not isinstance(vals, list) or not vals:
            raise ConfigError(f"{where}.values", vals, "a non-empty list of numbers")
        values = tuple(finite_number(f"{where}.values", v) for v in vals)
    else:
        r = t["range"]
        if not isinstance(r, dict) or set(r) - {"start", "stop", "points", "spacing"} or \
                not {"start", "stop", "points"} <= set(r):
            raise ConfigError(f"{where}.range", r, "{ start, stop, points, spacing = \"linear\" or \"log\" }")
        a, b = finite_number(f"{where}.range.start", r["start"]), finite_number(f"{where}.range.stop", r["stop"])
        n = r["points"]
        if isinstance(n, bool) or not isinstance(n, int) or not 1 <= n <= 1000:
            raise ConfigError(f"{where}.range.points", n, "an integer from 1 to 1000")
        spacing = r.get("spacing", "linear")
        if spacing not in ("linear", "log"):
            raise ConfigError(f"{where}.range.spacing", spacing, "\"linear\" or \"log\"")
        if spacing == "log" and (a <= 0 or b <= 0):
            raise ConfigError(f"{where}.range.start", a, "positive ends for a log range")
        if a == b and n > 1:
            raise ConfigError(f"{where}.range.stop", b, "different from start when points > 1")
        values = tuple(float(x) for x in (np.geomspace(a, b, n) if spacing == "log" else np.linspace(a, b, n)))
    linked = t.get("linked")
    lk = lp = None
    if linked is not None:
        if not isinstance(linked, dict) or set(linked) != {"key", "product"} or not isinstance(linked["key"], str):
            raise ConfigError(f"{where}.linked", linked, "{ key = \"<config key>\", product = <number> } "
                                                         "(linked value = product / axis value)")
        lk, lp = linked["key"], finite_number(f"{where}.linked.product", linked["product"])
        if any(v == 0 for v in values):
            raise ConfigError(f"{where}.values", list(values), "non-zero values on a linked axis")
    return Axis(key=key, values=values, linked_key=lk, linked_product=lp)


def from_config_dict(d: dict, overrides=()) -> Scan:
    """The scan of a config dict (TOML layout) with a ``[scan]`` table; every point is
    validated here, before any work."""
    d = apply_overrides(d, overrides)
    t = d.get("scan")
    if not isinstance(t, dict):
        raise ConfigError("scan", t, "a [scan] table with at least one [[scan.axis]]")
    unknown = set(t) - {"axis", "error_bar"}
    if unknown:
        k = sorted(unknown)[0]
        raise ConfigError(f"scan.{k}", t[k], "unknown key; allowed: axis, error_bar")
    axes_t = t.get("axis")
    if not isinstance(axes_t, list) or not axes_t:
        raise ConfigError("scan.axis", axes_t, "one or more [[scan.axis]] tables")
    axes = tuple(_axis(i, a) for i, a in enumerate(axes_t))
    keys = [a.key for a in axes] + [a.linked_key for a in axes if a.linked_key]
    if len(set(keys)) != len(keys):
        raise ConfigError("scan.axis", keys, "each config key on one axis only")
    eb = t.get("error_bar", False)
    n_points = math.prod(len(a.values) for a in axes)
    if isinstance(eb, list):
        if not eb or any(isinstance(i, bool) or not isinstance(i, int) or not 1 <= i <= n_points for i in eb):
            raise ConfigError("scan.error_bar", eb, f"true, false, or a non-empty list of point numbers "
                                                    f"from 1 to {n_points}")
        eb = tuple(sorted(set(eb)))
    elif not isinstance(eb, bool):
        raise ConfigError("scan.error_bar", eb, "true, false, or a list of point numbers (1 to N, in "
                                                "the order of the progress lines and scan.json)")
    base = {k: v for k, v in d.items() if k != "scan"}
    base_cfg = from_dict(base)
    scan = Scan(base=base, axes=axes, error_bar=eb, name=base_cfg.name)
    for i, p in enumerate(scan.points()):           # every point valid before any work
        scan.config_at(p, scan.error_bar_at(i))
    return scan


def load(path, overrides=()) -> Scan:
    """A scan from a config file (a relative cache_dir is relative to the file)."""
    from ..io.config import read_toml

    return from_config_dict(read_toml(path), overrides)


# ----------------------------------------------------------------------------------------
# Running

@dataclass(frozen=True)
class PointResult:
    point: tuple[float, ...]
    config_hash: str
    status: str
    message: str
    summary: dict | None
    seconds: float
    #: the stage entries this point computed (``"quark l"``, ``"pion"``); the others were
    #: read from the store (computed earlier, or by another process sharing the store)
    computed: tuple[str, ...] = ()
    index: int = 0
    #: peak resident memory of the process that computed the point, after it [MB]
    peak_rss_mb: float | None = None

    @property
    def from_cache(self) -> bool | None:
        return None if self.summary is None else not self.computed


def run_point(scan: Scan, point, cache: bool = True, index: int | None = None) -> PointResult:
    """One point through the pipeline (a failure is recorded, not raised).  ``index``
    (the point's number in ``scan.points()``) decides the error bar when ``[scan]
    error_bar`` selects points."""
    from . import pipeline

    t0 = time.perf_counter()
    if index is None:
        index = scan.points().index(tuple(point))
    cfg = scan.config_at(point, scan.error_bar_at(index))
    try:
        store = pipeline.store_of(cfg, cache)
        summ = pipeline.run(cfg, store, lean=True).summary()     # no figure data, no direct cross-check
        computed = tuple([f"quark {f}" for f, q in summ["quarks"].items() if not q.get("from_cache")]
                         + [m["name"] for m in summ["mesons"] if not m.get("from_cache")])
        return PointResult(tuple(point), cfg.hash(), STATUS_OK, "", summ, time.perf_counter() - t0,
                           computed, index, _peak_rss_mb())
    except KeyboardInterrupt:
        raise
    except Exception as e:  # noqa: BLE001  (a failed point is a result of the scan)
        msg = f"{type(e).__name__}: {' '.join(str(e).split())}"
        return PointResult(tuple(point), cfg.hash(), STATUS_FAILED, msg, None, time.perf_counter() - t0,
                           (), index, _peak_rss_mb())


def _peak_rss_mb() -> float | None:
    try:
        import resource
    except ImportError:                       # not on POSIX
        return None
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0   # KiB on Linux


def _point_task(args) -> PointResult:
    """What an executor runs per point (module level: picklable for worker processes)."""
    scan, index, cache = args
    return run_point(scan, scan.points()[index], cache, index)


def run(scan: Scan, workers: int | None = 1, cache: bool = True, progress=None, executor=None,
        dask: str | None = None) -> list[PointResult]:
    """Every point, results in point order.  ``executor``: an :mod:`rlmeson.workflows.executors`
    executor; else one made from ``workers`` (1: in this process; N: N worker processes;
    None: one per core) or ``dask`` (a scheduler address or ``"local"``).
    ``progress(done, total, result)`` is called as each point finishes."""
    from . import executors

    pts = scan.points()
    say = progress or (lambda *_: None)
    done = [0]

    def each(i, r):
        done[0] += 1
        say(done[0], len(pts), r)

    own = executor is None
    ex = executors.make(workers, dask, len(pts)) if own else executor
    try:
        return ex.map(_point_task, [(scan, i, cache) for i in range(len(pts))], each)
    finally:
        if own:
            ex.close()


def dataset(scan: Scan, results: list[PointResult]):
    """One xarray Dataset over the axes: per meson ``<meson>_<observable>``, per quark
    ``quark_<flavour>_<observable>``, and per point ``status``, ``message``, ``config_hash``."""
    import xarray as xr

    from .. import __version__

    shape = tuple(len(a.values) for a in scan.axes)
    dims = tuple(a.name for a in scan.axes)
    coords = {a.name: (a.name, np.asarray(a.values), {"long_name": a.key, "units": _units(a.key)})
              for a in scan.axes}
    for a in scan.axes:
        if a.linked_key:
            coords[a.linked_key.replace(".", "__")] = (a.name, a.linked_product / np.asarray(a.values),
                                                       {"long_name": f"{a.linked_key} = {a.linked_product:g} / "
                                                        f"{a.key}", "units": _units(a.linked_key)})
    data: dict[str, np.ndarray] = {}
    units: dict[str, str] = {}
    status = np.empty(shape, dtype=object)
    message = np.empty(shape, dtype=object)
    hashes = np.empty(shape, dtype=object)
    index = {p: np.unravel_index(i, shape) for i, p in enumerate(scan.points())}
    for r in results:
        ix = index[r.point]
        status[ix], message[ix], hashes[ix] = r.status, r.message, r.config_hash
        if r.summary is None:
            continue
        for m in r.summary["mesons"]:
            for k in MESON_KEYS:
                _put(data, units, f"{m['name']}_{k}", k, m.get(k), shape, ix)
        for f, q in r.summary["quarks"].items():
            for k in QUARK_KEYS:
                _put(data, units, f"quark_{f}_{k}", k, q.get(k), shape, ix)
    variables = {name: (dims, arr, {"units": units[name], "long_name": name.replace("_", " ")})
                 for name, arr in data.items()}
    variables["status"] = (dims, status.astype(str), {"long_name": "ok or failed"})
    variables["message"] = (dims, message.astype(str), {"long_name": "why a point failed"})
    variables["config_hash"] = (dims, hashes.astype(str), {"long_name": "config hash of the point"})
    return xr.Dataset(variables, coords=coords, attrs={
        "title": f"parameter scan of {scan.name}", "package": "rlmeson", "package_version": __version__,
        "axes": ", ".join(a.key for a in scan.axes),
        "error_bar": (("all points" if scan.error_bar else "none") if isinstance(scan.error_bar, bool)
                      else "points " + ", ".join(map(str, scan.error_bar))),
        "decay_constant_convention": next((m["decay_constant_convention"] for r in results if r.summary
                                           for m in r.summary["mesons"]), "")})


def _units(key: str) -> str:
    suffix = key.rsplit("_", 1)[-1]
    return UNITS.get(suffix, "1")


def _put(data, units, name, key, value, shape, ix):
    if name not in data:
        data[name] = np.full(shape, np.nan)
        units[name] = _units(key)
    if isinstance(value, (int, float)):          # flags (extrapolated, validated) as 1/0
        data[name][ix] = float(value)


# ----------------------------------------------------------------------------------------
# Gell-Mann–Oakes–Renner along a current-mass axis

def current_mass_flavour(axis: Axis) -> str | None:
    """The flavour whose current mass the axis varies (``quarks.<f>.current_mass_gev``)."""
    parts = axis.key.split(".")
    return parts[1] if len(parts) == 3 and parts[0] == "quarks" and parts[2] == "current_mass_gev" else None


def chiral_condensate_gev3(scan: Scan, flavour: str) -> tuple[float, float, float]:
    """(−⟨q̄q⟩⁰ [GeV³], ζ [GeV], Z₄⁰): the chiral-limit condensate of the scan's interaction
    at its renormalisation point ζ, from the quark stage (the gap equation of the base
    config at current mass 0; −⟨q̄q⟩ = Z₄ N_c ∫ tr S, ``gap.GapSolution.condensate_cbrt``)
    and that solve's Z₄."""
    from ..quark import gap
    from . import pipeline

    cfg = from_dict(apply_overrides(scan.base, [f"quarks.{flavour}.current_mass_gev=0.0"]))
    sol = gap.solve(pipeline.kernel_of(cfg), 0.0, cfg.renormalisation_point_gev, pipeline.gap_grid_of(cfg))
    return float(sol.condensate_cbrt()) ** 3, float(cfg.renormalisation_point_gev), float(sol.z4)


def add_gmor(scan: Scan, ds):
    """For a one-axis scan of a current mass m (at ζ) with a pseudoscalar of that flavour
    (both quarks): the variable ``<meson>_gmor_ratio`` = m_π² f_π² / (2 m̂ |⟨q̄q⟩⁰|) with f
    in the 92 MeV convention and the chiral condensate at the same ζ (→ 1 as m → 0,
    Gell-Mann–Oakes–Renner), and the attributes ``chiral_condensate_gev3`` (−⟨q̄q⟩⁰),
    ``chiral_Z4`` and ``gmor_renormalisation_point_gev``.  Returns the Dataset (unchanged
    otherwise).

    m̂ = Z₄(m) m^ζ / Z₄⁰: the bare-mass term of the massive gap equation renormalised as the
    chiral condensate is (so that m̂ ⟨q̄q⟩⁰ is the renormalisation-group invariant product).
    The renormalisation B(ζ²) = m^ζ puts the chiral solution's dynamical tail B⁰(ζ²)
    (≈ 0.04 MeV for Maris–Tandy at ζ = 19 GeV) into m^ζ, so that m^ζ itself would give a
    ratio 1 − B⁰(ζ²)/m + O(m), 8% low at m = 0.5 MeV (measured: 0.924, 0.973, 1.009, 1.050
    at m = 0.5, 1, 2, 4 MeV, translation-invariant; with m̂: 1.0071, 1.0149, 1.0303,
    1.0612, i.e. 0.9995 + 0.0155 m/MeV)."""
    from ..meson import observables

    if len(scan.axes) != 1:
        return ds
    ax = scan.axes[0]
    f = current_mass_flavour(ax)
    base_cfg = from_dict(scan.base)
    pions = [m.name for m in base_cfg.mesons if m.channel == "pseudoscalar" and tuple(m.quarks) == (f, f)]
    pions = [p for p in pions if f"{p}_mass_gev" in ds and f"{p}_decay_constant_gev" in ds]
    if f is None or not pions:
        return ds
    cond, zeta, z4_chiral = chiral_condensate_gev3(scan, f)
    to92 = observables.CONVENTIONS["92"] / observables.CONVENTIONS[base_cfg.output.decay_constant_convention]
    m = np.asarray(ds[ax.name].values, dtype=float)
    z4 = f"quark_{f}_Z4"
    if z4 not in ds:
        return ds
    m_hat = np.asarray(ds[z4].values, dtype=float) * m / z4_chiral
    for p in pions:
        mpi, fpi = ds[f"{p}_mass_gev"].values, ds[f"{p}_decay_constant_gev"].values * to92
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.where(m > 0, mpi**2 * fpi**2 / (2.0 * m_hat * abs(cond)), np.nan)
        ds[f"{p}_gmor_ratio"] = (ds[f"{p}_mass_gev"].dims, ratio, {
            "units": "1", "long_name": f"{p} m^2 f^2 / (2 mhat |<qbar q>^0|), f in the 92 MeV convention, "
                                       "mhat = Z4(m) m / Z4^0 and the chiral condensate at zeta = "
                                       f"{zeta:g} GeV (GMOR: -> 1 as m -> 0)"})
    ds.attrs["chiral_condensate_gev3"] = cond
    ds.attrs["chiral_Z4"] = z4_chiral
    ds.attrs["chiral_condensate_flavour"] = f
    ds.attrs["gmor_renormalisation_point_gev"] = zeta
    return ds


def gmor_figure(scan: Scan, ds, out_dir, fmt: str = "png"):
    """m_π² against m with the GMOR line m_π² = 2 m̂ |⟨q̄q⟩⁰| / f_π⁰² (f_π⁰: f_π
    extrapolated linearly to m = 0 from the two lightest points, 92 MeV convention; m̂ =
    Z₄(m) m / Z₄⁰ as in ``add_gmor``, linear in m through the points); None when the
    Dataset has no GMOR ratio."""
    from pathlib import Path

    from ..meson import observables
    from ..io import plots

    names = [n for n in ds.data_vars if n.endswith("_gmor_ratio")]
    if not names:
        return None
    ax_name = scan.axes[0].name
    m = np.asarray(ds[ax_name].values, dtype=float)
    cond = abs(float(ds.attrs["chiral_condensate_gev3"]))
    conv = from_dict(scan.base).output.decay_constant_convention
    to92 = observables.CONVENTIONS["92"] / observables.CONVENTIONS[conv]
    plt = plots._plt()
    fig, axp = plt.subplots(figsize=(5.5, 4))
    mm = np.linspace(0.0, float(np.nanmax(m)), 50)
    flav = ds.attrs.get("chiral_condensate_flavour")
    m_hat = np.asarray(ds[f"quark_{flav}_Z4"].values, float) * m / float(ds.attrs["chiral_Z4"])
    good = np.isfinite(m_hat)
    line = (np.polyval(np.polyfit(m[good], m_hat[good], 1), mm) if good.sum() >= 2 else mm)
    for n in names:
        p = n[: -len("_gmor_ratio")]
        mpi = ds[f"{p}_mass_gev"].values
        fpi = ds[f"{p}_decay_constant_gev"].values * to92
        ok = np.isfinite(mpi) & np.isfinite(fpi)
        axp.plot(m[ok], mpi[ok] ** 2, "o", ms=4, label=f"{p}: computed")
        if ok.sum() >= 2:
            i0, i1 = np.argsort(m[ok])[:2]
            mo, fo = m[ok], fpi[ok]
            f0 = fo[i0] - mo[i0] * (fo[i1] - fo[i0]) / (mo[i1] - mo[i0])
            label = "f_pi^0 extrapolated"
        elif ok.sum() == 1:
            f0, label = fpi[ok][0], "f_pi at the point"
        else:
            continue
        axp.plot(mm, 2.0 * cond * line / f0**2, "--",
                 label=f"GMOR: 2|<qq>^0| mhat / f^2, mhat = Z4 m / Z4^0 ({label} = {1e3 * f0:.1f} MeV)")
    axp.set_xlabel(f"{scan.axes[0].key} [GeV] (at zeta = {ds.attrs['gmor_renormalisation_point_gev']:g} GeV)")
    axp.set_ylabel("M^2 [GeV^2]")
    axp.set_title(f"{ds.attrs.get('title', 'scan')}: GMOR, -<qq>^0 = {cond:.4g} GeV^3", fontsize=9)
    axp.legend(fontsize=7)
    plots.tidy(axp)
    return plots._save(fig, Path(out_dir) / f"scan_gmor.{fmt}")


# ----------------------------------------------------------------------------------------
# A whole scan: run, gather, write

@dataclass
class ScanResult:
    """What ``rlmeson.scan()`` and ``rlmeson scan`` return: the scan, its points' results
    (in point order), the Dataset over the axes, the executor used and the wall time."""
    scan: Scan
    results: list[PointResult]
    dataset: object             # xarray.Dataset
    executor: str
    seconds: float

    @property
    def failed(self) -> list[PointResult]:
        return [r for r in self.results if r.status != STATUS_OK]

    def points_json(self) -> list[dict]:
        """Per point: its number, axis values, hash, status, reason, seconds, whether it
        came from the store and which stage entries it computed."""
        return [{"number": r.index + 1, "point": dict(zip((a.key for a in self.scan.axes), r.point)),
                 "config_hash": r.config_hash, "status": r.status, "message": r.message, "seconds": r.seconds,
                 "error_bar": self.scan.error_bar_at(r.index),
                 "from_cache": r.from_cache, "computed": list(r.computed), "peak_rss_mb": r.peak_rss_mb,
                 "mesons": None if r.summary is None else {m["name"]: {k: m.get(k) for k in MESON_KEYS}
                                                           for m in r.summary["mesons"]}}
                for r in self.results]

    def write(self, out_dir, extra: dict | None = None) -> list:
        """scan.nc, scan.json and the figures into ``out_dir`` (which must exist); returns
        the figure paths."""
        import json
        from pathlib import Path

        from ..io import exchange, plots
        from ..io.store import atomic_write_text

        out = Path(out_dir)
        exchange.write_netcdf(self.dataset, out / "scan.nc")
        figs = plots.scan_figures(self.dataset, out)
        g = gmor_figure(self.scan, self.dataset, out)
        if g is not None:
            figs.append(g)
        doc = {"package": "rlmeson", "scan": self.scan.name, "axes": [a.key for a in self.scan.axes],
               "executor": self.executor, "seconds": self.seconds,
               "points_ok": len(self.results) - len(self.failed), "points": self.points_json(),
               "figures": [f.name for f in figs], **(extra or {})}
        for k in ("chiral_condensate_gev3", "gmor_renormalisation_point_gev"):
            if k in self.dataset.attrs:
                doc[k] = float(self.dataset.attrs[k])
        atomic_write_text(out / "scan.json", json.dumps(doc, indent=2, allow_nan=False, default=str) + "\n")
        return figs


def execute(scan: Scan, workers: int | None = 1, dask: str | None = None, cache: bool = True,
            progress=None, executor=None) -> ScanResult:
    """Run every point (``run``), gather the Dataset and, along a current-mass axis, the
    GMOR ratio (``add_gmor``)."""
    from . import executors

    t0 = time.perf_counter()
    own = executor is None
    ex = executors.make(workers, dask, len(scan.points())) if own else executor
    try:
        results = run(scan, cache=cache, progress=progress, executor=ex)
    finally:
        if own:
            ex.close()
    ds = dataset(scan, results)
    if any(r.status == STATUS_OK for r in results):
        ds = add_gmor(scan, ds)
    return ScanResult(scan, results, ds, ex.description or type(ex).__name__, time.perf_counter() - t0)


def scan(cfg, workers: int | None = 1, dask: str | None = None, cache: bool = True, overrides=(),
         out=None, progress=None) -> "ScanResult":
    """The API's ``rlmeson.scan``: ``cfg`` a path, a dict of the TOML layout or a ``Scan``;
    ``out`` (checked before the work) also gets scan.nc, scan.json and the figures."""
    if isinstance(cfg, dict):
        sc = from_config_dict(cfg, overrides)
    elif isinstance(cfg, Scan):
        sc = cfg
    else:
        sc = load(cfg, overrides)
    if out is not None:
        from ..io.store import writable_directory

        out = writable_directory(out)
    res = execute(sc, workers=workers, dask=dask, cache=cache, progress=progress)
    if out is not None:
        res.write(out)
    return res

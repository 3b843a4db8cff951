"""Parameter scans: a grid of resolved configs, one pipeline run per point, gathered into
one xarray Dataset over the axes.

A ``[scan]`` table in a config declares the axes (our own layout)::

    [scan]
    error_bar = false                         # the second grid per point (default off)

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

from .config import Config, ConfigError, apply_overrides, from_dict

STATUS_OK, STATUS_FAILED = "ok", "failed"
#: Per-meson observables of summary.json gathered as variables ``<meson>_<key>``.
MESON_KEYS = ("mass_gev", "mass_error_gev", "decay_constant_gev", "decay_constant_error_gev",
              "normalisation_agreement", "awti_residual", "in_meson_condensate_gev2", "next_eigenvalue",
              "eta_spread_gev")
QUARK_KEYS = ("mass_function_at_zero_gev", "max_bound_state_mass_gev", "Z2", "minus_qbarq_cbrt_gev")
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
    error_bar: bool
    name: str

    def points(self) -> list[tuple[float, ...]]:
        return list(itertools.product(*(a.values for a in self.axes)))

    def config_at(self, point) -> Config:
        over = [o for a, v in zip(self.axes, point) for o in a.overrides(v)]
        d = apply_overrides(self.base, over + [f"output.error_bar={'true' if self.error_bar else 'false'}"])
        return from_dict(d, source=f"scan point {dict(zip((a.key for a in self.axes), point))}")


def _number(key, v):
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
        raise ConfigError(key, v, "a finite number")
    return float(v)


def _axis(i: int, t) -> Axis:
    where = f"scan.axis[{i + 1}]"
    if not isinstance(t, dict):
        raise ConfigError(where, t, "a table with key and values or range")
    unknown = set(t) - {"key", "values", "range", "linked"}
    if unknown:
        k = sorted(unknown)[0]
        raise ConfigError(f"{where}.{k}", t[k], "unknown key; allowed: key, values, range, linked")
    key = t.get("key")
    if not isinstance(key, str) or not key or key.startswith("scan"):
        raise ConfigError(f"{where}.key", key, "a dotted config key, e.g. quarks.l.current_mass_gev")
    if ("values" in t) == ("range" in t):
        raise ConfigError(where, sorted(t), "exactly one of values or range")
    if "values" in t:
        vals = t["values"]
        if not isinstance(vals, list) or not vals:
            raise ConfigError(f"{where}.values", vals, "a non-empty list of numbers")
        values = tuple(_number(f"{where}.values", v) for v in vals)
    else:
        r = t["range"]
        if not isinstance(r, dict) or set(r) - {"start", "stop", "points", "spacing"} or \
                not {"start", "stop", "points"} <= set(r):
            raise ConfigError(f"{where}.range", r, "{ start, stop, points, spacing = \"linear\" or \"log\" }")
        a, b = _number(f"{where}.range.start", r["start"]), _number(f"{where}.range.stop", r["stop"])
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
        lk, lp = linked["key"], _number(f"{where}.linked.product", linked["product"])
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
    if not isinstance(eb, bool):
        raise ConfigError("scan.error_bar", eb, "true or false")
    base = {k: v for k, v in d.items() if k != "scan"}
    base_cfg = from_dict(base)
    scan = Scan(base=base, axes=axes, error_bar=eb, name=base_cfg.name)
    for p in scan.points():           # every point valid before any work
        scan.config_at(p)
    return scan


def load(path, overrides=()) -> Scan:
    import tomllib
    from pathlib import Path

    try:
        d = tomllib.loads(Path(path).read_text(encoding="utf-8-sig"))
    except OSError as e:
        raise ConfigError("<file>", str(path), f"a readable TOML file ({e.strerror or type(e).__name__})") from None
    except ValueError as e:
        raise ConfigError("<file>", str(path), f"valid TOML ({e})") from None
    return from_config_dict(d, overrides)


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


def run_point(scan: Scan, point, cache: bool = True) -> PointResult:
    """One point through the pipeline (a failure is recorded, not raised)."""
    from . import pipeline

    t0 = time.perf_counter()
    cfg = scan.config_at(point)
    try:
        store = pipeline.store_of(cfg, cache)
        res = pipeline.run(cfg, store)
        return PointResult(tuple(point), cfg.hash(), STATUS_OK, "", res.summary(), time.perf_counter() - t0)
    except KeyboardInterrupt:
        raise
    except Exception as e:  # noqa: BLE001  (a failed point is a result of the scan)
        msg = f"{type(e).__name__}: {' '.join(str(e).split())}"
        return PointResult(tuple(point), cfg.hash(), STATUS_FAILED, msg, None, time.perf_counter() - t0)


def _worker(args):
    scan, point, cache = args
    return run_point(scan, point, cache)


def run(scan: Scan, workers: int = 1, cache: bool = True, progress=None) -> list[PointResult]:
    """Every point, in-process (``workers`` = 1) or in that many worker processes (each
    compiles once and keeps its JIT cache); results in point order."""
    pts = scan.points()
    say = progress or (lambda *_: None)
    out: dict[int, PointResult] = {}
    if workers <= 1:
        for i, p in enumerate(pts):
            out[i] = run_point(scan, p, cache)
            say(i + 1, len(pts), out[i])
    else:
        import multiprocessing as mp
        from concurrent.futures import ProcessPoolExecutor, as_completed

        with ProcessPoolExecutor(max_workers=workers, mp_context=mp.get_context("spawn")) as ex:
            futs = {ex.submit(_worker, (scan, p, cache)): i for i, p in enumerate(pts)}
            for n, f in enumerate(as_completed(futs)):
                out[futs[f]] = f.result()
                say(n + 1, len(pts), out[futs[f]])
    return [out[i] for i in range(len(pts))]


def dataset(scan: Scan, results: list[PointResult]):
    """One xarray Dataset over the axes: per meson ``<meson>_<observable>``, per quark
    ``quark_<flavour>_<observable>``, and per point ``status``, ``message``, ``config_hash``."""
    import xarray as xr

    from . import __version__

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
        "axes": ", ".join(a.key for a in scan.axes), "error_bar": int(scan.error_bar),
        "decay_constant_convention": next((m["decay_constant_convention"] for r in results if r.summary
                                           for m in r.summary["mesons"]), "")})


def _units(key: str) -> str:
    suffix = key.rsplit("_", 1)[-1]
    return UNITS.get(suffix, "1")


def _put(data, units, name, key, value, shape, ix):
    if name not in data:
        data[name] = np.full(shape, np.nan)
        units[name] = _units(key)
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        data[name][ix] = float(value)

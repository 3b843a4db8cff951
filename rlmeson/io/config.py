"""Run configuration: a TOML file read into frozen, validated dataclasses (units GeV).

Every bad input gives one ``ConfigError`` whose message is a single line

    config error: <dotted.key> = <repr(value)>: <what is allowed>

Unknown keys are errors at every level.  Numbers are ints or floats (never bools) and
finite; ints are accepted where floats are expected.

Hashes (16 hex digits of a sha256 of canonical JSON) identify what changes numbers:
``hash()`` the whole physics, ``quark_key`` one gap-equation solution, ``meson_key`` one
bound state.  They do not depend on key order, formatting, or on whether a default was
written out, nor on settings that the chosen regularisation does not use (the hard
cutoff ignores ``regulator_gev2``/``grid_end_gev2``, the translation-invariant one
ignores ``cutoff_gev2``).  A meson without ``quarks`` takes the flavour defined first
in the file, twice.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import math
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path

from ..model import channels, interactions, kernel
from ..numerics import grids, quadrature

NAME_RE = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.-]{0,63}")
FLAVOUR_RE = re.compile(r"[A-Za-z][A-Za-z0-9_]{0,15}")
PARAMETER_RE = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")
DECAY_CONVENTIONS = ("92", "131")
DEFAULT_MODEL = "maris-tandy"
DEFAULT_RENORMALISATION_POINT_GEV = 19.0


class _Missing:
    def __repr__(self) -> str:
        return "<missing>"


MISSING = _Missing()


def _one_line(text: str) -> str:
    return "".join(c if c.isprintable() else c.encode("unicode_escape").decode("ascii") for c in text)


class ConfigError(ValueError):
    """A bad configuration: ``key`` (dotted), the offending ``value``, what is ``allowed``."""

    def __init__(self, key, value, allowed):
        self.key, self.value, self.allowed = str(key), value, str(allowed)
        try:
            shown = repr(value)
        except Exception:  # e.g. an int too long to print
            shown = f"<{type(value).__name__}>"
        if len(shown) > 120:
            shown = shown[:117] + "..."
        super().__init__(_one_line(f"config error: {self.key} = {shown}: {self.allowed}"))


# ----------------------------------------------------------------------------------------
# The resolved configuration

@dataclass(frozen=True)
class InteractionConfig:
    model: str
    params: tuple[tuple[str, float], ...]  # sorted by name, defaults filled in
    given: tuple[str, ...] = field(default=(), compare=False)  # parameters written in the file

    def param_dict(self) -> dict[str, float]:
        return dict(self.params)


_KERNEL = {f.name: f.default for f in dataclasses.fields(kernel.Kernel)}


@dataclass(frozen=True)
class KernelConfig:
    z2_squared: bool = _KERNEL["z2_squared"]
    regularisation: str = _KERNEL["regularisation"]
    cutoff_gev2: float = _KERNEL["cutoff_gev2"]
    regulator_gev2: float = _KERNEL["regulator_gev2"]
    grid_end_gev2: float = _KERNEL["grid_end_gev2"]

    def relevant(self) -> dict:
        """The fields that the chosen regularisation uses."""
        d = {"z2_squared": self.z2_squared, "regularisation": self.regularisation}
        if self.regularisation == kernel.HARD_CUTOFF:
            d["cutoff_gev2"] = self.cutoff_gev2
        else:
            d.update(regulator_gev2=self.regulator_gev2, grid_end_gev2=self.grid_end_gev2)
        return d


@dataclass(frozen=True)
class FlavourConfig:
    name: str
    current_mass_gev: float


@dataclass(frozen=True)
class MesonConfig:
    name: str
    channel: str
    quarks: tuple[str, str]
    eta: float | None = None  # None: chosen from the quarks' singularities (pipeline.meson_eta)
    mass_guess_gev: float | None = None
    #: which state of the channel's C-parity: 0 the ground state, n the n-th above it
    #: (``search.find_excitation``); absent from the hashes when 0
    excitation: int = 0
    #: the mass again at a second momentum partition (Poincaré covariance check,
    #: ``eta_spread_gev``); None: for unequal flavours only
    eta_spread: bool | None = None


# The numerical defaults are those of the solvers' grid dataclasses (one place).
_GAP, _BSE = grids.GapGrid(), grids.BSEGrid()


@dataclass(frozen=True)
class GapNumerics:
    q2_min_gev2: float = _GAP.q2_min
    panel_widths: tuple[float, ...] = _GAP.widths
    order: int = _GAP.order
    angular_points: int = _GAP.angular_half


@dataclass(frozen=True)
class BSENumerics:
    q2_min_gev2: float = _BSE.q2_min
    panel_widths: tuple[float, ...] = _BSE.widths
    order: int = _BSE.order
    z_points: int = _BSE.n_z
    angular_points: int = _BSE.angular_half
    continuation: str = grids.CONTINUATIONS[0]


@dataclass(frozen=True)
class OutputConfig:
    decay_constant_convention: str = "92"
    cache_dir: str | None = None
    error_bar: bool = True


def _hash(obj) -> str:
    text = json.dumps(obj, sort_keys=True, separators=(",", ":"), allow_nan=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()[:16]


@dataclass(frozen=True)
class Config:
    name: str
    description: str
    interaction: InteractionConfig
    kernel: KernelConfig
    renormalisation_point_gev: float
    flavours: tuple[FlavourConfig, ...]
    mesons: tuple[MesonConfig, ...]
    gap: GapNumerics
    bse: BSENumerics
    output: OutputConfig
    source: str | None = None

    def flavour(self, name: str) -> FlavourConfig:
        for f in self.flavours:
            if f.name == name:
                return f
        raise ConfigError("flavour", name, "one of the flavours defined under [quarks]: "
                          + ", ".join(f.name for f in self.flavours))

    def _setup(self) -> dict:
        return {"interaction": {"model": self.interaction.model, "params": self.interaction.param_dict()},
                "kernel": self.kernel.relevant(),
                "renormalisation": {"point_gev": self.renormalisation_point_gev}}

    def physics_dict(self) -> dict:
        """Everything that changes numbers (not name, description, output or source)."""
        return {**self._setup(),
                "flavours": {f.name: f.current_mass_gev for f in self.flavours},
                "mesons": {m.name: {"channel": m.channel, "quarks": list(m.quarks), "eta": m.eta,
                                    "mass_guess_gev": m.mass_guess_gev,
                                    **({"excitation": m.excitation} if m.excitation else {}),
                                    **({"eta_spread": m.eta_spread} if m.eta_spread is not None else {})}
                           for m in self.mesons},
                "numerics": {"gap": dataclasses.asdict(self.gap), "bse": dataclasses.asdict(self.bse)}}

    def hash(self) -> str:
        return _hash(self.physics_dict())

    def quark_key(self, flavour: str) -> str:
        """Identifies one gap-equation solution (the flavour's name does not enter)."""
        return _hash({**self._setup(), "current_mass_gev": self.flavour(flavour).current_mass_gev,
                      "gap": dataclasses.asdict(self.gap)})

    def meson_key(self, meson: MesonConfig) -> str:
        """Identifies one bound state: its quarks (by quark_key), channel, eta, BSE numerics."""
        return _hash({"quarks": [self.quark_key(q) for q in meson.quarks], "channel": meson.channel,
                      "eta": meson.eta, "bse": dataclasses.asdict(self.bse),
                      **({"excitation": meson.excitation} if meson.excitation else {})})

    def to_dict(self) -> dict:
        """The full resolved configuration in the nesting of the TOML file (None left out)."""
        def clean(d):
            return {k: list(v) if isinstance(v, tuple) else v for k, v in d.items() if v is not None}
        return {
            "name": self.name,
            "description": self.description,
            "interaction": {"model": self.interaction.model, **self.interaction.param_dict()},
            "kernel": dataclasses.asdict(self.kernel),
            "renormalisation": {"point_gev": self.renormalisation_point_gev},
            "quarks": {f.name: {"current_mass_gev": f.current_mass_gev} for f in self.flavours},
            "mesons": [clean(dataclasses.asdict(m)) for m in self.mesons],
            "numerics": {"gap": clean(dataclasses.asdict(self.gap)), "bse": clean(dataclasses.asdict(self.bse))},
            "output": clean(dataclasses.asdict(self.output)),
        }


# ----------------------------------------------------------------------------------------
# Checking single values

@dataclass(frozen=True)
class _Range:
    lo: float | None = None
    hi: float | None = None
    lo_open: bool = True
    hi_open: bool = False

    def check(self, x: float) -> bool:
        if self.lo is not None and (x <= self.lo if self.lo_open else x < self.lo):
            return False
        return self.hi is None or (x < self.hi if self.hi_open else x <= self.hi)

    def allowed(self) -> str:
        parts = []
        if self.lo is not None:
            parts.append(f"{'>' if self.lo_open else '>='} {self.lo:g}")
        if self.hi is not None:
            parts.append(f"{'<' if self.hi_open else '<='} {self.hi:g}")
        return " and ".join(parts) or "any finite number"


class _Only:
    def __init__(self, value: float, text: str):
        self.value, self.text = value, text

    def check(self, x: float) -> bool:
        return x == self.value

    def allowed(self) -> str:
        return self.text


POSITIVE = _Range(0.0)
ANY = _Range()
MASS = _Range(0.0, 10.0, lo_open=False)
WIDTH = _Range(0.05, 10.0)
BSE_Q2_MIN = _Range(0.0, 1.0, hi_open=True)
ETA = _Range(0.0, 1.0, hi_open=True)  # the momentum fraction of the first quark, strictly between 0 and 1
# Regularisation scales: the solvers are checked up to these (a gap solve converges to 1e-15
# at Λ² = 1e12 GeV² and at Λ_R² = 1e10 GeV² with integrals to 1e16 GeV²); beyond them
# nothing changes physically and the panel count in ln q² only grows.
CUTOFF = _Range(0.0, 1e12)
GAP_Q2_MIN = _Range(0.0, 1e-2)     # the grid starts below M(0)'s probes and the infrared scale
GUESS = _Range(0.0, 10.0)
REGULATOR = _Range(0.0, 1e10)
GRID_END = _Range(0.0, 1e16)


def _real(key, v, rng) -> float:
    """A finite number (int or float, not bool) passing ``rng.check``."""
    if isinstance(v, bool) or not isinstance(v, (int, float)):
        raise ConfigError(key, v, f"a number, {rng.allowed()}")
    try:
        x = float(v)
    except OverflowError:
        x = math.inf
    if not math.isfinite(x) or not rng.check(x):
        raise ConfigError(key, v, f"a finite number, {rng.allowed()}")
    return x


def _integer(key, v, lo: int, hi: int, even: bool = False) -> int:
    what = f"an {'even ' if even else ''}integer from {lo} to {hi}"
    if isinstance(v, bool) or not isinstance(v, int) or not lo <= v <= hi or (even and v % 2):
        raise ConfigError(key, v, what)
    return v


def _boolean(key, v) -> bool:
    if not isinstance(v, bool):
        raise ConfigError(key, v, "true or false")
    return v


def _text(key, v) -> str:
    if not isinstance(v, str):
        raise ConfigError(key, v, "a string")
    return v


def _path(key, v) -> str:
    if not isinstance(v, str) or not v:
        raise ConfigError(key, v, "a non-empty path string")
    return v


def _pattern(key, v, rx) -> str:
    if not isinstance(v, str) or not rx.fullmatch(v):
        raise ConfigError(key, v, f"a string matching {rx.pattern}")
    return v


def _choice(key, v, choices) -> str:
    if not isinstance(v, str) or v not in choices:
        raise ConfigError(key, v, "one of " + ", ".join(repr(c) for c in choices))
    return v


def _convention(key, v) -> str:
    """92 or 131, written as a number or a string (stored as the string)."""
    text = str(v) if isinstance(v, int) and not isinstance(v, bool) else v
    if not isinstance(text, str) or text not in DECAY_CONVENTIONS:
        raise ConfigError(key, v, "one of " + ", ".join(DECAY_CONVENTIONS) + " (f_pi ~ 92 MeV or ~ 131 MeV; "
                          "a number or a string)")
    return text


def _widths(key, v) -> tuple[float, ...]:
    n = len(quadrature.ZONE_BREAKS) + 1
    if not isinstance(v, (list, tuple)) or len(v) != n:
        raise ConfigError(key, v, f"a list of {n} numbers (one per radial zone, split at "
                          f"{', '.join(f'{b:g}' for b in quadrature.ZONE_BREAKS)} GeV^2), each {WIDTH.allowed()}")
    return tuple(_real(f"{key}[{i}]", x, WIDTH) for i, x in enumerate(v))


def _quark_pair(key, v, names) -> tuple[str, str]:
    if not isinstance(v, (list, tuple)) or len(v) != 2:
        raise ConfigError(key, v, "a list of two flavour names")
    return tuple(_choice(f"{key}[{i}]", q, names) for i, q in enumerate(v))


# ----------------------------------------------------------------------------------------
# Checking tables

def _join(prefix: str, name) -> str:
    return f"{prefix}.{name}" if prefix else str(name)


def finite_number(key, v) -> float:
    """A finite number (int or float, not bool) for the workflow tables ([fit], [scan])."""
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
        raise ConfigError(key, v, "a finite number")
    return float(v)


def entry_table(where: str, t, allowed: tuple[str, ...], what: str) -> dict:
    """One ``[[...]]`` entry of a workflow table: a table (``what`` says of what) with no
    key outside ``allowed``; the first unknown key is named."""
    if not isinstance(t, dict):
        raise ConfigError(where, t, what)
    unknown = set(t) - set(allowed)
    if unknown:
        k = sorted(unknown)[0]
        raise ConfigError(f"{where}.{k}", t[k], "unknown key; allowed: " + ", ".join(allowed))
    return t


def _table(value, key: str, allowed) -> dict:
    if not isinstance(value, dict):
        raise ConfigError(key or "<config>", value, "a table")
    for k in value:
        if k not in allowed:
            raise ConfigError(_join(key, k), value[k], "unknown key; allowed: " + ", ".join(allowed))
    return value


def _sub(parent: dict, prefix: str, name: str, allowed) -> dict:
    return _table(parent[name], _join(prefix, name), allowed) if name in parent else {}


def _take(tbl: dict, prefix: str, name: str, default, conv, *args):
    """tbl[name] checked by ``conv``; ``default`` if absent (MISSING: required).

    An explicit None counts as absent for keys whose default is None."""
    key = _join(prefix, name)
    if name not in tbl or (default is None and tbl[name] is None):
        if default is not MISSING:
            return default
        try:
            conv(key, MISSING, *args)
        except ConfigError as e:
            raise ConfigError(key, MISSING, "required: " + e.allowed) from None
    return conv(key, tbl[name], *args)


def _fields(cls) -> tuple[str, ...]:
    return tuple(f.name for f in dataclasses.fields(cls))


TOP_KEYS = ("name", "description", "interaction", "kernel", "renormalisation", "quarks",
            "mesons", "numerics", "output", "scan", "fit")
#: Tables read by the workflows, not by a single run (``scan``, ``fit``): accepted here,
#: validated there, and no part of a run's physics or hash.
WORKFLOW_KEYS = ("scan", "fit")
MESON_KEYS = _fields(MesonConfig)
#: The highest ``excitation`` a meson may ask for (each costs a followed state more).
MAX_EXCITATION = 4


def _interaction(t) -> InteractionConfig:
    if not isinstance(t, dict):
        raise ConfigError("interaction", t, "a table")
    model = _take(t, "interaction", "model", DEFAULT_MODEL, _text)
    given = {k: v for k, v in t.items() if k != "model"}
    if model in interactions.registered():
        params = interactions.get(model).parameters
        allowed = ("model", *params)
        _table(t, "interaction", allowed)
        values = {k: _real(f"interaction.{k}", given[k], p) if k in given else float(p.default)
                  for k, p in params.items()}
        explicit = tuple(sorted(k for k in given if k in params))
    elif ":" in model:
        try:
            interactions.get(model)
        except (Exception, SystemExit) as e:
            raise ConfigError("interaction.model", model,
                              f"an importable 'module:function' naming a callable ({type(e).__name__}: {e})")
        values = {}
        for k, v in given.items():
            key = f"interaction.{k}"
            if not isinstance(k, str) or not PARAMETER_RE.fullmatch(k):
                raise ConfigError(key, v, f"parameter names of a user model match {PARAMETER_RE.pattern}")
            values[k] = _real(key, v, ANY)
        explicit = tuple(sorted(values))
        interactions.probe(model, values)  # finite, right shape, traceable: or one line
    else:
        raise ConfigError("interaction.model", model,
                          "one of " + ", ".join(map(repr, interactions.registered())) + " or 'module:function'")
    return InteractionConfig(model, tuple(sorted(values.items())), explicit)


def _kernel(t: dict) -> KernelConfig:
    p, d = "kernel", KernelConfig
    return KernelConfig(
        z2_squared=_take(t, p, "z2_squared", d.z2_squared, _boolean),
        regularisation=_take(t, p, "regularisation", d.regularisation, _choice, kernel.REGULARISATIONS),
        cutoff_gev2=_take(t, p, "cutoff_gev2", d.cutoff_gev2, _real, CUTOFF),
        regulator_gev2=_take(t, p, "regulator_gev2", d.regulator_gev2, _real, REGULATOR),
        grid_end_gev2=_take(t, p, "grid_end_gev2", d.grid_end_gev2, _real, GRID_END),
    )


def _flavours(top: dict) -> tuple[FlavourConfig, ...]:
    q = top.get("quarks", MISSING)
    if not isinstance(q, dict) or not q:
        raise ConfigError("quarks", q, "at least one flavour: a table [quarks.NAME] with current_mass_gev")
    out = []
    for name, t in q.items():
        key = f"quarks.{name}"
        if not isinstance(name, str) or not FLAVOUR_RE.fullmatch(name):
            raise ConfigError(key, name, f"a flavour name matching {FLAVOUR_RE.pattern}")
        t = _table(t, key, ("current_mass_gev",))
        out.append(FlavourConfig(name, _take(t, key, "current_mass_gev", MISSING, _real, MASS)))
    return tuple(out)


def meson_label(index: int, name: str | None = None) -> str:
    """How messages name a meson: ``mesons["pion"]`` once its name is known, else its
    position counted from 1 (``mesons[1]`` is the first [[mesons]] table)."""
    return f'mesons["{name}"]' if name is not None else f"mesons[{index + 1}]"


def _mesons(top: dict, flavours: tuple[FlavourConfig, ...]) -> tuple[MesonConfig, ...]:
    ms = top.get("mesons", [])
    if not isinstance(ms, (list, tuple)):
        raise ConfigError("mesons", ms, "an array of tables [[mesons]]")
    names = tuple(f.name for f in flavours)
    out, seen = [], set()
    for i, m in enumerate(ms):
        p = meson_label(i)
        m = _table(m, p, MESON_KEYS)
        name = _take(m, p, "name", MISSING, _pattern, NAME_RE)
        if name in seen:
            raise ConfigError(f"{p}.name", name, "a name not used by an earlier meson")
        seen.add(name)
        p = meson_label(i, name)
        channel = _take(m, p, "channel", MISSING, _choice, channels.registered())
        quarks = _take(m, p, "quarks", (names[0], names[0]), _quark_pair, names)
        eta = _take(m, p, "eta", None, _real, ETA)
        out.append(MesonConfig(
            name=name,
            channel=channel,
            quarks=quarks,
            # equal flavours default to 1/2; unequal ones are left to the pipeline
            eta=0.5 if eta is None and quarks[0] == quarks[1] else eta,
            mass_guess_gev=_take(m, p, "mass_guess_gev", None, _real, GUESS),
            excitation=_take(m, p, "excitation", 0, _integer, 0, MAX_EXCITATION),
            eta_spread=_take(m, p, "eta_spread", None, _boolean),
        ))
    return tuple(out)


def _gap(t: dict) -> GapNumerics:
    p, d = "numerics.gap", GapNumerics
    return GapNumerics(
        q2_min_gev2=_take(t, p, "q2_min_gev2", d.q2_min_gev2, _real, GAP_Q2_MIN),
        panel_widths=_take(t, p, "panel_widths", d.panel_widths, _widths),
        order=_take(t, p, "order", d.order, _integer, 4, 24),
        angular_points=_take(t, p, "angular_points", d.angular_points, _integer, 8, 400),
    )


def _bse(t: dict) -> BSENumerics:
    p, d = "numerics.bse", BSENumerics
    return BSENumerics(
        q2_min_gev2=_take(t, p, "q2_min_gev2", d.q2_min_gev2, _real, BSE_Q2_MIN),
        panel_widths=_take(t, p, "panel_widths", d.panel_widths, _widths),
        order=_take(t, p, "order", d.order, _integer, 4, 24),
        z_points=_take(t, p, "z_points", d.z_points, _integer, 4, 64, True),
        angular_points=_take(t, p, "angular_points", d.angular_points, _integer, 8, 400),
        continuation=_take(t, p, "continuation", d.continuation, _choice, grids.CONTINUATIONS),
    )


def _output(t: dict) -> OutputConfig:
    p, d = "output", OutputConfig
    return OutputConfig(
        decay_constant_convention=_take(t, p, "decay_constant_convention", d.decay_constant_convention,
                                        _convention),
        cache_dir=_take(t, p, "cache_dir", None, _path),
        error_bar=_take(t, p, "error_bar", d.error_bar, _boolean),
    )


def _cross_checks(c: Config) -> None:
    z2 = c.renormalisation_point_gev ** 2
    k = c.kernel
    if k.regularisation == kernel.HARD_CUTOFF:
        if not c.gap.q2_min_gev2 < z2 < k.cutoff_gev2:
            raise ConfigError("renormalisation.point_gev", c.renormalisation_point_gev,
                              f"with the hard cutoff point_gev^2 must lie in (numerics.gap.q2_min_gev2, "
                              f"kernel.cutoff_gev2) = ({c.gap.q2_min_gev2:g}, {k.cutoff_gev2:g}) GeV^2")
    else:
        if not z2 > c.gap.q2_min_gev2:
            raise ConfigError("renormalisation.point_gev", c.renormalisation_point_gev,
                              f"point_gev^2 > numerics.gap.q2_min_gev2 = {c.gap.q2_min_gev2:g} GeV^2")
        if not z2 < k.regulator_gev2 / 10.0:
            raise ConfigError("kernel.regulator_gev2", k.regulator_gev2,
                              f"> 10 * renormalisation.point_gev^2 = {10.0 * z2:g} GeV^2 (Lambda_R >> zeta)")
        if not k.grid_end_gev2 >= 1e4 * k.regulator_gev2:
            raise ConfigError("kernel.grid_end_gev2", k.grid_end_gev2,
                              f">= 1e4 * kernel.regulator_gev2 = {1e4 * k.regulator_gev2:g} GeV^2")


# ----------------------------------------------------------------------------------------
# Entry points

def from_dict(d: dict, source: str | None = None) -> Config:
    """A validated Config from a nested dict of the TOML layout."""
    top = _table(d, "", TOP_KEYS)
    top = {k: v for k, v in top.items() if k not in WORKFLOW_KEYS}
    numerics = _sub(top, "", "numerics", ("gap", "bse"))
    name = _take(top, "", "name", MISSING, _pattern, NAME_RE)
    flavours = _flavours(top)
    config = Config(
        name=name,
        description=_take(top, "", "description", "", _text),
        interaction=_interaction(top.get("interaction", {})),
        kernel=_kernel(_sub(top, "", "kernel", _fields(KernelConfig))),
        renormalisation_point_gev=_take(_sub(top, "", "renormalisation", ("point_gev",)), "renormalisation",
                                        "point_gev", DEFAULT_RENORMALISATION_POINT_GEV, _real, POSITIVE),
        flavours=flavours,
        mesons=_mesons(top, flavours),
        gap=_gap(_sub(numerics, "numerics", "gap", _fields(GapNumerics))),
        bse=_bse(_sub(numerics, "numerics", "bse", _fields(BSENumerics))),
        output=_output(_sub(top, "", "output", _fields(OutputConfig))),
        source=source,
    )
    _cross_checks(config)
    return config


def parse(text: str, source: str | None = None) -> Config:
    """A validated Config from TOML text; ``source`` names the file in messages."""
    where = source if source is not None else "<string>"
    if not isinstance(text, str):
        raise ConfigError("<file>", where, "TOML text (a str)")
    try:
        d = tomllib.loads(text)
    except (ValueError, RecursionError) as e:  # TOMLDecodeError is a ValueError
        raise ConfigError("<file>", where, f"valid TOML ({e})") from None
    return from_dict(d, source)


def apply_overrides(d: dict, overrides) -> dict:
    """A copy of the TOML-layout dict ``d`` with ``KEY=VALUE`` overrides applied: KEY is
    dotted (``interaction.omega_gev``, ``quarks.l.current_mass_gev``, ``mesons.rho.eta``
    by meson name or ``mesons.2.eta`` counted from 1); VALUE is a TOML value (a bare word
    that is not one is taken as a string).  The result is validated like the file."""
    import copy

    out = copy.deepcopy(d)
    for item in overrides or ():
        key, sep, raw = str(item).partition("=")
        key = key.strip()
        if not sep or not key or any(not part for part in key.split(".")):
            raise ConfigError("--set", item, "KEY=VALUE with a dotted KEY, e.g. interaction.omega_gev=0.45")
        try:
            value = tomllib.loads(f"v = {raw.strip()}")["v"]
        except ValueError:
            value = raw.strip()
        parts = key.split(".")
        node = out
        for i, part in enumerate(parts[:-1]):
            if part == "mesons" and i == 0:
                mesons = node.get("mesons")
                if not isinstance(mesons, list) or len(parts) < 3:
                    raise ConfigError(f"--set {key}", raw, "mesons.<name or number from 1>.<key> of a listed meson")
                sel = parts[1]
                hit = [m for m in mesons if isinstance(m, dict) and m.get("name") == sel]
                if not hit and sel.isdigit() and 1 <= int(sel) <= len(mesons):
                    hit = [mesons[int(sel) - 1]]
                if not hit:
                    raise ConfigError(f"--set {key}", raw, "mesons.<name or number from 1>.<key> of a listed meson")
                node = hit[0]
                rest = parts[2:-1]
                for r in rest:
                    node = node.setdefault(r, {})
                break
            nxt = node.setdefault(part, {})
            if not isinstance(nxt, dict):
                raise ConfigError(f"--set {key}", raw, f"a key inside the table {'.'.join(parts[:i + 1])}")
            node = nxt
        node[parts[-1]] = value
    return out


def read_toml(path) -> dict:
    """The TOML table of a config file (UTF-8, a byte-order mark allowed) as a dict, with a
    relative ``[output] cache_dir`` made relative to the file's directory (as ``load``
    does); one-line ConfigErrors for an unreadable or invalid file.  For the workflow
    readers (``[scan]``, ``[fit]``) that validate the dict themselves."""
    try:
        d = tomllib.loads(Path(path).read_text(encoding="utf-8-sig"))
    except UnicodeDecodeError:
        raise ConfigError("<file>", str(path), "a UTF-8 text file") from None
    except OSError as e:
        raise ConfigError("<file>", str(path), f"a readable TOML file ({e.strerror or type(e).__name__})") from None
    except (ValueError, RecursionError) as e:
        raise ConfigError("<file>", str(path), f"valid TOML ({e})") from None
    out = d.get("output")
    if isinstance(out, dict) and isinstance(out.get("cache_dir"), str):
        where = Path(out["cache_dir"]).expanduser()
        if not where.is_absolute():
            d["output"] = {**out, "cache_dir": str(Path(path).resolve().parent / where)}
    return d


def load(path, overrides=()) -> Config:
    """A validated Config from a TOML file (a UTF-8 byte-order mark is allowed), with
    ``KEY=VALUE`` overrides (``apply_overrides``) applied before validation.

    A relative ``[output] cache_dir`` is taken relative to the file's directory."""
    try:
        text = Path(path).read_text(encoding="utf-8-sig")
    except UnicodeDecodeError:
        raise ConfigError("<file>", str(path), "a UTF-8 text file") from None
    except OSError as e:
        raise ConfigError("<file>", str(path), f"a readable TOML file ({e.strerror or type(e).__name__})") from None
    if overrides:
        try:
            d = tomllib.loads(text)
        except (ValueError, RecursionError) as e:
            raise ConfigError("<file>", str(path), f"valid TOML ({e})") from None
        cfg = from_dict(apply_overrides(d, overrides), str(path))
    else:
        cfg = parse(text, str(path))
    cache = cfg.output.cache_dir
    if cache is not None:
        where = Path(cache).expanduser()
        if not where.is_absolute():
            where = Path(path).resolve().parent / where
        cfg = dataclasses.replace(cfg, output=dataclasses.replace(cfg.output, cache_dir=str(where)))
    return cfg


# ----------------------------------------------------------------------------------------
# What a run echoes, and plausibility warnings (not errors)

#: A current mass above this at ζ is legal but unusual for the light and strange quarks
#: the rainbow-ladder models are tuned to (the charm mass at 2 GeV is about 1.1 GeV, PDG).
HEAVY_CURRENT_MASS_GEV = 1.0


def describe(cfg: Config) -> list[str]:
    """The resolved interaction, regularisation and quark masses, a few short lines."""
    i = cfg.interaction
    given = set(i.given)
    params = ", ".join(f"{k} = {v:g}" + ("" if k in given or ":" in i.model else " (default)")
                       for k, v in i.params) or "no parameters"
    k = cfg.kernel
    reg = (f"hard cutoff {k.cutoff_gev2:g} GeV^2" if k.regularisation == kernel.HARD_CUTOFF else
           f"translation-invariant, regulator {k.regulator_gev2:g} GeV^2")
    quarks = ", ".join(f"{f.name} = {1e3 * f.current_mass_gev:g} MeV" for f in cfg.flavours)
    return [f"interaction {i.model}: {params}",
            f"kernel: {reg}, Z2^2 {'on' if k.z2_squared else 'off'}; zeta = {cfg.renormalisation_point_gev:g} GeV",
            f"current masses at zeta: {quarks}"]


def plausibility_warnings(cfg: Config) -> list[str]:
    """Legal but suspicious settings, one line each, naming the key."""
    out = []
    for f in cfg.flavours:
        if f.current_mass_gev > HEAVY_CURRENT_MASS_GEV:
            out.append(f"quarks.{f.name}.current_mass_gev = {f.current_mass_gev:g} GeV at zeta = "
                       f"{cfg.renormalisation_point_gev:g} GeV is above {HEAVY_CURRENT_MASS_GEV:g} GeV "
                       "(heavier than charm; is it in GeV, not MeV?)")
    model = cfg.interaction.model
    if model in interactions.registered():
        params = interactions.get(model).parameters
        given = set(cfg.interaction.given)
        for group in sorted({p.group for p in params.values() if p.group}):
            members = [k for k, p in params.items() if p.group == group]
            set_ = [k for k in members if k in given]
            if set_:
                for k in members:
                    if k not in given:
                        out.append(f"interaction.{k} is left at its default {params[k].default:g} while "
                                   f"{', '.join('interaction.' + s for s in set_)} is set "
                                   f"({params[k].meaning}; both belong to the {group} form of {model})")
    if cfg.output.error_bar and cfg.mesons:
        b, k = cfg.bse, cfg.kernel
        fine = grids.BSEGrid(b.q2_min_gev2, tuple(b.panel_widths), b.order, b.z_points, b.angular_points)
        coarse = fine.coarser()
        q2_max = k.cutoff_gev2 if k.regularisation == kernel.HARD_CUTOFF else k.grid_end_gev2
        if coarse.n_z == fine.n_z and coarse.radial(q2_max).edges == fine.radial(q2_max).edges:
            out.append("output.error_bar = true, but numerics.bse is so coarse already (panel_widths, z_points) "
                       "that the second grid is the same grid: the error bars would be 0")
    return out

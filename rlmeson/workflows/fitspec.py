"""The ``[fit]`` table of a config: what a fit varies and what it aims at (our own layout,
read without importing the numerics)::

    [fit]
    derivatives = "exact"            # or "central" (default "exact" where available)
    max_iterations = 30              # least-squares evaluations at most

    [[fit.parameter]]
    key = "interaction.strength_gev2"        # any interaction parameter of the model ...
    bounds = [0.5, 1.5]
    # start = 0.8                            # default: the value in the config
    # linked = { key = "interaction.omega_gev", product = 0.372 }
    #   the linked key follows as product / value (D at fixed omega D: a Qin-Chang family);
    #   product defaults to the starting config's value of key times linked key

    [[fit.parameter]]
    key = "quarks.l.current_mass_gev"        # ... or any flavour's current mass
    bounds = [0.001, 0.01]

    [[fit.target]]
    meson = "pion"                           # a meson listed in the config
    observable = "mass_gev"                  # or "decay_constant_gev"
    value = 0.138                            # GeV; decay constants in the config's convention
    uncertainty = 0.001

Without ``[[fit.target]]`` tables the targets are the pion defaults for the first
equal-flavour pseudoscalar meson of the config: the charged-pion mass and its uncertainty
(PDG, through the ``particle`` package) and f_π = 130.2 ± 1.2 MeV in the √2 convention
(PDG, from memory), i.e. 0.0921 ± 0.0008 GeV in the 92 MeV one.  A target that names a
pseudoscalar with neither ``value`` nor ``uncertainty`` takes the same default.
"""

from __future__ import annotations

import importlib.util
from dataclasses import dataclass

from ..io.config import Config, ConfigError, apply_overrides, entry_table, finite_number, from_dict

OBSERVABLES = ("mass_gev", "decay_constant_gev")
DERIVATIVES = ("exact", "central")
#: f_π⁺ in the √2 convention, GeV (PDG, from memory): 130.2 ± 1.2 MeV.
F_PI_SQRT2_GEV, F_PI_SQRT2_ERROR_GEV = 0.1302, 0.0012
#: The charged pion's PDG id (for its mass through ``particle``).
PI_PLUS_PDGID = 211


def exact_available() -> bool:
    """Whether the exact derivatives (``rlmeson.workflows.sensitivity``) are part of this install."""
    return importlib.util.find_spec("rlmeson.workflows.sensitivity") is not None


def default_pion_targets(convention: str) -> dict[str, tuple[float, float]]:
    """{"mass_gev": (value, uncertainty), "decay_constant_gev": (value, uncertainty)} of
    the physical charged pion, f in ``convention`` ("92" or "131")."""
    from particle import Particle

    p = Particle.from_pdgid(PI_PLUS_PDGID)
    mass = (p.mass / 1e3, max(p.mass_upper or 0.0, p.mass_lower or 0.0) / 1e3)   # MeV -> GeV
    from ..meson.observables import CONVENTIONS

    k = CONVENTIONS[convention] / CONVENTIONS["131"]
    return {"mass_gev": mass, "decay_constant_gev": (F_PI_SQRT2_GEV * k, F_PI_SQRT2_ERROR_GEV * k)}


@dataclass(frozen=True)
class Parameter:
    key: str
    start: float
    lower: float
    upper: float
    linked_key: str | None = None
    linked_product: float | None = None

    @property
    def keys(self) -> tuple[str, ...]:
        """The config keys this parameter moves."""
        return (self.key,) if self.linked_key is None else (self.key, self.linked_key)

    def overrides(self, value: float) -> list[str]:
        out = [f"{self.key}={float(value)!r}"]
        if self.linked_key is not None:
            out.append(f"{self.linked_key}={self.linked_product / float(value)!r}")
        return out

    def chain(self, value: float) -> tuple[float, ...]:
        """d(config keys)/d(parameter) at ``value``: 1 and, when linked, −product/value²."""
        return (1.0,) if self.linked_key is None else (1.0, -self.linked_product / float(value) ** 2)


@dataclass(frozen=True)
class Target:
    meson: str
    observable: str
    value: float
    uncertainty: float
    source: str

    @property
    def name(self) -> str:
        return f"{self.meson}.{self.observable}"


@dataclass(frozen=True)
class FitSpec:
    base: dict                  # the config's TOML layout without [fit]
    parameters: tuple[Parameter, ...]
    targets: tuple[Target, ...]
    derivatives: str
    max_iterations: int
    name: str
    convention: str

    def config_at(self, values) -> Config:
        over = [o for p, v in zip(self.parameters, values) for o in p.overrides(v)]
        return from_dict(apply_overrides(self.base, over),
                         source=f"fit point {dict(zip((p.key for p in self.parameters), map(float, values)))}")

    def dict_at(self, values) -> dict:
        return apply_overrides(self.base, [o for p, v in zip(self.parameters, values) for o in p.overrides(v)])

    @property
    def start(self) -> tuple[float, ...]:
        return tuple(p.start for p in self.parameters)

    @property
    def config_keys(self) -> tuple[str, ...]:
        return tuple(k for p in self.parameters for k in p.keys)



def _value_of(cfg: Config, key: str):
    """The config's value of a fittable key, or None when the key is not fittable."""
    parts = key.split(".")
    if len(parts) == 2 and parts[0] == "interaction":
        return cfg.interaction.param_dict().get(parts[1])
    if len(parts) == 3 and parts[0] == "quarks" and parts[2] == "current_mass_gev":
        return next((f.current_mass_gev for f in cfg.flavours if f.name == parts[1]), None)
    return None


def _fittable(cfg: Config) -> str:
    return ("an interaction parameter (" + ", ".join(f"interaction.{k}" for k in cfg.interaction.param_dict())
            + ") or a flavour's current mass (" + ", ".join(f"quarks.{f.name}.current_mass_gev"
                                                           for f in cfg.flavours) + ")")


def _parameter(i: int, t, cfg: Config) -> Parameter:
    where = f"fit.parameter[{i + 1}]"
    entry_table(where, t, ("key", "bounds", "start", "linked"), "a table with key and bounds")
    key = t.get("key")
    if not isinstance(key, str) or _value_of(cfg, key) is None:
        raise ConfigError(f"{where}.key", key, _fittable(cfg))
    b = t.get("bounds")
    if not isinstance(b, list) or len(b) != 2:
        raise ConfigError(f"{where}.bounds", b, "[lower, upper], two numbers")
    lo, hi = finite_number(f"{where}.bounds[1]", b[0]), finite_number(f"{where}.bounds[2]", b[1])
    if not lo < hi:
        raise ConfigError(f"{where}.bounds", b, "lower < upper")
    start = finite_number(f"{where}.start", t["start"]) if "start" in t else float(_value_of(cfg, key))
    if not lo <= start <= hi:
        raise ConfigError(f"{where}.start" if "start" in t else key, start,
                          f"a starting value within {where}.bounds = [{lo:g}, {hi:g}]")
    linked = t.get("linked")
    lk = lp = None
    if linked is not None:
        if not isinstance(linked, dict) or not set(linked) <= {"key", "product"} or "key" not in linked:
            raise ConfigError(f"{where}.linked", linked, "{ key = \"<config key>\", product = <number> } "
                                                         "(linked value = product / parameter value)")
        lk = linked["key"]
        if not isinstance(lk, str) or _value_of(cfg, lk) is None or lk == key:
            raise ConfigError(f"{where}.linked.key", lk, "another " + _fittable(cfg))
        lp = (finite_number(f"{where}.linked.product", linked["product"]) if "product" in linked
              else float(_value_of(cfg, key)) * float(_value_of(cfg, lk)))
        if lp == 0 or lo <= 0 <= hi:
            raise ConfigError(f"{where}.bounds" if lp != 0 else f"{where}.linked.product", b if lp != 0 else lp,
                              "a non-zero product and bounds not containing 0 for a linked parameter")
    return Parameter(key=key, start=start, lower=lo, upper=hi, linked_key=lk, linked_product=lp)


def _target(i: int, t, cfg: Config) -> Target:
    where = f"fit.target[{i + 1}]"
    entry_table(where, t, ("meson", "observable", "value", "uncertainty", "convention"),
                "a table with meson, observable, value and uncertainty")
    names = [m.name for m in cfg.mesons]
    meson = t.get("meson")
    if meson not in names:
        raise ConfigError(f"{where}.meson", meson, "the name of a meson listed in the config: "
                          + (", ".join(names) or "(none listed)"))
    obs = t.get("observable")
    if obs not in OBSERVABLES:
        raise ConfigError(f"{where}.observable", obs, "one of " + ", ".join(map(repr, OBSERVABLES)))
    m = next(x for x in cfg.mesons if x.name == meson)
    if m.excitation:
        raise ConfigError(f"{where}.meson", meson, "a ground state (excitation = 0): a fit follows the leading "
                          "state of the channel's charge parity")
    if obs == "decay_constant_gev":
        from ..model import channels

        if channels.get(m.channel).decay_projector is None:
            raise ConfigError(f"{where}.observable", obs, f"'mass_gev' (the {m.channel} channel has no decay "
                              "constant)")
    if "value" not in t and "uncertainty" not in t:
        if m.channel != "pseudoscalar" or m.quarks[0] != m.quarks[1]:
            raise ConfigError(f"{where}.value", None, "required (defaults exist only for an equal-flavour "
                              "pseudoscalar, the pion)")
        v, u = default_pion_targets(cfg.output.decay_constant_convention)[obs]
        return Target(meson, obs, v, u, _default_source(obs))
    if "value" not in t or "uncertainty" not in t:
        missing = "value" if "value" not in t else "uncertainty"
        raise ConfigError(f"{where}.{missing}", None, "required together with "
                          + ("uncertainty" if missing == "value" else "value"))
    v = finite_number(f"{where}.value", t["value"])
    if not v > 0:
        raise ConfigError(f"{where}.value", t["value"], "a positive number (GeV)")
    u = finite_number(f"{where}.uncertainty", t["uncertainty"])
    if not u > 0:
        raise ConfigError(f"{where}.uncertainty", t["uncertainty"], "a positive number (GeV)")
    source = "config"
    if "convention" in t:               # a decay constant given in a stated convention
        from ..meson.observables import CONVENTIONS

        conv = str(t["convention"])
        if obs != "decay_constant_gev" or conv not in CONVENTIONS:
            raise ConfigError(f"{where}.convention", t["convention"],
                              "92 or 131, for a decay_constant_gev target (default: the config's "
                              "output.decay_constant_convention)")
        k = CONVENTIONS[cfg.output.decay_constant_convention] / CONVENTIONS[conv]
        v, u, source = v * k, u * k, f"config, given in the {conv} MeV convention"
    return Target(meson, obs, v, u, source)


def _default_source(obs: str) -> str:
    return ("PDG charged-pion mass and uncertainty (particle package)" if obs == "mass_gev" else
            "PDG f_pi+ = 130.2 +- 1.2 MeV in the sqrt 2 convention (from memory), in the config's convention")


def from_config_dict(d: dict, overrides=()) -> FitSpec:
    """The fit of a config dict (TOML layout) with a ``[fit]`` table, checked before any work."""
    d = apply_overrides(d, overrides)
    t = d.get("fit")
    if not isinstance(t, dict):
        raise ConfigError("fit", t, "a [fit] table with at least one [[fit.parameter]]")
    unknown = set(t) - {"parameter", "target", "derivatives", "max_iterations"}
    if unknown:
        k = sorted(unknown)[0]
        raise ConfigError(f"fit.{k}", t[k], "unknown key; allowed: parameter, target, derivatives, max_iterations")
    base = {k: v for k, v in d.items() if k != "fit"}
    cfg = from_dict(base)
    pt = t.get("parameter")
    if not isinstance(pt, list) or not pt:
        raise ConfigError("fit.parameter", pt, "one or more [[fit.parameter]] tables")
    params = tuple(_parameter(i, p, cfg) for i, p in enumerate(pt))
    keys = [k for p in params for k in p.keys]
    if len(set(keys)) != len(keys):
        raise ConfigError("fit.parameter", keys, "each config key moved by one parameter only")
    tt = t.get("target")
    if tt is None:
        pion = next((m for m in cfg.mesons if m.channel == "pseudoscalar" and m.quarks[0] == m.quarks[1]), None)
        if pion is None:
            raise ConfigError("fit.target", None, "[[fit.target]] tables (the pion defaults need an "
                              "equal-flavour pseudoscalar meson in the config)")
        tt = [{"meson": pion.name, "observable": o} for o in OBSERVABLES]
    if not isinstance(tt, list) or not tt:
        raise ConfigError("fit.target", tt, "one or more [[fit.target]] tables")
    targets = tuple(_target(i, x, cfg) for i, x in enumerate(tt))
    names = [x.name for x in targets]
    if len(set(names)) != len(names):
        raise ConfigError("fit.target", names, "each (meson, observable) once")
    if len(params) > len(targets):
        raise ConfigError("fit.parameter", [p.key for p in params],
                          f"at most as many parameters as targets ({len(targets)}): the fit would be undetermined")
    deriv = t.get("derivatives", "exact" if exact_available() else "central")
    if deriv not in DERIVATIVES:
        raise ConfigError("fit.derivatives", deriv, "one of " + ", ".join(map(repr, DERIVATIVES)))
    if deriv == "exact" and not exact_available():
        raise ConfigError("fit.derivatives", deriv, "'central' (the exact derivatives, rlmeson.workflows.sensitivity, are "
                          "not part of this install)")
    mi = t.get("max_iterations", 30)
    if isinstance(mi, bool) or not isinstance(mi, int) or not 1 <= mi <= 500:
        raise ConfigError("fit.max_iterations", mi, "an integer from 1 to 500")
    spec = FitSpec(base=base, parameters=params, targets=targets, derivatives=deriv, max_iterations=mi,
                   name=cfg.name, convention=cfg.output.decay_constant_convention)
    for corner in (spec.start, tuple(p.lower for p in params), tuple(p.upper for p in params)):
        spec.config_at(corner)      # every corner of the box a valid config before any work
    return spec


def load(path, overrides=()) -> FitSpec:
    """A fit from a config file (a relative cache_dir is relative to the file)."""
    from ..io.config import read_toml

    return from_config_dict(read_toml(path), overrides)

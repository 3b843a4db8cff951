"""Effective interactions of rainbow-ladder truncation, as data in a registry.

An interaction is the function g(s) = 𝒢(s)/s of the gluon momentum squared s = k², in
GeV⁻², valid for complex s.  The gap equation and the Bethe–Salpeter kernel both use

    Z₂² C_F g(k²) (δ_μν − k_μ k_ν / k²) γ_μ · γ_ν        (Landau gauge)

so g carries the whole model.  Models register a name, their parameters with defaults and
allowed ranges, and a pure array function ``g(s, params)`` written with ``jax.numpy``
(so that it can be compiled and differentiated).  A user model is given in a config as
``"package.module:function"``; the function takes ``(s, params)`` where ``params`` is a
plain ``dict`` of floats and returns g(s) with the shape of ``s``.

The ultraviolet tail common to Maris–Tandy and Qin–Chang is

    8π² γ_m ℱ(s) / ln[τ + (1 + s/Λ²_QCD)²],   ℱ(s) = (1 − e^{−s/(4 m_t²)})/s,

with γ_m = 12/(33 − 2 N_f).  For complex s the logarithm is written as
ln(1 + u − i√τ) + ln(1 + u + i√τ) with u = s/Λ²_QCD (principal branches): equal to the
real-axis function for Re s > −Λ²_QCD and Schwarz-symmetric, g(s*) = g(s)*; its branch
cuts run from the branch points s = Λ²_QCD(−1 ± i√τ) to Re s → −∞ parallel to the real
axis.  ``uv_tail(..., principal_log=True)`` instead takes the principal logarithm of the product,
whose cuts leave the branch points vertically; the two differ only where a cut lies in
between, which for a meson mass changes the result at the 1e-5 level (measured in the
test suite).  All parameters are plain floats so that a fit can differentiate with
respect to them.
"""

from __future__ import annotations

import importlib
import math
from dataclasses import dataclass, field
from typing import Callable, Mapping



class _LazyNumpy:
    """``jax.numpy``, imported (and configured by ``_jax``) on first use, so that reading a
    config -- which needs the registry and the parameter ranges -- does not import JAX."""

    def __getattr__(self, name):
        from ..numerics._jax import jnp as module

        return getattr(module, name)


jnp = _LazyNumpy()
Array = object
GFunction = Callable[[Array, Mapping[str, float]], Array]


@dataclass(frozen=True)
class Parameter:
    """One model parameter: default, allowed closed/open range, and a short meaning."""

    default: float
    minimum: float | None = None
    maximum: float | None = None
    strict_minimum: bool = False  # True: value must be > minimum (not >=)
    meaning: str = ""
    group: str = ""  # parameters set together (a config setting one but not another is warned about)

    def allowed(self) -> str:
        lo = "" if self.minimum is None else (f"> {self.minimum:g}" if self.strict_minimum else f">= {self.minimum:g}")
        hi = "" if self.maximum is None else f"<= {self.maximum:g}"
        return " and ".join(x for x in (lo, hi) if x) or "any real number"

    def check(self, value: float) -> bool:
        if not math.isfinite(value):
            return False
        if self.minimum is not None:
            if self.strict_minimum and not value > self.minimum:
                return False
            if not self.strict_minimum and value < self.minimum:
                return False
        if self.maximum is not None and value > self.maximum:
            return False
        return True


@dataclass(frozen=True)
class Model:
    name: str
    g: GFunction
    parameters: Mapping[str, Parameter] = field(default_factory=dict)
    summary: str = ""

    def defaults(self) -> dict[str, float]:
        return {k: p.default for k, p in self.parameters.items()}


_REGISTRY: dict[str, Model] = {}


def register(model: Model) -> Model:
    if model.name in _REGISTRY:
        raise ValueError(f"interaction {model.name!r} is already registered")
    _REGISTRY[model.name] = model
    return model


def registered() -> tuple[str, ...]:
    return tuple(sorted(_REGISTRY))


def get(name: str) -> Model:
    """Model by registry name, or a user model given as ``module:function``."""
    if name in _REGISTRY:
        return _REGISTRY[name]
    if ":" in name:
        module, _, func = name.partition(":")
        mod = importlib.import_module(module)
        fn = getattr(mod, func)
        if not callable(fn):
            raise TypeError(f"{name} is not callable")
        return Model(name=name, g=fn, parameters={}, summary="user interaction")
    raise KeyError(name)


# ----------------------------------------------------------------------------------------
# The common ultraviolet tail and the two published infrared forms

def _f_soft(s, m_t):
    """ℱ(s) = (1 − exp(−s/4m_t²))/s, with its series near s = 0 (no 0/0)."""
    a = 4.0 * m_t * m_t
    x = s / a
    small = jnp.abs(x) < 1e-4
    xs = jnp.where(small, jnp.ones_like(x), x)
    exact = -jnp.expm1(-xs) / (xs * a)
    series = (1.0 - x / 2.0 + x * x / 6.0 - x * x * x / 24.0) / a
    return jnp.where(small, series, exact)


def uv_tail(s, p: Mapping[str, float], principal_log: bool = False):
    """uv_strength · 8π² γ_m ℱ(s) / ln[τ + (1 + s/Λ²)²] (module docstring: complex s).

    ``principal_log`` selects the principal logarithm of the product instead of the
    split form (only used to measure how much the branch choice matters).
    """
    lam2 = p["lambda_qcd_gev"] ** 2
    tau = p["tau"]
    u = 1.0 + s / lam2
    if principal_log or not jnp.iscomplexobj(s):
        log = jnp.log(tau + u * u)
    else:
        rt = jnp.sqrt(tau)
        log = jnp.log(u - 1j * rt) + jnp.log(u + 1j * rt)
    gamma_m = 12.0 / (33.0 - 2.0 * p["flavours"])
    return (p["uv_strength"] * 8.0 * math.pi**2 * gamma_m
            * _f_soft(s, p["gluon_mass_scale_gev"]) / log)


def _maris_tandy(s, p):
    w2 = p["omega_gev"] ** 2
    ir = (4.0 * math.pi**2 / w2**3) * p["strength_gev2"] * s * jnp.exp(-s / w2)
    return ir + uv_tail(s, p)


def _qin_chang(s, p):
    w2 = p["omega_gev"] ** 2
    ir = (8.0 * math.pi**2 / w2**2) * p["strength_gev2"] * jnp.exp(-s / w2)
    return ir + uv_tail(s, p)


def _free(s, p):
    return jnp.zeros_like(s)


_UV = {
    "gluon_mass_scale_gev": Parameter(0.5, 0.0, None, True, "m_t in ℱ(s)"),
    "tau": Parameter(math.e**2 - 1.0, 0.0, None, True, "τ in the UV logarithm"),
    # Λ_QCD is a few hundred MeV (common practice); above 1 GeV the one-loop evolution of
    # the condensate to 1 GeV is meaningless, so the range stops well below.
    "lambda_qcd_gev": Parameter(0.234, 0.0, 0.6, True, "Λ_QCD in the UV logarithm", "running coupling"),
    "flavours": Parameter(4.0, 0.0, 16.0, False, "N_f in γ_m = 12/(33 − 2N_f)", "running coupling"),
    "uv_strength": Parameter(1.0, 0.0, None, False, "factor on the perturbative tail (1: as published)"),
}

MARIS_TANDY = register(Model(
    name="maris-tandy",
    g=_maris_tandy,
    parameters={
        "omega_gev": Parameter(0.4, 0.0, None, True, "ω, width of the infrared Gaussian", "infrared"),
        "strength_gev2": Parameter(0.933, 0.0, None, False, "D, infrared strength", "infrared"),
        **_UV,
    },
    summary="(4π²/ω⁶) D s e^{−s/ω²} + UV tail (Maris–Tandy, 1999)",
))

QIN_CHANG = register(Model(
    name="qin-chang",
    g=_qin_chang,
    parameters={
        "omega_gev": Parameter(0.5, 0.0, None, True, "ω, width of the infrared Gaussian", "infrared"),
        "strength_gev2": Parameter(0.8**3 / 0.5, 0.0, None, False, "D; ωD = (0.8 GeV)³ by default", "infrared"),
        **_UV,
    },
    summary="(8π²/ω⁴) D e^{−s/ω²} + UV tail (Qin–Chang, 2011)",
))

FREE = register(Model(
    name="free",
    g=_free,
    parameters={},
    summary="no interaction: A = 1, B = m (a test of the machinery)",
))


# ----------------------------------------------------------------------------------------
# A user interaction is tried once before anything is solved

#: Probe points (GeV²): infrared, near the Maris–Tandy peak, ultraviolet, and the complex
#: momenta of the continuation (Schwarz pairs) -- real and complex arrays, 1-D and 2-D.
PROBE_S = (1e-4, 0.3, 2.0, 1e3, 0.2 + 0.3j, 0.2 - 0.3j, -0.1 + 0.05j, 1.0 + 1.0j)


def probe(name: str, params: Mapping[str, float]) -> None:
    """Evaluate g once on real and complex s, plain and under ``jax.jit``: the result
    must be finite and have the shape of s.  A failure raises ``ConfigError`` naming
    ``interaction.model`` (one line)."""
    import numpy as np

    from ..numerics._jax import jax, jnp as real_jnp
    from ..io.config import ConfigError

    def fail(what: str):
        raise ConfigError("interaction.model", name, f"a function g(s, params) of jax.numpy that {what}")

    fn = get(name).g
    jp = {k: real_jnp.asarray(float(v)) for k, v in params.items()}
    s_complex = np.asarray(PROBE_S, dtype=complex).reshape(2, 4)
    s_real = np.asarray([s.real for s in PROBE_S[:4]]) + 0.0
    for s in (s_real, s_complex):
        for how, call in (("plain", lambda x: fn(real_jnp.asarray(x), jp)),
                          ("jax.jit", jax.jit(lambda x: fn(x, jp)))):
            try:
                val = call(s)
            except Exception as e:  # noqa: BLE001  (whatever it raised: name the key)
                msg = " ".join(str(e).split())[:160]
                where = "complex" if s.dtype.kind == "c" else "real"
                fail(f"can be traced and compiled (with {how} on {where} s it raised {type(e).__name__}: {msg})")
            if val is None:
                fail("returns an array (it returned None)")
            try:
                arr = np.asarray(val)
            except Exception:  # noqa: BLE001
                fail(f"returns an array (it returned {type(val).__name__})")
            if arr.shape != s.shape:
                fail(f"returns an array of the shape of s (s of shape {s.shape} gave {arr.shape})")
            if arr.dtype.kind not in "fcib" or not np.all(np.isfinite(arr)):
                fail(f"is finite for the probe momenta s = {', '.join(map(str, PROBE_S))} GeV^2 "
                     f"(it gave {arr.ravel()[:4].tolist()}...)")


def evaluate(name: str, params: Mapping[str, float], s):
    """g(s) for a model name and a full parameter mapping."""
    return get(name).g(s, params)

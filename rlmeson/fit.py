"""Fitting model inputs to observables through the pipeline (no stage internals).

``tune_current_mass`` adjusts one flavour's m^ζ until a meson's mass hits a target:
secant steps in m on M², which is nearly linear in m for a pseudo-Goldstone boson.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass

from . import pipeline
from .config import Config, ConfigError


@dataclass(frozen=True)
class TuneResult:
    current_mass_gev: float
    meson_mass_gev: float      # evaluated at current_mass_gev
    steps: list[tuple[float, float]]
    converged: bool


def _with_mass(cfg: Config, flavour: str, m: float) -> Config:
    fl = tuple(dataclasses.replace(f, current_mass_gev=m) if f.name == flavour else f for f in cfg.flavours)
    return dataclasses.replace(cfg, flavours=fl)


def meson_mass(cfg: Config, meson_name: str, store=None) -> float:
    meson = next((m for m in cfg.mesons if m.name == meson_name), None)
    if meson is None:
        raise ConfigError("mesons", meson_name, "the name of a meson listed in the config")
    quarks = {q: pipeline.solve_quark(cfg, q, store) for q in set(meson.quarks)}
    return pipeline.bound_state(cfg, meson, quarks, pipeline.bse_grid_of(cfg)).mass_gev


def tune_current_mass(cfg: Config, flavour: str, meson_name: str, target_gev: float,
                      rtol: float = 1e-7, max_steps: int = 12, store=None) -> TuneResult:
    m0 = cfg.flavour(flavour).current_mass_gev
    if m0 <= 0:
        raise ConfigError(f"quarks.{flavour}.current_mass_gev", m0, "a positive starting value for the fit")
    steps = []

    def residual(m):
        mm = meson_mass(_with_mass(cfg, flavour, m), meson_name, store)
        steps.append((m, mm))
        return mm**2 - target_gev**2

    x0 = m0
    y0 = residual(x0)
    x1 = x0 * target_gev**2 / (y0 + target_gev**2)   # M² ∝ m to leading order
    y1 = residual(x1)
    converged = abs(y1) < 2 * rtol * target_gev**2
    while not converged and len(steps) < max_steps + 2 and y1 != y0:
        x0, y0, x1 = x1, y1, x1 - y1 * (x1 - x0) / (y1 - y0)
        if not x1 > 0:
            break
        y1 = residual(x1)
        converged = abs(y1) < 2 * rtol * target_gev**2
    best = min(steps, key=lambda s: abs(s[1] - target_gev))
    return TuneResult(current_mass_gev=best[0], meson_mass_gev=best[1], steps=steps, converged=converged)

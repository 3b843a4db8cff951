"""The rainbow-ladder kernel as one object shared by the gap equation and the BSE.

It bundles the interaction g(s) = 𝒢(s)/s, the regularisation, and whether the kernel
carries Z₂² (as the published Maris–Tandy model does).  It knows nothing of quarks or
mesons: it evaluates the regularised g on any array of (possibly complex) s, gives the
integration domain in t = ln q², and the scales that quadrature rules need.

Regularisation
--------------
``hard-cutoff``: loop momenta q² ≤ Λ² (how published numbers were made).  Not
  translation invariant: shifting a loop momentum by c leaves a surface term iγ·c δ.
``translation-invariant``: a Pauli–Villars-type factor Λ_R²/(k² + Λ_R²) on the gluon
  momentum, loop integrals to q² = ∞ (in practice to a grid end many decades above Λ_R²,
  where the remainder is ∝ Λ_R²/q²_end and below 1e-8).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Mapping

from . import interactions

HARD_CUTOFF = "hard-cutoff"
TRANSLATION_INVARIANT = "translation-invariant"
REGULARISATIONS = (HARD_CUTOFF, TRANSLATION_INVARIANT)
#: The package default (README: the exact identities hold and nothing drifts with the
#: regulator); the published Maris–Tandy numbers need HARD_CUTOFF, chosen explicitly.
DEFAULT_REGULARISATION = TRANSLATION_INVARIANT

C_F = 4.0 / 3.0
N_C = 3


@dataclass(frozen=True)
class KernelForm:
    """The structural part of a kernel (hashable; the key under which code is compiled)."""

    model: str
    regularisation: str
    regulator_gev2: float

    def g(self, s, jparams):
        val = interactions.get(self.model).g(s, jparams)
        if self.regularisation == TRANSLATION_INVARIANT:
            lr = self.regulator_gev2
            val = val * (lr / (s + lr))
        return val


@dataclass(frozen=True)
class TangentForm:
    """dg/dθ of a ``KernelForm`` along a direction in parameter space, usable wherever a
    KernelForm is (``selfenergy.rows``, ``ladder`` moments): its ``g`` takes the pair
    (parameters, tangents) and returns the forward-mode derivative.  The direction is
    data (traced), so one compilation serves every direction."""

    base: KernelForm

    def g(self, s, jparams):
        from ..numerics._jax import jax

        params, tangents = jparams
        return jax.jvp(lambda p: self.base.g(s, p), (params,), (tangents,))[1]


@dataclass(frozen=True)
class Kernel:
    model: str
    params: Mapping[str, float] = field(hash=False)
    regularisation: str = DEFAULT_REGULARISATION
    cutoff_gev2: float = 1e5          # Λ² (hard cutoff)
    regulator_gev2: float = 1e6       # Λ_R² (translation-invariant)
    grid_end_gev2: float = 1e11       # end of the loop integrals (translation-invariant)
    z2_squared: bool = True

    def __post_init__(self):
        if self.regularisation not in REGULARISATIONS:
            raise ValueError(f"unknown regularisation {self.regularisation!r}")

    @property
    def hard(self) -> bool:
        return self.regularisation == HARD_CUTOFF

    @property
    def q2_max(self) -> float:
        """Upper end of every loop integral over q²."""
        return self.cutoff_gev2 if self.hard else self.grid_end_gev2

    @property
    def scale_gev2(self) -> float:
        """Λ² or Λ_R²: the scale that defines the regularisation."""
        return self.cutoff_gev2 if self.hard else self.regulator_gev2

    @property
    def label(self) -> str:
        if self.hard:
            return f"{HARD_CUTOFF} (Λ² = {self.cutoff_gev2:g} GeV²)"
        return (f"{TRANSLATION_INVARIANT} (Λ_R² = {self.regulator_gev2:g} GeV², "
                f"integrals to {self.grid_end_gev2:g} GeV²)")

    def jparams(self) -> dict:
        from ..numerics._jax import jnp  # (here, so that reading a config does not import JAX)

        return {k: jnp.asarray(float(v)) for k, v in self.params.items()}

    def jtangent(self, direction) -> tuple[dict, dict]:
        """(parameters, tangents) for ``TangentForm``: ``direction`` maps parameter names
        to tangent components (others 0)."""
        from ..numerics._jax import jnp

        unknown = set(direction) - set(self.params)
        if unknown:
            raise KeyError(f"not a parameter of {self.model}: {', '.join(sorted(unknown))}")
        return self.jparams(), {k: jnp.asarray(float(direction.get(k, 0.0))) for k in self.params}

    @property
    def form(self) -> KernelForm:
        return KernelForm(self.model, self.regularisation,
                          0.0 if self.hard else float(self.regulator_gev2))

    def g(self, s, jparams=None):
        """Regularised g(s) (GeV⁻²), for real or complex s."""
        return self.form.g(s, self.jparams() if jparams is None else jparams)

    @property
    def resolution_gev(self) -> float:
        """Smallest momentum scale on which the kernel varies (sets quadrature grading)."""
        scales = [0.5]
        for key in ("omega_gev", "gluon_mass_scale_gev"):
            if key in self.params:
                scales.append(float(self.params[key]))
        return min(scales)

    def z2_factor(self, z2):
        return z2 * z2 if self.z2_squared else 1.0 + 0.0 * z2


def one_loop_condensate_factor(mu_from: float, mu_to: float, lambda_qcd: float,
                               n_f: float = 4.0) -> float:
    """[ln(μ_to/Λ)/ln(μ_from/Λ)]^{γ_m}: one-loop evolution of −⟨q̄q⟩ from μ_from to μ_to."""
    gamma_m = 12.0 / (33.0 - 2.0 * n_f)
    return (math.log(mu_to / lambda_qcd) / math.log(mu_from / lambda_qcd)) ** gamma_m

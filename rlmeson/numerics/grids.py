"""Numerical resolutions of the gap and Bethe–Salpeter solves (pure data, no JAX).

They live here, not beside the solvers, so that reading and checking a config (which
takes its defaults from these classes) does not import the numerics.  ``gap.GapGrid``
and ``bse.BSEGrid`` are the same classes.
"""

from __future__ import annotations

from dataclasses import dataclass

from . import quadrature as qd

#: Continuations of the quark propagators to q ± ηP (``propagators``); the first is the default.
CONTINUATIONS = ("shifted", "direct")


@dataclass(frozen=True)
class GapGrid:
    """Numerical resolution of a gap-equation solve."""

    q2_min: float = 1e-6
    widths: tuple[float, ...] = (4.0, 1.2, 3.6, 3.6)
    order: int = 8
    angular_half: int = 32
    fine_order: int = 10

    def radial(self, q2_max: float) -> qd.RadialGrid:
        return qd.radial_grid(self.q2_min, q2_max, self.widths, self.order)

    def refined(self) -> "GapGrid":
        """Twice the radial panels and angular points (for the convergence estimate)."""
        return GapGrid(self.q2_min, tuple(w / 2 for w in self.widths), self.order,
                       2 * self.angular_half, self.fine_order)


@dataclass(frozen=True)
class BSEGrid:
    """Resolution of a Bethe–Salpeter solve."""

    q2_min: float = 1e-4
    widths: tuple[float, ...] = (6.0, 2.4, 5.0, 5.0)
    order: int = 8
    n_z: int = 8
    angular_half: int = 32
    fine_order: int = 10

    def radial(self, q2_max: float) -> qd.RadialGrid:
        return qd.radial_grid(self.q2_min, q2_max, self.widths, self.order)

    def coarser(self) -> "BSEGrid":
        """A grid with wider radial panels and fewer z nodes (the second grid of an error bar)."""
        return BSEGrid(self.q2_min, tuple(1.5 * w for w in self.widths), self.order,
                       max(4, self.n_z - 2), self.angular_half, self.fine_order)

"""rlmeson: mesons in rainbow-ladder truncation from the gap and Bethe–Salpeter equations."""

from . import _jax  # noqa: F401  (float64 and the compilation cache, before anything else)

__version__ = "0.1.0"

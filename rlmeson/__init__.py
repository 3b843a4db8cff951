"""rlmeson: mesons in rainbow-ladder truncation from the gap and Bethe–Salpeter equations."""

# JAX is configured (float64, compilation cache) by ``rlmeson._jax``, which every module
# that computes imports; ``import rlmeson`` and reading a config do not import JAX.

__version__ = "0.1.0"

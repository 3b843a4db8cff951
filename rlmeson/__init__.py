"""rlmeson: mesons in rainbow-ladder truncation from the gap and Bethe–Salpeter equations."""

# JAX is configured (float64, compilation cache) by ``rlmeson._jax``, which every module
# that computes imports; ``import rlmeson`` and reading a config do not import JAX.

__version__ = "0.1.0"


def open_propagator(path):
    """A dressed quark from a file written by ``rlmeson export`` (netCDF-4 or HDF5):
    A, B, σ_V, σ_S, M at real p² and at complex p² inside the exported region."""
    from .readers import open_propagator as _open

    return _open(path)


def open_amplitude(path):
    """A normalised Bethe–Salpeter amplitude from a file written by ``rlmeson export``."""
    from .readers import open_amplitude as _open

    return _open(path)

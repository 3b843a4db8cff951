"""User interactions for the tests of the user-model probe (loaded as 'user_models:NAME').

``gaussian`` is a well-behaved g(s) (finite, complex-safe, written with jax.numpy); the
others are the mistakes a user can make: NaN, the wrong shape, no return value, and
plain numpy (which cannot be traced by JAX).
"""

import numpy as np

from rlmeson.numerics._jax import jnp


def gaussian(s, p):
    return p["width"] * jnp.exp(-s / p["width"])


def nan_at_zero(s, p):
    return jnp.log(s.real) * 0.0 + jnp.where(jnp.abs(s) < 1e-3, jnp.nan, 1.0)


def scalar(s, p):
    return jnp.sum(jnp.exp(-s))


def nothing(s, p):
    jnp.exp(-s)


def plain_numpy(s, p):
    return np.exp(-np.asarray(s))

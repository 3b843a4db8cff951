"""One place that configures JAX for the whole package.

Float64 is switched on at import, and JAX's persistent compilation cache is pointed at
a directory under the user's cache (override with ``RLMESON_JAX_CACHE``; set it to an
empty string to switch the persistent cache off).  Everything runs on the CPU unless the
user's JAX installation says otherwise.
"""

from __future__ import annotations

import os
from pathlib import Path

import jax

jax.config.update("jax_enable_x64", True)


def _cache_dir() -> str | None:
    env = os.environ.get("RLMESON_JAX_CACHE")
    if env is not None:
        return env or None
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return str(Path(base) / "rlmeson" / "jax")


_dir = _cache_dir()
if _dir:
    try:
        Path(_dir).mkdir(parents=True, exist_ok=True)
        jax.config.update("jax_compilation_cache_dir", _dir)
        jax.config.update("jax_persistent_cache_min_compile_time_secs", 0.0)
        jax.config.update("jax_persistent_cache_min_entry_size_bytes", 0)
    except (OSError, AttributeError):  # read-only home, or an older JAX: run without it
        pass

import jax.numpy as jnp  # noqa: E402  (after x64 is enabled)

__all__ = ["jax", "jnp"]

"""JAX set-up shared by every module that traces: float64 on, compilation cache on.

Imported only by modules that need JAX, so ``shaper --help`` never pays for it.
The cache folder is ``$SHAPER_CACHE_DIR`` if set, else ``~/.cache/shaper/jax``.
"""

from __future__ import annotations

import os
from pathlib import Path

import jax
import numpy as np

jax.config.update("jax_enable_x64", True)


def cache_dir() -> Path:
    """Where JAX's persistent compilation cache lives (``$SHAPER_CACHE_DIR`` overrides)."""
    env = os.environ.get("SHAPER_CACHE_DIR")
    if env:
        return Path(env)
    base = os.environ.get("XDG_CACHE_HOME") or str(Path.home() / ".cache")
    return Path(base) / "shaper" / "jax"


def _enable_cache() -> None:
    folder = cache_dir()
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError:
        return  # a read-only home: run without the cache rather than fail
    jax.config.update("jax_compilation_cache_dir", str(folder))
    # Our compiles take 0.1-2 s; the default 1 s threshold would skip most of them.
    jax.config.update("jax_persistent_cache_min_compile_time_secs", 0.05)
    jax.config.update("jax_persistent_cache_min_entry_size_bytes", 0)


_enable_cache()


def device(x, dtype=None) -> jax.Array:
    """Host data (NumPy, lists, Python numbers) as a JAX array, without compiling anything.

    ``jnp.asarray`` of a host array runs a small compiled copy program, one per new shape
    and dtype (3-30 ms each, dozens per command); ``jax.device_put`` of a NumPy array only
    transfers. Python scalars become strongly typed float64/complex128, as traced code
    expects.
    """
    return jax.device_put(np.asarray(x, dtype=dtype))

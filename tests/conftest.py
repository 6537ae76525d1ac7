"""Test set-up: float64 on (shaper._jax), a private compilation cache, shared fixtures."""

import os
import tempfile

os.environ.setdefault("SHAPER_CACHE_DIR", os.path.join(tempfile.gettempdir(),
                                                       "shaper-test-jax-cache"))

import shaper.physics._jax  # noqa: E402,F401  (jax_enable_x64 before any array is made)

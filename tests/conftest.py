"""Test set-up: float64 on (shaper._jax), a private compilation cache, shared fixtures."""

import os
import tempfile

# one BLAS thread per process, as the command line sets it (shaper/cli/main.py): an idle
# OpenBLAS thread spinning beside small-matrix loops made the references here 5x slower
# on a loaded 2-core machine (measured: a 4x4 scipy expm 12-16 ms instead of 40 us)
for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_name, "1")
os.environ.setdefault("SHAPER_CACHE_DIR", os.path.join(tempfile.gettempdir(),
                                                       "shaper-test-jax-cache"))

import shaper.physics._jax  # noqa: E402,F401  (jax_enable_x64 before any array is made)

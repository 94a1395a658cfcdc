"""Project-wide test settings."""

from __future__ import annotations

import os

# Small matrices everywhere: BLAS threads only oversubscribe a 2-core machine (see hopscope/cli.py).
# This takes effect when numpy has not been imported yet; .ci/run also sets it in the environment.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

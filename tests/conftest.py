"""Project-wide test settings."""

from __future__ import annotations

import os

# Small matrices everywhere: BLAS threads only oversubscribe a 2-core machine (see hopscope/cli.py).
# This takes effect when numpy has not been imported yet; .ci/run also sets it in the environment.
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import pytest  # noqa: E402


@pytest.hookimpl(tryfirst=True)
def pytest_collection_modifyitems(config, items):
    """A browser test is also a slow one: the fast loop ``-m "not slow"`` needs no Chromium, while the
    plain ``python -m pytest`` (CI's command) still runs it."""
    for item in items:
        if item.get_closest_marker("browser") is not None and item.get_closest_marker("slow") is None:
            item.add_marker(pytest.mark.slow)

"""Shared test fixtures."""

from __future__ import annotations

import os

import matplotlib
import numpy as np
import pytest

matplotlib.use("Agg")
# Keep BLAS to one thread so tests on the 2-core CI machine do not oversubscribe.
os.environ.setdefault("OMP_NUM_THREADS", "1")


@pytest.fixture
def rng() -> np.random.Generator:
    """A fixed-seed generator; tests that need other seeds make their own."""
    return np.random.default_rng(20261201)

"""Suite-wide settings: seeded randomness only; heavy tests are marked ``slow``."""

import os

import numpy as np
import pytest

os.environ.setdefault("MPLBACKEND", "Agg")


@pytest.fixture
def rng() -> np.random.Generator:
    """A seeded generator: tests never depend on unseeded randomness."""
    return np.random.default_rng(20261201)

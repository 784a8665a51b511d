import os

import numpy as np
import pytest

os.environ.setdefault("MPLBACKEND", "Agg")


@pytest.fixture
def rng():
    """A seeded generator: every random test is reproducible."""
    return np.random.default_rng(20261201)

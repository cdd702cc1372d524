import numpy as np
import pytest


@pytest.fixture
def rng():
    """Explicit, seeded randomness for every test that needs it."""
    return np.random.default_rng(20261202)

"""Shared test configuration."""

import os

import numpy as np
import pytest

# plots in tests never need a display
os.environ.setdefault("MPLBACKEND", "Agg")


@pytest.fixture
def rng():
    return np.random.default_rng(20261201)

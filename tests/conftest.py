"""Shared fixtures: small synthetic series with known answers."""

import numpy as np
import pytest

import saxsnb  # noqa: F401  (registers the .saxs accessor)


@pytest.fixture
def rng():
    return np.random.default_rng(1234)

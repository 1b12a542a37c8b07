"""Shared fixtures: small synthetic series with known answers."""

import numpy as np
import pytest

import saxsnb  # noqa: F401  (registers the .saxs accessor)


@pytest.fixture
def rng():
    return np.random.default_rng(1234)

# Property tests draw the same examples on every run and every machine, so a CI result
# can be reproduced; no example database is written into the checkout.
from hypothesis import settings  # noqa: E402

settings.register_profile("saxsnb", derandomize=True, database=None)
settings.load_profile("saxsnb")


@pytest.fixture
def few_points(monkeypatch):
    """Let read_series take curves of fewer than 5 q points (its minimum, tested in
    tests/test_io_trailer.py): for the exactness cases of issue 12, written on 2-3 rows."""
    import saxsnb.io.text

    monkeypatch.setattr(saxsnb.io.text, "MIN_Q_POINTS", 2)

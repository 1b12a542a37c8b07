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


@pytest.fixture
def never_whole(monkeypatch):
    """``with never_whole(shape) as calls:`` fails a compute that returns, or a task that
    makes, an array of ``shape`` (a series' (frame, q)): the client never holds it, nor a
    worker; ``calls.n`` counts the computations started meanwhile."""
    import contextlib

    pytest.importorskip("dask")
    import dask.array.core as dac
    from dask.callbacks import Callback

    @contextlib.contextmanager
    def arm(shape):
        original = dac.finalize

        def finalize(results):
            out = original(results)
            if getattr(out, "shape", None) == shape:
                raise AssertionError(f"the whole {shape} array was computed")
            return out

        class Whole(Callback):
            def _start(self, dsk):
                self.n = getattr(self, "n", 0) + 1

            def _posttask(self, key, result, dsk, state, id):
                if getattr(result, "shape", None) == shape:
                    raise AssertionError(f"a task made the whole {shape} array ({key})")

        monkeypatch.setattr(dac, "finalize", finalize)
        try:
            with Whole() as w:
                yield w
        finally:
            monkeypatch.setattr(dac, "finalize", original)

    return arm

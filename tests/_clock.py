"""A fixed clock for the history entries of results (a fixture for the widget tests).

Every result's ``attrs["history"]`` entry carries the time to the second
(``saxsnb.series.add_history``). The panels compute a whole-series result once and
reuse it, so a result a test compares it with, computed later, can differ in that
timestamp only when a second boundary falls in between; with the clock fixed the
comparisons (``xr.testing.assert_identical``) check the numbers and the parameters.
"""

import datetime
import types

import pytest

import saxsnb.series


class _FixedDatetime(datetime.datetime):
    @classmethod
    def now(cls, tz=None):
        return datetime.datetime(2024, 1, 1, 12, 0, 0, tzinfo=tz)


FIXED = types.SimpleNamespace(datetime=_FixedDatetime, timezone=datetime.timezone)


@pytest.fixture(autouse=True, scope="module")
def fixed_history_clock():
    """Module-wide (panels built by module fixtures use it too)."""
    with pytest.MonkeyPatch.context() as mp:
        mp.setattr(saxsnb.series, "_dt", FIXED)
        yield

"""Bounded, derandomised fuzzing of the readers (issue 12): text, canSAS XML, NetCDF and
NXcanSAS. Every generated file must be read exactly (the values written; the reference
for a decimal token is Python's correctly rounded ``float``) or refused by an error of
the saxsnb family naming the file (and, for a bad text row, its line); no other
exception and no hang. The generators and the judge are in tests/_fuzz_io.py; the large
run is benchmarks/fuzz_io.py.
"""

import numpy as np
import pytest
from _fuzz_io import judge, store_case, text_case, xml_case
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

ALLOWED = {"exact", "refused", "refused-benign", "slow-refused"}
_SETTINGS = settings(
    derandomize=True,
    deadline=None,
    database=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
)


@pytest.mark.parametrize(
    ("make", "n"),
    [(text_case, 250), (xml_case, 150), (store_case, 120)],
    ids=["text", "xml", "store"],
)
def test_every_file_is_read_exactly_or_refused(tmp_path, monkeypatch, make, n):
    import saxsnb.io._h5guard as h5guard

    monkeypatch.setattr(h5guard, "READ_TIMEOUT", 3.0)  # a looping HDF5 library is stopped sooner
    seen = set()

    @settings(_SETTINGS, max_examples=n)
    @given(st.integers(0, 2**32 - 1))
    def check(seed):
        case = make(np.random.default_rng(seed), tmp_path, 0)
        outcome, detail = judge(case, limit=10.0)  # a hang guard; the 1 s figure is the benchmark's
        seen.add(outcome)
        assert outcome in ALLOWED, f"{case.what}: {outcome}: {detail}"
        assert outcome != "refused-benign" or case.kind != "xml", detail

    check()
    assert {"exact", "refused"} <= seen

"""ds.saxs.distance_distribution: same numbers as the numpy function, lazily on dask, and
Rg from p(r) beside the Guinier Rg on the flow-growth demo."""

import numpy as np
import pytest

import saxsnb
from saxsnb import analysis


@pytest.fixture(scope="module")
def flow():
    ds, bg = saxsnb.demo.make_series("flow-growth", seed=0)
    return ds.saxs.subtract(bg).isel(frame=slice(0, 60, 6))


def test_accessor_equals_numpy(flow):
    res = flow.saxs.distance_distribution()
    I, S = flow.saxs.masked()
    direct = analysis.distance_distribution(flow.q.values, I.values, S.values)
    for k, v in direct.items():
        if np.asarray(v).dtype.kind == "f":
            np.testing.assert_array_equal(res[k].values, v, err_msg=k)
        else:
            assert res[k].values.astype(str).tolist() == np.asarray(v).astype(str).tolist()
    assert res.p.attrs["units"] == "1/cm/nm" and res.r.attrs["units"] == "nm"
    assert res.attrs["sample"] == flow.attrs["sample"]


def test_dask_equals_in_memory(flow):
    pytest.importorskip("dask")
    a = flow.saxs.distance_distribution(dmax=30.0)
    b = flow.chunk({"frame": 4}).saxs.distance_distribution(dmax=30.0)
    assert b["p"].chunks is not None
    b = b.compute()
    c = flow.chunk({"frame": 3}).saxs.distance_distribution().compute()  # automatic Dmax, uneven chunks
    auto = flow.saxs.distance_distribution()
    # every frame is solved from its own data by the same operations whatever the chunk
    # (analysis._distance_solve): the same numbers to the last digit
    for k in a.data_vars:
        np.testing.assert_array_equal(b[k].values, a[k].values, err_msg=k)
        np.testing.assert_array_equal(c[k].values, auto[k].values, err_msg=k)
    assert (a.status.values == b.status.values).all()


def test_rg_from_pr_agrees_with_guinier(flow):
    # Rg from p(r) (Glatter 1977: Rg^2 = int p r^2 dr / (2 int p dr)) and the Guinier Rg
    # estimate the same quantity (docs/REFERENCES.md); within their joint uncertainty
    pr = flow.saxs.distance_distribution()
    g = flow.saxs.guinier()
    ok = (pr.status.values == "ok") & (g.status.values == "ok")
    assert ok.sum() >= 6
    diff = np.abs(pr.rg.values - g.rg.values)[ok]
    joint = np.hypot(pr.rg_sigma.values, g.rg_sigma.values)[ok]
    rel = diff / g.rg.values[ok]
    # a 2 % systematic allowance: the Guinier fit of a Schulz distribution is biased by
    # its range (sphere bias table, docs/REFERENCES.md)
    assert np.all(diff <= 3 * joint + 0.02 * g.rg.values[ok]), (rel, joint)


def test_per_frame_dmax_and_bad_input(flow):
    d = np.full(flow.sizes["frame"], 30.0)
    d[0] = 0.5  # far too short for these particles
    res = flow.saxs.distance_distribution(dmax=d)
    assert res.dmax.values[1] == 30.0
    assert str(res.status.values[0]) != "ok"
    with pytest.raises(saxsnb.SaxsError):
        flow.saxs.distance_distribution(dmax=d[:3])


def test_errors_raise_names_frame_and_parameter(flow):
    bad = flow.copy(deep=True)
    bad["intensity"][3] = np.nan  # an all-NaN frame
    res = bad.saxs.distance_distribution(dmax=30.0)
    assert str(res.status.values[3]) == "no_data" and (res.status.values[[0, 1, 2, 4]] == "ok").all()
    with pytest.raises(saxsnb.SaxsError) as err:
        bad.saxs.distance_distribution(dmax=30.0, errors="raise")
    assert err.value.frame == int(bad.frame.values[3]) and err.value.parameter == "intensity"
    with pytest.raises(saxsnb.SaxsError) as err:
        flow.saxs.distance_distribution(dmax=1.0, errors="raise")  # far too short for these particles
    assert err.value.parameter == "dmax" and err.value.frame == int(flow.frame.values[0])

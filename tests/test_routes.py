"""One answer by every route: ``saxsnb.analysis.<f>`` on arrays equals ``ds.saxs.<f>()``.

The numpy layer is complete on its own (issue 8): the accessor only unwraps and rewraps.
Checked on the demo series, the flow-growth one after background subtraction included.
"""

import inspect

import numpy as np
import pytest

import saxsnb
from saxsnb import analysis
from saxsnb.analysis import STATUS
from saxsnb.analysis._status import check_codes


@pytest.fixture(scope="module", params=["flow-growth", "unfolding", "phase-ramp"])
def series(request):
    ds, bg = saxsnb.demo.make_series(request.param, seed=0)
    return request.param, ds.saxs.subtract(bg)


def _arrays(ds):
    I, S = ds.saxs.masked()
    return ds.q.values, I.values, S.values


def _same(numpy_result, dataset, names=None):
    for k in names or numpy_result:
        a, b = np.asarray(numpy_result[k]), dataset[k].values
        if a.dtype.kind in "fc":
            np.testing.assert_array_equal(a, b, err_msg=k)
        else:
            assert a.astype(str).tolist() == b.astype(str).tolist(), k


def test_guinier_and_porod_agree(series):
    _, ds = series
    q, I, S = _arrays(ds)
    _same(analysis.guinier(q, I, S), ds.saxs.guinier())
    _same(analysis.guinier(q, I, S, shape="rod"), ds.saxs.guinier(shape="rod"))
    _same(analysis.porod(q, I, S), ds.saxs.porod())


def test_kratky_summary_agrees(series):
    _, ds = series
    q, I, S = _arrays(ds)
    g = analysis.guinier(q, I, S)
    direct = analysis.kratky_summary(q, I, rg=g["rg"], i0=g["i0"])
    _same(direct, ds.saxs.kratky_summary(), [k for k in direct if k not in ("rg", "i0")])


def test_peaks_and_phases_agree(series):
    name, ds = series
    q, I, S = _arrays(ds)
    order = np.argsort(ds[ds.saxs.scan].values, kind="stable")
    pk = analysis.find_peaks(q, I, S, order=order)
    acc = ds.saxs.find_peaks()
    _same(pk, acc)
    q_min = max(float(q.min()), float(q.min()))
    ix = analysis.index_phases(
        pk["position"],
        pk["position_sigma"],
        pk["fwhm"],
        pk["prominence"],
        peak_status=pk["status"],
        order=order,
        q_min=q_min,
        q_step=float(np.median(np.diff(q))),
    )
    res = ds.saxs.index_phases(acc)
    _same(ix, res)
    check_codes(res["status"].values)
    if name != "phase-ramp":
        # particles and chains: form-factor oscillations are not a lattice (issue 8, issue 15)
        assert not (res["phase"].values[:, 0] != "").any()
        assert not np.isin(res["status"].values, ["ok", "unexplained_peaks"]).any()


def test_every_produced_status_is_in_the_table(series):
    _, ds = series
    for res in (ds.saxs.guinier(), ds.saxs.guinier(shape="sheet"), ds.saxs.porod(), ds.saxs.invariant()):
        check_codes(res["status"].values)
    assert all(st.message for st in STATUS.values())


def _public_callables():
    for name in analysis.__all__:
        obj = getattr(analysis, name)
        if inspect.isfunction(obj) or inspect.isclass(obj):
            yield f"saxsnb.analysis.{name}", obj
    acc = type(saxsnb.from_arrays([0.1, 0.2, 0.3], [[1.0, 1.0, 1.0]], [[0.1, 0.1, 0.1]]).saxs)
    for name, obj in inspect.getmembers(acc):
        if not name.startswith("_") and (inspect.isfunction(obj) or isinstance(obj, property)):
            if inspect.isfunction(obj):
                yield f"ds.saxs.{name}", obj


@pytest.mark.parametrize(
    "label,obj", list(_public_callables()), ids=lambda v: v if isinstance(v, str) else ""
)
def test_public_api_has_a_running_example(label, obj):
    # the doctests of these examples run in `make test` (--doctest-modules)
    doc = inspect.getdoc(obj) or ""
    assert ">>>" in doc, f"{label} has no example in its docstring"


def test_results_keep_the_series_attrs_and_extend_its_history():
    import json

    ds, bg = saxsnb.demo.make_series("flow-growth", seed=0)
    sub = ds.saxs.subtract(bg)
    for res in (sub.saxs.guinier(), sub.saxs.porod(), sub.saxs.index_phases(), sub.saxs.kratky_summary()):
        assert res.attrs["sample"] == ds.attrs["sample"]
        steps = [json.loads(h)["operation"] for h in res.attrs["history"]]
        assert steps[: len(sub.attrs["history"])] == [
            json.loads(h)["operation"] for h in sub.attrs["history"]
        ]
        assert "subtract" in steps and steps[-1] == res.attrs["operation"]
        last = json.loads(res.attrs["history"][-1])
        assert json.dumps(last["parameters"], sort_keys=True) == res.attrs["parameters"]
    assert ds.attrs["history"] == saxsnb.demo.make_series("flow-growth", seed=0)[0].attrs["history"]

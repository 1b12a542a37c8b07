"""The .saxs accessor core: frame selection, unit conversion, summary, mapping over frames."""

import numpy as np
import pytest
import xarray as xr

import saxsnb
from saxsnb.accessor import OutputSpec
from saxsnb.errors import SaxsInputError


@pytest.fixture
def ds():
    q = np.linspace(0.1, 2.0, 20)
    T = np.array([20.0, 20.5, 21.0, 21.5, 22.0])
    I = np.outer(T, np.exp(-q))
    return saxsnb.from_arrays(q, I, 0.01 * I, scan={"temperature": T}, sample="test")


def test_frame_selects_nearest_scan_value(ds):
    assert int(ds.saxs.frame(21.2).frame) == 2
    assert int(ds.saxs.frame(index=-1).frame) == 4
    with pytest.raises(SaxsInputError, match="coord"):
        ds.saxs.frame(1.0, coord="pressure")
    with pytest.raises(SaxsInputError):
        ds.saxs.frame(index=10)


def test_to_q_unit_round_trip(ds):
    a = ds.saxs.to_q_unit("1/A")
    assert a.q.attrs["units"] == "1/A"
    np.testing.assert_allclose(a.q.values, ds.q.values / 10)  # 1 1/nm = 0.1 1/A
    b = a.saxs.to_q_unit("1/nm")
    np.testing.assert_allclose(b.q.values, ds.q.values)
    assert ds.q.attrs["units"] == "1/nm"  # the original is untouched


def test_summary_and_reprs(ds):
    s = ds.saxs.summary()
    assert s["frames"] == 5 and s["scan"]["temperature"]["max"] == 22.0
    assert "5 frames" in repr(ds.saxs) and "degC" in ds.saxs._repr_html_()


def _frame_means(q, I, S, *, power=1.0):
    with np.errstate(invalid="ignore"):
        return {"mean": np.nanmean(I**power, axis=-1), "qI": q * I}


def test_apply_numpy_and_dask_agree(ds):
    pytest.importorskip("dask")
    outputs = {"mean": OutputSpec(units="arb"), "qI": OutputSpec(dims=("q",))}
    a = ds.saxs._apply(_frame_means, outputs, operation="mean", power=2.0)
    b = ds.chunk({"frame": 2}).saxs._apply(_frame_means, outputs, operation="mean", power=2.0)
    assert b["mean"].chunks is not None
    xr.testing.assert_allclose(a, b.compute())
    np.testing.assert_allclose(a["mean"].values, (ds.intensity.values**2).mean(axis=1))
    assert a["mean"].attrs["units"] == "arb" and "temperature" in a.coords
    assert a.attrs["operation"] == "mean" and '"power": 2.0' in a.attrs["parameters"]


def test_mask_becomes_nan_for_analysis(ds):
    m = np.zeros(ds.intensity.shape, bool)
    m[:, :10] = True
    dm = ds.assign(mask=(("frame", "q"), m))
    I, _ = dm.saxs.masked()
    assert np.isnan(I.values[:, :10]).all() and np.isfinite(I.values[:, 10:]).all()
    assert np.isfinite(dm.intensity.values).all()  # the loaded data is not modified


def test_apply_single_output(ds):
    out = ds.saxs._apply(_frame_means, {"mean": OutputSpec(units="arb")}, operation="mean")
    np.testing.assert_allclose(out["mean"].values, ds.intensity.values.mean(axis=1))


def test_output_named_like_a_scan_coordinate_keeps_both():
    q = np.linspace(0.1, 2.0, 20)
    ds = saxsnb.from_arrays(q, np.ones((3, 20)), np.ones((3, 20)), scan={"position": [0.0, 1.0, 2.0]})

    def f(q, I, S):
        return {"position": np.full(I.shape[0], 0.5)}

    out = ds.saxs._apply(f, {"position": OutputSpec(units="1/nm")}, operation="f")
    assert out["position"].attrs["units"] == "1/nm"
    np.testing.assert_array_equal(out["scan_position"].values, [0.0, 1.0, 2.0])
    assert out["scan_position"].attrs["scan_coordinate"] == "position"


def test_frame_value_outside_the_scan_is_an_error(ds):
    # issue 11: ds.saxs.frame(500) on a 20..22 degC scan returned the last frame silently
    with pytest.raises(SaxsInputError, match="outside the scan"):
        ds.saxs.frame(500.0)
    assert int(ds.saxs.frame(22.4).frame) == 4  # within one step of the end: nearest


def test_tab_completion_lists_the_public_names():
    names = dir(saxsnb)
    for n in ("read_series", "explore", "open_series", "demo", "analysis", "SaxsError"):
        assert n in names

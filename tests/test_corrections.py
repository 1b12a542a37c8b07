"""Background subtraction and intensity scaling, numpy core and accessor."""

import json

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

import saxsnb
from saxsnb.analysis import scale_intensity, subtract_background
from saxsnb.errors import SaxsInputError


def test_subtract_hand_values():
    I = np.array([[10.0, 8.0, 6.0], [12.0, 9.0, 7.0]])
    S = np.array([[0.3, 0.4, 0.5], [0.6, 0.8, 1.2]])
    B = np.array([2.0, 1.0, 4.0])
    BS = np.array([0.4, 0.3, 1.2])
    out, sig = subtract_background(I, S, B, BS, scale=0.5)
    # hand-computed: I - 0.5 B; sqrt(s^2 + (0.5 s_bg)^2), quadrature (common practice)
    np.testing.assert_allclose(out, [[9.0, 7.5, 4.0], [11.0, 8.5, 5.0]])
    np.testing.assert_allclose(sig, [[np.sqrt(0.09 + 0.04), np.sqrt(0.16 + 0.0225), np.sqrt(0.25 + 0.36)],
                                     [np.sqrt(0.36 + 0.04), np.sqrt(0.64 + 0.0225), np.sqrt(1.44 + 0.36)]])
    # 3-4-5: sigma 0.3 and background sigma 0.4 give 0.5
    assert subtract_background([1.0], [0.3], [0.0], [0.4])[1][0] == pytest.approx(0.5)


def test_subtract_per_frame_background_equals_loop(rng):
    I, S = rng.uniform(1, 5, (6, 20)), rng.uniform(0.1, 0.2, (6, 20))
    B, BS = rng.uniform(0, 1, (6, 20)), rng.uniform(0.05, 0.1, (6, 20))
    out, sig = subtract_background(I, S, B, BS, scale=1.3)
    for i in range(6):  # batch equals loop
        o, s = subtract_background(I[i], S[i], B[i], BS[i], scale=1.3)
        np.testing.assert_array_equal(out[i], o)
        np.testing.assert_array_equal(sig[i], s)


def test_subtract_does_not_modify_inputs_and_checks_shapes():
    I = np.ones((2, 3))
    S = np.full((2, 3), 0.1)
    B = np.ones(3)
    keep = I.copy(), S.copy(), B.copy()
    subtract_background(I, S, B, S[0])
    for a, b in zip((I, S, B), keep):
        np.testing.assert_array_equal(a, b)
    with pytest.raises(SaxsInputError) as info:
        subtract_background(I, S, np.ones(4), np.ones(4))
    assert info.value.parameter == "bg_intensity"
    with pytest.raises(SaxsInputError) as info:
        subtract_background(I, S, B, B, scale=np.nan)
    assert info.value.parameter == "scale"


def test_scale_intensity_hand_values():
    out, sig = scale_intensity(np.array([[2.0, 4.0]]), np.array([[0.1, 0.2]]), 3.0, 0.3)
    np.testing.assert_allclose(out, [[6.0, 12.0]])
    # first-order product rule (common practice): sqrt((k s)^2 + (I s_k)^2)
    np.testing.assert_allclose(sig, [[np.sqrt(0.09 + 0.36), np.sqrt(0.36 + 1.44)]])
    out, sig = scale_intensity(np.ones((2, 2)), np.zeros((2, 2)), np.array([[2.0], [3.0]]))
    np.testing.assert_allclose(out, [[2, 2], [3, 3]])
    np.testing.assert_allclose(sig, 0.0)
    with pytest.raises(SaxsInputError) as info:
        scale_intensity([1.0], [0.1], 2.0, -1.0)
    assert info.value.parameter == "factor_sigma"


# ---------------------------------------------------------------- accessor
def _series(rng, n=4, m=5, **kw):
    q = np.linspace(0.1, 1.0, m)
    I = rng.uniform(5, 10, (n, m))
    return saxsnb.from_arrays(q, I, np.full((n, m), 0.3), scan={"temperature": 20.0 + np.arange(n)}, **kw)


def test_accessor_subtract_one_frame_background(rng):
    ds = _series(rng)
    bg = saxsnb.from_arrays(ds.q.values, np.full(5, 2.0), np.full(5, 0.4))
    out = ds.saxs.subtract(bg, scale=1.0)
    np.testing.assert_allclose(out.intensity.values, ds.intensity.values - 2.0)
    np.testing.assert_allclose(out.sigma.values, 0.5)  # sqrt(0.3^2 + 0.4^2), quadrature
    assert out.intensity.attrs["units"] == "arb"
    np.testing.assert_array_equal(out.temperature.values, ds.temperature.values)
    entry = json.loads(out.attrs["history"][-1])
    assert entry["operation"] == "subtract" and entry["parameters"]["scale"] == 1.0
    assert len(ds.attrs["history"]) == 0  # the input is untouched
    assert float(ds.intensity.values.min()) >= 5


def test_accessor_subtract_per_frame_and_mask_union(rng):
    mask = np.zeros((4, 5), bool)
    mask[0, 0] = True
    ds = _series(rng, mask=mask)
    bmask = np.zeros((4, 5), bool)
    bmask[2, 4] = True
    bI = rng.uniform(0, 1, (4, 5))
    bg = saxsnb.from_arrays(ds.q.values, bI, np.full((4, 5), 0.1), mask=bmask,
                            scan={"temperature": [0.0, 0.0, 0.0, 0.0]})
    out = ds.saxs.subtract(bg, scale=2.0)
    np.testing.assert_allclose(out.intensity.values, ds.intensity.values - 2.0 * bI)
    np.testing.assert_allclose(out.sigma.values, np.sqrt(0.09 + 0.04))
    np.testing.assert_array_equal(out["mask"].values, mask | bmask)
    # the series' own scan values are kept, not the background's
    np.testing.assert_array_equal(out.temperature.values, ds.temperature.values)


def test_accessor_subtract_dask_equals_numpy(rng):
    pytest.importorskip("dask")
    ds = _series(rng, n=6)
    bg = _series(rng, n=6)
    eager = ds.saxs.subtract(bg)
    lazy = ds.chunk({"frame": 2}).saxs.subtract(bg.chunk({"frame": 3}))
    assert lazy.intensity.chunks is not None
    np.testing.assert_allclose(lazy.intensity.values, eager.intensity.values)
    np.testing.assert_allclose(lazy.sigma.values, eager.sigma.values)


def test_accessor_subtract_bad_background(rng):
    ds = _series(rng)
    cases = [
        _series(rng, n=3),  # wrong number of frames
        saxsnb.from_arrays(np.linspace(0.1, 1.0, 6), np.ones(6), np.ones(6)),  # other grid
        saxsnb.from_arrays(ds.q.values * 1.01, np.ones(5), np.ones(5)),  # shifted grid
        saxsnb.from_arrays(ds.q.values, np.ones(5), np.ones(5), intensity_unit="1/cm"),
        "not a dataset",
    ]
    for bg in cases:
        with pytest.raises(SaxsInputError) as info:
            ds.saxs.subtract(bg)
        assert info.value.parameter == "background"
    with pytest.raises(SaxsInputError, match="expected 1 or 4"):
        ds.saxs.subtract(cases[0])


def test_accessor_subtract_single_frame_background_mask(rng):
    ds = _series(rng)  # no mask of its own
    bmask = np.array([False, True, False, False, False])
    bg = saxsnb.from_arrays(ds.q.values, np.ones(5), np.full(5, 0.1), mask=bmask)
    out = ds.saxs.subtract(bg)
    assert out["mask"].dims == ("frame", "q")
    np.testing.assert_array_equal(out["mask"].values, np.broadcast_to(bmask, (4, 5)))
    assert "mask" not in ds.data_vars


_finite = st.floats(-1e6, 1e6, allow_nan=False)
_positive = st.floats(1e-6, 1e3, allow_nan=False)


@settings(max_examples=60, deadline=None)
@given(
    st.integers(1, 4).flatmap(lambda n: st.tuples(
        arrays(float, (n, 5), elements=_finite), arrays(float, (n, 5), elements=_positive),
        arrays(float, 5, elements=_finite), arrays(float, 5, elements=_positive))),
    st.floats(0.0, 10.0),
)
def test_subtract_properties(arrays_, scale):
    I, S, B, BS = arrays_
    out, sig = subtract_background(I, S, B, BS, scale=scale)
    assert out.shape == sig.shape == I.shape
    np.testing.assert_allclose(out + scale * B, I, rtol=1e-9, atol=1e-6)  # adding back undoes it
    # quadrature: never below either part, never above their sum (common practice)
    assert np.all(sig >= np.maximum(S, scale * BS) * (1 - 1e-12))
    assert np.all(sig <= (S + scale * BS) * (1 + 1e-12))


@pytest.mark.parametrize("bad", ["abc", "1.5", None, [1, 2], {"a": 1}, True, -1.0,
                                 float("nan"), float("inf")])
def test_subtract_refuses_a_scale_that_is_not_a_number(bad):
    # issue 12 item 9: a non-numeric or negative scale= is an error from the family
    ds = saxsnb.demo.example_series("spheres")
    with pytest.raises(saxsnb.SaxsInputError, match="scale") as info:
        ds.saxs.subtract(ds.isel(frame=[0]), scale=bad, match="mean")
    assert info.value.parameter == "scale"

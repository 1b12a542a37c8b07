"""The weighted linear-fit engine against numpy, scipy and lmfit (general reference
libraries), window sums against direct fits, and batch = loop."""

import lmfit
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from saxsnb.analysis import (
    WindowMoments,
    index_range,
    linearize,
    running_sum,
    weighted_linear_fit,
)
from saxsnb.errors import SaxsInputError


@pytest.fixture
def data(rng):
    x = np.sort(rng.uniform(0.0, 5.0, (6, 40)), axis=-1)
    sigma = rng.uniform(0.05, 0.5, x.shape)
    y = 1.5 - 0.7 * x + rng.normal(0.0, 1.0, x.shape) * sigma
    return x, y, sigma


def test_unweighted_matches_linregress_and_polyfit(data):
    x, y, _ = data
    r = weighted_linear_fit(x, y)
    for i in range(x.shape[0]):
        ref = stats.linregress(x[i], y[i])  # scipy.stats.linregress (reference library)
        assert r["slope"][i] == pytest.approx(ref.slope, rel=1e-12)
        assert r["intercept"][i] == pytest.approx(ref.intercept, rel=1e-12)
        assert r["slope_sigma"][i] == pytest.approx(ref.stderr, rel=1e-10)
        assert r["intercept_sigma"][i] == pytest.approx(ref.intercept_stderr, rel=1e-10)
        coef, cov = np.polyfit(x[i], y[i], 1, cov=True)  # numpy.polyfit (reference library)
        assert r["slope_intercept_cov"][i] == pytest.approx(cov[0, 1], rel=1e-10)
        assert r["slope"][i] == pytest.approx(coef[0], rel=1e-12)


def test_weighted_matches_polyfit_and_lmfit(data):
    x, y, s = data
    r = weighted_linear_fit(x, y, s)
    model = lmfit.models.LinearModel()
    for i in range(x.shape[0]):
        # numpy.polyfit with w = 1/sigma and absolute ("unscaled") covariance
        coef, cov = np.polyfit(x[i], y[i], 1, w=1 / s[i], cov="unscaled")
        assert r["slope"][i] == pytest.approx(coef[0], rel=1e-11)
        assert r["intercept"][i] == pytest.approx(coef[1], rel=1e-11)
        assert r["slope_sigma"][i] == pytest.approx(np.sqrt(cov[0, 0]), rel=1e-10)
        assert r["intercept_sigma"][i] == pytest.approx(np.sqrt(cov[1, 1]), rel=1e-10)
        assert r["slope_intercept_cov"][i] == pytest.approx(cov[0, 1], rel=1e-10)
        # lmfit (reference library), absolute sigma: scale_covar=False
        res = model.fit(y[i], model.make_params(slope=0, intercept=0), x=x[i], weights=1 / s[i],
                        scale_covar=False)
        assert r["slope"][i] == pytest.approx(res.params["slope"].value, rel=1e-7)
        assert r["slope_sigma"][i] == pytest.approx(res.params["slope"].stderr, rel=1e-5)
        assert r["chi2"][i] == pytest.approx(res.chisqr, rel=1e-7)
        assert r["chi2_reduced"][i] == pytest.approx(res.redchi, rel=1e-7)


def test_scaled_covariance_matches_lmfit_default(data):
    x, y, s = data
    r = weighted_linear_fit(x[0], y[0], s[0], scale_covariance=True)
    model = lmfit.models.LinearModel()
    res = model.fit(y[0], model.make_params(slope=0, intercept=0), x=x[0], weights=1 / s[0])
    # lmfit scales the covariance by the reduced chi-square by default
    assert r["slope_sigma"] == pytest.approx(res.params["slope"].stderr, rel=1e-5)
    assert r["intercept_sigma"] == pytest.approx(res.params["intercept"].stderr, rel=1e-5)


def test_non_finite_points_are_excluded(data):
    x, y, s = data
    y2, s2 = y.copy(), s.copy()
    y2[:, ::5] = np.nan
    s2[:, 1::7] = np.inf
    s2[:, 2::9] = 0.0
    r = weighted_linear_fit(x, y2, s2)
    for i in range(x.shape[0]):
        keep = np.isfinite(y2[i]) & np.isfinite(s2[i]) & (s2[i] > 0)
        ref = weighted_linear_fit(x[i, keep], y[i, keep], s[i, keep])
        assert r["slope"][i] == pytest.approx(ref["slope"], rel=1e-12)
        assert r["n_points"][i] == keep.sum()


def test_degenerate_rows_give_nan():
    r = weighted_linear_fit(np.ones((2, 4)), np.array([[1.0, 2, 3, 4], [np.nan] * 4]))
    assert np.isnan(r["slope"]).all()
    assert r["n_points"].tolist() == [4, 0]


@settings(max_examples=40, deadline=None)
@given(
    slope=st.floats(-100, 100),
    intercept=st.floats(-100, 100),
    n=st.integers(3, 50),
    offset=st.floats(-1e3, 1e3),
)
def test_exact_lines_are_recovered(slope, intercept, n, offset):
    x = offset + np.linspace(0.0, 3.0, n)
    r = weighted_linear_fit(x, intercept + slope * x)
    assert r["slope"] == pytest.approx(slope, rel=1e-8, abs=1e-8)
    at_offset = r["intercept"] + r["slope"] * offset
    assert at_offset == pytest.approx(intercept + slope * offset, rel=1e-8, abs=1e-6)


def test_window_moments_equal_direct_fits(data):
    x, y, s = data
    y = y.copy()
    y[:, 7] = np.nan
    m = WindowMoments(x, y, s, quadratic=True)
    starts = np.array([[0], [2], [5], [1], [0], [3]])
    stops = np.array([[10, 25, 40]] * 6)
    r = m.fit(starts, stops)
    c = m.curvature(starts, stops)
    lean = m.search_stats(starts, stops)
    for f in range(6):
        for j, e in enumerate(stops[f]):
            sl = slice(starts[f, 0], e)
            ref = weighted_linear_fit(x[f, sl], y[f, sl], s[f, sl])
            for key in ("slope", "intercept", "slope_sigma", "intercept_sigma", "chi2"):
                assert r[key][f, j] == pytest.approx(ref[key], rel=1e-8), key
            assert lean["slope"][f, j] == pytest.approx(ref["slope"], rel=1e-8)
            assert lean["slope_var"][f, j] == pytest.approx(ref["slope_sigma"] ** 2, rel=1e-8)
            ok = np.isfinite(y[f, sl])
            # numpy.polyfit of degree 2 (reference library) for the quadratic term
            coef, cov = np.polyfit(x[f, sl][ok], y[f, sl][ok], 2, w=1 / s[f, sl][ok], cov="unscaled")
            assert c["c"][f, j] == pytest.approx(coef[0], rel=1e-6, abs=1e-10)
            assert c["c_sigma"][f, j] == pytest.approx(np.sqrt(cov[0, 0]), rel=1e-6)
            assert lean["c"][f, j] == pytest.approx(coef[0], rel=1e-6, abs=1e-10)
            resid = y[f, sl][ok] - np.polyval(coef, x[f, sl][ok])
            assert c["chi2_quadratic"][f, j] == pytest.approx(np.sum((resid / s[f, sl][ok]) ** 2), rel=1e-6)


def test_window_moments_batch_equals_loop(data):
    x, y, s = data
    m = WindowMoments(x, y, s, quadratic=True)
    starts = np.array([[0, 3]] * 6)[:, :, None]
    stops = np.array([[12, 30, 40]] * 6)[:, None, :]
    batch = m.search_stats(starts, stops)
    for f in range(6):
        one = WindowMoments(x[f : f + 1, :35], y[f : f + 1, :35], s[f : f + 1, :35], quadratic=True)
        single = one.search_stats(starts[f : f + 1], np.minimum(stops[f : f + 1], 35))
        if f == 0:
            continue  # the stop 40 differs once the columns are cut at 35
        assert np.array_equal(batch["slope"][f, :, :2], single["slope"][0, :, :2])
        assert np.array_equal(batch["c"][f, :, :2], single["c"][0, :, :2])


def test_running_sum_matches_cumsum(rng):
    a = rng.normal(size=(30, 4, 5))
    out = running_sum(a)
    assert out.shape == (31, 4, 5)
    np.testing.assert_allclose(out[1:], np.cumsum(a, axis=0), rtol=1e-13)
    np.testing.assert_allclose(running_sum(a, axis=2)[..., 1:], np.cumsum(a, axis=2), rtol=1e-13)


def test_linearize_error_propagation(rng):
    q = np.linspace(0.1, 1.0, 10)
    I = rng.uniform(1.0, 10.0, (2, 10))
    s = 0.01 * I
    for kind, k in (("guinier", 0), ("rod", 1), ("sheet", 2)):
        x, y, sy = linearize(q, I, s, kind)
        np.testing.assert_allclose(x, np.broadcast_to(q**2, I.shape))
        np.testing.assert_allclose(y, np.log(q**k * I))
        # delta method: d ln(q^k I) / dI = 1 / I (common practice)
        np.testing.assert_allclose(sy, s / I)
    x, y, sy = linearize(q, I, s, "porod")
    np.testing.assert_allclose(y, q**4 * I)
    np.testing.assert_allclose(sy, q**4 * s)
    _, y, _ = linearize(q, -I, s, "loglog")
    assert np.isnan(y).all()
    with pytest.raises(SaxsInputError, match="kind"):
        linearize(q, I, s, "nonsense")


def test_index_range():
    q = np.linspace(0.1, 1.0, 10)
    start, stop = index_range(q, np.array([[0.1, 0.35], [np.nan, 0.5]]), 2)
    assert start.tolist() == [0, 0] and stop.tolist() == [3, 5]
    with pytest.raises(SaxsInputError, match="q_range"):
        index_range(q, (0.5, 0.2), 3)
    with pytest.raises(SaxsInputError, match="q_range"):
        index_range(q, np.zeros((2, 3)), 2)

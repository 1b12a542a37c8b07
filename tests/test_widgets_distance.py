"""Python-side tests of the P(r) panel (no browser): traits give the accessor's result."""

import numpy as np
import pytest
import xarray as xr

import saxsnb
from saxsnb.errors import SaxsInputError
from saxsnb.widgets import DistancePanel, explore

RADII = np.array([2.0, 2.5, 3.0, 3.5])


@pytest.fixture
def series(rng):
    q = np.linspace(0.05, 3.0, 160)
    # homogeneous sphere, Rayleigh (1911): I = I0 [3 (sin x - x cos x) / x^3]^2, x = qR
    x = q[None, :] * RADII[:, None]
    I = 10.0 * (3 * (np.sin(x) - x * np.cos(x)) / x**3) ** 2 + 1e-4
    S = 0.01 * I + 1e-5
    I = I + rng.normal(0, 1, I.shape) * S
    return saxsnb.from_arrays(q, I, S, scan={"time": np.arange(4) * 10.0}, intensity_unit="1/cm")


def brush(panel, lo, hi):
    """What a drag in the page does: brushing on, selection streams, brushing off."""
    panel.selector.brushing = True
    panel.selector.selected = np.array([lo, hi])
    panel.selector.brushing = False


def test_automatic_result_equals_accessor_and_sphere_rg(series):
    p = DistancePanel(series)
    for i in (0, 2):
        p.frame = i
        xr.testing.assert_identical(p.result, series.isel(frame=[i]).saxs.distance_distribution())
        # Guinier & Fournet (1955): a homogeneous sphere has Rg = sqrt(3/5) R
        assert float(p.result.rg[0]) == pytest.approx(np.sqrt(0.6) * RADII[i], rel=0.01)
        # its maximum dimension is 2R (common practice: Dmax of a sphere); automatic within 10 %
        assert float(p.result.dmax[0]) == pytest.approx(2 * RADII[i], rel=0.1)
    # the drawn p(r) is the result's
    np.testing.assert_allclose(p.p_line.y, p.result.p.values[0][np.isfinite(p.result.p.values[0])])
    assert p.dmax_auto.value and p.dmax is None and p.weight is None


def test_fixed_choices_from_python_equal_direct_call(series):
    p = DistancePanel(series, frame=1)
    p.dmax = 5.5
    p.weight = 0.5
    p.q_range = (0.1, 2.5)
    direct = series.isel(frame=[1]).saxs.distance_distribution(5.5, weight=0.5, q_range=(0.1, 2.5))
    xr.testing.assert_identical(p.result, direct)
    assert not p.dmax_auto.value and p.dmax_text.value == 5.5
    assert not p.weight_auto.value and p.weight_slider.value == pytest.approx(0.5)
    # the brush shows the q range
    np.testing.assert_allclose(p.selector.selected, [0.1, 2.5])
    # the exported code reproduces the result (the series bound to ``ds``)
    env = {"ds": series}
    exec(p.to_code(), env)
    xr.testing.assert_identical(env["result"], p.result)


def test_controls_set_traits(series):
    p = DistancePanel(series)
    p.dmax_auto.value = False
    p.dmax_text.value = 6.0
    assert p.dmax == 6.0
    xr.testing.assert_identical(p.result, series.isel(frame=[0]).saxs.distance_distribution(6.0))
    p.weight_auto.value = False
    assert p.weight == pytest.approx(p.weight_slider.value)
    p.dmax_auto.value = True
    p.weight_auto.value = True
    assert p.dmax is None and p.weight is None
    xr.testing.assert_identical(p.result, series.isel(frame=[0]).saxs.distance_distribution())


def test_brush_sets_q_range(series):
    p = DistancePanel(series, dmax=5.0)
    brush(p, 0.2, 2.0)
    assert p.q_range == pytest.approx((0.2, 2.0), rel=1e-12)
    xr.testing.assert_identical(
        p.result, series.isel(frame=[0]).saxs.distance_distribution(5.0, q_range=p.q_range)
    )
    # residuals of the fitted points only
    assert np.all((p.residuals.x >= 0.2) & (p.residuals.x <= 2.0))
    p.range_button.click()
    assert p.q_range is None and p.selector.selected is None
    assert p.residuals.x.size == series.sizes["q"]


def test_apply_to_all_and_code(series):
    p = DistancePanel(series)
    p.dmax = 7.0
    p.apply_to_all = True
    direct = series.saxs.distance_distribution(7.0)
    xr.testing.assert_identical(p.result, direct)
    assert p.series is p.result  # the trends show this series
    assert p.model.cached("distance_distribution", dmax=7.0)
    np.testing.assert_allclose(np.sort(p.trend_dmax.y), [7.0] * 4)
    env = {"ds": series}
    exec(p.to_code(), env)
    xr.testing.assert_identical(env["result"], direct)
    # a frame step keeps the series result (nothing recomputed)
    before = p.result
    p.frame = 3
    assert p.result is before
    p.apply_to_all = False
    xr.testing.assert_identical(p.result, series.isel(frame=[3]).saxs.distance_distribution(7.0))
    assert p.series is p.model.result("distance_distribution")  # back to the automatic trends


def test_frame_step_changes_drawn_p(series):
    p = DistancePanel(series, dmax=6.0)
    first = np.array(p.p_line.y)
    p.frame = 1  # R = 2.5 nm: 2R below the fixed Dmax
    second = np.array(p.p_line.y)
    assert first.shape != second.shape or not np.allclose(first, second)
    # a sphere's p(r) peaks near r = 1.0494 R (Glatter 1982, closed form r^2 (1 - 3r/4R + r^3/16R^3))
    r = np.asarray(p.p_line.x)
    assert r[np.argmax(second)] == pytest.approx(1.0494 * RADII[1], rel=0.1)


def test_bad_dmax_shows_status_not_exception(series):
    p = DistancePanel(series)
    p.dmax = -1.0
    assert "dmax" in p.status and isinstance(p.last_error, SaxsInputError)
    p.dmax = 0.5  # far below 2R
    assert p.status.endswith("dmax_too_small")
    assert p.result.status.values[0] == "dmax_too_small"
    assert "Dmax" in p.status_text or "dmax" in p.status_text
    p.q_range = (10.0, 20.0)  # no point in range
    assert p.status != ""


def test_trend_click_jumps_and_guinier_beside(series):
    p = DistancePanel(series)
    assert p.trend_rg.x.size == 4 and p.trend_guinier.x.size == 4
    np.testing.assert_allclose(p.trend_guinier.y, p.model.result("guinier").rg.values)
    p._on_point_click(p.trend_dmax, {"data": {"index": 2}})
    assert p.frame == 2


def test_matplotlib_export_and_explore(series):
    fig = DistancePanel(series, dmax=6.0).to_matplotlib()
    assert len(fig.axes) == 7
    dash = explore(series, panels=("guinier", "distance"))
    d = dash.panels["distance"]
    dash.frame = 1
    assert d.frame == 1
    # one Guinier fit of the series, shared by both panels
    assert d.model is dash.panels["guinier"].model
    assert d.model.cached("guinier")
    assert "distance_distribution" in dash.to_code()
    assert "distance" not in explore(series.isel(frame=[0, 1])).panels


def test_weight_slider_follows_the_scale_of_the_weight(series):
    # the weight's scale follows the intensity units: a series 1e12 times brighter (same
    # relative noise) must still show its automatic weight on the slider
    bright = series.copy()
    bright["intensity"] = series.intensity * 1e12
    bright["sigma"] = series.sigma * 1e12
    p = DistancePanel(bright, dmax=6.0)
    w = float(p.result.weight[0])
    assert p.weight_slider.min <= np.log10(w) <= p.weight_slider.max
    assert p.weight_slider.value == pytest.approx(w, rel=1e-9)
    p.weight = w * 1e9  # beyond the slider's end: the slider widens
    assert p.weight_slider.value == pytest.approx(w * 1e9, rel=1e-9)
    direct = bright.isel(frame=[0]).saxs.distance_distribution(6.0, weight=w * 1e9)
    xr.testing.assert_identical(p.result, direct)


def test_all_nan_frame_shows_status(series):
    bad = series.copy(deep=True)
    bad["intensity"][2] = np.nan
    p = DistancePanel(bad, dmax=6.0)
    p.frame = 2
    assert p.status.endswith("no_data") and p.result.status.values[0] == "no_data"
    assert not p.p_line.visible
    p.frame = 1  # the next frame draws again
    assert p.status == "" and p.p_line.visible


def test_trends_have_error_bars_and_a_key(series):
    """Issue 11: error bars on trends where sigma is known, a key under the plots,
    numbers in print form (display.format_value, nm⁻¹ not 1/nm)."""
    import html

    p = DistancePanel(series)
    res = p.series
    assert "Guinier Rg" in p.trend_key.value and "current frame" in p.trend_key.value
    for bars, var in ((p.rg_bars, "rg"), (p.dmax_bars, "dmax"), (p.i0_bars, "i0")):
        v = np.asarray(res[var].values, dtype=float)
        sig = np.asarray(res[f"{var}_sigma"].values, dtype=float)
        ok = np.isfinite(v)
        if not np.isfinite(sig[ok]).any():
            continue
        assert bars.visible
        y = np.asarray(bars.y, dtype=float)
        # each bar spans value - sigma .. value + sigma (common practice)
        np.testing.assert_allclose(y[1::3] - y[0::3], 2 * sig[ok], rtol=1e-9)
    text = html.unescape(p.result_text.value)
    assert "1/nm" not in text and " ± " in text and "+-" not in text

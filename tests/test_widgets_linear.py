"""Python-side tests of the linear-fit (Guinier, Porod) and Kratky panels (no browser)."""

import html

import numpy as np
import pytest
import xarray as xr

import saxsnb
from saxsnb.errors import SaxsInputError
from saxsnb.widgets import KratkyPanel, LinearFitPanel
from saxsnb.widgets.palette import ROLE

RG = np.array([2.0, 2.5, 3.0, 3.5, 4.0, 4.5])


@pytest.fixture
def series(rng):
    q = np.linspace(0.02, 2.0, 200)
    # Guinier form I = I0 exp(-(q Rg)^2 / 3) (Guinier 1939), 0.5 % noise
    I = 50.0 * np.exp(-((q[None, :] * RG[:, None]) ** 2) / 3) + 1e-3
    S = 0.005 * I + 1e-5
    I = I + rng.normal(0, 1, I.shape) * S
    return saxsnb.from_arrays(q, I, S, scan={"time": np.arange(6) * 10.0}, intensity_unit="1/cm")


def brush(panel, lo, hi):
    """What a drag in the page does: brushing on, selection streams, brushing off."""
    panel.selector.brushing = True
    panel.selector.selected = np.array([lo, hi])
    panel.selector.brushing = False


def test_guinier_automatic_range_equals_accessor(series):
    p = LinearFitPanel(series)
    for i in (0, 3):
        p.frame = i
        xr.testing.assert_identical(p.result, series.isel(frame=[i]).saxs.guinier())
        # Guinier (1939): the fit recovers the Rg of the Guinier form
        assert abs(float(p.result.rg[0]) - RG[i]) / RG[i] < 0.02
    # the selector shows the automatic range, in q^2
    np.testing.assert_allclose(
        p.selector.selected, [float(p.result.q_min[0]) ** 2, float(p.result.q_max[0]) ** 2]
    )
    assert p.q_range is None and p.status == ""


def test_brush_sets_q_range_and_refits(series):
    p = LinearFitPanel(series, frame=2)
    brush(p, 0.1**2, 0.3**2)  # the x axis is q^2
    assert p.q_range == pytest.approx((0.1, 0.3), rel=1e-12)
    direct = series.isel(frame=[2]).saxs.guinier(q_range=p.q_range, shape="compact")
    xr.testing.assert_identical(p.result, direct)
    # marks: the fitted points are the data in range, the line is intercept + slope x
    q = series.q.values
    inside = (q >= p.q_range[0]) & (q <= p.q_range[1])
    np.testing.assert_allclose(p.in_range.x, q[inside] ** 2)
    np.testing.assert_allclose(p.in_range.y, np.log(series.intensity.values[2][inside]))
    a, b = float(direct.intercept[0]), float(direct.slope[0])
    np.testing.assert_allclose(p.fit_line.y, a + b * np.asarray(p.fit_line.x))
    assert p.residuals.x.size == inside.sum()
    assert "Rg</b> = " in p.result_text.value
    ns = {"ds": series}
    exec(p.to_code(), ns)
    xr.testing.assert_identical(ns["result"], p.result)


def test_setting_q_range_moves_selector_and_steps_keep_it(series):
    p = LinearFitPanel(series)
    p.q_range = (0.05, 0.25)
    np.testing.assert_allclose(p.selector.selected, [0.05**2, 0.25**2])
    p.frame = 4
    xr.testing.assert_identical(p.result, series.isel(frame=[4]).saxs.guinier(q_range=(0.05, 0.25)))
    np.testing.assert_allclose(p.trend_current.x, [40.0])
    np.testing.assert_allclose(p.trend_current.y, p.result.rg.values)


def test_validity_limit_colour(series):
    p = LinearFitPanel(series, frame=5)
    p.q_range = (0.05, 0.5)  # q_max Rg = 2.25 > 1.3 (Guinier 1939; Jacques & Trewhella 2010)
    assert ROLE["warning"] in p.result_text.value and "validity limit" in p.result_text.value
    assert "qrg_limit_exceeded" in p.status  # the trait keeps the code
    # what people read: plain words, in the panel's line and in the dashboard's
    assert "qrg_limit_exceeded" not in p.status_line.value
    assert "above the validity limit 1.3" in p.status_line.value and "Rg" in p.status_text
    p.q_range = (0.02, 0.15)  # q_max Rg = 0.68
    assert ROLE["ok"] in p.result_text.value


def test_analysis_errors_show_in_status(series):
    p = LinearFitPanel(series)
    p.q_range = (0.5000, 0.5001)  # fewer than 3 points
    assert "too_few_points" in p.status and "too_few_points" not in p.status_line.value
    msg = "too few usable points in the q range for this fit: widen the range"
    assert p.status_text == f"{p.frame_label()}: {msg}"
    assert p.status_text in html.unescape(p.status_line.value)
    before = p.result
    p.q_range = (0.3, 0.3)  # rejected by the accessor: q_min must be below q_max
    assert "SaxsInputError" in p.status and "q_range" in p.status
    assert isinstance(p.last_error, SaxsInputError)
    # the result and its code stay those of the last accepted range
    assert p.result is before
    ns = {"ds": series}
    exec(p.to_code(), ns)
    xr.testing.assert_identical(ns["result"], p.result)
    p.auto_button.click()
    assert p.q_range is None and p.status == ""
    with pytest.raises(SaxsInputError):
        LinearFitPanel(series, kind="cylinder")


def test_apply_range_to_all_frames(series):
    p = LinearFitPanel(series)
    p.q_range = (0.03, 0.2)
    p.apply_button.value = True
    assert p.apply_to_all
    xr.testing.assert_identical(p.result, series.saxs.guinier(q_range=(0.03, 0.2)))
    np.testing.assert_array_equal(p.trend_fixed.y, p.result.rg.values)
    assert p.trend_fixed.visible
    ns = {"ds": series}
    exec(p.to_code(), ns)
    xr.testing.assert_identical(ns["result"], p.result)
    p.frame = 3  # stepping keeps the whole-series result
    assert p.result.sizes["frame"] == 6


def test_trend_click_jumps_to_frame(series):
    p = LinearFitPanel(series)
    np.testing.assert_array_equal(p.trend.y, series.saxs.guinier().rg.values)
    p._on_point_click(p.trend, {"event": "element_click", "data": {"index": 4}})
    assert p.frame == 4


def test_porod_panel(rng):
    q = np.linspace(0.5, 3.0, 150)
    kp = np.array([2.0, 3.0, 4.0])
    I = kp[:, None] / q**4 + 0.01  # Porod (1951): I = Kp / q^4 + B
    ds = saxsnb.from_arrays(q, I, 0.002 * I)
    p = LinearFitPanel(ds, kind="porod", frame=1)
    xr.testing.assert_identical(p.result, ds.isel(frame=[1]).saxs.porod())
    brush(p, 1.5**4, 3.0**4)  # the x axis is q^4
    assert p.q_range == pytest.approx((1.5, 3.0))
    xr.testing.assert_identical(p.result, ds.isel(frame=[1]).saxs.porod(q_range=p.q_range))
    assert float(p.result.porod_constant[0]) == pytest.approx(3.0, rel=1e-6)
    ns = {"ds": ds}
    exec(p.to_code(), ns)
    xr.testing.assert_identical(ns["result"], p.result)


def test_rod_and_sheet_kinds_call_guinier_with_shape(series):
    for kind, shape in (("rod", "rod"), ("sheet", "sheet")):
        p = LinearFitPanel(series, kind=kind, q_range=(0.05, 0.2))
        xr.testing.assert_identical(
            p.result, series.isel(frame=[0]).saxs.guinier(q_range=(0.05, 0.2), shape=shape)
        )
        assert f"shape={shape!r}" in p.code


def test_kratky_panel_dimensionless(series):
    k = KratkyPanel(series)
    k.frame = 2
    direct = series.isel(frame=[2]).saxs.kratky(normalize="rg").to_dataset(name="kratky")
    xr.testing.assert_identical(k.result, direct)
    rg = float(series.isel(frame=[2]).saxs.guinier().rg[0])
    np.testing.assert_allclose(k.curve.x, series.q.values * rg)
    np.testing.assert_allclose(k.curve.y, direct.kratky.values[0])
    # Durand et al. (2010): Guinier-form peak at q Rg = sqrt(3), height 3/e; Debye (1947): plateau 2
    np.testing.assert_allclose(k.references.x[1], [np.sqrt(3.0)] * 2)
    np.testing.assert_allclose(k.references.y[0], [3.0 / np.e] * 2)
    np.testing.assert_allclose(k.references.y[2], [2.0, 2.0])
    assert k.references.visible
    ns = {"ds": series}
    exec(k.to_code(), ns)
    xr.testing.assert_identical(ns["result"], k.result)
    # the series is the Guinier form: the summary finds its peak near sqrt(3), 3/e
    assert float(k.summary.peak_qrg[2]) == pytest.approx(np.sqrt(3.0), rel=0.05)
    assert "bell" in k.summary_text.value


def test_kratky_panel_plain_toggle_and_trend_click(series):
    k = KratkyPanel(series, normalize=None)
    assert k.toggle.value == "plain"
    xr.testing.assert_identical(k.result, series.isel(frame=[0]).saxs.kratky().to_dataset(name="kratky"))
    np.testing.assert_allclose(k.curve.y, series.q.values**2 * series.intensity.values[0])
    assert not k.references.visible
    # fixed ranges per form: the hidden reference lines do not stretch the plain plot
    assert k._xs.max == pytest.approx(series.q.values.max() * 1.02)
    assert k._ys.max < 2.0 * np.nanpercentile(series.q.values**2 * series.intensity.values, 99.5)
    k.toggle.value = "rg"
    assert k.normalize == "rg" and k.references.visible
    k._on_point_click(k.trend_peak, {"data": {"index": 5}})
    assert k.frame == 5
    np.testing.assert_allclose(k.trend_current.x, [50.0, 50.0])
    assert k.to_matplotlib().axes[0].get_xlabel() == "q Rg"


def test_linear_panel_matplotlib_export(series):
    p = LinearFitPanel(series, q_range=(0.05, 0.3))
    fig = p.to_matplotlib()
    ax, rax, tax = fig.axes
    assert ax.get_xlabel() == "q² (nm⁻²)" and ax.get_ylabel() == "ln I"  # symbols and units
    fit = [line for line in ax.lines if line.get_color() == ROLE["fit"]]
    assert len(fit) == 1
    np.testing.assert_allclose(fit[0].get_ydata(), p.fit_line.y)
    assert rax.get_ylabel() == "residual / sigma" and tax.get_xlabel() == "time (s)"


def test_failed_automatic_range_clears_the_brush(rng):
    q = np.linspace(0.05, 2.0, 120)
    I = 1.0 + 5.0 * q**2  # rises with q: no Guinier region
    ds = saxsnb.from_arrays(q, np.vstack([I, I]), 0.01 * np.vstack([I, I]))
    p = LinearFitPanel(ds, q_range=(0.1, 0.3))
    np.testing.assert_allclose(p.selector.selected, [0.01, 0.09])
    p.q_range = None
    assert p.selector.selected is None and p.q_range is None
    assert p.status.endswith(str(p.result.status.values[0])) and p.result.status.values[0] != "ok"
    assert "n/a" in p.result_text.value


def test_panels_on_a_dask_series(series):
    lazy = series.chunk({"frame": 2})
    p = LinearFitPanel(lazy, q_range=(0.05, 0.3), frame=3)
    xr.testing.assert_identical(p.result.compute(), series.isel(frame=[3]).saxs.guinier(q_range=(0.05, 0.3)))
    k = KratkyPanel(lazy, frame=3)
    direct = series.isel(frame=[3]).saxs.kratky(normalize="rg").to_dataset(name="kratky")
    xr.testing.assert_identical(k.result.compute(), direct)


def test_kratky_panel_falls_back_to_plain_without_guinier_region():
    q = np.linspace(0.05, 2.0, 120)
    I = 1.0 + 5.0 * q**2  # rises with q: no Guinier region, no Rg
    ds = saxsnb.from_arrays(q, np.vstack([I, I]), 0.01 * np.vstack([I, I]))
    k = KratkyPanel(ds)
    assert k.normalize is None and k.toggle.value == "plain" and k.status == ""
    assert KratkyPanel(ds, normalize="rg").status.endswith("the dimensionless plot is undefined")


def test_dashboard_status_line_in_plain_words(series):
    d = saxsnb.explore(series, panels=("curve", "guinier"), frame=5)
    g = d.panels["guinier"]
    g.q_range = (0.05, 0.5)  # q_max Rg past 1.3 (Guinier 1939; Jacques & Trewhella 2010)
    assert g.status.endswith("qrg_limit_exceeded")
    assert "qrg_limit_exceeded" not in d.status_line.value
    assert "guinier: " in d.status_line.value and "above the validity limit 1.3" in d.status_line.value

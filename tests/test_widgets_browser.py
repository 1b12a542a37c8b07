"""Python-side tests of the series browser, the curve panel and explore() (no browser)."""

import numpy as np
import pytest
import traitlets
import xarray as xr

import saxsnb
from saxsnb.display import drawable_line, errorbar_segments, overview_map
from saxsnb.widgets import CurvePanel, SeriesBrowser, explore


@pytest.fixture
def series(rng):
    q = np.linspace(0.05, 3.0, 120)
    rg = np.linspace(2.0, 4.0, 12)
    I = 100 * np.exp(-((q[None, :] * rg[:, None]) ** 2) / 3) + 0.5  # Guinier form, Guinier (1939)
    S = 0.01 * I
    I = I + rng.normal(0, 1, I.shape) * S
    ds = saxsnb.from_arrays(q, I, S, scan={"temperature": np.linspace(20.0, 75.0, 12)})
    bg = saxsnb.from_arrays(q, np.full((1, q.size), 0.5), np.full((1, q.size), 0.01))
    return ds, bg


def test_browser_slider_label_and_result(series):
    ds, _ = series
    b = SeriesBrowser(ds)
    assert b.result.identical(ds.isel(frame=[0]))
    b.slider.value = 3
    assert b.frame == 3
    assert "temperature 35 degC" in b.label.value
    np.testing.assert_allclose(b.marker.y, [35.0, 35.0])
    xr.testing.assert_identical(b.result, ds.isel(frame=[3]))
    ns = {"ds": ds}
    exec(b.to_code(), ns)
    xr.testing.assert_identical(ns["result"], b.result)
    assert b.code == b.to_code()
    with pytest.raises(traitlets.TraitError):
        b.frame = 12


def test_browser_play_is_jslinked_and_slider_keyboard_ready(series):
    b = SeriesBrowser(series[0])
    assert b.play.max == b.slider.max == 11
    assert b.slider.min == 0 and b.slider.step == 1


def test_browser_row_click_selects_frame(series):
    ds, _ = series
    b = SeriesBrowser(ds)
    b._on_row_click(b.rows, {"event": "element_click", "data": {"rowNum": 5, "columnNum": 0}})
    assert b.frame == 5
    b.rows.selected = np.array([[7, 1]])
    assert b.frame == 7 and b.slider.value == 7
    b.select_row(99)
    assert "outside" in b.status and "outside" in b.status_line.value


def test_browser_downsamples_large_series_and_says_so(rng):
    q = np.linspace(0.1, 2.0, 50)
    I = rng.uniform(1, 2, (30, 50))
    ds = saxsnb.from_arrays(q, I, 0.1 * I)
    b = SeriesBrowser(ds, max_rows=10, max_cols=20)
    assert b.heatmap.color.shape == (10, 17)
    assert "downsampled" in b.map_note.value
    # clicking row 4 of a 3-frame block map gives the block's middle frame
    b.select_row(4)
    assert b.frame == 13


def test_overview_map_matches_block_means(rng):
    I = rng.uniform(1, 100, (6, 8))
    m = overview_map(np.arange(1.0, 9.0), I, max_rows=3, max_cols=4)
    # numpy reference: mean of log10 over 2 x 2 blocks
    ref = np.log10(I).reshape(3, 2, 4, 2).mean(axis=(1, 3))
    np.testing.assert_allclose(m["log10_intensity"], ref)


def test_curve_panel_marks_follow_frame(series):
    ds, bg = series
    c = CurvePanel(ds, bg)
    c.frame = 4
    np.testing.assert_array_equal(c.curve.y, ds.intensity.values[4])
    ex, ey = drawable_line(
        *errorbar_segments(ds.q.values, ds.intensity.values[4], ds.sigma.values[4], floor=c._floor),
        positive=True,
    )
    np.testing.assert_array_equal(c.errorbars.x, ex)
    np.testing.assert_array_equal(c.errorbars.y, ey)
    assert np.isfinite(c.errorbars.y[-1])  # ends on a bar, not on a gap
    assert c.background_line.visible
    np.testing.assert_array_equal(c.background_line.y, bg.intensity.values[0])
    xr.testing.assert_identical(c.result, ds.isel(frame=[4]))


def test_curve_overlays_and_code(series):
    ds, bg = series
    c = CurvePanel(ds, bg, frame=2)
    c.overlay_text.value = "0, 5"
    c.every = 4
    assert c.overlay_frames() == [0, 5, 4, 8]
    assert c.overlays.visible and c.overlays.y.shape == (4, ds.sizes["q"])
    xr.testing.assert_identical(c.result, ds.isel(frame=[2, 0, 5, 4, 8]))
    ns = {"ds": ds}
    exec(c.to_code(), ns)
    xr.testing.assert_identical(ns["result"], c.result)
    c.overlay_text.value = "1, x"
    assert "integers" in c.status
    c.show_background = False
    assert not c.background_line.visible


def test_matplotlib_export(series):
    ds, bg = series
    fig = CurvePanel(ds, bg).to_matplotlib()
    ax = fig.axes[0]
    assert ax.get_xscale() == "log" and ax.get_yscale() == "log"
    assert ax.get_xlabel() == "q (nm⁻¹)"  # units in print form
    assert len(ax.lines) >= 2
    assert SeriesBrowser(ds).to_matplotlib().axes[0].get_ylabel() == "temperature (°C)"


def test_explore_links_frames(series):
    ds, bg = series
    d = saxsnb.explore(ds, bg, panels=("browser", "curve"))
    assert list(d.panels.keys()) == ["browser", "curve"]
    assert d.panels[0] is d.panels["browser"]
    assert list(d.panels) == [d.panels["browser"], d.panels["curve"]]  # iterating gives panels
    assert all(d.panels[p] is p for p in d.panels) and dict(d.panels)["curve"] is d.panels[1]
    d.panels["browser"].slider.value = 6
    assert d.frame == 6 and d.panels["curve"].frame == 6
    code = d.to_code()
    ns = {"ds": ds, "background": bg}
    exec(code, ns)
    xr.testing.assert_identical(ns["curve"], d.panels["curve"].result)
    assert explore is saxsnb.explore


def test_single_frame_and_unlabelled_series(rng):
    q = np.linspace(0.05, 3.0, 80)
    I = 100 * np.exp(-((q * 3.0) ** 2) / 3) + 0.1  # Guinier form (Guinier 1939)
    one = saxsnb.from_arrays(q, I, 0.01 * I)
    d = saxsnb.explore(one, panels=("browser", "curve", "guinier", "kratky"))
    assert all(p.status == "" for p in d.panels.values())
    assert d.panels["browser"].heatmap.color.shape == (2, 80)
    b = SeriesBrowser(saxsnb.from_arrays(q, np.vstack([I, 2 * I]), 0.01 * np.vstack([I, 2 * I])))
    b.frame = 1
    assert b.frame_label() == "frame 1" and b.scan_label == "frame"


def test_curve_panel_rejects_a_background_on_another_grid(series):
    ds, _ = series
    q = np.linspace(0.1, 2.0, 30)
    other = saxsnb.from_arrays(q, np.ones((1, 30)), np.full((1, 30), 0.1))
    c = CurvePanel(ds, other)
    assert c.background is None and "q grid" in c.status and not c.background_line.visible

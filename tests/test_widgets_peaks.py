"""Python-side tests of the peaks panel, phase overrides and the full dashboard."""

import json
import re

import numpy as np
import pytest
import xarray as xr

import saxsnb
from saxsnb.analysis import q_positions
from saxsnb.widgets import PeaksPanel
from saxsnb.widgets import _bq as bq


@pytest.fixture(scope="module")
def cubic_series():
    """Four frames of a Pn3m phase (a = 10 -> 10.3 nm) then two lamellar (d = 6 nm)."""
    rng = np.random.default_rng(1234)
    q = np.linspace(0.3, 5.0, 700)
    rows = []
    for a in (10.0, 10.1, 10.2, 10.3):
        rows.append(q_positions("Pn3m", a, 6))  # ITC Vol. A reflection conditions
    for d in (6.0, 6.0):
        rows.append(q_positions("lamellar", d, 3))  # 1 : 2 : 3 (common practice)
    I = np.empty((len(rows), q.size))
    for k, centres in enumerate(rows):
        I[k] = 2.0 / (1 + q**2) + sum(40 * np.exp(-0.5 * ((q - c) / 0.012) ** 2) for c in centres)
    S = 0.01 * I + 0.002
    I = I + rng.normal(0, 1, I.shape) * S
    return saxsnb.from_arrays(q, I, S, scan={"temperature": 20.0 + 5.0 * np.arange(len(rows))})


@pytest.fixture(scope="module")
def panel(cubic_series):
    return PeaksPanel(cubic_series)


def test_peaks_panel_marks_and_table(cubic_series, panel):
    p = panel
    p.frame = 1
    pk = cubic_series.saxs.find_peaks()
    ix = cubic_series.saxs.index_phases(pk)
    xr.testing.assert_identical(p.result, ix)
    pos = pk.position.values[1]
    np.testing.assert_allclose(p.markers.x, pos[np.isfinite(pos)])
    assert list(p.labels.text) == [str(h) for h, x in zip(ix.hkl.values[1], pos) if np.isfinite(x)]
    assert str(ix.phase.values[1, 0]) == "Pn3m"
    # the lattice to the place of its uncertainty (the one number formatter)
    assert "Pn3m" in p.table.value and re.search(r"a = 10\.\d+ ± 0\.0\d+ nm", p.table.value)
    # the peak map holds every found peak of the Pn3m frames
    n_pn3m = int(np.isfinite(pk.position.values[:4]).sum())
    assert p.map_marks["Pn3m"].x.size == n_pn3m
    np.testing.assert_allclose(np.sort(p.trend_marks["Pn3m"].y), np.sort(ix.lattice.values[:4, 0]))


def test_override_is_recorded_applied_and_exported(cubic_series):
    p = PeaksPanel(cubic_series, frame=2)
    p.phase_choice.value = "Im3m"
    p.override_button.click()
    assert p.overrides == {2: {"phase": "Im3m", "lattice": None}}
    assert str(p.result.phase.values[2, 0]) == "Im3m" and str(p.result.status.values[2]) == "override"
    assert "override" in p.table.value and "automatic: Pn3m" in p.table.value
    pk = cubic_series.saxs.find_peaks()
    expected = cubic_series.saxs.index_phases(pk, overrides=p.overrides)
    xr.testing.assert_identical(p.result, expected)
    ns = {"ds": cubic_series}
    exec(p.to_code(), ns)
    xr.testing.assert_identical(ns["result"], p.result)
    assert json.loads(p.result.attrs["overrides"]) == {"2": {"phase": "Im3m", "lattice": None}}
    # [der] Pn3m h^2+k^2+l^2 = 2, 3, 4, 6, 8, 9 doubled are 4, 6, 8, 12, 16, 18, all Im3m-allowed
    # (h+k+l even; ITC Vol. A): the Im3m reading has a = sqrt(2) a(Pn3m)
    assert float(p.result.lattice.values[2, 0]) == pytest.approx(10.2 * np.sqrt(2.0), rel=2e-3)
    # a given lattice value, then clearing
    p.override(5, "lamellar", 6.5)
    assert float(p.result.lattice.values[5, 0]) == 6.5
    p.clear_override(2)
    assert 2 not in p.overrides and str(p.result.phase.values[2, 0]) == "Pn3m"
    p.override(1, "cubic")
    assert "unknown phase" in p.status


def test_peak_map_click_jumps_to_frame(panel):
    m = panel.map_marks["lamellar"]
    panel._on_point_click(m, {"event": "element_click", "data": {"index": 0}})
    assert panel.frame == 4


def test_peaks_panel_reports_analysis_error(cubic_series):
    p = PeaksPanel(cubic_series, find_options={"profile": "no-such-profile"})
    assert p.status.startswith("peak search / indexing") and p.status_line.value
    assert p.result is None


def test_explore_all_panels_linked_and_exported(cubic_series):
    # Bragg peaks only: explore() alone would leave the particle panels out; named, all are shown
    assert list(saxsnb.explore(cubic_series).panels.keys()) == ["browser", "curve", "peaks"]
    d = saxsnb.explore(cubic_series, panels=("browser", "curve", "guinier", "kratky", "peaks"))
    assert list(d.panels.keys()) == ["browser", "curve", "guinier", "kratky", "peaks"] and not d.reason
    d.panels["browser"].slider.value = 3
    assert all(p.frame == 3 for p in d.panels.values())
    d.panels["guinier"].q_range = (0.3, 0.6)
    d.panels["peaks"].override(3, "Im3m")
    ns = {"ds": cubic_series}
    exec(d.to_code(), ns)
    for name, p in d.panels.items():
        xr.testing.assert_identical(ns[name], p.result)
    assert d.show_code() == d.code_area.value
    fig = d.panels["peaks"].to_matplotlib()
    assert len(fig.axes) == 3


def _check_drawable(panel):
    """What a browser can draw: point marks hold finite coordinates only, and every
    line (each row of a 2-D Lines) ends on a real point, where bqplot puts its label."""
    for fig in panel.figures:
        for mark in fig.marks:
            if isinstance(mark, (bq.Scatter, bq.Label)):
                assert np.all(np.isfinite(mark.x)) and np.all(np.isfinite(mark.y)), (panel.name, mark.labels)
            elif isinstance(mark, bq.Lines):
                y = np.array(mark.y, dtype=float, ndmin=2)
                x = np.broadcast_to(np.asarray(mark.x, dtype=float), y.shape)
                assert y.shape[1] > 0, (panel.name, mark.labels)
                last_x, last_y = x[:, -1], y[:, -1]
                assert np.all(np.isfinite(last_x) & np.isfinite(last_y)), (panel.name, mark.labels)
                if isinstance(mark.scales["y"], bq.LogScale):
                    assert np.all(last_y > 0), (panel.name, mark.labels)
        # every axis has a range: fixed, or from some finite data (bqplot cannot format
        # the ticks of an axis without any)
        for axis in fig.axes:
            sc = axis.scale
            if isinstance(sc, bq.ColorScale) or (sc.min is not None and sc.max is not None):
                continue
            values = []
            for mark in fig.marks:
                for dim, attr in (("x", "x"), ("y", "y"), ("row", "row"), ("column", "column")):
                    if mark.scales.get(dim) is sc and getattr(mark, attr, None) is not None:
                        values.append(np.asarray(getattr(mark, attr), dtype=float).ravel())
            data = np.concatenate(values) if values else np.zeros(0)
            assert np.isfinite(data).any(), (panel.name, axis.label)


@pytest.mark.parametrize("scenario", ["unfolding", "phase-ramp", "flow-growth"])
def test_demo_dashboard_is_drawable(scenario):
    series, background = saxsnb.demo.make_series(scenario, seed=0)
    ds = series.saxs.subtract(background)  # negative intensities at high q after subtraction
    d = saxsnb.explore(ds, background, panels=("browser", "curve", "guinier", "kratky", "peaks"))
    d.panels["curve"].every = 10
    for p in d.panels.values():
        _check_drawable(p)
    g = d.panels["guinier"]
    g.q_range = (float(ds.q[0]), float(ds.q[12]))
    for f in (0, 20, 40):
        d.frame = f
        for p in d.panels.values():
            _check_drawable(p)
    d.panels["guinier"].apply_to_all = True
    d.panels["kratky"].normalize = None
    for p in d.panels.values():
        _check_drawable(p)


def test_peaks_panel_says_when_there_are_no_bragg_peaks():
    # a growing-particle series: only broad form-factor maxima, no Bragg peak (demo data)
    ds = saxsnb.demo.make_series("unfolding")[0]
    p = PeaksPanel(ds)
    assert str(p.result.status.values[0]) == "no_peaks"  # the code stays in the result
    assert p.status.endswith("no_peaks")
    assert p.status_text.endswith("no Bragg peaks found in this frame")
    assert "no_peaks" not in p.status_line.value
    assert "no Bragg peaks found in this frame" in p.table.value
    assert "no frame could be indexed" in p.table.value
    p.frame = 5
    assert "no Bragg peaks found in this frame" in p.table.value
    d = saxsnb.explore(ds, panels=("curve", "peaks"))
    assert "peaks: " in d.status_line.value and "no Bragg peaks found" in d.status_line.value


def test_peaks_panel_broad_features_are_not_bragg_peaks():
    ds = saxsnb.demo.make_series("flow-growth")[0]
    p = PeaksPanel(ds)
    st = p.result.status.values.astype(str)
    k = int(np.flatnonzero(st == "no_bragg_peaks")[0])
    p.frame = k
    assert "only broad features" in p.status_text and "no_bragg_peaks" not in p.status_line.value
    assert "broad (not Bragg peaks)" in p.table.value and "no frame could be indexed" in p.table.value

"""Panel faults a new user trips on (issue 11, item 3): each test failed before the fix."""

import io
import re

import numpy as np
import pytest

import saxsnb
from saxsnb.display import PHASE_COLOURS, format_value, label_levels
from saxsnb.errors import SaxsInputError
from saxsnb.widgets import CurvePanel, KratkyPanel, LinearFitPanel, PeaksPanel, explore


@pytest.fixture(scope="module")
def ramp():
    ds, bg = saxsnb.demo.make_series("phase-ramp", seed=0)
    return ds.saxs.subtract(bg)


@pytest.fixture(scope="module")
def protein():
    ds, bg = saxsnb.demo.make_series("unfolding", seed=0)
    return ds.saxs.subtract(bg), bg


def test_out_of_range_overlay_frame_is_a_clear_error(protein):
    ds, bg = protein
    n = ds.sizes["frame"]
    with pytest.raises(SaxsInputError, match=rf"outside the series \(frames 0..{n - 1}\)"):
        CurvePanel(ds, overlay=[2, 500])
    c = CurvePanel(ds, bg)
    with pytest.raises(SaxsInputError, match="overlay"):
        c.overlay = [500]
    c.overlay_text.value = "3, 500"  # typed in the page: said in the status line
    assert "500" in c.status and "outside the series" in c.status_line.value
    assert c.overlay == []
    c.overlay_text.value = "3, 7"
    assert c.overlay == [3, 7] and c.status == ""


def test_keys_under_the_plots_not_legends_over_data(protein):
    ds, bg = protein
    c = CurvePanel(ds, bg, overlay=[5, 30])
    key = c.key.value
    assert "frame 5" in key and "frame 30" in key and "background" in key and "±σ" in key
    for fig in c.figures:
        assert not any(getattr(m, "display_legend", False) for m in fig.marks)
    g = LinearFitPanel(ds)
    assert "automatic range" in g.trend_key.value and "applied to all" in g.trend_key.value


def test_labels_with_symbols_and_units_and_readable_ticks(ramp, protein):
    ds, _ = protein
    dash = explore(ramp, panels=("browser", "curve", "guinier", "porod", "kratky", "peaks"))
    labels = [a.label for p in dash.panels.values() for f in p.figures for a in f.axes]
    assert all("^" not in t and "1/nm" not in t and "degC" not in t for t in labels), labels
    assert "q² (nm⁻²)" in labels and "temperature (°C)" in labels and "q (nm⁻¹)" in labels
    # a Porod plot of small numbers: exponent ticks, not 0.000001
    small = ds.copy()
    small["intensity"] = small["intensity"] * 1e-6
    small["sigma"] = small["sigma"] * 1e-6
    p = LinearFitPanel(small, kind="porod", frame=3, q_range=(2.0, 3.5))
    assert p.figures[0].axes[1].tick_format == ".2~e"


def test_peaks_coloured_by_phase_and_hkl_labels_apart_at_coexistence(ramp):
    p = PeaksPanel(ramp)
    res = p.result
    two = np.flatnonzero((np.asarray(res["phase"].values) != "").sum(axis=1) == 2)
    assert two.size, "the demo ramp has coexistence frames"
    for f in two[:: max(1, two.size // 4)]:
        p.frame = int(f)
        pphase = np.asarray(res["peak_phase"].values[f])
        pos = np.asarray(res["position"].values[f])
        shown = np.isin(pos, p.markers.x)
        assert list(p.markers.colors) == [PHASE_COLOURS[str(ph)] for ph in pphase[shown]]
        # labels closer than the gap are at different heights
        x, y = np.asarray(p.labels.x), np.asarray(p.labels.y)
        gap = 0.035 * float(p.q.max() - p.q.min())
        for a in range(x.size):
            for b in range(a + 1, x.size):
                if abs(x[a] - x[b]) < gap:
                    assert not np.isclose(y[a], y[b]), (f, x[a], x[b])
    # one colour code for notebook figures and panels
    for ph, mark in p.map_marks.items():
        assert mark.colors[0] == PHASE_COLOURS["" if ph == "unassigned" else ph]
    assert "&#9679;</span> Pn3m" in p.phase_key.value
    assert label_levels([1.0, 1.01], min_gap=0.05).tolist() == [0, 1]


def test_error_bars_where_sigma_is_known(protein):
    ds, _ = protein
    g = LinearFitPanel(ds, frame=10)
    assert g.in_range_bars.visible and np.isnan(g.in_range_bars.y).any()  # bars with gaps
    assert g.trend_bars.visible
    k = KratkyPanel(ds, frame=10)
    assert k.errorbars.visible
    k.normalize = None
    assert k.errorbars.visible


def test_numbers_with_sensible_significant_figures(protein):
    ds, _ = protein
    g = LinearFitPanel(ds, frame=10)
    text = g.result_text.value
    assert not re.search(r"\d e-\d|\de-0\d", text), text
    rg, s = float(g.result.rg[0]), float(g.result.rg_sigma[0])
    assert format_value(rg, s).replace("±", "&plusmn;") in text
    assert format_value(5.0, 3.3e-05) == "5.000000 ± 0.000033"  # the example


def test_png_of_a_whole_panel_and_matplotlib_at_print_resolution(protein):
    from PIL import Image

    ds, _ = protein
    g = LinearFitPanel(ds, frame=4)
    data = g.to_png()
    img = Image.open(io.BytesIO(data))
    assert img.size[0] >= 1600 and img.size[1] > img.size[0]  # all three figures stacked
    g.png_button.click()
    assert 'href="data:image/png;base64,' in g.png_link.value
    fig = g.to_matplotlib(dpi=300)
    assert fig.dpi == 300 and len(fig.axes) == 3
    buf = io.BytesIO()
    fig.savefig(buf, format="png")
    assert Image.open(buf).size[0] == 6 * 300

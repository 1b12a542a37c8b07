"""The image panel (saxsnb.widgets.image), driven from Python."""

import numpy as np
import pytest
import traitlets

from saxsnb.analysis import DetectorGeometry, circle_mask
from saxsnb.io.images import image_series
from saxsnb.widgets.image import ImagePanel

G = DetectorGeometry(40.0, 30.0, 500.0, 0.172, 0.172, 0.1, tilt_deg=2.0, shape=(60, 80))


@pytest.fixture
def panel():
    rng = np.random.default_rng(1234)
    ims = image_series(rng.poisson(20.0, size=(3, 60, 80)).astype(np.uint32), geometry=G)
    return ImagePanel(ims, mask=circle_mask(G.shape, (40, 30), 4), rings_q=[0.5, 1.0])


def test_frame_log_and_mask(panel):
    img = panel.images.counts.values
    c = panel.image_values
    assert np.isnan(c[30, 40])                            # masked beam stop: no value
    # the front end gets finite colours only (a NaN blanks the whole image in bqplot)
    shown = panel.colour_values
    assert np.isfinite(shown).all() and shown[30, 40] == panel.cs.min == np.nanmin(c)
    assert panel.frame_layer.image.value[:8] == b"\x89PNG\r\n\x1a\n"
    assert panel.mask_layer.visible
    np.testing.assert_allclose(c[0, 0], np.log10(img[0, 0, 0]))
    panel.frame = 2
    np.testing.assert_allclose(panel.colour_values[0, 0], np.log10(img[2, 0, 0]))
    panel.log_scale = False
    panel.show_mask = False
    assert panel.colour_values[30, 40] == img[2, 30, 40]
    assert not panel.mask_layer.visible
    panel.frame = 7
    assert "frame 7" in panel.status and panel.status_line.value


def test_rings_centre_and_cursor(panel):
    assert len(panel.ring_lines.x) == 2
    rows, cols = np.asarray(panel.ring_lines.y[1]), np.asarray(panel.ring_lines.x[1])
    np.testing.assert_allclose(G.q_chi(rows, cols)[0], 1.0, rtol=1e-10)
    assert list(panel.centre.x) == [40.0]
    cur = panel.point_at(50.0, 30.0)
    q, chi = G.q_chi([30.0], [50.0])
    assert cur["q"] == pytest.approx(float(q[0])) and cur["chi"] == pytest.approx(float(chi[0]))
    assert "1/nm" in panel.readout.value
    panel._on_click(panel.frame_layer, {"event": "element_click", "data": {"click_x": 1.0, "click_y": 0.0}})
    assert panel.cursor["x"] == 1.0 and panel.cursor["y"] == 0.0
    # frame can be linked to another panel's frame (common traitlets link)
    other = ImagePanel(panel.images)
    traitlets.link((panel, "frame"), (other, "frame"))
    panel.frame = 1
    assert other.frame == 1


def test_orientation_selector_drives_the_trend(panel):
    from saxsnb.demo_images import fibre_series

    fib = fibre_series(n_frames=5)
    q0 = 2 * np.pi / 3.0                       # the demo fibre's reflection, d = 3 nm
    p = ImagePanel(fib, q_band=(q0 - 0.06, q0 + 0.06), sector=(45.0, 135.0), n_chi=36)
    assert p.director_deg == 90.0
    direct = fib.saxs.orientation((q0 - 0.06, q0 + 0.06), director_deg=90.0, n_chi=36)
    np.testing.assert_allclose(p.orientation.hermans.values, direct.hermans.values)
    np.testing.assert_allclose(np.asarray(p.f_lines.y)[0], direct.hermans.values)
    np.testing.assert_allclose(np.asarray(p.f_lines.x), fib.strain.values)
    assert len(p.selection_lines.x) == 4        # two arcs and two edges of the sector
    p.sector_slider.value = (-45.0, 45.0)      # the slider moves the director to 0 degrees
    assert p.sector == [-45.0, 45.0] and p.director_deg == 0.0
    moved = fib.saxs.orientation((q0 - 0.06, q0 + 0.06), director_deg=0.0, n_chi=36)
    np.testing.assert_allclose(p.orientation.hermans.values, moved.hermans.values)
    p.q_slider.value = (q0 - 0.1, q0 + 0.1)
    assert p.q_band == pytest.approx([q0 - 0.1, q0 + 0.1])
    code = p.to_code()
    ns = {"fib": fib}                          # the panel writes code about the caller's variable
    exec(code, ns)                              # runs without widgets
    np.testing.assert_allclose(ns["orientation"].hermans.values, p.orientation.hermans.values)
    p.show_code()
    assert "orientation(" in p.code_area.value
    png = p.to_png(width_px=300)
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    p.frame_slider.value = 3
    assert p.frame == 3 and list(p.f_now.y) == [float(p.orientation.hermans.values[3])]
    ok = p.orientation.fwhm_status.values == "ok"       # unresolved widths are not drawn
    np.testing.assert_allclose(np.asarray(p.w_lines.y), p.orientation.fwhm_deg.values[ok])


def test_mask_layer_png():
    from saxsnb.widgets.image import _png_rgba

    rgba = np.zeros((3, 5, 4), np.uint8)
    rgba[1, 2] = (1, 2, 3, 4)
    data = _png_rgba(rgba)
    import io

    from matplotlib.image import imread  # an independent PNG decoder (matplotlib's)

    back = imread(io.BytesIO(data), format="png")
    np.testing.assert_array_equal(np.round(back * 255).astype(np.uint8), rgba)

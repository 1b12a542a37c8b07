"""The image panel in Voila, driven in headless Chromium: the frame is drawn with a log
colour scale and the beam-stop mask (NaN pixels) under a grey layer, the fitted ring and
beam centre are drawn, a click reads q and chi of the pixel, the frame slider steps the linked curve
panel, and the sector selector redraws the orientation trend."""

import re

import nbformat
import pytest
from app_flow import figure, paths_signature, wait_signature_changes
from playwright.sync_api import expect

CELL = """\
import ipywidgets as widgets
import numpy as np
import traitlets

from saxsnb import analysis as an
from saxsnb.demo_images import fibre_series
from saxsnb.widgets import CurvePanel
from saxsnb.widgets.image import ImagePanel

fibre = fibre_series(n_frames=6)
g = fibre.saxs.geometry()
mask = an.circle_mask(g.shape, (g.beam_center_x_px, g.beam_center_y_px), 12)   # beam stop
q0 = 2 * np.pi / 3.0                                  # the demo fibre's reflection (d = 3 nm)
panel = ImagePanel(fibre, mask=mask, rings_q=[q0], q_band=(q0 - 0.06, q0 + 0.06),
                   sector=(45.0, 135.0), n_chi=36)
curves = fibre.saxs.integrate(mask=mask, n_bins=150)
curve = CurvePanel(curves)
traitlets.link((panel, "frame"), (curve, "frame"))
widgets.VBox([panel, curve])
"""

# the frame and the mask layer: bqplot Image marks (<image> elements with a blob: href)
FRAME = "div.saxsnb-image-figure svg image"
READOUT = re.compile(r"x [\d.]+, y [\d.]+ px: q = [\d.e+-]+ 1/nm, chi = -?[\d.]+ deg")


def frame_href(page) -> str:
    return page.locator(FRAME).first.get_attribute("href")


PIXELS = """async ([sel, k]) => {
    const im = document.querySelectorAll(sel)[k];
    const img = new Image();
    img.src = im.getAttribute('href');
    await img.decode();
    const c = document.createElement('canvas');
    c.width = img.width; c.height = img.height;
    const ctx = c.getContext('2d');
    ctx.drawImage(img, 0, 0);
    const d = ctx.getImageData(0, 0, c.width, c.height).data;
    let clear = 0, solid = 0;
    for (let i = 3; i < d.length; i += 4) { if (d[i] === 0) clear++; else solid++; }
    return [clear, solid];
}"""


@pytest.mark.browser
def test_image_panel_in_a_browser(servers, probe, tmp_path):
    nb_path = tmp_path / "nb" / "image.ipynb"
    nb_path.parent.mkdir()
    nb = nbformat.v4.new_notebook()
    nb.cells = [nbformat.v4.new_markdown_cell("# image panel"), nbformat.v4.new_code_cell(CELL)]
    nb.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3", "language": "python"}
    nbformat.write(nb, nb_path)
    server = servers.voila(nb_path)
    page = probe.page
    page.set_viewport_size({"width": 1200, "height": 2800})
    page.goto(f"{server.url}/?token={server.token}", timeout=120_000)
    # ring + selection outline + trend lines + FWHM + curve panel lines
    probe.wait_for_lines(4)
    image_fig = page.locator("div.bqplot.figure.saxsnb-image-figure")
    expect(image_fig).to_have_count(1)
    # the frame is drawn as an opaque image (no NaN reaches the front end), log colour axis;
    # the mask layer above it is opaque on the beam stop only
    expect(page.locator(FRAME)).to_have_count(2)
    page.wait_for_function(f"() => /^blob:/.test(document.querySelector('{FRAME}').getAttribute('href'))",
                           timeout=30_000)
    expect(image_fig.locator("text", has_text="log10 counts")).to_have_count(1)
    clear, solid = page.evaluate(PIXELS, [FRAME, 0])
    assert clear == 0 and solid > 1000, (clear, solid)
    clear, solid = page.evaluate(PIXELS, [FRAME, 1])
    assert 0 < solid < 0.05 * clear, (clear, solid)    # a disc of radius 12 px out of 400 x 400
    # the fitted ring (white) and the selection outline are drawn, and the beam centre marker
    ring = image_fig.locator("g.curve path.line").first
    expect(ring).to_have_attribute("d", re.compile(r"^M[-\d.e]+,"))
    expect(image_fig.locator("path.dot")).to_have_count(1)
    probe.screenshot("image-panel")
    # q and chi of a clicked pixel
    box = page.locator(FRAME).first.bounding_box()
    page.mouse.click(box["x"] + 0.8 * box["width"], box["y"] + 0.5 * box["height"])
    expect(page.locator(".widget-html", has_text=READOUT)).to_have_count(1, timeout=15_000)
    # log colour off: the image is redrawn and the colour axis says counts
    before = frame_href(page)
    page.get_by_label("log colour").uncheck()
    page.wait_for_function(f"(old) => document.querySelector('{FRAME}').getAttribute('href') !== old",
                           arg=before, timeout=30_000)
    expect(image_fig.locator("text", has_text=re.compile(r"^counts$"))).to_have_count(1)
    # the frame slider steps the linked curve panel
    curve_fig = figure(page, "body", re.compile(r"\(frame 0\)$"))
    expect(curve_fig).to_have_count(1)
    curve_sig = paths_signature(curve_fig)
    handle = page.locator(".widget-slider", has=page.locator("label", has_text=re.compile(r"^frame$")))
    knob = handle.locator(".noUi-handle[role=slider]").first
    knob.focus()
    knob.press("ArrowRight")
    expect(knob).to_have_attribute("aria-valuenow", re.compile(r"^1(\.0+)?$"))
    expect(figure(page, "body", re.compile(r"\(frame 1\)$"))).to_have_count(1, timeout=30_000)
    wait_signature_changes(probe, figure(page, "body", re.compile(r"\(frame 1\)$")), curve_sig,
                           "curve panel after the image panel's frame step")
    # the sector selector drives the orientation trend
    trend = page.locator("div.bqplot.figure.saxsnb-image-trend")
    trend_sig = paths_signature(trend)
    sector = page.locator(".widget-slider", has=page.locator("label", has_text="sector chi"))
    lo_knob = sector.locator(".noUi-handle[role=slider]").first
    lo_knob.focus()
    for _ in range(30):
        lo_knob.press("ArrowLeft")
    wait_signature_changes(probe, trend, trend_sig, "orientation trend after moving the sector")
    probe.screenshot("image-panel-moved")
    probe.assert_clean()

"""The browser harness itself, on a tiny notebook: a bqplot line driven by an IntSlider
and a brush whose final selection is echoed in a label (served by Voila)."""

import re

import nbformat
import pytest
from playwright.sync_api import expect

TINY = '''\
import numpy as np
import bqplot as bq
import ipywidgets as w

x = np.linspace(0, 1, 50)
sx, sy = bq.LinearScale(), bq.LinearScale()
line = bq.Lines(x=x, y=np.sin(2 * np.pi * x), scales={"x": sx, "y": sy})
fig = bq.Figure(marks=[line], title="harness check",
                axes=[bq.Axis(scale=sx, label="q (1/nm)"),
                      bq.Axis(scale=sy, orientation="vertical", label="I (arb)")])
brush = bq.interacts.BrushIntervalSelector(scale=sx, marks=[line])
fig.interaction = brush
slider = w.IntSlider(0, min=0, max=10, description="frame")
echo = w.Label("none")
echo.add_class("brush-echo")

def on_frame(change):
    line.y = np.sin(2 * np.pi * x + change["new"])

def on_brushing(change):
    if not change["new"]:
        echo.value = "selected %.3f %.3f" % tuple(brush.selected)

slider.observe(on_frame, "value")
brush.observe(on_brushing, "brushing")
w.VBox([slider, fig, echo])
'''


@pytest.mark.browser
def test_harness_voila_slider_and_brush(servers, probe, tmp_path):
    nb = nbformat.v4.new_notebook()
    nb.cells = [nbformat.v4.new_markdown_cell("# tiny"), nbformat.v4.new_code_cell(TINY)]
    path = tmp_path / "tiny.ipynb"
    nbformat.write(nb, path)
    server = servers.voila(path)
    page = probe.page
    page.goto(f"{server.url}/?token={server.token}")
    probe.wait_for_lines(1)

    line = page.locator("svg.svg-figure g.curve path.line").first
    d0 = line.get_attribute("d")
    handle = page.locator(".widget-slider .noUi-handle[role=slider]").first
    handle.focus()
    page.keyboard.press("ArrowRight")
    expect(handle).to_have_attribute("aria-valuenow", re.compile(r"^1(\.0+)?$"))
    d1 = probe.wait_attr_changes(line, "d", d0)
    assert re.match(r"^M[-\d.e]+,", d1)

    probe.drag(page.locator("rect.plotarea_events").first, 0.2, 0.6)
    expect(page.locator(".brush-echo")).to_contain_text(re.compile(r"selected 0\.\d+ 0\.\d+"))
    lo, hi = map(float, page.locator(".brush-echo").inner_text().split()[1:])
    assert 0.1 < lo < 0.3 and 0.5 < hi < 0.7, (lo, hi)

    probe.screenshot("tiny")
    probe.assert_clean()
    assert probe.seen_external == probe.stubbed  # only the CDN icon CSS was asked for

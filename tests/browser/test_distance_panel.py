"""The p(r) panel alone in Voila, driven in headless Chromium: it renders, a fixed Dmax
typed into its control changes the plotted p(r), and so does a q range dragged on the
I(q) plot."""

import re

import nbformat
import pytest
from app_flow import figure, paths_signature, wait_signature_changes
from playwright.sync_api import expect

CELL = """\
import saxsnb
from saxsnb.widgets import DistancePanel

ds = saxsnb.demo.example_series("spheres")
DistancePanel(ds)
"""


@pytest.mark.browser
def test_distance_panel_renders_and_dmax_changes_p(servers, probe, tmp_path):
    nb_path = tmp_path / "nb" / "distance.ipynb"
    nb_path.parent.mkdir()
    nb = nbformat.v4.new_notebook()
    nb.cells = [nbformat.v4.new_markdown_cell("# p(r) panel"), nbformat.v4.new_code_cell(CELL)]
    nb.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3", "language": "python"}
    nbformat.write(nb, nb_path)
    server = servers.voila(nb_path)
    page = probe.page
    page.set_viewport_size({"width": 1200, "height": 2600})
    page.goto(f"{server.url}/?token={server.token}", timeout=120_000)
    # I(q) fit, residual zero line, p(r) band and line, evidence curve: drawn paths
    probe.wait_for_lines(4)
    pfig = figure(page, "body", "p(r) ± σ")
    expect(pfig).to_be_visible()
    expect(pfig.locator("g.curve path.line").last).to_have_attribute("d", re.compile(r"^M[-\d.e]+,"))
    probe.screenshot("distance-auto")
    # fixed Dmax: untick "auto Dmax" (fixes the automatic value, about 2R = 4 nm) ...
    page.get_by_label("auto Dmax").uncheck()
    # "Dmax = 4.1 ± 0.2 nm (fixed)" (display.format_value; no sigma when it is 0)
    fixed_text = re.compile(r"Dmax = [\d.]+(?: ± [\d.e+-]+)? nm \(fixed\)")
    fixed = page.locator(".widget-html", has_text=fixed_text).first
    expect(fixed).to_be_visible(timeout=30_000)
    box = page.locator(".widget-text", has=page.locator("label", has_text="Dmax (nm)")).locator("input")
    expect(box).to_be_enabled()
    sig1 = paths_signature(pfig)
    # ... then type 8 nm: p(r) is redrawn on 0..8 nm
    box.fill("8")
    box.press("Enter")
    wait_signature_changes(probe, pfig, sig1, "Dmax 8 nm typed into the control")
    eight = re.compile(r"Dmax = 8(?:\.0*)?(?: ± [\d.e+-]+)? nm \(fixed\)")
    shown = page.locator(".widget-html", has_text=eight).first
    expect(shown).to_be_visible()
    probe.screenshot("distance-fixed")
    # the q range as a brush on the I(q) plot: drag across the middle of the curve
    qfig = figure(page, "body", re.compile(r"^Distance distribution p\(r\): "))
    expect(qfig).to_have_count(1)
    sig2 = paths_signature(pfig)
    fit_sig = paths_signature(qfig)
    probe.drag(qfig.locator("rect.plotarea_events"), 0.15, 0.75)
    wait_signature_changes(probe, pfig, sig2, "q range dragged on the I(q) plot")
    wait_signature_changes(probe, qfig, fit_sig, "fit redrawn over the dragged q range")
    expect(shown).to_be_visible()  # Dmax stays as typed
    probe.screenshot("distance-brushed")
    probe.assert_clean()

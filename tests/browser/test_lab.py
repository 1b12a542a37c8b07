"""The app notebook run inside JupyterLab in headless Chromium."""

import re

import nbformat
import pytest
from playwright.sync_api import expect
from test_harness import TINY


@pytest.mark.browser
def test_harness_lab_tiny(servers, probe, tmp_path):
    nb_dir = tmp_path / "nb"
    nb_dir.mkdir()
    nb = nbformat.v4.new_notebook()
    nb.cells = [nbformat.v4.new_code_cell(TINY)]
    nb.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3", "language": "python"}
    nbformat.write(nb, nb_dir / "tiny.ipynb")
    server = servers.lab(nb_dir)
    probe.open_in_lab(server, "tiny.ipynb")
    page = probe.page
    probe.wait_for_lines(1, root=".jp-OutputArea")
    line = page.locator(".jp-OutputArea svg.svg-figure g.curve path.line").first
    d0 = line.get_attribute("d")
    handle = page.locator(".jp-OutputArea .widget-slider .noUi-handle[role=slider]").first
    handle.focus()
    page.keyboard.press("ArrowRight")
    expect(handle).to_have_attribute("aria-valuenow", re.compile(r"^1(\.0+)?$"))
    probe.wait_attr_changes(line, "d", d0)
    probe.screenshot("lab-tiny")
    probe.assert_clean()

"""Notebooks run inside JupyterLab in headless Chromium: the harness on a tiny notebook,
then the flow-growth app notebook (keyboard frame step and Guinier range drag)."""

import re
import shutil

import nbformat
import pytest
from app_flow import NOTEBOOK, run_flow
from playwright.sync_api import expect
from test_harness import TINY


@pytest.mark.browser
def test_lab_tiny_notebook(servers, probe, tmp_path):
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


@pytest.mark.browser
def test_lab_app_step_and_drag(servers, probe, tmp_path):
    nb_dir = tmp_path / "nb"
    nb_dir.mkdir()
    shutil.copy(NOTEBOOK, nb_dir / NOTEBOOK.name)  # Lab may write checkpoints next to it
    server = servers.lab(nb_dir)
    probe.page.set_viewport_size({"width": 1400, "height": 1400})
    probe.open_in_lab(server, NOTEBOOK.name)
    seen = run_flow(probe, ".jp-OutputArea-output", "lab")
    assert seen["rg_dragged"] != seen["rg_frame1"]
    probe.assert_clean()

"""The flow-growth app notebook run inside JupyterLab in headless Chromium (Run All
Cells, then a keyboard frame step and a Guinier range drag in the output area)."""

import shutil

import pytest
from app_flow import NOTEBOOK, run_flow


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

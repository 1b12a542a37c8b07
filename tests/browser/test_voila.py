"""The code-free flow-growth page served by Voila, driven in headless Chromium."""

import pytest
from app_flow import NOTEBOOK, click_map_row, run_flow


@pytest.mark.browser
def test_voila_app_step_and_drag(servers, probe):
    server = servers.voila(NOTEBOOK)
    page = probe.page
    page.set_viewport_size({"width": 1400, "height": 2600})  # the whole dashboard at once
    page.goto(f"{server.url}/?token={server.token}")
    seen = run_flow(probe, "body", "voila")
    # clicking the middle row of the overview map (0 .. 118 mm) jumps to about 59 mm
    frame = click_map_row(probe, "body", 0.5)
    assert 24 <= frame <= 35, frame
    # Voila shows outputs only: no code cell input on the page
    assert page.get_by_text("make_series(").count() == 0
    assert page.locator(".jp-CodeMirrorEditor, .cm-editor").count() == 0
    probe.screenshot("voila-page")
    probe.assert_clean()
    print(seen)

"""The code-free flow-growth page served by Voila, driven in headless Chromium."""

import pytest
from app_flow import NOTEBOOK, click_map_row, run_flow
from playwright.sync_api import TimeoutError as PlaywrightTimeout
from playwright.sync_api import expect


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


SCENARIOS = sorted(p for p in NOTEBOOK.parent.glob("*.ipynb") if p != NOTEBOOK)
#: Scenario notebooks whose outputs are text only (no figure to wait for).
TEXT_ONLY = {"06-cluster"}


@pytest.mark.browser
@pytest.mark.parametrize("notebook", SCENARIOS, ids=[p.stem for p in SCENARIOS])
def test_voila_scenario_notebook_renders(servers, probe, notebook):
    """Every scenario notebook is a clean page in Voila (what `make app APP_NB=...` serves):
    it runs, its figures and widgets show, nothing goes wrong in the browser."""
    server = servers.voila(notebook)
    page = probe.page
    page.set_viewport_size({"width": 1400, "height": 1600})
    page.goto(f"{server.url}/?token={server.token}", timeout=120_000)  # load = every cell ran
    page.locator("h1").first.wait_for()
    # widget outputs (if any) rendered; bqplot figures drawn
    n_views = page.locator('script[type="application/vnd.jupyter.widget-view+json"]').count()
    if n_views:
        expect(page.locator(".jupyter-widgets").first).to_be_visible(timeout=60_000)
    # outputs arrive progressively after the load event: wait for the first figure
    # (a matplotlib image or a bqplot figure) instead of counting at once
    if notebook.stem in TEXT_ONLY:  # prints its figures (timings, cluster), draws none
        expect(page.locator(".jp-OutputArea-output").first).to_be_attached(timeout=120_000)
        probe.screenshot(f"voila-{notebook.stem}")
        probe.assert_clean()
        return
    figures = page.locator(".jp-RenderedImage img, div.bqplot.figure")
    try:
        figures.first.wait_for(state="attached", timeout=120_000)
    except PlaywrightTimeout:
        raise AssertionError("no figure on the page within 120 s") from None
    if page.locator("div.bqplot.figure").count():
        probe.wait_for_lines(1)
    figures.first.scroll_into_view_if_needed()
    expect(figures.first).to_be_visible()
    probe.screenshot(f"voila-{notebook.stem}")
    probe.assert_clean()

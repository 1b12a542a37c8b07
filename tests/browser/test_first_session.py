"""A practitioner's first session in JupyterLab (issue 11): open the quickstart, run all,
step frames, drag a Guinier range, click the overview map, export the panel's code, run it
in a new cell and compare the printed numbers with the panel's, save, reload, and check
that every panel is still drawn, with nothing going wrong in the browser."""

from __future__ import annotations

import re
import shutil
from pathlib import Path

import pytest
from playwright.sync_api import expect

QUICKSTART = Path(__file__).resolve().parents[2] / "notebooks" / "01-quickstart.ipynb"
OUT = ".jp-OutputArea-output"
RG_TEXT = re.compile(r"Rg = ([-\d.e+()]+) ± ([-\d.e+()]+) nm")
PANELS = ("browser", "curve", "guinier", "kratky")


def _drawn(page, panel: str) -> int:
    """Number of drawn bqplot lines in a panel (a path starting with "M<x>,<y>")."""
    return page.locator(f".saxsnb-{panel} svg.svg-figure g.curve path.line").evaluate_all(
        "ps => ps.filter(p => /^M[-\\d.e]+,/.test(p.getAttribute('d') || '')).length"
    )


def _wait_all_drawn(probe, timeout: float = 90_000) -> None:
    page = probe.page
    for name in PANELS:
        panel = page.locator(f"{OUT} .saxsnb-{name}").first
        expect(panel).to_be_attached(timeout=timeout)
        if name != "browser":  # the browser's map is a heat map: its current-frame line is drawn
            page.wait_for_function(
                "sel => [...document.querySelectorAll(sel)].some(p => /^M[-\\d.e]+,/.test("
                "p.getAttribute('d') || ''))",
                arg=f".saxsnb-{name} svg.svg-figure g.curve path.line", timeout=timeout,
            )
        assert _drawn(page, name) >= 1, f"panel {name} has no drawn line"


@pytest.mark.browser
def test_first_session_in_lab(servers, probe, tmp_path):
    import saxsnb.demo

    repo = tmp_path / "repo"  # laid out as the repository: notebooks/ beside demo-data/
    (repo / "notebooks").mkdir(parents=True)
    shutil.copy(QUICKSTART, repo / "notebooks" / QUICKSTART.name)
    saxsnb.demo.write_demo(repo / "demo-data")
    server = servers.lab(repo)
    page = probe.page
    page.set_viewport_size({"width": 1400, "height": 1400})
    probe.open_in_lab(server, f"notebooks/{QUICKSTART.name}")

    # ---- run all: the last cell printed, every panel drawn, the reason line shown
    expect(page.get_by_text("saved and reopened: identical")).to_be_attached(timeout=120_000)
    _wait_all_drawn(probe)
    expect(page.locator(OUT, has_text="No Bragg peaks in 5 sampled frames").first).to_be_attached()
    guinier = page.locator(f"{OUT} .saxsnb-guinier").first
    result = guinier.locator(".widget-html", has_text=RG_TEXT)
    expect(result).to_have_count(1)

    # ---- step two frames with the keyboard
    handle = page.locator(f"{OUT} .saxsnb-browser .widget-slider .noUi-handle[role=slider]").first
    handle.scroll_into_view_if_needed()
    handle.focus()
    page.keyboard.press("ArrowRight")
    page.keyboard.press("ArrowRight")
    expect(handle).to_have_attribute("aria-valuenow", re.compile(r"^2(\.0+)?$"))
    expect(guinier.locator("text.mainheading").first).to_have_text(re.compile(r"\(frame 2\)$"))

    # ---- drag a Guinier range
    plot = guinier.locator(".saxsnb-guinier-figure-0 rect.plotarea_events")
    probe.drag(plot, 0.25, 0.5)
    expect(result).to_contain_text("q range (fixed)", timeout=30_000)

    # ---- click the overview map: another frame, the fixed range kept
    omap = page.locator(f"{OUT} .saxsnb-browser-figure-0 rect.plotarea_events").first
    omap.scroll_into_view_if_needed()
    box = omap.bounding_box()
    before = handle.get_attribute("aria-valuenow")
    page.mouse.click(box["x"] + 0.5 * box["width"], box["y"] + 0.3 * box["height"])
    expect(handle).not_to_have_attribute("aria-valuenow", before)
    frame = int(float(handle.get_attribute("aria-valuenow")))
    expect(guinier.locator("text.mainheading").first).to_have_text(re.compile(rf"\(frame {frame}\)$"))
    expect(result).to_contain_text("q range (fixed)")
    shown = RG_TEXT.search(result.inner_text()).group(0)

    # ---- export the panel's code and run it in a new cell
    guinier.get_by_role("button", name="Export code").click()
    area = guinier.locator("textarea").first
    expect(area).to_have_value(re.compile(r"read_series\("))
    code = area.input_value()
    assert "protein = saxsnb.read_series(" in code and f"frame=[{frame}]" in code, code
    probe.screenshot("first-session-exported", guinier)
    page.locator(".jp-Notebook .jp-Cell").last.click()
    page.keyboard.press("Escape")
    page.keyboard.press("b")  # a new code cell below the last one
    page.keyboard.press("Enter")
    show = 'print(f"Rg = {saxsnb.display.format_value(float(result.rg[0]), float(result.rg_sigma[0]))} nm")'
    page.keyboard.insert_text(code + show + "\n")
    cells = page.locator(".jp-Notebook .jp-CodeCell")
    mine = cells.nth(cells.count() - 1)  # Shift+Enter on the last cell adds another below it
    page.keyboard.press("Shift+Enter")
    printed = mine.locator(".jp-OutputArea-output")
    expect(printed).to_contain_text("Rg = ", timeout=60_000)
    assert printed.inner_text().strip() == shown, (printed.inner_text(), shown)

    # ---- save, reload: every panel drawn again, nothing wrong in the browser
    page.keyboard.press("Escape")
    page.keyboard.press("Control+s")
    expect(page.locator(".jp-mod-dirty")).to_have_count(0, timeout=30_000)
    page.reload()
    page.locator('.jp-Notebook-ExecutionIndicator[data-status="idle"]').wait_for(timeout=90_000)
    _wait_all_drawn(probe)
    expect(page.get_by_text("Loading widget")).to_have_count(0, timeout=30_000)
    probe.screenshot("first-session-after-reload", page.locator(f"{OUT} .saxsnb-guinier").first)
    probe.assert_clean()

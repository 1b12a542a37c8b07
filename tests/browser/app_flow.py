"""The user flow on the code-free flow-growth page, shared by the Voila and JupyterLab tests.

Figures are found by their titles (bqplot ``text.mainheading``), which the panels set:
the curve panel's title is the current frame ("position 0 mm (frame 0)"), the Guinier
panel's starts with "Guinier fit (compact)".
"""

from __future__ import annotations

import re
from pathlib import Path

from playwright.sync_api import expect

NOTEBOOK = Path(__file__).resolve().parents[2] / "notebooks" / "app-flow-growth.ipynb"

# "Rg = 2.032 ± 0.00049 nm" in the Guinier panel's result text.
RG_TEXT = re.compile(r"Rg = ([-\d.e+]+) ± ([-\d.e+]+) nm")
# "q range (fixed) = 0.1234 .. 0.5678 nm⁻¹, 23 points" in the same text.
RANGE_TEXT = re.compile(r"q range \((?:fixed|automatic)\) = ([-\d.e+]+) \.\. ([-\d.e+]+) nm⁻¹, (\d+) points")


def series_of_the_page():
    """The series the notebook shows, rebuilt the same way (its first code cell)."""
    import saxsnb.demo

    series, background = saxsnb.demo.make_series("flow-growth", seed=0)
    return series.saxs.subtract(background)


def check_rg_against_accessor(text: str, frame: int) -> dict:
    """The Rg the page shows is ``ds.saxs.guinier(q_range=<the range shown>)`` of the frame.

    The page prints the first and last fitted q points to 4 significant digits: each is
    taken as the nearest point of the q grid (the grid steps are far wider than the
    rounding), so the reference fit uses exactly the points the panel used.
    """
    import numpy as np

    m = RANGE_TEXT.search(text)
    assert m, f"no 'q range (...) = a .. b nm⁻¹, n points' in the Guinier result text: {text[:300]!r}"
    lo, hi, n_shown = float(m.group(1)), float(m.group(2)), int(m.group(3))
    ds = series_of_the_page()
    q = ds["q"].values
    q_lo, q_hi = (float(q[np.argmin(np.abs(q - v))]) for v in (lo, hi))
    assert f"{q_lo:.4g}" == m.group(1) and f"{q_hi:.4g}" == m.group(2), (lo, hi, q_lo, q_hi)
    ref = ds.isel(frame=[frame]).saxs.guinier(q_range=(q_lo, q_hi))
    rg, sigma = float(ref["rg"][0]), float(ref["rg_sigma"][0])
    shown = RG_TEXT.search(text)
    assert shown, text[:300]
    # the page and the accessor agree to the digits shown (the one number formatter)
    from saxsnb.display import format_value

    assert shown.group(0) == f"Rg = {format_value(rg, sigma)} nm", (shown.group(0), rg, sigma)
    assert n_shown == int(ref["n_points"][0]), (n_shown, int(ref["n_points"][0]))
    return {"q_range": (q_lo, q_hi), "rg": rg, "rg_sigma": sigma, "n_points": n_shown}


def figure(page, root: str, title: str | re.Pattern):
    """The bqplot figure (div.bqplot.figure) under ``root`` whose title matches."""
    heading = page.locator("text.mainheading", has_text=title)
    return page.locator(f"{root} div.bqplot.figure").filter(has=heading)


def paths_signature(locator) -> str:
    """A short hash of every drawn line path in a figure (paths are far too big to compare
    in messages)."""
    return locator.evaluate(
        """el => {
            let h = 0;
            for (const p of el.querySelectorAll('g.curve path.line')) {
                const d = p.getAttribute('d') || '';
                for (let i = 0; i < d.length; i++) h = (Math.imul(h, 31) + d.charCodeAt(i)) | 0;
                h = (Math.imul(h, 31) + 7) | 0;
            }
            return String(h);
        }"""
    )


def wait_signature_changes(probe, locator, old: str, what: str, timeout: float = 30_000) -> str:
    """Poll :func:`paths_signature` until it differs from ``old``."""
    step = 200
    for _ in range(int(timeout / step)):
        new = paths_signature(locator)
        if new != old:
            return new
        probe.page.wait_for_timeout(step)
    raise AssertionError(f"{what}: the plotted paths did not change within {timeout / 1000:.0f} s")


def rg_value(text_locator) -> tuple[float, float, str]:
    text = text_locator.inner_text()
    m = RG_TEXT.search(text)
    assert m, f"no 'Rg = value ± sigma nm' in the Guinier result text: {text[:200]!r}"
    return float(m.group(1)), float(m.group(2)), text


def run_flow(probe, root: str, shots: str) -> dict:
    """Step a frame with the keyboard and drag a Guinier range; return what was seen.

    ``root`` is the CSS scope of the page's outputs ("body" for Voila, the notebook's
    output area in JupyterLab); ``shots`` prefixes the screenshot names.
    """
    page = probe.page
    seen = {}
    # every figure of the dashboard has drawn its lines (browser map has none)
    curve_fig = figure(page, root, re.compile(r"^position 0 mm \(frame 0\)$"))
    guinier_fig = figure(page, root, re.compile(r"^Guinier fit \(compact\)"))
    expect(curve_fig).to_have_count(1, timeout=90_000)
    expect(guinier_fig).to_have_count(1)
    probe.wait_for_lines(6, root=root)
    line = curve_fig.locator("g.curve path.line").last
    expect(line).to_have_attribute("d", re.compile(r"^M[-\d.e]+,"))
    fit_path = guinier_fig.locator("g.curve path.line").last  # the fit line is the last Lines mark
    expect(fit_path).to_have_attribute("d", re.compile(r"^M[-\d.e]+,"))
    result = page.locator(f"{root} .widget-html", has_text=RG_TEXT)
    expect(result).to_have_count(1)
    rg0, s0, text0 = rg_value(result)
    seen["rg_frame0"] = (rg0, s0)
    assert "nm⁻¹" in text0 and "1/nm" not in text0 and "q range (automatic)" in text0, text0

    # ---- step the frame with the keyboard
    frame_label = page.locator("label.widget-label", has_text=re.compile(r"^frame$"))
    slider = page.locator(f"{root} .widget-slider", has=frame_label)
    handle = slider.locator(".noUi-handle[role=slider]")
    expect(handle).to_have_attribute("aria-valuenow", re.compile(r"^0(\.0+)?$"))
    curve_sig0 = paths_signature(curve_fig)
    guinier_sig0 = paths_signature(guinier_fig)
    handle.focus()
    page.keyboard.press("ArrowRight")
    expect(handle).to_have_attribute("aria-valuenow", re.compile(r"^1(\.0+)?$"))
    curve_fig1 = figure(page, root, re.compile(r"^position 2 mm \(frame 1\)$"))
    expect(curve_fig1).to_have_count(1)  # the curve panel's title follows the frame
    wait_signature_changes(probe, curve_fig1, curve_sig0, "curve after ArrowRight")
    wait_signature_changes(probe, guinier_fig, guinier_sig0, "Guinier plot after ArrowRight")
    expect(guinier_fig.locator("text.mainheading")).to_have_text(re.compile(r"\(frame 1\)$"))
    expect(page.locator(f"{root} .widget-html", has_text="position 2 mm (frame 1)").first).to_be_visible()
    rg1, s1, _ = rg_value(result)
    seen["rg_frame1"] = (rg1, s1)
    probe.screenshot(f"{shots}-after-step", page.locator(root).first)

    # ---- drag a Guinier range across the linearised plot
    fit_d0 = fit_path.get_attribute("d")
    plot = guinier_fig.locator("rect.plotarea_events")
    probe.drag(plot, 0.30, 0.55)
    expect(result).to_contain_text("q range (fixed)", timeout=30_000)
    probe.wait_attr_changes(fit_path, "d", fit_d0)
    rg2, s2, text2 = rg_value(result)
    seen["rg_dragged"] = (rg2, s2)
    seen["result_text"] = text2
    assert rg2 != rg1, f"Rg text unchanged after the drag: {text2[:200]!r}"
    # ... and it is the accessor's fit over the range the page shows (frame 1)
    seen["reference"] = check_rg_against_accessor(text2, frame=1)
    check_validity_colour(result)
    panel = guinier_fig.locator("xpath=ancestor::div[contains(@class,'widget-vbox')][1]")
    probe.screenshot(f"{shots}-guinier-after-drag", panel)
    return seen


# Colours of the q_max Rg line (saxsnb.widgets.palette, Okabe & Ito 2008): bluish green
# inside the limit for elongated particles (0.8), orange up to the compact limit (1.3),
# vermillion past it.
VALIDITY_COLOURS = [(0.8, "rgb(0, 158, 115)"), (1.3, "rgb(230, 159, 0)"), (float("inf"), "rgb(213, 94, 0)")]


def check_validity_colour(result) -> None:
    """The q_max Rg line has the colour its value calls for."""
    line = result.locator("span", has_text=re.compile(r"q_max Rg = "))
    m = re.search(r"q_max Rg = ([-\d.e+]+)", line.inner_text())
    assert m, line.inner_text()
    qrg = float(m.group(1))
    colour = next(c for limit, c in VALIDITY_COLOURS if qrg <= limit)
    expect(line).to_have_css("color", colour)


def click_map_row(probe, root: str, fraction: float = 0.5) -> int:
    """Click the overview map at ``fraction`` of its height (from the top); return the
    frame the slider moved to (checked against the curve panel's title)."""
    page = probe.page
    omap = figure(page, root, re.compile(r"^log(10|₁₀) intensity over the series"))
    area = omap.locator("rect.plotarea_events")
    area.scroll_into_view_if_needed()
    box = area.bounding_box()
    assert box is not None
    handle = page.locator(f"{root} .widget-slider .noUi-handle[role=slider]").first
    before = handle.get_attribute("aria-valuenow")
    page.mouse.click(box["x"] + 0.5 * box["width"], box["y"] + fraction * box["height"])
    expect(handle).not_to_have_attribute("aria-valuenow", before)
    frame = int(float(handle.get_attribute("aria-valuenow")))
    expect(figure(page, root, re.compile(rf"^position [\d.]+ mm \(frame {frame}\)$"))).to_have_count(1)
    return frame

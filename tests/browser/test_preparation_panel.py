"""The preparation panel alone in Voila, in headless Chromium: its figures draw without
the console error ``translate(0,NaN)`` (a log y axis without a fixed domain laid its ticks
at NaN at first draw, in every page load measured)."""

import nbformat
import pytest

CELL = """\
from saxsnb.demo.preparation import preparation_series
from saxsnb.widgets import PreparationPanel

s = preparation_series(seed=3)
PreparationPanel(s["sample"], s["buffer"].saxs.average(exclude=None))
"""


@pytest.mark.browser
def test_preparation_panel_draws_without_nan(servers, probe, tmp_path):
    nb_path = tmp_path / "nb" / "preparation.ipynb"
    nb_path.parent.mkdir()
    nb = nbformat.v4.new_notebook()
    nb.cells = [nbformat.v4.new_markdown_cell("# preparation panel"), nbformat.v4.new_code_cell(CELL)]
    nb.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3", "language": "python"}
    nbformat.write(nb, nb_path)
    server = servers.voila(nb_path)
    page = probe.page
    nan = []
    page.on("console", lambda m: nan.append(m.text) if "NaN" in m.text else None)
    # one load: before the fix every load measured showed the error (18 times); reloading the
    # page would only add Voila's refused shutdown calls of the kernels left behind
    page.goto(f"{server.url}/?token={server.token}", timeout=120_000)
    page.wait_for_selector(".heatmaprow", timeout=90_000)  # the similarity map drawn
    page.wait_for_timeout(2000)
    assert nan == []
    probe.screenshot("preparation")
    probe.assert_clean()

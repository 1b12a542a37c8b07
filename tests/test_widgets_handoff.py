"""The hand-off from the panels (issue 11): exported code that starts from the files and
rebuilds each panel's exact result under the user's own variable names, the results
tables, and the default panels chosen from what the series holds."""

import base64
import re

import numpy as np
import pandas as pd
import pytest
import xarray as xr

import saxsnb
from saxsnb.errors import SaxsInputError
from saxsnb.widgets import (
    CurvePanel,
    DistancePanel,
    KratkyPanel,
    LinearFitPanel,
    PeaksPanel,
    PreparationPanel,
    SeriesBrowser,
    explore,
)
from saxsnb.widgets.dashboard import BRAGG_PANELS, PARTICLE_PANELS, choose_panels


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    d = tmp_path_factory.mktemp("files")
    saxsnb.demo.write_demo(d, names=["flow-growth", "phase-ramp"])
    return d


@pytest.fixture(scope="module")
def flow(folder):
    raw = saxsnb.read_series(str(folder / "flow-growth"), scan="position")
    buffer = saxsnb.read_series(str(folder / "flow-growth" / "background"), scan="position")
    return raw, buffer


def _rerun(code):
    ns = {}  # a fresh namespace: nothing but what the code makes from the files
    exec(code, ns)
    return ns


def _same(code, result, target="result"):
    xr.testing.assert_identical(_rerun(code)[target], result)


def test_each_panel_exports_code_from_the_files_that_rebuilds_its_result(flow, folder):
    raw, buffer = flow
    growth = raw.saxs.subtract(buffer)
    panels = [
        SeriesBrowser(growth, frame=4),
        CurvePanel(growth, buffer, frame=2, overlay=[0, 9]),
        LinearFitPanel(growth, frame=6, q_range=(0.05, 0.2)),
        LinearFitPanel(growth, kind="rod", frame=3),
        LinearFitPanel(growth, kind="sheet", frame=3),
        LinearFitPanel(growth, kind="porod", frame=5),
        KratkyPanel(growth, frame=7),
        PreparationPanel(raw, buffer, frame=1, scale=0.98),
        DistancePanel(growth, frame=2),
    ]
    for p in panels:
        code = p.to_code()
        first = code.splitlines()[1]
        # the user's own variable: found in this test's locals by identity
        expected = "raw" if isinstance(p, PreparationPanel) else "growth"
        assert first.startswith(f"{expected} = saxsnb.read_series("), (p.name, first)
        _same(code, p.result)
    prep = panels[7]
    assert "raw.saxs.subtract(buffer, scale=0.98)" in prep.code
    g = panels[2]
    g.apply_to_all = True
    _same(g.to_code(), g.result)
    # the code of the result, also in the panel's text area ("Export code")
    assert g.show_code() == g.code_area.value == g.to_code()


def test_peaks_panel_code_with_an_override_rebuilds_the_result(folder):
    ramp = saxsnb.read_series(str(folder / "phase-ramp"), scan="temperature")
    p = PeaksPanel(ramp, frame=3)
    p.override(3, "lamellar", 6.0)
    code = p.to_code()
    assert code.splitlines()[1].startswith("ramp = saxsnb.read_series(")
    _same(code, p.result)


def test_dashboard_code_rebuilds_every_panel(flow):
    raw, buffer = flow
    growth = raw.saxs.subtract(buffer)
    names = ("browser", "curve", "guinier", "rod", "sheet", "porod", "kratky", "peaks", "distance",
             "preparation")
    dash = explore(growth, buffer, panels=names)
    dash.frame = 11
    dash.panels["guinier"].q_range = (0.06, 0.25)
    dash.panels["curve"].overlay = [1, 30]
    dash.panels["preparation"].scale = 1.01
    code = dash.to_code()
    assert code.count("saxsnb.read_series(") == 2  # the series and its background, once each
    assert "buffer = background" in code  # the user's background is the one the recipe read
    ns = _rerun(code)
    for name, p in dash.panels.items():
        xr.testing.assert_identical(ns[name], p.result)
    assert dash.show_code() == dash.code_area.value


def test_variable_names_given_or_found(flow):
    raw, buffer = flow
    ramp = raw
    board = explore(ramp, panels=("browser",))
    assert board.model.name == "raw"  # the first of the names holding it
    assert "ramp" in explore(ramp, panels=("browser",), name="ramp").to_code()
    p = SeriesBrowser(raw, series_name="sample")
    assert p.to_code().splitlines()[1].startswith("sample = saxsnb.read_series(")
    assert "other = saxsnb.read_series(" in p.to_code(name="other")
    with pytest.raises(SaxsInputError, match="variable name"):
        explore(raw, panels=("browser",), name="not a name")
    # no variable at all: the default name, still from the files
    code = SeriesBrowser(raw.copy()).to_code()
    assert code.splitlines()[1].startswith("ds = saxsnb.read_series(")
    _same(code, raw.isel(frame=[0]))


def test_series_made_in_memory_keeps_the_ds_convention():
    q = np.linspace(0.05, 2.0, 60)
    mine = saxsnb.from_arrays(q, np.exp(-np.outer([2.0, 2.5], q) ** 2 / 3), np.full((2, q.size), 0.01))
    p = LinearFitPanel(mine, frame=1)
    code = p.to_code()
    assert "made in memory" in code.splitlines()[1]
    ns = {"ds": mine}
    exec(code, ns)
    xr.testing.assert_identical(ns["result"], p.result)


def test_results_tables_one_file_per_panel_round_trip(flow, tmp_path):
    raw, buffer = flow
    growth = raw.saxs.subtract(buffer)
    dash = explore(growth, panels=("browser", "guinier", "kratky"))
    dash.panels["guinier"].q_range = (0.06, 0.25)
    dash.table_folder = str(tmp_path)
    dash.table_button.click()
    paths = sorted(tmp_path.glob("*.csv"))
    assert [p.name for p in paths] == ["saxsnb-growth-guinier.csv", "saxsnb-growth-kratky.csv"]
    n = growth.sizes["frame"]
    for path in paths:
        df = pd.read_csv(path, index_col="frame")
        assert len(df) == n and df.columns[0] == "position [mm]"
    g = pd.read_csv(tmp_path / "saxsnb-growth-guinier.csv", index_col="frame")
    want = growth.saxs.guinier(q_range=(0.06, 0.25))
    np.testing.assert_allclose(g["rg [nm]"].to_numpy(), want["rg"].values, rtol=1e-12)
    assert "written to" in dash.status_line.value
    # the download links carry the same bytes (data: URIs work on a code-free page)
    links = re.findall(r'download="([^"]+)" href="data:text/csv;base64,([^"]+)"', dash.download.value)
    assert [name for name, _ in links] == [p.name for p in paths]
    assert base64.b64decode(links[0][1]) == paths[0].read_bytes()


def test_default_panels_follow_what_the_series_holds(flow, folder):
    raw, buffer = flow
    growth = raw.saxs.subtract(buffer)
    ramp = saxsnb.read_series(str(folder / "phase-ramp"), scan="temperature")
    panels, why = choose_panels(ramp)
    assert panels == BRAGG_PANELS and "Bragg peaks indexed in 5 of 5" in why
    d = explore(growth)
    assert tuple(d.panels.keys()) == PARTICLE_PANELS
    assert "No Bragg peaks" in d.reason and d.reason in d.reason_line.value
    # the user can still ask for any panel, including the other straight-line fits
    d = explore(growth, panels=("porod", "rod", "sheet", "peaks"))
    assert [p.kind for p in list(d.panels)[:3]] == ["porod", "rod", "sheet"] and d.reason == ""

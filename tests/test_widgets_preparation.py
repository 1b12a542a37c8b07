"""The preparation panel: traits give the accessor's results; code and clicks work."""

import ipywidgets as widgets
import numpy as np
import pytest
import xarray as xr

import saxsnb
from saxsnb.demo.preparation import TRUTH, preparation_series
from saxsnb.errors import SaxsInputError
from saxsnb.widgets import PreparationPanel, explore


@pytest.fixture(scope="module")
def prep():
    s = preparation_series(seed=3)
    return s["sample"], s["buffer"].saxs.average(exclude=None)


def test_scale_traits_give_the_direct_calls(prep):
    ds, bg = prep
    p = PreparationPanel(ds, bg)
    assert p.scale is None and p.auto_box.value
    xr.testing.assert_identical(p.result, ds.saxs.subtract(bg, scale="auto"))
    p.scale = 0.98
    assert not p.auto_box.value and p.scale_box.value == 0.98
    xr.testing.assert_identical(p.result, ds.saxs.subtract(bg, scale=0.98))
    # the controls, as a user in the browser would
    p.scale_box.value = 1.02
    xr.testing.assert_identical(p.result, ds.saxs.subtract(bg, scale=1.02))
    p.auto_box.value = True
    assert p.scale is None
    xr.testing.assert_identical(p.result, ds.saxs.subtract(bg, scale="auto"))
    # the drawn background is what was subtracted: sample - subtracted (common practice)
    np.testing.assert_allclose(p.background_line.y, ds.intensity.values[0] - p.result.intensity.values[0])


def test_exported_code_reproduces_the_result(prep):
    ds, bg = prep
    p = PreparationPanel(ds, bg, scale=0.99)
    for scale in (0.99, None):
        p.scale = scale
        ns = {"ds": ds, "background": bg}
        exec(p.to_code(), ns)
        xr.testing.assert_identical(ns["result"], p.result)


def test_map_click_moves_the_frame_and_state_stays_serialisable(prep):
    ds, bg = prep
    p = PreparationPanel(ds, bg)
    # what the page sends on a click: a list of [row, column] pairs
    p.cells.set_state({"selected": [[6, 2]]})
    assert p.frame == 6 and p.cells.selected is None
    p._on_cell_click(p.cells, {"data": {"row": 4, "column": 1}})
    assert p.frame == 4
    widgets.Widget.get_manager_state(widgets=[p])
    # the map is -log10 of compare_frames' pairwise p-values (numpy as the reference)
    sim = ds.saxs.compare_frames(test="cormap", pairwise=True)
    pv = np.clip(np.nan_to_num(sim.pairwise_p_value.values, nan=1.0), 1e-12, 1.0)
    np.testing.assert_allclose(p.cells.color, -np.log10(pv))


def test_flags_are_the_damaged_frames(prep):
    ds, bg = prep
    p = PreparationPanel(ds, bg)
    # demo truth (saxsnb.demo.preparation): the last frames carry the low-q excess
    assert p.flagged_frames.tolist() == TRUTH["damaged_frames"]
    assert "flagged" in p.flag_table.value
    p.frame = TRUTH["damaged_frames"][0]
    assert "flagged" in p.status


def test_explore_adds_the_panel_with_a_background(prep):
    ds, bg = prep
    dash = explore(ds, bg, panels=("browser", "preparation"))
    assert list(dash.panels.keys()) == ["browser", "preparation"]
    dash.panels["preparation"].cells.set_state({"selected": [[3, 3]]})
    assert dash.frame == 3 and dash.panels["browser"].frame == 3
    with pytest.raises(SaxsInputError, match="background"):
        explore(ds, panels=("preparation",))
    ns = {"ds": ds, "background": bg, "saxsnb": saxsnb}
    exec(dash.to_code(), ns)
    xr.testing.assert_identical(ns["preparation"], dash.panels["preparation"].result)


def test_long_series_map_is_shown_in_blocks():
    from saxsnb.display.plots import similarity_map
    from saxsnb.widgets.preparation import MAP_CELLS

    rng = np.random.default_rng(1234)
    q = np.linspace(0.1, 3.0, 60)
    n = 450
    I = np.exp(-q**2) + 0.01 * rng.normal(size=(n, q.size))
    I[300:] += 0.05 * np.exp(-(q / 0.5) ** 2)  # a change from frame 300 on
    ds = saxsnb.from_arrays(q, I, np.full_like(I, 0.01))
    bg = saxsnb.from_arrays(q, np.zeros(q.size), np.full(q.size, 0.01))
    p = PreparationPanel(ds, bg)
    full = PreparationPanel._map_values(p.similarity())
    m = similarity_map(full, max_cells=MAP_CELLS)
    assert p.cells.color.shape == (150, 150) and max(p.cells.color.shape) <= MAP_CELLS  # blocks of 3
    # each block shows its most dissimilar pair
    assert p.cells.color[0, 149] == full[0:3, 447:450].max()
    np.testing.assert_array_equal(p.cells.color, m["values"])
    assert p.cells.row.tolist() == (np.arange(0, n + 1, 3) - 0.5).tolist()
    p.select_cell(101)  # map row 101 = frames 303..305: the first becomes current
    assert p.frame == 303
    p.cells.set_state({"selected": [[10, 2]]})
    assert p.frame == 30

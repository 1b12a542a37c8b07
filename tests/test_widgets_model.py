"""The model under the panels: one series, results computed once, state in traits."""

import functools
import html
from collections import Counter

import ipywidgets as widgets
import numpy as np
import pytest
import traitlets
import xarray as xr

import saxsnb
import saxsnb.accessor.linear
import saxsnb.accessor.phases
from saxsnb.display import format_value, pretty_unit
from saxsnb.display.report import frame_lines
from saxsnb.errors import SaxsInputError
from saxsnb.widgets import KratkyPanel, LinearFitPanel, SeriesBrowser, SeriesModel


@pytest.fixture(scope="module")
def particles():
    """The unfolding demo (a Guinier region in every frame), background subtracted."""
    series, background = saxsnb.demo.make_series("unfolding", seed=0)
    return series.saxs.subtract(background)


@pytest.fixture
def masked(rng):
    q = np.linspace(0.05, 2.0, 150)
    rg = np.linspace(2.0, 4.0, 8)
    I = 80 * np.exp(-((q[None, :] * rg[:, None]) ** 2) / 3) + 0.2  # Guinier form (Guinier 1939)
    S = 0.01 * I
    ds = saxsnb.from_arrays(q, I + rng.normal(0, 1, I.shape) * S, S)
    ds["mask"] = (("frame", "q"), rng.random(I.shape) < 0.05)
    return ds


def _count_whole_series_calls(monkeypatch, n_frames):
    """Wrap the accessor's whole-series analyses with counters of calls on all frames."""
    counts = Counter()
    for cls, names in (
        (saxsnb.accessor.linear.LinearMethods, ("guinier", "porod", "kratky_summary")),
        (saxsnb.accessor.phases.PhaseMethods, ("find_peaks", "index_phases", "phase_map")),
    ):
        for name in names:
            original = getattr(cls, name)

            @functools.wraps(original)
            def counting(self, *args, _original=original, _name=name, **kwargs):
                if self._ds.sizes["frame"] == n_frames:
                    counts[_name] += 1
                return _original(self, *args, **kwargs)

            monkeypatch.setattr(cls, name, counting)
    return counts


def test_explore_computes_each_whole_series_analysis_once(monkeypatch, particles):
    counts = _count_whole_series_calls(monkeypatch, particles.sizes["frame"])
    # every default panel named (a particle series alone would leave the peaks panel out)
    d = saxsnb.explore(particles, panels=("browser", "curve", "guinier", "kratky", "peaks"))
    k = d.panels["kratky"]
    assert k.normalize == "rg"  # the dimensionless plot uses the automatic Guinier fit too
    # before the shared model: 3 automatic Guinier fits (Guinier panel, Kratky panel,
    # Kratky summary); now one for the whole dashboard, and one peak search / indexing
    assert counts == Counter(guinier=1, kratky_summary=1, find_peaks=1, index_phases=1, phase_map=1)
    for f in (3, 17, 40):
        d.frame = f
    k.normalize = None
    k.normalize = "rg"
    assert counts["guinier"] == 1 and counts["find_peaks"] == 1 and counts["index_phases"] == 1
    g = d.panels["guinier"]
    g.q_range = (0.1, 0.5)  # a new range: the whole series is fitted once with it
    g.frame = 5
    g.apply_to_all = True
    g.q_range = (0.1, 0.5)
    assert counts["guinier"] == 2
    d.panels["peaks"].override(3, "lamellar", 10.0)  # a new set of overrides: indexed once more
    d.frame = 4
    assert counts["index_phases"] == 2 and counts["find_peaks"] == 1
    # the shared results are the accessor's
    xr.testing.assert_identical(d.model.result("guinier"), particles.saxs.guinier())


def test_panels_share_one_model(particles):
    d = saxsnb.explore(particles, panels=("browser", "curve", "guinier", "kratky"))
    assert all(p.model is d.model for p in d.panels.values())
    d.panels["curve"].frame = 7
    assert d.model.frame == 7 and d.frame == 7 and all(p.frame == 7 for p in d.panels.values())
    # a panel added later on the same model starts at its frame and moves with it
    extra = LinearFitPanel(d.model, kind="rod")
    assert extra.frame == 7
    d.frame = 2
    assert extra.frame == 2
    # a panel made alone has a model of its own
    alone = LinearFitPanel(particles, frame=4)
    assert alone.model is not d.model and alone.frame == 4 and d.frame == 2
    with pytest.raises(traitlets.TraitError):
        d.model.frame = particles.sizes["frame"]


def test_model_caches_results_by_parameters(particles):
    m = SeriesModel(particles, max_results=3)
    auto = m.result("guinier")
    assert m.result("guinier", q_range=None, shape="compact", errors="ignore") is auto
    xr.testing.assert_identical(auto, particles.saxs.guinier())
    fixed = m.result("guinier", q_range=(0.1, 0.4))
    assert fixed is not auto and m.result("guinier", q_range=[0.1, 0.4]) is fixed
    xr.testing.assert_identical(fixed, particles.saxs.guinier(q_range=(0.1, 0.4)))
    # inputs come from the cache and give the accessor's own answer
    xr.testing.assert_identical(m.result("kratky_summary"), particles.saxs.kratky_summary())
    pk = m.result("find_peaks")
    xr.testing.assert_identical(m.result("index_phases"), particles.saxs.index_phases(pk))
    # the oldest non-automatic results go first; the automatic ones stay
    for hi in (0.5, 0.6, 0.7):
        m.result("guinier", q_range=(0.1, hi))
    assert m.cached("guinier") and not m.cached("guinier", q_range=(0.1, 0.4))
    with pytest.raises(SaxsInputError):
        m.result("no_such_analysis")
    with pytest.raises(SaxsInputError):
        m.result("porod", bad=1)  # porod takes no such option


def test_masked_rows_are_the_accessors_and_no_panel_keeps_a_copy(masked):
    m = SeriesModel(masked)
    I, S = masked.saxs.masked()
    for i in (0, 5):
        rI, rS = m.rows(i)
        np.testing.assert_array_equal(rI, I.values[i])  # NaN where masked, as the accessor
        np.testing.assert_array_equal(rS, S.values[i])
    np.testing.assert_array_equal(m.masked()[0], I.values)
    assert not m.rows(0)[0].flags.writeable or m.rows(0)[0].base is None
    # without a mask the rows are read-only views of the series itself (no copy)
    plain = SeriesModel(masked.drop_vars("mask"))
    row = plain.rows(3)[0]
    assert np.shares_memory(row, masked.intensity.values) and not row.flags.writeable
    assert masked.intensity.values.flags.writeable  # the series' own array is untouched
    # no panel of the dashboard holds an array the size of the series
    d = saxsnb.explore(masked, panels=("browser", "curve", "guinier", "kratky"))
    shape = masked.intensity.shape
    for p in [d.model, *d.panels.values()]:
        big = [k for k, v in vars(p).items() if isinstance(v, np.ndarray) and v.shape == shape]
        assert big in ([], ["_intensity", "_sigma", "_mask"]), (type(p).__name__, big)
        if big:
            assert all(np.shares_memory(getattr(p, k), masked[n].values)
                       for k, n in zip(big, ("intensity", "sigma", "mask")))


def test_result_trait_notifies_on_every_new_result(particles):
    p = LinearFitPanel(particles)
    seen = []
    p.observe(lambda change: seen.append((change["old"], change["new"])), "result")
    first = p.result
    p.frame = 3
    p.frame = 4
    p.q_range = (0.1, 0.4)
    assert len(seen) == 3 and seen[0][0] is first and seen[-1][1] is p.result
    p.set_trait("result", p.result)  # the same object: no notification
    assert len(seen) == 3
    with pytest.raises(traitlets.TraitError):
        p.set_trait("result", 1.0)
    with pytest.raises(traitlets.TraitError):
        p.result = first  # read only from outside


def test_last_error_is_a_trait(particles):
    p = LinearFitPanel(particles)
    assert "last_error" in p.trait_names() and p.last_error is None
    errors = []
    p.observe(lambda change: errors.append(change["new"]), "last_error")
    p.q_range = (0.3, 0.3)  # rejected by the accessor: q_min must be below q_max
    assert isinstance(p.last_error, SaxsInputError) and errors == [p.last_error]


def test_map_row_selection_from_the_browser_stays_serialisable(particles):
    b = SeriesBrowser(particles)
    # what the page sends on a click: a list of [row, column] pairs, which bqplot turns
    # into an object-typed array that it cannot serialise again
    b.rows.set_state({"selected": [[5, 0]]})
    assert b.frame == int(b._row_frames[5])
    assert b.rows.selected is None  # no outline left on the clicked row
    b.rows.get_state()  # serialisable (a second view or a reload of the page sends it)
    widgets.Widget.get_manager_state(widgets=[b])


def test_linear_panel_text_says_what_the_report_says(particles):
    p = LinearFitPanel(particles, frame=6)
    shown = html.unescape(p.result_text.value).replace("±", "+-")
    report = p.result.saxs.report(frame=0)
    for line in frame_lines(p.result, 0):
        name, _, value = line.partition(" = ")
        assert line in report
        if name != "qrg_max":  # shown with its validity colour instead
            assert pretty_unit(value) in shown, (line, shown)  # units in print form (nm⁻¹, cm⁻¹)
    assert "1/nm" not in shown and "1/cm" not in shown
    assert "Rg</b> = " in p.result_text.value and "q_max Rg = " in shown
    rg, sigma = float(p.result.rg[0]), float(p.result.rg_sigma[0])
    assert f"{format_value(rg, sigma, pm=' +- ')} nm" in shown  # the one number formatter


def test_kratky_frame_result_uses_the_shared_guinier_fit(particles):
    k = KratkyPanel(particles, frame=9)
    direct = particles.isel(frame=[9]).saxs.kratky(normalize="rg").to_dataset(name="kratky")
    xr.testing.assert_identical(k.result, direct)
    assert isinstance(k.summary, xr.Dataset) and "summary" in k.trait_names()


def test_exported_code_cannot_be_injected_from_metadata():
    # issue 12, item 7: a scan unit from a file with a line break and code in it
    import numpy as np

    import saxsnb
    from saxsnb.widgets import CurvePanel, LinearFitPanel

    q = np.linspace(0.05, 2.0, 80)
    I = np.exp(-np.outer([2.0, 2.2], q) ** 2 / 3) + 0.01
    ds = saxsnb.from_arrays(q, I, 0.01 * I, scan={"temperature": [20.0, 21.0]})
    ds["temperature"].attrs["units"] = "degC\nraise SystemExit('injected')"
    for panel in (LinearFitPanel(ds), CurvePanel(ds)):
        code = panel.to_code()
        assert "\nraise SystemExit" not in code
        exec(code, {"ds": ds})  # runs, and the injected line is only a comment

"""The panels on a dask-chunked series and with whole-series results in the background.

The lazy series must never be computed whole: a guard on ``dask.array.core.finalize``
(the step that joins computed chunks into the array a compute returns) fails any
compute that returns a (frame, q) array of the series' full shape, and a dask callback
fails any task whose output has that shape. Equality checks compare with the same
panels on the in-memory series (the accessor's results; batch equals loop).
"""

import dask
import dask.array as da
import numpy as np
import pytest
import xarray as xr
from dask.callbacks import Callback

import saxsnb
from saxsnb.demo import make_series
from saxsnb.errors import SaxsInputError
from saxsnb.widgets import SeriesModel
from saxsnb.widgets.dashboard import DEFAULT_PANELS
from saxsnb.widgets.model import ROW_BLOCK, is_lazy


@pytest.fixture(scope="module")
def ramp():
    ds, bg = make_series("phase-ramp", temperature=np.linspace(20.0, 90.0, 60))
    ds = ds.saxs.subtract(bg)
    ds["mask"] = (("frame", "q"), np.random.default_rng(7).random(ds["intensity"].shape) < 0.02)
    return ds


@pytest.fixture
def never_whole(ramp, never_whole):
    """Fail every compute that returns, and every task that makes, a whole (frame, q) array
    (the guard of tests/conftest.py, armed for the ramp's shape)."""
    shape = tuple(ramp["intensity"].shape)
    with never_whole(shape):
        yield shape


def test_guard_catches_values(ramp, never_whole):
    lazy = ramp.chunk({"frame": 16})
    with pytest.raises(AssertionError, match="whole"):
        _ = lazy["intensity"].values  # what the panels must never do
    with pytest.raises(AssertionError, match="whole"):
        np.asarray(lazy["sigma"].data.rechunk({0: -1}))  # a single task making it whole


def test_explore_lazy_never_loads_the_whole_series(ramp, never_whole):
    lazy = ramp.chunk({"frame": 16})
    dash = saxsnb.explore(lazy, panels=DEFAULT_PANELS)
    assert dash.model.lazy and dash.model.deferred
    for f in (3, 40, 41):
        dash.frame = f
    dash.wait()
    assert dash.model.busy == ""
    with pytest.raises(SaxsInputError, match="dask-backed"):
        dash.model.masked()
    # the same numbers as the panels on the in-memory series (accessor results)
    mem = saxsnb.explore(ramp, panels=DEFAULT_PANELS, frame=41)
    for name in ("browser", "curve", "guinier", "kratky"):
        xr.testing.assert_allclose(dash.panels[name].result.compute(), mem.panels[name].result.compute())
    xr.testing.assert_identical(dash.panels["browser"].result, ramp.isel(frame=[41]))
    for name in ("guinier", "peaks"):
        xr.testing.assert_allclose(dash.panels[name].table_result(), mem.panels[name].table_result())
    np.testing.assert_allclose(dash.model.overview()["log10_intensity"],
                               mem.model.overview()["log10_intensity"], rtol=1e-12)
    assert dash.model.positive_range() == pytest.approx(mem.model.positive_range(), rel=1e-12)


def test_lazy_rows_fetch_only_the_frames_asked(ramp):
    lazy = ramp.chunk({"frame": 16})
    model = SeriesModel(lazy)
    tasks = []

    class Count(Callback):
        def _posttask(self, key, result, dsk, state, id):
            tasks.append(getattr(result, "shape", None))

    with Count():
        I, S = model.rows(5)
        model.rows(5)  # cached: nothing computed again
    # the block of ROW_BLOCK frames around frame 5 at most, never the series (60 frames)
    assert tasks and all(s is None or len(s) < 2 or s[0] <= ROW_BLOCK < 60 for s in tasks)
    I0, S0 = SeriesModel(ramp).rows(5)
    np.testing.assert_array_equal(I, I0)
    np.testing.assert_array_equal(S, S0)


def test_deferred_in_memory_results_arrive_and_equal_the_direct_ones(ramp):
    dash = saxsnb.explore(ramp, panels=DEFAULT_PANELS, wait=False, frame=10)
    g = dash.panels["guinier"]
    # the current frame is drawn at once from a fit of that frame alone
    assert g.result is not None and g.result.sizes["frame"] == 1
    dash.wait()
    assert dash.model.busy == "" and dash.progress_line.value == ""
    direct = ramp.saxs.guinier()
    xr.testing.assert_identical(g.result, direct.isel(frame=[10]))
    np.testing.assert_array_equal(g.trend.y, direct["rg"].values[np.isfinite(direct["rg"].values)])
    peaks = dash.panels["peaks"]
    xr.testing.assert_identical(peaks.result, ramp.saxs.index_phases(ramp.saxs.find_peaks()))
    k = dash.panels["kratky"]
    xr.testing.assert_identical(k.summary, ramp.saxs.kratky_summary(guinier=direct))


def test_busy_line_while_background_work_runs(ramp):
    gate = __import__("threading").Event()
    model = SeriesModel(ramp)
    model.deferred = True
    seen = []
    original = model.result

    def slow(analysis, /, **params):
        gate.wait(10)
        return original(analysis, **params)

    model.result = slow
    assert not model.when_ready("guinier", lambda r, e: seen.append((r, e)))
    assert "guinier" in model.busy
    gate.set()
    model.wait(30)
    assert model.busy == "" and len(seen) == 1 and seen[0][1] is None
    xr.testing.assert_identical(seen[0][0], ramp.saxs.guinier())


def test_background_error_reaches_the_callback(ramp):
    model = SeriesModel(ramp)
    model.deferred = True
    got = []
    model.when_ready("guinier", lambda r, e: got.append(e), q_range=(5.0, 4.0, 3.0))
    model.wait(30)
    assert len(got) == 1 and got[0] is not None


def test_dask_random_series_opens(never_whole):
    """A series made by dask.array.random (never held in memory) opens and steps."""
    n, m = 40, 200
    q = np.linspace(0.05, 3.0, m)
    rs = da.random.default_rng(3)
    intensity = 1.0 + 0.01 * rs.standard_normal((n, m), chunks=(8, m)) + da.from_array(1.0 / q)[None, :]
    ds = saxsnb.from_arrays(q, np.ones((n, m)), np.ones((n, m)))
    ds = ds.assign(intensity=(("frame", "q"), intensity, ds["intensity"].attrs),
                   sigma=(("frame", "q"), 0.01 * da.ones((n, m), chunks=(8, m)), ds["sigma"].attrs))
    with dask.config.set(scheduler="sync"):
        dash = saxsnb.explore(ds, panels=("browser", "curve", "guinier"))
        dash.frame = 7
        dash.wait()
    assert dash.panels["curve"].result.sizes["frame"] == 1


def test_peaks_on_every_kth_frame_of_a_big_deferred_series(ramp, monkeypatch):
    """A deferred model of more than PEAK_FRAMES frames finds the peaks of every k-th
    frame: the panel's result is the accessor's on those frames (its exported code gives
    it again), a frame between shows the nearest analysed one, and the button analyses
    every frame (the accessor's result on the whole series)."""
    import saxsnb.widgets.peaks as peaks_mod

    monkeypatch.setattr(peaks_mod, "PEAK_FRAMES", 25)  # 60 frames -> every 3rd
    dash = saxsnb.explore(ramp, panels=("browser", "peaks"), wait=False, frame=4)
    p = dash.panels["peaks"]
    assert p.every == 3 and "one frame in 3" in p.every_note.value
    dash.wait()
    thin = ramp.isel(frame=slice(None, None, 3))
    direct = thin.saxs.index_phases(thin.saxs.find_peaks())
    xr.testing.assert_identical(p.result, direct)
    assert p.analysed_frame() == 3 and "nearest analysed frame" in p.table.value
    xr.testing.assert_identical(_run_steps(p.to_code("out"), ramp), direct)
    assert any("one frame in 3" in k for k in dash.model.timings)
    p.override(7, "lamellar")  # frame 7 -> the nearest analysed frame, 6
    assert list(p.overrides) == [6] and str(p.result["status"].values[2]) == "override"
    xr.testing.assert_identical(_run_steps(p.to_code("out"), ramp), p.result)
    p.clear_override(6)
    p.analyse_every_frame()
    dash.wait()
    assert p.every == 1 and p.every_button.layout.display == "none"
    xr.testing.assert_identical(p.result, ramp.saxs.index_phases(ramp.saxs.find_peaks()))


def _run_steps(code: str, ds):
    """The panel's own steps of exported code (after the series' recipe), run on ``ds``."""
    steps = "\n".join(line for line in code.splitlines() if line.startswith(("out", "# peaks of one")))
    assert "ramp.isel(frame=slice(None, None, 3))" in steps
    ns = {"ramp": ds}
    exec(steps, ns)
    return ns["out"]


def test_model_every_keyword(ramp):
    model = SeriesModel(ramp)
    a = model.result("guinier", every=4)
    xr.testing.assert_identical(a, ramp.isel(frame=slice(None, None, 4)).saxs.guinier())
    assert model.result("guinier", every=4) is a and model.key("guinier", every=1) == model.key("guinier")
    assert "guinier, one frame in 4" in model.timings
    with pytest.raises(SaxsInputError, match="every"):
        model.result("guinier", every=0)


def test_marks_send_float32_and_keep_float64(ramp):
    from saxsnb.widgets import _bq as bq

    dash = saxsnb.explore(ramp, panels=("curve",), frame=2)
    c = dash.panels["curve"]
    state = c.curve.get_state()
    assert state["y"]["dtype"] == "float32" and c.curve.y.dtype == np.float64
    # float32 on the wire: relative rounding <= 2**-24 (IEEE 754 single precision, common practice)
    wire = np.frombuffer(state["y"]["value"], dtype=np.float32)
    np.testing.assert_allclose(wire, c.curve.y, rtol=2.0**-24)
    # values float32 cannot hold go as float64
    assert bq.wire_array(np.array([1e-300, 1.0])).dtype == np.float64
    assert bq.wire_array(np.array([1e39])).dtype == np.float64
    assert bq.wire_array(np.array([0.0, np.nan, np.inf, 3.0])).dtype == np.float32


def test_trend_plots_draw_one_frame_in_k_of_a_long_series(monkeypatch):
    import saxsnb.widgets.base as base

    ds, bg = make_series("unfolding", seed=2)
    ds = ds.saxs.subtract(bg)
    n = ds.sizes["frame"]
    k_ = -(-n // 5)
    monkeypatch.setattr(base, "MAX_TREND_POINTS", 5)  # one frame in k_ drawn
    dash = saxsnb.explore(ds, panels=("guinier", "kratky"))
    g, k = dash.panels["guinier"], dash.panels["kratky"]
    rg = ds.saxs.guinier()["rg"].values[::k_]
    assert np.isfinite(rg).sum() >= 3
    np.testing.assert_array_equal(g.trend.y, rg[np.isfinite(rg)])
    frames = g._point_frames[id(g.trend)]
    assert np.all(frames % k_ == 0) and f"one frame in {k_} drawn" in g.trend_key.value
    g._on_point_click(g.trend, {"data": {"index": 2}})
    assert dash.frame == frames[2]
    assert f"one frame in {k_} drawn" in k.trend_key.value
    assert np.all(k._point_frames[id(k.trend_peak)] % k_ == 0)
    # the tables keep every frame
    assert g.table_result().sizes["frame"] == n and k.table_result().sizes["frame"] == n


def test_distance_trends_of_one_frame_in_k_in_the_background(monkeypatch):
    """On a deferred model the distance panel opens at once (its current frame only) and
    the automatic p(r) trends arrive from one frame in k, equal to the accessor's there."""
    import saxsnb.widgets.distance as dist

    ds, bg = make_series("unfolding", seed=2)
    ds = ds.saxs.subtract(bg).isel(frame=slice(0, 12))
    monkeypatch.setattr(dist, "DISTANCE_FRAMES", 4)  # 12 frames -> one frame in 3
    # the background thread's p(r) waits until the opening is checked (on a quiet machine
    # it could finish before the panel is built, and the panel would open with the trends)
    import threading

    from saxsnb.accessor.distance import DistanceMethods

    gate, plain = threading.Event(), DistanceMethods.distance_distribution

    def held(self, *args, **kwargs):
        if threading.current_thread() is not threading.main_thread():
            gate.wait(60)
        return plain(self, *args, **kwargs)

    monkeypatch.setattr(DistanceMethods, "distance_distribution", held)
    dash = saxsnb.explore(ds, panels=("distance",), wait=False, frame=4)
    p = dash.panels["distance"]
    assert p.every == 3 and p.series is None and "one frame in 3" in p.trend_note.value
    xr.testing.assert_identical(p.result, ds.isel(frame=[4]).saxs.distance_distribution())
    gate.set()
    dash.wait()
    thin = ds.isel(frame=slice(None, None, 3))
    xr.testing.assert_identical(p.series, thin.saxs.distance_distribution())
    assert np.all(p._point_frames[id(p.trend_dmax)] % 3 == 0)
    assert p.trend_guinier.x.size == np.isfinite(ds.saxs.guinier()["rg"].values).sum()


def test_lazy_thinned_peaks_equal_the_in_memory_ones(ramp, never_whole, monkeypatch):
    import saxsnb.widgets.peaks as peaks_mod

    monkeypatch.setattr(peaks_mod, "PEAK_FRAMES", 25)  # 60 frames -> one frame in 3
    dash = saxsnb.explore(ramp.chunk({"frame": 16}), panels=("peaks",), frame=7)
    dash.wait()
    p = dash.panels["peaks"]
    thin = ramp.isel(frame=slice(None, None, 3))
    assert p.every == 3 and not is_lazy(dash.model.thinned(3)["intensity"])
    xr.testing.assert_identical(p.result, thin.saxs.index_phases(thin.saxs.find_peaks()))

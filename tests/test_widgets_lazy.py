"""The panels on a dask-chunked series and with whole-series results in the background.

The lazy series must never be computed whole: a guard on ``dask.array.core.finalize``
(the step that joins computed chunks into the array a compute returns) fails any
compute that returns a (frame, q) array of the series' full shape, and a dask callback
fails any task whose output has that shape. Equality checks compare with the same
panels on the in-memory series (the accessor's results; batch equals loop).
"""

import dask
import dask.array as da
import dask.array.core as dac
import numpy as np
import pytest
import xarray as xr
from dask.callbacks import Callback

import saxsnb
from saxsnb.demo import make_series
from saxsnb.errors import SaxsInputError
from saxsnb.widgets import SeriesModel
from saxsnb.widgets.dashboard import DEFAULT_PANELS
from saxsnb.widgets.model import ROW_BLOCK


@pytest.fixture(scope="module")
def ramp():
    ds, bg = make_series("phase-ramp", temperature=np.linspace(20.0, 90.0, 60))
    ds = ds.saxs.subtract(bg)
    ds["mask"] = (("frame", "q"), np.random.default_rng(7).random(ds["intensity"].shape) < 0.02)
    return ds


@pytest.fixture
def never_whole(ramp, monkeypatch):
    """Fail every compute that returns, and every task that makes, a whole (frame, q) array."""
    shape = tuple(ramp["intensity"].shape)
    original = dac.finalize

    def finalize(results):
        out = original(results)
        if getattr(out, "shape", None) == shape:
            raise AssertionError(f"the whole {shape} array was computed")
        return out

    monkeypatch.setattr(dac, "finalize", finalize)

    class Whole(Callback):
        def _posttask(self, key, result, dsk, state, id):
            if getattr(result, "shape", None) == shape:
                raise AssertionError(f"a task made the whole {shape} array ({key})")

    with Whole():
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

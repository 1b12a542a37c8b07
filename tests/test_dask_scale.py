"""A dask-chunked series gives the in-memory results, stays lazy until asked, and
computes once with errors="raise" (issue 13).

The reference of every check is the in-memory result of the same method on the same
series (numpy, no dask); "equal" is exact for statuses, strings and integers, and within
1e-9 relative for floats (1e-6 for the ``*_sigma`` and chi-square outputs, which are
amplified rounding of the former): the vectorised fits run on a chunk of frames at
once, and their rounding depends on how many frames share a batch (numpy, common
practice).
"""

import json

import numpy as np
import pytest
import xarray as xr

import saxsnb

dask = pytest.importorskip("dask")
from dask.callbacks import Callback  # noqa: E402


class Computations(Callback):
    """Counts dask computations (each ``compute`` / ``.values`` / ``persist`` is one)."""

    def __init__(self):
        super().__init__()
        self.n = 0

    def _start(self, dsk):
        self.n += 1


def assert_same(a: xr.Dataset | xr.DataArray, b: xr.Dataset | xr.DataArray, what: str = ""):
    """In-memory ``a`` against computed ``b``: values, statuses, dtypes kind, dims, attrs."""
    if isinstance(a, xr.DataArray):
        a, b = a.to_dataset(name="v"), b.to_dataset(name="v")
    assert set(a.variables) == set(b.variables), what
    assert a.attrs == b.attrs, what
    for v in a.variables:
        x, y = a[v], b[v]
        assert x.dims == y.dims, (what, v)
        xv, yv = np.asarray(x.values), np.asarray(y.values)
        if xv.dtype.kind == "f":
            loose = v.endswith("sigma") or "chi2" in v or v in ("margin", "cost", "log_evidence", "weight")
            np.testing.assert_allclose(yv, xv, rtol=1e-6 if loose else 1e-9, atol=0, err_msg=f"{what} {v}")
        else:
            assert xv.dtype.kind == yv.dtype.kind, (what, v, xv.dtype, yv.dtype)
            np.testing.assert_array_equal(yv, xv, err_msg=f"{what} {v}")


@pytest.fixture(scope="module")
def spheres():
    """The flow-growth demo (growing spheres), background subtracted: 12 frames."""
    s, bg = saxsnb.demo.make_series("flow-growth", seed=3)
    ds = s.saxs.subtract(bg).isel(frame=slice(0, 12))
    return ds.assign(mask=(("frame", "q"), np.zeros(ds.intensity.shape, bool)))


@pytest.fixture(scope="module")
def ramp():
    """The phase-ramp demo (lamellar -> cubic), background subtracted, 48 frames."""
    s, bg = saxsnb.demo.make_series("phase-ramp", seed=2)
    return s.saxs.subtract(bg).isel(frame=slice(40, 88))


# ---------------------------------------------------------------- peaks and phases
@pytest.mark.parametrize("chunk", [5, 16, 48])
def test_peaks_tracks_and_phases_equal_in_memory(ramp, chunk):
    ref_pk = ramp.saxs.find_peaks()
    ref_ix = ramp.saxs.index_phases(ref_pk)
    lazy = ramp.chunk({"frame": chunk})
    with Computations() as c:
        pk = lazy.saxs.find_peaks()
        ix = lazy.saxs.index_phases(pk)
    assert c.n == 0  # nothing computed: tracking and indexing are lazy tasks
    assert pk["track"].chunks[0] == pk["position"].chunks[0] == lazy.intensity.chunks[0]
    assert ix["phase"].chunks is not None and ix["track"].chunks is not None
    with Computations() as c:
        pk_c, ix_c = dask.compute(pk, ix)
    assert c.n == 1
    assert_same(ref_pk, pk_c, "find_peaks")
    assert_same(ref_ix, ix_c, "index_phases")
    assert (ref_ix.status.values == "ok").sum() > 10  # the check is not on empty frames


def test_tracking_order_and_overrides_on_dask(ramp):
    # a scan coordinate in reverse order (a cooling leg): tracks follow it, not the frame index
    rev = ramp.assign_coords(temperature=("frame", ramp.temperature.values[::-1],
                                          dict(ramp.temperature.attrs)))
    ref = rev.saxs.index_phases(overrides={3: {"phase": "lamellar", "lattice": 5.0}})
    lazy = rev.chunk({"frame": 7}).saxs.index_phases(overrides={3: {"phase": "lamellar", "lattice": 5.0}})
    assert lazy.track.chunks is not None
    assert_same(ref, lazy.compute(), "index_phases with overrides, reversed scan")
    assert str(ref.status.values[3]) == "override"


def test_bad_override_raises_at_the_call_on_dask(ramp):
    from saxsnb.errors import SaxsInputError

    lazy = ramp.chunk({"frame": 16})
    with pytest.raises(SaxsInputError, match="override frame 99"):
        lazy.saxs.index_phases(overrides={99: {"phase": "Pn3m"}})
    with pytest.raises(SaxsInputError, match="phase name"):
        lazy.saxs.index_phases(overrides={1: {"phase": "cubic"}})


# --------------------------------------------------------------- every other method
_ONE = saxsnb.demo.make_series("flow-growth", seed=4)[1].isel(frame=[0])


METHODS = {
    "guinier_auto": lambda ds: ds.saxs.guinier(),
    "guinier_range": lambda ds: ds.saxs.guinier((0.05, 0.3)),
    "guinier_rod": lambda ds: ds.saxs.guinier((0.3, 0.6), shape="rod"),
    "guinier_sheet": lambda ds: ds.saxs.guinier((0.3, 0.6), shape="sheet"),
    "porod": lambda ds: ds.saxs.porod(),
    "invariant": lambda ds: ds.saxs.invariant(),
    "kratky": lambda ds: ds.saxs.kratky(),
    "kratky_rg": lambda ds: ds.saxs.kratky(normalize="rg"),
    "kratky_summary": lambda ds: ds.saxs.kratky_summary(),
    "distance": lambda ds: ds.saxs.distance_distribution(n_r=21, dmax_candidates=np.linspace(8, 30, 6)),
    "distance_fixed": lambda ds: ds.saxs.distance_distribution(20.0, n_r=21),
    "rebin": lambda ds: ds.saxs.rebin(60),
    "per_concentration": lambda ds: ds.saxs.per_concentration(2.0),
    # the reference and background are small in-memory series (one frame)
    "absolute_scale": lambda ds: ds.saxs.absolute_scale(_ONE, kind="curve", known=np.ones(ds.sizes["q"])),
    "subtract": lambda ds: ds.saxs.subtract(_ONE, scale=0.5),
    "subtract_auto": lambda ds: ds.saxs.subtract(_ONE, scale="auto"),
    "to_q_unit": lambda ds: ds.saxs.to_q_unit("1/A"),
    "rescale_q": lambda ds: ds.saxs.rescale_q(1.01),
    # across frames, lazy: per-chunk scores against the reference row, Holm's step on the p-values
    "compare_frames": lambda ds: ds.saxs.compare_frames(),
    "compare_frames_chi2": lambda ds: ds.saxs.compare_frames(test="chi2", reference=7,
                                                             correction="bonferroni"),
    "compare_frames_no_matrix": lambda ds: ds.saxs.compare_frames(reference=-1, pairwise=False),
}


@pytest.mark.parametrize("chunk", [1, 5, 12])
@pytest.mark.parametrize("name", sorted(METHODS))
def test_method_lazy_and_equal_in_memory(spheres, name, chunk):
    method = METHODS[name]
    ref = method(spheres)
    lazy = spheres.chunk({"frame": chunk})
    with Computations() as c:
        res = method(lazy)
    assert c.n == 0, f"{name} computed {c.n} times before being asked"
    first = res if isinstance(res, xr.DataArray) else next(iter(res.data_vars.values()))
    assert first.chunks is not None and first.chunks[0] == lazy.intensity.chunks[0]
    with Computations() as c:
        out = res.compute()
    assert c.n == 1
    assert_same(ref, out, name)


SLICED = {"porod": "porod", "invariant": "invariant", "kratky": "kratky", "kratky_summary": "kratky_summary",
          "distance_fixed": "distance_distribution", "distance": "distance_distribution",
          "absolute_scale": "absolute_scale", "rebin": "rebin", "per_concentration": "per_concentration"}


@pytest.mark.parametrize("name", sorted(SLICED))
def test_chunks_run_in_slices_equal_in_memory(monkeypatch, spheres, name):
    # slices of 2 frames inside chunks of 5 (the shipped minimum is 16 to 256 frames per call)
    from saxsnb.accessor._core import TEMPORARIES

    key = SLICED[name]
    monkeypatch.setitem(TEMPORARIES, key, (3.0, 1))  # 6 slices per chunk: 1 frame each
    ref = METHODS[name](spheres)
    out = METHODS[name](spheres.chunk({"frame": 5})).compute()
    assert_same(ref, out, f"{name} in slices")


def test_find_peaks_in_slices_equal_in_memory(monkeypatch, ramp):
    from saxsnb.accessor._core import TEMPORARIES

    monkeypatch.setitem(TEMPORARIES, "find_peaks", (2.0, 3))
    ref = ramp.saxs.find_peaks()
    assert_same(ref, ramp.chunk({"frame": 16}).saxs.find_peaks().compute(), "find_peaks in slices")


def test_subtract_auto_error_names_the_series_frame_on_dask(spheres):
    from saxsnb.errors import SaxsInputError

    bad = spheres.copy(deep=True)
    bad["intensity"][6] = np.nan
    lazy = bad.chunk({"frame": 4}).saxs.subtract(_ONE, scale="auto")  # lazy: raised when computed
    with pytest.raises(SaxsInputError, match="frame 6 ") as err:
        lazy.compute()
    assert err.value.frame == 6  # not 2, its position in the chunk


def test_chunked_along_q_too(spheres):
    # a store chunked along q as well is rechunked to whole curves per task
    ref = spheres.saxs.guinier()
    lazy = spheres.chunk({"frame": 4, "q": 100}).saxs.guinier()
    assert_same(ref, lazy.compute(), "guinier, q chunks")


# ------------------------------------------- across frames: one small computation at the call
def _numeric_close(a, b, what):
    """Equal JSON-like attrs, numbers within 1e-9 relative (the rounding of the fits)."""
    import json

    if isinstance(a, str) and isinstance(b, str) and a[:1] in "[{" and a != b:
        try:
            a, b = json.loads(a), json.loads(b)
        except ValueError:
            pass
    if isinstance(a, dict):
        assert isinstance(b, dict) and set(a) == set(b), what
        for k in a:
            _numeric_close(a[k], b[k], f"{what}.{k}")
    elif isinstance(a, list | tuple):
        assert isinstance(b, list | tuple) and len(a) == len(b), what
        for x, y in zip(a, b):
            _numeric_close(x, y, what)
    elif isinstance(a, float) and not isinstance(b, str):
        np.testing.assert_allclose(b, a, rtol=1e-9, atol=0, err_msg=what)
    else:
        assert a == b, what


def _repeats(dilution: bool):
    """12 noisy repeats of one curve, frames 4 and 9 with a low-q excess (outliers); with
    ``dilution``, frame k at concentration c_k (1 to 4) with a slight repulsion."""
    e = saxsnb.demo.example_series("spheres").isel(frame=[0])
    q = e["q"].values
    rng = np.random.default_rng(1234)
    base = e["intensity"].values[0]
    s = 0.01 * base
    I = base + s * rng.standard_normal((12, q.size))
    I[[4, 9]] += 0.2 * base * np.exp(-(q / q[q.size // 8]) ** 2)
    c = np.linspace(1.0, 4.0, 12)
    f = c[:, None] * (1 - 0.03 * c[:, None]) if dilution else np.ones((12, 1))
    return saxsnb.from_arrays(q, I * f, s[None, :] * f,
                              scan={"concentration": c, "sample": np.array(list("aabbbaabbbab"))})


ONCE = {  # name -> (method, computations at the call); the extrapolations on a dilution series
    "average": (lambda ds: ds.saxs.average(), 1),
    "average_all": (lambda ds: ds.saxs.average(exclude=None), 0),
    "average_every": (lambda ds: ds.saxs.average(every=5, test="chi2"), 1),
    "average_by": (lambda ds: ds.saxs.average(by="sample"), 1),
    "extrapolate_guinier": (lambda ds: ds.saxs.extrapolate_concentration("concentration"), 1),
    "extrapolate_lowest_q": (lambda ds: ds.saxs.extrapolate_concentration("concentration", i0="lowest_q"), 0),
}


@pytest.mark.parametrize("few", [64, 0])  # few groups: one sum per group; many: chunks of whole groups
@pytest.mark.parametrize("chunk", [1, 5, 12])
@pytest.mark.parametrize("name", sorted(ONCE))
def test_across_frames_lazy_and_equal_in_memory(monkeypatch, never_whole, name, chunk, few):
    import saxsnb.accessor._across as across

    if few == 0 and not name.startswith("average"):
        pytest.skip("the group paths are the averages'")
    monkeypatch.setattr(across, "FEW_GROUPS", few)
    ds = _repeats(dilution=name.startswith("extrapolate"))
    method, at_call = ONCE[name]
    ref = method(ds)
    # the data chunked, the per-frame coordinates in memory (as a store opens them)
    lazy = ds.chunk({"frame": chunk}).assign_coords({c: ds[c] for c in ("concentration", "sample")})
    import contextlib

    # below one chunk of the whole series, no step may hold its whole (frame, q) arrays
    guard = never_whole(ds["intensity"].shape) if chunk < ds.sizes["frame"] else contextlib.nullcontext()
    with guard:
        with Computations() as c:
            res = method(lazy)
        assert c.n == at_call, f"{name} computed {c.n} times at the call"
        assert res["intensity"].chunks is not None  # the (frame, q) result is left lazy
        with Computations() as c:
            out = res.compute()
        assert c.n == 1
    _numeric_close(ref.attrs, out.attrs, name)
    assert_same(ref.assign_attrs(out.attrs), out, name)
    if name == "average":
        assert json.loads(ref.attrs["parameters"])["excluded_frames"] == [4, 9]  # the check is not empty


def test_average_with_lazy_coordinates_reads_them_once(spheres):
    # every per-frame coordinate chunked too: read in one small computation before the outlier flags
    ref = spheres.saxs.average(every=4)
    lazy = spheres.chunk({"frame": 5})
    assert lazy["position"].chunks is not None
    with Computations() as c:
        res = lazy.saxs.average(every=4)
    assert c.n == 2
    assert_same(ref, res.compute(), "average, lazy coordinates")


@pytest.mark.parametrize("test", ["cormap", "chi2"])
def test_compare_frames_never_whole(spheres, never_whole, test):
    ref = spheres.saxs.compare_frames(test=test, pairwise=False)
    with never_whole(spheres["intensity"].shape):
        out = spheres.chunk({"frame": 5}).saxs.compare_frames(test=test, pairwise=False).compute()
    assert_same(ref, out, "compare_frames")


def test_compare_frames_data_errors_raised_when_computed(spheres):
    from saxsnb.errors import SaxsInputError

    bad = spheres.copy(deep=True)
    bad["intensity"][3] = np.nan
    with pytest.raises(SaxsInputError, match="reference frame 3"):
        bad.saxs.compare_frames(reference=3)
    lazy = bad.chunk({"frame": 5}).saxs.compare_frames(reference=3)  # lazy: raised when computed
    with pytest.raises(SaxsInputError, match="reference frame 3"):
        lazy.compute()
    with pytest.raises(SaxsInputError, match="correction"):  # a parameter: raised at the call
        spheres.chunk({"frame": 5}).saxs.compare_frames(correction="sidak")


@pytest.mark.parametrize("chunk", [5, 16, 48])
def test_phase_map_computes_the_indexing_once(ramp, never_whole, chunk):
    ref = ramp.saxs.phase_map()
    lazy = ramp.chunk({"frame": chunk})
    idx = lazy.saxs.index_phases()
    with Computations() as c:
        if chunk < ramp.sizes["frame"]:
            with never_whole(ramp["intensity"].shape):
                pm = lazy.saxs.phase_map(idx)
        else:
            pm = lazy.saxs.phase_map(idx)
    assert c.n == 1  # the per-frame tables and the scan values together
    _numeric_close(ref.attrs, pm.attrs, "phase_map")
    assert_same(ref.assign_attrs(pm.attrs), pm, "phase_map")
    assert json.loads(ref.attrs["transitions"])  # the check is not on an empty map


# ----------------------------------------------------------------- errors="raise"
def _tiled(kind, n=8):
    """The tiny example series repeated to ``n`` frames (every analysis succeeds on it)."""
    e = saxsnb.demo.example_series(kind)
    out = xr.concat([e] * (n // 2), dim="frame")
    return out.assign_coords(frame=np.arange(n), time=("frame", np.arange(n, dtype=float)))


@pytest.mark.parametrize("kind,module,name,method", [
    ("spheres", "saxsnb.analysis._guinier", "guinier", lambda ds, **kw: ds.saxs.guinier(**kw)),
    ("spheres", "saxsnb.analysis", "distance_distribution",
     lambda ds, **kw: ds.saxs.distance_distribution(**kw)),
    ("cubic", "saxsnb.analysis._peaks", "find_peaks", lambda ds, **kw: ds.saxs.find_peaks(**kw)),
])
def test_errors_raise_computes_once(monkeypatch, kind, module, name, method):
    import importlib

    ds = _tiled(kind)
    ref = method(ds, errors="raise")
    lazy = ds.chunk({"frame": 3})  # 3 chunks
    mod = importlib.import_module(module)
    fit = getattr(mod, name)
    calls = []

    def counted(*args, **kwargs):
        calls.append(args[1].shape[0])
        return fit(*args, **kwargs)

    monkeypatch.setattr(mod, name, counted)
    with Computations() as c:
        res = method(lazy, errors="raise")
    # the status check persists the result (the one computation that fits) and reads the
    # persisted statuses (a second pass that fits nothing)
    assert c.n == 2
    assert sorted(calls) == [2, 3, 3]  # every chunk fitted once
    out = res.compute()
    assert out["status"].values.tolist() == ["ok"] * 8
    assert sorted(calls) == [2, 3, 3]  # the user's compute afterwards fits nothing again
    assert_same(ref, out, "errors='raise'")


def test_method_with_errors_ignore_fits_each_chunk_once(monkeypatch, spheres):
    import saxsnb.analysis._porod as mod

    fit = mod.porod
    calls = []
    monkeypatch.setattr(mod, "porod", lambda *a, **k: calls.append(1) or fit(*a, **k))
    res = spheres.chunk({"frame": 4}).saxs.porod()
    assert calls == []  # lazy
    with Computations() as c:
        res.compute()
    assert c.n == 1 and len(calls) == 3


def test_errors_raise_names_the_frame_on_dask(spheres):
    from saxsnb.errors import SaxsFitError

    bad = spheres.copy(deep=True)
    bad["intensity"][5] = np.nan
    with pytest.raises(SaxsFitError, match="frame 5"):
        bad.chunk({"frame": 4}).saxs.guinier((0.05, 0.3), errors="raise")


# ------------------------------------------------------------------ the cluster helper
@pytest.mark.slow
def test_cluster_workers_keep_the_default_malloc_policy_and_agree(spheres):
    pytest.importorskip("distributed")
    import os

    def env():
        return os.environ.get("MALLOC_TRIM_THRESHOLD_")

    ref = spheres.saxs.guinier()
    client = saxsnb.cluster(1, memory_limit="1GB")
    try:
        assert client.submit(env, pure=False).result() is None  # glibc's own policy (mallopt(3))
        assert_same(ref, spheres.chunk({"frame": 5}).saxs.guinier().compute(), "guinier on a cluster")
    finally:
        client.close()

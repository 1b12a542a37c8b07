"""The model under the panels: one series, its masked arrays once, results cached.

A :class:`SeriesModel` holds what every panel of a series needs, computed once:

- the validated Dataset (``ds``, never modified), its intensity, sigma and mask as
  numpy arrays once (read-only views of the series' own arrays; the dask arrays of a
  lazy series, never loaded whole), ``q``, the scan name, values and units. Panels read the masked
  intensity and sigma (masked points NaN) through :meth:`SeriesModel.rows` (a frame
  or a few) and :meth:`SeriesModel.masked` (all frames, for a one-off summary): the
  mask is applied on reading, so no masked copy of the series is ever kept (a
  masked copy held for the life of the panels would cost as much as the series);
- the shared current frame, the trait ``frame``: every panel links its own ``frame``
  to it, so stepping one panel steps them all;
- whole-series results of the accessor, cached by (analysis, parameters):
  ``model.result("guinier", q_range=None, shape="compact")`` calls
  ``ds.saxs.guinier(q_range=None, shape="compact")`` once and returns the same
  Dataset afterwards (``model.result("guinier")`` is the same entry: the parameters
  are completed with the method's defaults before they become the key).

Results that feed other results are taken from the cache too (:data:`INPUTS`): the
automatic Guinier fit behind ``kratky_summary`` and the dimensionless ``kratky`` is
``model.result("guinier")``, the peaks behind ``index_phases`` are
``model.result("find_peaks", **peaks)`` when ``peaks`` is a dict of options. So
:func:`saxsnb.explore` fits each whole series once whatever the panels ask.

A deferred model (``model.deferred = True``: :func:`saxsnb.explore` on a big or lazy
series) computes whole-series results in one background thread instead
(:meth:`SeriesModel.when_ready`, :meth:`SeriesModel.wait`, the ``busy`` trait). A
dask-backed series is never loaded whole: :meth:`SeriesModel.rows` and
:meth:`SeriesModel.part` compute the frames asked for only, :meth:`SeriesModel.overview`
reduces chunk by chunk, and :meth:`SeriesModel.masked` refuses.

:func:`saxsnb.explore` builds one model and gives it to every panel; a panel made
alone (``LinearFitPanel(ds)``) makes its own. Every panel accepts a Dataset or a
model as its first argument.
"""

from __future__ import annotations

import inspect
import keyword
import queue
import threading
import time
from collections import OrderedDict
from collections.abc import Mapping
from concurrent.futures import Future
from typing import Any

import numpy as np
import traitlets
import xarray as xr

from ..accessor import SaxsAccessor
from ..display import positive_range
from ..display.overview import overview_block, overview_combine, overview_edges, sample_frames
from ..errors import SaxsInputError
from ..series import main_scan, validate
from ._background import BackgroundResults, _row_scheduler

__all__ = ["SeriesModel", "as_model", "ANALYSES", "INPUTS", "is_lazy"]

#: Frames of a lazy series fetched together (a step computes once per block) ...
ROW_BLOCK = 32
#: ... and blocks kept in memory (the current frame's, a few stepped through).
ROW_CACHE = 4

#: A lazy series thinned to at most this many points (frames x q) is loaded into memory
#: for the analyses of its thinned frames (:meth:`SeriesModel.thinned`): 4e6 points are
#: 64 MB of intensity and sigma.
THIN_IN_MEMORY = 4_000_000

#: Accessor methods whose whole-series results the model caches.
ANALYSES = ("guinier", "porod", "invariant", "kratky", "kratky_summary", "find_peaks", "index_phases",
            "phase_map", "compare_frames", "distance_distribution")

#: analysis -> {argument: analysis whose cached result is passed there}. The argument
#: may be left out (the automatic result), a dict of that analysis' options, or a
#: Dataset (passed through as it is).
INPUTS = {
    "kratky": {"guinier": "guinier"},
    "kratky_summary": {"guinier": "guinier"},
    "invariant": {"guinier": "guinier", "porod": "porod"},
    "index_phases": {"peaks": "find_peaks"},
    "phase_map": {"index": "index_phases"},
}

# read when this module is imported (a wrapper made with functools.wraps is seen through)
_SIGNATURES = {name: inspect.signature(getattr(SaxsAccessor, name)) for name in ANALYSES}


def _freeze(value) -> Any:
    """A hashable stand-in for a parameter value (dicts and lists of numbers, ranges)."""
    if isinstance(value, Mapping):
        return ("dict", tuple(sorted((str(k), _freeze(v)) for k, v in value.items())))
    if isinstance(value, (list, tuple)):
        return ("seq", tuple(_freeze(v) for v in value))
    if isinstance(value, np.ndarray):
        return ("array", value.dtype.str, value.shape, value.tobytes())
    if isinstance(value, (xr.Dataset, xr.DataArray)):
        return ("object", id(value))
    if isinstance(value, np.generic):
        return value.item()
    hash(value)  # anything else must be hashable (str, numbers, None, bool)
    return value


def _strided_rows(block: np.ndarray, start: int, every: int) -> np.ndarray:
    """The rows of a chunk starting at frame ``start`` whose frame is a multiple of ``every``."""
    return np.ascontiguousarray(np.asarray(block)[(-start) % every::every])


def _check_every(every) -> int:
    if isinstance(every, bool) or not isinstance(every, (int, np.integer)) or int(every) < 1:
        raise SaxsInputError(f"every must be a positive integer (a frame step), got {every!r}",
                             parameter="every")
    return int(every)


def _split_every(params: Mapping[str, Any]) -> tuple[int, dict[str, Any]]:
    """``(every, the other parameters)`` of a ``result(...)`` call."""
    params = dict(params)
    return _check_every(params.pop("every", 1)), params


def is_lazy(da) -> bool:
    """Whether a DataArray (or array) is backed by a dask array."""
    data = getattr(da, "data", da)
    return hasattr(data, "dask") and hasattr(data, "chunks")


def as_model(source) -> SeriesModel:
    """``source`` if it is a :class:`SeriesModel`, else a new model of the series."""
    return source if isinstance(source, SeriesModel) else SeriesModel(source)


class SeriesModel(BackgroundResults):
    """One series shared by linked panels (see the module docstring).

    Parameters
    ----------
    ds : xarray.Dataset
        A series in the saxsnb layout (:func:`saxsnb.validate`); it is never modified.
    frame : int
        The initial current frame.
    max_results : int
        Most results kept; beyond it the least recently used one that is not an
        automatic result (default arguments) is dropped (a dragged range gives a new
        whole-series fit per range).

    Examples
    --------
    >>> import numpy as np, saxsnb
    >>> from saxsnb.widgets.model import SeriesModel
    >>> q = np.linspace(0.02, 1.0, 100)
    >>> I = np.exp(-np.outer([2.0, 3.0], q) ** 2 / 3)
    >>> model = SeriesModel(saxsnb.from_arrays(q, I, 0.01 * I))
    >>> fit = model.result("guinier")
    >>> model.result("guinier", q_range=None, shape="compact") is fit
    True
    >>> I, S = model.rows(1)
    >>> fit.rg.values.round(6).tolist(), I.shape, model.frame
    ([2.0, 3.0], (100,), 0)
    """

    #: The current frame (position along ``frame``), shared by the panels.
    frame = traitlets.Int(0)

    def __init__(self, ds: xr.Dataset, *, frame: int = 0, max_results: int = 12, **kwargs):
        self.ds = validate(ds)
        self.n_frames = int(ds.sizes["frame"])
        #: Whether the series is dask-backed: then nothing as large as the series is
        #: ever loaded (rows are fetched on demand, overviews come from per-chunk
        #: reductions) and whole-series results are computed in the background.
        self.lazy = is_lazy(ds["intensity"])
        if self.lazy:
            data = ds["intensity"].data
            self._intensity = data.rechunk({1: -1}) if len(data.chunks[1]) > 1 else data
            chunks = self._intensity.chunks
            self._sigma = ds["sigma"].data.rechunk(chunks) if is_lazy(ds["sigma"]) else ds["sigma"].values
            if "mask" in ds.data_vars:
                m = ds["mask"]
                self._mask = m.data.rechunk(chunks) if is_lazy(m) else self._read_only(m.values)
            else:
                self._mask = None
        else:
            # the series' own arrays (views)
            self._intensity = self._read_only(ds["intensity"].values)
            self._sigma = self._read_only(ds["sigma"].values)
            self._mask = self._read_only(ds["mask"].values) if "mask" in ds.data_vars else None
        self._row_cache: OrderedDict = OrderedDict()
        self._part_cache: OrderedDict = OrderedDict()
        self._part_blocks: OrderedDict = OrderedDict()
        self._small: xr.Dataset | None = None
        self._positive_range: tuple[float, float] | None = None
        self._overview: dict = {}
        self.q = self._read_only(np.asarray(ds["q"].values, dtype=float))
        self.q_units = str(ds["q"].attrs.get("units", "1/nm"))
        self.intensity_units = str(ds["intensity"].attrs.get("units", "arb"))
        self.scan = main_scan(ds)
        if self.scan == "frame":
            self.scan_values = np.arange(self.n_frames, dtype=float)
            self.scan_units = ""
        else:
            self.scan_values = np.asarray(ds[self.scan].values)
            self.scan_units = str(ds[self.scan].attrs.get("units", ""))
        #: The user's variable names of the series and of its background in exported code
        #: (found by ``caller_variable`` or given; None: not known) and the background.
        self.name: str | None = None
        self.name_given = False
        self.background = None
        self.background_name: str | None = None
        self.background_name_given = False
        self.max_results = int(max_results)
        self._results: OrderedDict = OrderedDict()
        #: Compute whole-series results in the background (:meth:`when_ready`) instead
        #: of at once; :func:`saxsnb.explore` turns it on for big or lazy series.
        self.deferred = False
        self._lock = threading.RLock()
        self._jobs: dict[tuple, Future] = {}
        self._job_names: dict[tuple, str] = {}
        self._job_start: dict[tuple, float] = {}
        self._queue: queue.SimpleQueue | None = None
        self._worker: threading.Thread | None = None
        self._pending: list = []
        self._loop = None
        self._tasks = [0, 0]  # dask tasks started, finished (background progress)
        #: Seconds each whole-series result took to compute (see :meth:`result`).
        self.timings: dict[str, float] = {}
        super().__init__(**kwargs)
        if frame:
            self.frame = int(frame)

    def set_names(self, name: str | None = None, background_name: str | None = None) -> None:
        """Give the variable names the exported code uses for the series and background."""
        for value, attr in ((name, "name"), (background_name, "background_name")):
            if value is None:
                continue
            if not (isinstance(value, str) and value.isidentifier() and not keyword.iskeyword(value)):
                raise SaxsInputError(f"{value!r} is not a Python variable name", parameter=attr)
            setattr(self, attr, value)
            setattr(self, f"{attr}_given", True)

    @staticmethod
    def _read_only(values) -> np.ndarray:
        view = np.asarray(values).view()  # a view: the series' own array stays writeable
        view.flags.writeable = False
        return view

    # ---------------------------------------------------------------- arrays
    def rows(self, frames) -> tuple[np.ndarray, np.ndarray]:
        """Masked intensity and sigma of ``frames`` (an index, a slice or a list of
        positions), masked points NaN, as ``ds.saxs.masked()`` gives them.

        Without a mask these are read-only views of the series' arrays; with one they
        are new arrays of the frames asked for only. On a lazy series only these
        frames are computed (single frames are kept in a small cache, :data:`ROW_CACHE`).
        """
        if self.lazy:
            return self._lazy_rows(frames)
        I, S = self._intensity[frames], self._sigma[frames]
        if self._mask is not None:
            I, S = self._apply_mask(I, S, self._mask[frames])
        return I, S

    @staticmethod
    def _apply_mask(I, S, m):
        I = np.where(m, np.array(np.nan, dtype=np.result_type(I.dtype, np.float16)), I)
        S = np.where(m, np.array(np.nan, dtype=np.result_type(S.dtype, np.float16)), S)
        return I, S

    def _big(self) -> list[str]:
        return [k for k in self.ds.data_vars if self.ds.variables[k].dims == ("frame", "q")]

    def _raw(self, frames) -> dict:
        """The (frame, q) data variables of ``frames`` (an index or a slice) as numpy
        arrays. Frames are fetched :data:`ROW_BLOCK` at a time (one ``dask.compute``
        for all variables) and the last :data:`ROW_CACHE` blocks kept, so stepping
        through the series computes once per block."""
        if isinstance(frames, (int, np.integer)):
            i = int(frames)
            start, block = self._raw_block(i // ROW_BLOCK)
            return {k: v[i - start] for k, v in block.items()}
        if isinstance(frames, slice):
            a, b, step = frames.indices(self.n_frames)
            if step == 1 and b > a and a // ROW_BLOCK == (b - 1) // ROW_BLOCK:
                start, block = self._raw_block(a // ROW_BLOCK)
                return {k: v[a - start:b - start] for k, v in block.items()}
        return self._fetch(frames)

    def _raw_block(self, n: int):
        with self._lock:
            hit = self._row_cache.get(n)
            if hit is not None:
                self._row_cache.move_to_end(n)
                return hit
        start = n * ROW_BLOCK
        got = (start, self._fetch(slice(start, min(start + ROW_BLOCK, self.n_frames))))
        with self._lock:
            self._row_cache[n] = got
            while len(self._row_cache) > ROW_CACHE:
                self._row_cache.popitem(last=False)
        return got

    def _fetch(self, frames) -> dict:
        import dask

        names = self._big()
        got = dask.compute(*[self.ds[k].data[frames] for k in names], scheduler=_row_scheduler())
        out = {}
        for k, a in zip(names, got):
            a = np.asarray(a)
            a.flags.writeable = False
            out[k] = a
        return out

    def _lazy_rows(self, frames):
        raw = self._raw(frames)
        I, S = raw["intensity"], raw["sigma"]
        if "mask" in raw:
            I, S = self._apply_mask(I, S, raw["mask"])
        return I, S

    def part(self, frames) -> xr.Dataset:
        """``ds.isel(frame=frames)`` (a list of positions or a slice), in memory: on a lazy
        series only these frames are computed (the rows a step fetched are reused). A
        one-frame part is cached (the panels of one step share it)."""
        one = isinstance(frames, list) and len(frames) == 1
        if one:
            i = int(frames[0]) % max(self.n_frames, 1)
            with self._lock:
                hit = self._part_cache.get(i)
                if hit is not None:
                    return hit
            if self.lazy:
                # the part of the frame's block of ROW_BLOCK frames (made once per block),
                # sliced: the same Dataset as ds.isel(frame=[i]) at a fraction of the cost
                n = i // ROW_BLOCK
                with self._lock:
                    block = self._part_blocks.get(n)
                if block is None:
                    block = self.part(slice(n * ROW_BLOCK, min((n + 1) * ROW_BLOCK, self.n_frames)))
                    with self._lock:
                        self._part_blocks[n] = block
                        while len(self._part_blocks) > 2:
                            self._part_blocks.popitem(last=False)
                out = block.isel(frame=slice(i - n * ROW_BLOCK, i - n * ROW_BLOCK + 1))
            else:
                out = self.ds.isel(frame=slice(i, i + 1))  # = isel(frame=[i]), twice as fast
            with self._lock:
                self._part_cache[i] = out
                while len(self._part_cache) > 6:
                    self._part_cache.popitem(last=False)
            return out
        if self.lazy:
            big = self._big()
            if self._small is None:  # every variable but the (frame, q) ones, in memory once
                self._small = self.ds.drop_vars(big).compute(scheduler=_row_scheduler())
            small = self._small.isel(frame=frames)
            if isinstance(frames, slice):
                raw = self._raw(frames)
            else:
                raw = self._fetch(frames)
            out = small.assign({k: (("frame", "q"), raw[k], self.ds[k].attrs) for k in big})
            for k in big:
                out[k].encoding = dict(self.ds[k].encoding)
            out = out[list(self.ds.data_vars)]
        else:
            out = self.ds.isel(frame=frames)
        return out

    def masked(self) -> tuple[np.ndarray, np.ndarray]:
        """Masked intensity and sigma of every frame, (n_frames, n_q).

        A new pair of arrays as large as the series when it has a mask: use it for a
        one-off summary and do not keep it. Refused on a lazy series (it would load
        the whole series): use :meth:`overview` and :meth:`rows` there.
        """
        if self.lazy:
            raise SaxsInputError(
                "the series is dask-backed: its whole (frame, q) arrays are not loaded by the panels; "
                "use model.rows(frames) or model.overview()", parameter="ds")
        return self.rows(slice(None))

    def overview(self, max_rows: int = 400, max_cols: int = 400) -> dict:
        """``display.overview_map`` of the masked intensity (block means of log10 I),
        computed once per size, block by block: on a lazy series one small reduction
        per chunk of frames (``dask.compute``: on the active distributed client, if
        any), so the series is never loaded whole. ``"sampled"`` holds the positive
        values of at most 256 evenly spaced frames (for :meth:`positive_range`)."""
        key = (int(max_rows), int(max_cols))
        if key in self._overview:
            return self._overview[key]
        n, n_q = self.n_frames, self.q.size
        rows, cols = overview_edges(n, n_q, max_rows=max_rows, max_cols=max_cols)
        sample = sample_frames(n)
        if self.lazy:
            import dask

            starts = np.concatenate([[0], np.cumsum(self._intensity.chunks[0])[:-1]])
            blocks_i = self._intensity.to_delayed().ravel()
            if self._mask is None:
                blocks_m = [None] * len(blocks_i)
            elif is_lazy(self._mask):
                blocks_m = self._mask.to_delayed().ravel()
            else:
                stops = np.append(starts[1:], n)
                blocks_m = [self._mask[a:b] for a, b in zip(starts, stops)]
            reduce = dask.delayed(overview_block, pure=True)
            parts = dask.compute(*[reduce(bi, int(a), rows, cols, bm, sample)
                                   for bi, bm, a in zip(blocks_i, blocks_m, starts)])
        else:
            step = 2048
            parts = [overview_block(self._intensity[a:a + step], a, rows, cols,
                                    None if self._mask is None else self._mask[a:a + step], sample)
                     for a in range(0, n, step)]
        out = overview_combine(self.q, n, rows, cols, parts)
        self._overview[key] = out
        return out

    def positive_range(self) -> tuple[float, float]:
        """``display.positive_range`` of the masked intensity (the fixed y range of log
        plots), computed once, from at most 256 evenly spaced frames (every frame of a
        shorter series), gathered in the pass of :meth:`overview`."""
        if self._positive_range is None:
            self._positive_range = positive_range(self.overview()["sampled"])
        return self._positive_range

    @traitlets.validate("frame")
    def _check_frame(self, proposal):
        value = int(proposal["value"])
        if not 0 <= value < self.n_frames:
            raise traitlets.TraitError(f"frame {value} outside 0..{self.n_frames - 1}")
        return value

    # ------------------------------------------------------------------ scan
    def frame_label(self, index: int | None = None) -> str:
        """Plain label of a frame, e.g. ``"temperature 45.5 degC (frame 51)"``."""
        i = self.frame if index is None else int(index)
        if self.scan == "frame":
            return f"frame {i}"
        v = self.scan_values[i]
        text = f"{v:.4g}" if np.issubdtype(np.asarray(v).dtype, np.number) else str(v)
        unit = f" {self.scan_units}" if self.scan_units else ""
        return f"{self.scan} {text}{unit} (frame {i})"

    @property
    def scan_limits(self) -> tuple[float, float]:
        """Smallest and largest scan value (for the x range of trend plots)."""
        v = np.asarray(self.scan_values, dtype=float)
        v = v[np.isfinite(v)]
        return (float(v.min()), float(v.max())) if v.size else (0.0, 1.0)

    @property
    def scan_label(self) -> str:
        """Axis label of the scan coordinate with its units."""
        if self.scan == "frame":
            return "frame"
        return f"{self.scan} ({self.scan_units})" if self.scan_units else self.scan

    # --------------------------------------------------------------- results
    def _arguments(self, analysis: str, params: Mapping[str, Any]) -> dict[str, Any]:
        if analysis not in _SIGNATURES:
            raise SaxsInputError(f"unknown analysis {analysis!r}; use one of {list(ANALYSES)}",
                                 parameter="analysis")
        sig = _SIGNATURES[analysis]
        try:
            bound = sig.bind(None, **params)  # None stands for the accessor (self)
        except TypeError as exc:
            raise SaxsInputError(f"{analysis}: {exc}", parameter="params") from None
        bound.apply_defaults()
        args = dict(bound.arguments)
        args.pop(next(iter(sig.parameters)))
        for name, p in sig.parameters.items():
            if p.kind is inspect.Parameter.VAR_KEYWORD:
                args.update(args.pop(name, {}))
            elif p.kind is inspect.Parameter.VAR_POSITIONAL:
                args.pop(name, None)
        return args

    def key(self, analysis: str, /, **params) -> tuple:
        """The cache key of ``result(analysis, **params)``: the analysis and all its
        arguments (defaults filled in), frozen; ``every`` > 1 is a third element."""
        try:  # keys of plain parameters are kept (asked for at every frame step)
            memo = (analysis, tuple(sorted(params.items())))
            hash(memo)
        except TypeError:
            memo = None
        cache = self.__dict__.setdefault("_key_memo", {})
        if memo is not None and memo in cache:
            return cache[memo]
        every, own = _split_every(params)
        args = self._arguments(analysis, own)
        key = (analysis, _freeze(args))
        key = key if every == 1 else (*key, ("every", every))
        if memo is not None and len(cache) < 256:
            cache[memo] = key
        return key

    def thinned(self, every: int = 1) -> xr.Dataset:
        """``ds.isel(frame=slice(None, None, every))`` (the series itself for 1), made once;
        of a lazy series, in memory when it has at most :data:`THIN_IN_MEMORY` points."""
        every = _check_every(every)
        if every == 1:
            return self.ds
        cache = self.__dict__.setdefault("_thinned", {})
        if every not in cache:
            thin = self.ds.isel(frame=slice(None, None, every))
            if self.lazy and thin.sizes["frame"] * self.q.size <= THIN_IN_MEMORY:
                # a few thousand frames: read once (every chunk is read for them anyway) and
                # analysed in memory, which is several times faster than the same analysis
                # over a hundred dask chunks of a few frames each (measured in bench_widgets)
                thin = self._thin_in_memory(thin, every)
            cache[every] = thin
        return cache[every]

    def _thin_in_memory(self, thin: xr.Dataset, every: int) -> xr.Dataset:
        """``thin`` (``ds`` thinned to one frame in ``every``) in memory, its (frame, q)
        variables taken chunk by chunk: each task reads one chunk and keeps its thinned
        rows only, so no more than a chunk or two is ever held (a plain ``compute()``
        may read every chunk before slicing any)."""
        import dask

        big = self._big()
        out = thin.drop_vars(big).compute(scheduler=_row_scheduler())
        take = dask.delayed(_strided_rows, pure=True)
        for k in big:
            data = self.ds[k].data
            if not is_lazy(self.ds[k]):
                rows = np.asarray(data)[::every]
            else:
                data = data.rechunk({1: -1}) if len(data.chunks[1]) > 1 else data
                starts = np.concatenate([[0], np.cumsum(data.chunks[0])[:-1]])
                parts = [take(b, int(a), every) for b, a in zip(data.to_delayed()[:, 0], starts)]
                rows = np.concatenate(dask.compute(*parts, scheduler=_row_scheduler()))
            out[k] = (("frame", "q"), rows, self.ds[k].attrs)
        return out[list(self.ds.data_vars)]

    def _resolve(self, analysis: str, args: dict[str, Any], every: int = 1) -> dict[str, Any]:
        """Replace the inputs of ``analysis`` that are options (or absent) by cached results."""
        needed = dict(INPUTS.get(analysis, {}))
        if analysis == "kratky" and args.get("normalize") != "rg":
            needed = {}  # the plain transform uses no Guinier fit
        for arg, source in needed.items():
            value = args.get(arg)
            extra = {} if every == 1 else {"every": every}
            if value is None:
                args[arg] = self.result(source, **extra)
            elif isinstance(value, Mapping):
                args[arg] = self.result(source, **extra, **value)
        return args

    def compute(self, analysis: str, /, **params):
        """``ds.saxs.<analysis>(**params)`` with its inputs from the cache, not kept.

        For transforms as large as the series (``kratky``) that a panel only needs
        briefly (e.g. for an axis range); see :meth:`result` for the cached results.
        """
        args = self._resolve(analysis, self._arguments(analysis, params))
        return getattr(self.ds.saxs, analysis)(**args).compute()

    def result(self, analysis: str, /, **params):
        """The whole-series ``ds.saxs.<analysis>(**params)``, computed once and cached.

        Parameters
        ----------
        analysis : one of :data:`ANALYSES`.
        **params : the accessor method's arguments; an input of :data:`INPUTS` may be
            a dict of options of the analysis that produces it. One more keyword,
            ``every`` (int, default 1), computes the analysis on every ``every``-th frame
            only (``ds.isel(frame=slice(None, None, every)).saxs.<analysis>``, its inputs
            on the same frames): what a panel shows at a fixed decimation on a big series.

        Returns
        -------
        The computed (in-memory) result, the same object on every call with the same
        parameters (an exception is raised again, not cached). The time of the
        computation itself (inputs from the cache not counted) is kept in
        :attr:`timings` under the analysis' name (with ", one frame in k").
        """
        key = self.key(analysis, **params)
        with self._lock:
            if key in self._results:
                self._results.move_to_end(key)
                return self._results[key][0]
            job = self._jobs.get(key)
        if job is not None and threading.current_thread() is not self._worker:
            return job.result()  # computing in the background: wait for it (errors raised)
        every, own = _split_every(params)
        args = self._resolve(analysis, self._arguments(analysis, own), every)
        kw = {}
        if self.lazy and threading.current_thread() is self._worker and _row_scheduler() == "sync":
            # the background thread computes its chunks one after the other itself (no
            # distributed client): the other core stays free for the notebook
            kw = {"scheduler": "sync"}
        t0 = time.perf_counter()
        out = getattr(self.thinned(every).saxs, analysis)(**args).compute(**kw)
        label = analysis if every == 1 else f"{analysis}, one frame in {every}"
        self.timings[label] = time.perf_counter() - t0
        # Datasets passed as inputs are kept with the entry: their id is in the key
        kept = tuple(v for v in own.values() if isinstance(v, (xr.Dataset, xr.DataArray)))
        with self._lock:
            self._results[key] = (out, kept)
            # the automatic results (default arguments, on all frames or thinned) stay: other
            # results and every frame step build on them; the others go least recently used first
            spare = [k for k in self._results if k[:2] != self.key(k[0])]
            while len(self._results) > max(self.max_results, 1) and spare:
                del self._results[spare.pop(0)]
        return out

    def cached(self, analysis: str, /, **params) -> bool:
        """Whether ``result(analysis, **params)`` is in the cache."""
        return self.key(analysis, **params) in self._results

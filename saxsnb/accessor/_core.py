"""The machinery under ``ds.saxs``: arrays out of the Dataset, one function over all
frames, a Dataset back with units, the series' attrs and the extended history.

:meth:`AccessorBase._apply` is the one wrapper every analysis method goes through, in
the style of xarray's ``curvefit`` (``xarray/computation/fit.py``): it owns the NaN
handling of masked points, ``errors=``, the ``xarray.apply_ufunc(...,
dask="parallelized")`` mapping (so a dask-chunked series runs unchanged on a cluster)
and the provenance.

Conventions for analysis functions called through ``_apply``:
- signature ``func(q, intensity, sigma, *extra, **options)`` with ``intensity.shape ==
  (n_frames, n_q)``; masked points arrive as NaN in ``intensity`` and ``sigma`` and
  must be ignored like any non-finite point;
- return a mapping ``name -> array`` whose leading axis is the frame axis.
"""

from __future__ import annotations

import json
import warnings
from collections.abc import Callable, Mapping
from typing import Any

import numpy as np
import xarray as xr

from .. import __version__
from .._jsonsafe import to_json_safe
from ..analysis._status import CAUTIONS, STATUS_DTYPE, parameter_of
from ..errors import SaxsFitError, SaxsInputError, SaxsWarning
from ..series import add_history, main_scan, scan_coords

__all__ = ["OutputSpec", "AccessorBase", "provenance", "result_attrs", "is_dask", "TEMPORARIES"]

#: Peak memory each analysis allocates on a batch of frames, in units of the batch's
#: intensity, outputs included (``benchmarks/bench_temporaries.py`` on unsliced 200-frame
#: chunks of 1,000 q, less the 2 chunks of input copies that apply_gufunc made then;
#: rounded up), and the fewest frames per call that keep its speed (a call has a fixed cost:
#: about 0.1 s for ``find_peaks``). On a dask chunk the analysis runs on slices of the
#: chunk that allocate about half a chunk each, no smaller than that (see
#: :meth:`AccessorBase._apply`).
TEMPORARIES = {
    "porod": (2.5, 128),
    "invariant": (4.0, 128),
    "kratky": (2.1, 128),
    "kratky_summary": (2.3, 128),
    "distance_distribution": (45.0, 16),
    "find_peaks": (8.0, 256),
    "absolute_scale": (4.0, 128),
    "rebin": (3.4, 128),
    "per_concentration": (2.1, 128),
}


def is_dask(data) -> bool:
    """True for a dask array (or a DataArray backed by one)."""
    data = getattr(data, "data", data) if isinstance(data, xr.DataArray) else data
    return hasattr(data, "dask") and hasattr(data, "chunks") and not isinstance(data, np.ndarray)


def order_along(values, n_frames: int) -> np.ndarray:
    """Stable frame order along ``values`` (NaN last); frame order when None or not numeric.

    >>> order_along(np.array([2.0, np.nan, 1.0]), 3).tolist()
    [2, 0, 1]
    """
    if values is None or np.asarray(values).dtype.kind not in "fiu":
        return np.arange(n_frames)
    v = np.asarray(values)
    return np.argsort(np.where(np.isfinite(v), v, np.inf), kind="stable")


class OutputSpec:
    """How one output of an analysis function becomes a Dataset variable.

    Parameters
    ----------
    dims : tuple of str
        Extra (core) dims after ``frame``, e.g. ``()`` for a per-frame scalar,
        ``("peak",)`` for a padded list of peaks.
    dtype : numpy dtype of the output ("status" outputs use the one status dtype).
    units : str, optional; stored in the variable's attrs.
    sizes : mapping of new dim name to length (needed for dask when a dim is new).
    attrs : extra attrs of the variable (long_name, ...).
    """

    def __init__(self, dims=(), dtype=float, units=None, sizes=None, **attrs):
        self.dims = tuple(dims)
        self.dtype = np.dtype(STATUS_DTYPE if dtype == "status" else dtype)
        self.units = units
        self.sizes = dict(sizes or {})
        self.attrs = attrs


def scalar_outputs(units: Mapping[str, str | None], dtypes: Mapping[str, Any] | None = None) -> dict:
    """Per-frame scalar OutputSpecs from ``name -> units``; ``status`` gets the status dtype."""
    dtypes = dict(dtypes or {})
    return {k: OutputSpec((), dtypes.get(k, "status" if k.endswith("status") else float), u)
            for k, u in units.items()}


def provenance(operation: str, parameters: Mapping[str, Any]) -> dict[str, Any]:
    """The shortcut attrs of a result: ``operation`` and ``parameters`` (JSON), the same
    content as the history entry the result appends (see :func:`result_attrs`)."""
    return {
        "operation": operation,
        "parameters": json.dumps(to_json_safe(dict(parameters)), sort_keys=True),
        "saxsnb_version": __version__,
    }


def result_attrs(source: xr.Dataset, operation: str, parameters: Mapping[str, Any],
                 after: xr.Dataset | None = None) -> dict[str, Any]:
    """The attrs of a result made from ``source``: its attrs (sample, files, ...), its
    history extended by this step (the one history format of
    :func:`saxsnb.series.add_history`), and ``operation`` / ``parameters`` of this step.
    ``after``: a result this step was computed from (peaks for phases, a Guinier fit for
    a Kratky summary); its history, which holds the series' and its own step, is extended."""
    attrs = dict(source.attrs)
    if after is not None and "history" in after.attrs:
        attrs["history"] = list(after.attrs["history"])
    stepped = add_history(xr.Dataset(attrs=attrs), operation, **dict(parameters))
    out = dict(stepped.attrs)
    for key in ("operation", "parameters", "saxsnb_version"):
        out.pop(key, None)
    out.update(provenance(operation, parameters))
    return out


def _in_slices(run: Callable, pieces: int, n_out: int, min_frames: int = 1) -> Callable:
    """``run(I, S, *extra)`` over ``pieces`` slices of the frames of a chunk (each of at
    least ``min_frames`` frames), each writing into the outputs preallocated for the whole
    chunk (extras cut along the frames too)."""

    def sliced(I_, S_, *extra):
        n = I_.shape[0]
        step = max(1, min_frames, -(-n // pieces))
        if n <= step:
            return run(I_, S_, *extra)
        outs = None
        for a in range(0, n, step):  # a few slices of a chunk, each vectorised over its frames
            b = min(n, a + step)
            part = run(I_[a:b], S_[a:b],
                       *[e[a:b] if np.ndim(e) and np.shape(e)[0] == n else e for e in extra])
            part = part if n_out > 1 else (part,)
            if outs is None:
                outs = [np.empty((n, *p.shape[1:]), dtype=p.dtype) for p in part]
            for k, p in enumerate(part):
                if p.dtype.kind in "SU" and p.dtype.itemsize > outs[k].dtype.itemsize:
                    outs[k] = outs[k].astype(p.dtype)  # strings as wide as the widest slice's
                outs[k][a:b] = p
        return tuple(outs) if n_out > 1 else outs[0]

    return sliced


def _one_block(x):
    """The block itself from blockwise's list of the blocks along a dimension in one chunk."""
    while isinstance(x, list):
        if len(x) != 1:
            raise ValueError("a core dimension must be one chunk")
        x = x[0]
    return x


def per_chunk(run: Callable, I: xr.DataArray, S: xr.DataArray, extras: list, outputs: Mapping,
              sizes: Mapping[str, int] | None = None) -> tuple:
    """``run(I, S, *extras)`` on each frame chunk of dask-backed (frame, q) arrays, one task
    per chunk (``I`` and ``S`` with q in one chunk; ``extras`` DataArrays with frame first,
    or without frame: given whole to every task) whose blocks reach ``run`` as they are
    (``dask.array.apply_gufunc``, under ``xarray.apply_ufunc(dask="parallelized")``, joins
    every input block into a new array first: a copy of the chunk's intensity and sigma in
    every task). Returns a DataArray per output, frame first, like ``apply_ufunc``'s."""
    import dask.array as da

    fch = I.data.chunks[0]
    names = list(outputs)
    dim_size = {"q": I.sizes["q"], **dict(sizes or {})}
    letters = iter("abcdeghijklmnoprstuvwxyz")
    letter: dict[str, str] = {"q": "q"}  # one index letter per dimension name

    def index(dims) -> str:
        return "f" + "".join(letter.setdefault(d, next(letters)) for d in dims)

    args = [I.data, "fq", S.data.rechunk(I.data.chunks), "fq"]
    for a in extras:
        arr = da.asarray(a.data)
        # an extra's own dims get their own letters (contracted: each task gets them whole);
        # one without frame (a background curve, a factor) goes whole to every task
        on_frame = a.dims[:1] == ("frame",)
        arr = arr.rechunk((fch, *[-1] * (arr.ndim - 1)) if on_frame else -1)
        own = "".join(next(letters) for _ in range(arr.ndim - on_frame))
        args += [arr, ("f" if on_frame else "") + own]
        dim_size.update({d: int(n) for d, n in zip(a.dims, a.shape)})

    def saxs_chunk(*blocks):
        res = run(*[_one_block(b) for b in blocks])
        return res if len(names) > 1 else (res,)

    def saxs_output(t, k):
        return t[k]

    tmp = da.blockwise(saxs_chunk, "f", *args, concatenate=False, meta=np.empty((0,), dtype=object))
    result = []
    for k, n in enumerate(names):
        spec = outputs[n]
        ind = index(spec.dims)
        new_axes = {c: dim_size[d] for c, d in zip(ind[1:], spec.dims)}
        arr = da.blockwise(saxs_output, ind, tmp, "f", k, None, new_axes=new_axes, dtype=spec.dtype,
                           meta=np.empty((0,) * len(ind), dtype=spec.dtype))
        coords = {"frame": I["frame"]} if "frame" in I.coords else {}
        if "q" in spec.dims and "q" in I.coords:
            coords["q"] = I["q"]
        result.append(xr.DataArray(arr, dims=("frame", *spec.dims), coords=coords))
    return tuple(result)


class AccessorBase:
    """State and helpers shared by the subject mixins of ``ds.saxs``."""

    def __init__(self, ds: xr.Dataset):
        self._ds = ds

    @property
    def scan(self) -> str:
        """Name of the main scan coordinate ("temperature", "time", ..., or "frame")."""
        return main_scan(self._ds)

    @property
    def scan_coords(self) -> list[str]:
        """All per-frame scan coordinates."""
        return scan_coords(self._ds)

    def masked(self) -> tuple[xr.DataArray, xr.DataArray]:
        """Intensity and sigma with masked points set to NaN (new arrays).

        Examples
        --------
        >>> import saxsnb
        >>> ds = saxsnb.from_arrays([0.1, 0.2], [[1.0, 2.0]], [[0.1, 0.1]])
        >>> ds["mask"] = (("frame", "q"), [[True, False]])
        >>> ds.saxs.masked()[0].values.tolist()
        [[nan, 2.0]]
        """
        ds = self._ds
        I, S = ds["intensity"], ds["sigma"]
        if "mask" in ds.data_vars:
            I = I.where(~ds["mask"])
            S = S.where(~ds["mask"])
        return I, S

    # ------------------------------------------------------------ arguments
    def _per_frame(self, value, name: str) -> xr.DataArray:
        """A number or per-frame values as a DataArray on ``frame``."""
        n = self._ds.sizes["frame"]
        if isinstance(value, xr.DataArray):
            if value.dims != ("frame",):
                raise SaxsInputError(f"{name} must be on ('frame',), got {value.dims}", parameter=name)
            return value
        arr = (np.broadcast_to(np.asarray(value, dtype=float), (n,)) if np.ndim(value) == 0
               else np.asarray(value, dtype=float))
        if arr.shape != (n,):
            raise SaxsInputError(f"{name} has shape {arr.shape}; expected ({n},)", parameter=name)
        return xr.DataArray(arr, dims="frame", coords={"frame": self._ds["frame"]})

    def _per_frame_range(self, q_range):
        """(None, ()) for None or one (a, b) range; else (DataArray (frame, bound), (it,))."""
        if q_range is None:
            return None, ()
        if isinstance(q_range, xr.DataArray):
            da = q_range.transpose("frame", ...)
        else:
            arr = np.asarray(q_range, dtype=float)
            if arr.shape == (2,):
                if not arr[0] < arr[1]:
                    raise SaxsInputError(f"q_range {tuple(arr)} must be (q_min, q_max), q_min < q_max",
                                         parameter="q_range")
                return None, ()
            n = self._ds.sizes["frame"]
            if arr.shape != (n, 2):
                raise SaxsInputError(f"q_range must be (q_min, q_max) or ({n}, 2) per frame; got {arr.shape}",
                                     parameter="q_range")
            da = xr.DataArray(arr, dims=("frame", "bound"), coords={"frame": self._ds["frame"]})
        if da.ndim != 2 or da.shape[1] != 2:
            raise SaxsInputError("a per-frame q_range needs dims (frame, 2)", parameter="q_range")
        return da, (da,)

    @staticmethod
    def _check_errors(errors: str) -> None:
        if errors not in ("ignore", "raise"):
            raise SaxsInputError(f"errors must be 'ignore' or 'raise', got {errors!r}", parameter="errors")

    def _raise_failed(self, out: xr.Dataset, operation: str, errors: str) -> xr.Dataset:
        """With errors="raise", a SaxsFitError naming the first failed frame and status."""
        if errors != "raise":
            return out
        if out["status"].chunks is not None:
            # computed once: the status check and the user's later compute share the work
            out = out.persist()
        status = np.asarray(out["status"].values)
        fine = np.isin(status, ("ok",) + CAUTIONS)
        bad = np.flatnonzero(~fine)
        if bad.size == 0:
            cautioned = np.flatnonzero(status != "ok")
            if cautioned.size:
                codes = ", ".join(sorted(set(status[cautioned].astype(str))))
                warnings.warn(
                    f"{operation}: {cautioned.size} of {status.size} frames carry a caution ({codes}), "
                    f"the first at frame {out['frame'].values[cautioned[0]].item()}; their numbers are "
                    "kept (errors='raise' stops only on failures)", SaxsWarning, stacklevel=3)
            return out
        i = int(bad[0])
        st = str(status[i])
        frame = out["frame"].values[i].item()
        where = f"frame {frame}"
        scan = self.scan
        if scan != "frame" and scan in out.coords:
            where += f" ({scan} = {out[scan].values[i]} {out[scan].attrs.get('units', '')})".rstrip()
        raise SaxsFitError(
            f"{operation} failed at {where}: status {st!r}; {bad.size} of {status.size} frames failed "
            "(use errors='ignore' to keep the others)",
            frame=frame, parameter=parameter_of(st),
        )

    # ------------------------------------------------------------ scan order
    def _scan_name(self, name: str | None = None) -> str:
        # scan coordinates are looked up on the series: a result may hold a variable
        # of the same name (a peak "position" on a "position" scan)
        src = self._ds
        name = name or self.scan
        if name != "frame" and name not in src.coords:
            raise SaxsInputError(f"no coordinate {name!r} to order frames by", parameter="order_by")
        return name if name in src.coords else "frame"

    def _scan_values(self, name: str, n_frames: int) -> np.ndarray | None:
        src = self._ds
        if name in src.coords and src.sizes["frame"] == n_frames:
            return np.asarray(src[name].values)
        return None

    def _scan_order(self, ds: xr.Dataset, name: str | None = None) -> np.ndarray:
        """Frame order along a scan coordinate (default the main scan; stable, NaN last).

        The values are read from the series itself: results share its frame axis, and
        a result variable may carry the scan coordinate's name.
        """
        v = self._scan_source(ds, name)
        return order_along(None if v is None else np.asarray(v), ds.sizes["frame"])

    def _scan_source(self, ds: xr.Dataset, name: str | None = None):
        """The values (numpy or dask, not computed) that :meth:`_scan_order` sorts by, or None."""
        src = self._ds if self._ds.sizes["frame"] == ds.sizes["frame"] else ds
        name = self._scan_name(name)
        if name not in src.coords:
            return None
        return src[name].variable.data

    def _frame_coords(self, out: xr.Dataset) -> xr.Dataset:
        """Attach the series' frame and scan coordinates to a result on ``frame``."""
        ds = self._ds
        for c in self.scan_coords:
            if c in out.data_vars:  # keep both: the scan coordinate gets a prefix
                out = out.assign_coords(
                    {f"scan_{c}": ds[c].reset_coords(drop=True).assign_attrs(scan_coordinate=c)}
                )
            else:
                out = out.assign_coords({c: ds[c].reset_coords(drop=True)})
        return out.assign_coords(frame=ds["frame"].reset_coords(drop=True))

    def _result(self, data: Mapping[str, tuple], operation: str, parameters: Mapping[str, Any],
                coords=None, like: xr.Dataset | None = None, after: xr.Dataset | None = None) -> xr.Dataset:
        """A result Dataset from in-memory arrays, with coordinates and provenance; the
        frame coordinates come from ``like`` (a result on the same frames) when given."""
        out = xr.Dataset(dict(data), coords=coords)
        if like is not None and like.sizes["frame"] != self._ds.sizes["frame"]:
            out = out.assign_coords({c: like[c] for c in like.coords if like[c].dims == ("frame",)})
        else:
            out = self._frame_coords(out)
        out.attrs = result_attrs(self._ds, operation, parameters, after)
        return out

    # ------------------------------------------- one step over the whole frame axis
    @staticmethod
    def _across_frames(func: Callable[..., Mapping[str, np.ndarray]], arrays, outputs: Mapping[str, tuple],
                       frame_chunks=None, **kwargs) -> dict:
        """``func(*arrays, **kwargs)``, a step that needs every frame at once (linking
        peaks, the scan prior of indexing), on per-frame summaries.

        In memory: called directly. When any of ``arrays`` is dask-backed: one dask task
        on a worker (its inputs, e.g. a (frame, peak) table, are gathered there, never in
        the client), and every output a lazy dask array cut into ``frame_chunks``.
        ``outputs``: ``name -> (shape, dtype)`` of each returned array, frame first (the
        dtype of a string output is metadata only: the computed array keeps its width).
        Returns ``name -> array`` (numpy or dask).
        """
        data = [a.data if isinstance(a, xr.DataArray) else a for a in arrays]
        if not any(is_dask(d) for d in data):
            return dict(func(*[None if d is None else np.asarray(d) for d in data], **kwargs))
        import dask.array as da

        # one generalised ufunc whose core dims include "frame": dask gives the task every
        # frame (rechunked to one block), and the outputs share one task (no duplicate
        # computation, unlike a delayed call on the arrays, whose graphs are optimised apart)
        given = [i for i, d in enumerate(data) if d is not None]
        names = list(outputs)
        letters = iter("abcdeghijklmnopqrstuvwxyz")
        sizes: dict[int, str] = {}

        def dims(shape):
            return "(" + ",".join("f" if i == 0 else sizes.setdefault(n, next(letters))
                                  for i, n in enumerate(shape)) + ")"

        sig_in = ",".join(dims(np.shape(data[i])) for i in given)
        sig_out = ",".join(dims(outputs[n][0]) for n in names)
        output_sizes = {v: k for k, v in sizes.items()}

        def run(*given_data):
            full = [None] * len(data)
            for i, d in zip(given, given_data):
                full[i] = d
            res = func(*full, **kwargs)
            out = tuple(np.asarray(res[n]) for n in names)
            return out if len(out) > 1 else out[0]

        res = da.apply_gufunc(run, f"{sig_in}->{sig_out}",
                              *[data[i] for i in given], output_dtypes=[outputs[n][1] for n in names],
                              output_sizes=output_sizes, allow_rechunk=True, vectorize=False)
        res = res if len(names) > 1 else (res,)
        out = {}
        for name, arr in zip(names, res):
            if frame_chunks is not None:
                arr = arr.rechunk({0: frame_chunks})
            out[name] = arr
        return out

    # -------------------------------------------------- mapping over frames
    def _apply(
        self,
        func: Callable[..., Mapping[str, np.ndarray]],
        outputs: Mapping[str, OutputSpec],
        *,
        operation: str,
        parameters: Mapping[str, Any] | None = None,
        extra_args: tuple = (),
        errors: str | None = None,
        after: xr.Dataset | None = None,
        temporaries: tuple[float, int] | None = None,
        **kwargs,
    ) -> xr.Dataset:
        """Run ``func(q, intensity, sigma, *extra_args, **kwargs)`` over all frames.

        Masked points become NaN; ``xarray.apply_ufunc`` with ``dask="parallelized"``
        maps the function (on a dask-backed series each frame chunk is processed
        independently; q must be one chunk and is rechunked if needed). ``extra_args``
        are per-frame arrays (DataArrays on ``frame`` and possibly other core dims)
        passed after sigma. ``errors`` ("ignore" / "raise", None for no check): with
        "raise" the first frame whose ``status`` is a failure raises SaxsFitError (the cautions
        of :data:`saxsnb.analysis.CAUTIONS` pass with a SaxsWarning).
        ``temporaries``: (the peak memory ``func`` allocates on a batch of frames, in
        units of the batch's intensity, measured by ``benchmarks/bench_temporaries.py``;
        the fewest frames per call); on a dask chunk, ``func`` then runs on slices of the
        chunk small enough to allocate about half a chunk at a time, each writing into the
        chunk's preallocated outputs, so a task's peak stays within a few chunks (issue 13).
        Results are the same: the functions' results per frame do not depend on the batch
        (the dask tests check it at chunk sizes 1, 5 and 12, and with slices of 1 frame).

        Returns a Dataset on ``frame`` (plus the new dims of ``outputs``) with the
        scan coordinates kept, units on each variable, the series' attrs and history
        extended by ``operation`` with ``parameters`` (default ``kwargs``).
        """
        if errors is not None:
            self._check_errors(errors)
        I, S = self.masked()
        # scan coordinates are re-attached at the end, so an output may share a name
        # with one (a peak "position" on a "position" scan)
        I, S = I.reset_coords(drop=True), S.reset_coords(drop=True)
        extra_args = tuple(a.reset_coords(drop=True) if isinstance(a, xr.DataArray) else a
                           for a in extra_args)
        q = self._ds["q"].values
        names = list(outputs)

        def _run(I_, S_, *extra):
            res = func(q, I_, S_, *extra, **kwargs)
            out = tuple(np.asarray(res[n]).astype(outputs[n].dtype, copy=False) for n in names)
            return out[0] if len(out) == 1 else out

        if I.chunks is not None:
            I, S = I.chunk({"q": -1}), S.chunk({"q": -1})
            if temporaries is not None and temporaries[0] > 1:
                _run = _in_slices(_run, int(np.ceil(2 * temporaries[0])), len(names), int(temporaries[1]))
        extra_core = [[d for d in a.dims if d != "frame"] for a in extra_args]
        sizes: dict[str, int] = {}
        for spec in outputs.values():
            sizes.update(spec.sizes)
        if I.chunks is not None and all(isinstance(a, xr.DataArray) and "frame" in a.dims
                                        for a in extra_args):
            result = per_chunk(_run, I, S, [a.transpose("frame", ...) for a in extra_args], outputs, sizes)
        else:
            result = xr.apply_ufunc(
                _run, I, S, *extra_args,
                input_core_dims=[["q"], ["q"], *extra_core],
                output_core_dims=[list(outputs[n].dims) for n in names],
                dask="parallelized",
                output_dtypes=[outputs[n].dtype for n in names],
                dask_gufunc_kwargs={"output_sizes": sizes} if sizes else None,
                keep_attrs=False,
            )
            if len(names) == 1:
                result = (result,)
        data_vars = {}
        for n, da in zip(names, result):
            spec = outputs[n]
            attrs = dict(spec.attrs)
            if spec.units is not None:
                attrs["units"] = spec.units
            data_vars[n] = da.assign_attrs(attrs)
        out = self._frame_coords(xr.Dataset(data_vars))
        out.attrs = result_attrs(self._ds, operation, kwargs if parameters is None else parameters, after)
        if errors is not None:
            out = self._raise_failed(out, operation, errors)
        return out

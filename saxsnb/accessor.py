"""The ``.saxs`` accessor on :class:`xarray.Dataset`.

This is the one place that turns Datasets into numpy arrays and back. Each method is
a thin adapter: pick the arrays, call a pure function from ``saxsnb.analysis`` through
:meth:`SaxsAccessor._map_frames` (``xarray.apply_ufunc(..., dask="parallelized")``,
so a dask-chunked series runs unchanged on a cluster), attach units and provenance.

Conventions for analysis functions called through ``_map_frames``:
- signature ``func(q, intensity, sigma, **options)`` with ``intensity.shape ==
  (n_frames, n_q)``; masked points arrive as NaN in ``intensity`` and ``sigma`` and
  must be ignored like any non-finite point;
- return a mapping ``name -> array`` whose leading axis is the frame axis.
"""

from __future__ import annotations

import html
from collections.abc import Callable, Mapping
from typing import Any

import numpy as np
import xarray as xr

from . import __version__
from .errors import SaxsInputError
from .series import (
    CANONICAL_Q_UNIT,
    add_history,
    main_scan,
    normalize_q_unit,
    q_unit_factor,
    scan_coords,
    validate,
)

__all__ = ["SaxsAccessor", "OutputSpec"]


class OutputSpec:
    """How one output of an analysis function becomes a Dataset variable.

    Parameters
    ----------
    dims : tuple of str
        Extra (core) dims after ``frame``, e.g. ``()`` for a per-frame scalar,
        ``("peak",)`` for a padded list of peaks.
    dtype : numpy dtype of the output.
    units : str, optional; stored in the variable's attrs.
    sizes : mapping of new dim name to length (needed for dask when a dim is new).
    attrs : extra attrs of the variable (long_name, ...).
    """

    def __init__(self, dims=(), dtype=float, units=None, sizes=None, **attrs):
        self.dims = tuple(dims)
        self.dtype = np.dtype(dtype)
        self.units = units
        self.sizes = dict(sizes or {})
        self.attrs = attrs


@xr.register_dataset_accessor("saxs")
class SaxsAccessor:
    """SAXS series methods, as ``ds.saxs.<method>``."""

    def __init__(self, ds: xr.Dataset):
        self._ds = ds

    # ------------------------------------------------------------------ basics
    @property
    def scan(self) -> str:
        """Name of the main scan coordinate ("temperature", "time", ..., or "frame")."""
        return main_scan(self._ds)

    @property
    def scan_coords(self) -> list[str]:
        """All per-frame scan coordinates."""
        return scan_coords(self._ds)

    def validate(self) -> xr.Dataset:
        """Check the layout (see :func:`saxsnb.validate`); return the Dataset."""
        return validate(self._ds)

    def masked(self) -> tuple[xr.DataArray, xr.DataArray]:
        """Intensity and sigma with masked points set to NaN (new arrays)."""
        ds = self._ds
        I, S = ds["intensity"], ds["sigma"]
        if "mask" in ds.data_vars:
            I = I.where(~ds["mask"])
            S = S.where(~ds["mask"])
        return I, S

    def frame(self, value=None, *, coord: str | None = None, index: int | None = None):
        """Select one frame by scan value (nearest) or by position.

        Parameters
        ----------
        value : float
            A value of the scan coordinate; the nearest frame is returned.
        coord : str, optional
            Which scan coordinate ``value`` refers to (default: the main scan).
        index : int, optional
            Select by position instead of value.

        Returns
        -------
        Dataset of the one frame (``frame`` kept as a scalar coordinate).
        """
        ds = self._ds
        if index is not None:
            n = ds.sizes["frame"]
            if not -n <= int(index) < n:
                raise SaxsInputError(f"frame index {index} outside 0..{n - 1}", parameter="index")
            return ds.isel(frame=int(index))
        if value is None:
            raise SaxsInputError("give a scan value or index=", parameter="value")
        name = coord or self.scan
        if name not in ds.coords:
            raise SaxsInputError(
                f"no scan coordinate {name!r}; have {self.scan_coords or ['frame']}",
                parameter="coord",
            )
        vals = np.asarray(ds[name].values, dtype=float)
        if not np.isfinite(value):
            raise SaxsInputError(f"scan value {value!r} is not finite", parameter="value")
        i = int(np.nanargmin(np.abs(vals - float(value))))
        return ds.isel(frame=i)

    def to_q_unit(self, unit: str) -> xr.Dataset:
        """Return a copy with q expressed in ``unit`` ("1/nm" or "1/A").

        Analysis functions expect 1/nm; this is for display and export.
        """
        ds = self._ds
        target = normalize_q_unit(unit)
        current = normalize_q_unit(ds["q"].attrs.get("units", CANONICAL_Q_UNIT))
        if target == current:
            return ds.copy()
        factor = q_unit_factor(current) / q_unit_factor(target)
        q = ds["q"]
        new_q = xr.DataArray(q.values * factor, dims="q", attrs={**q.attrs, "units": target})
        out = ds.assign_coords(q=new_q)
        return add_history(out, "to_q_unit", source_unit=current, target_unit=target)

    def save(self, path, **options) -> None:
        """Write the series to NetCDF (.nc) or NXcanSAS HDF5 (.h5, .nxs), atomically."""
        from .io import save_series

        save_series(self._ds, path, **options)

    # ----------------------------------------------------------------- summary
    def summary(self) -> dict[str, Any]:
        """A JSON-safe summary: frames, q range and unit, scan ranges, units."""
        ds = self._ds
        q = ds["q"].values
        out: dict[str, Any] = {
            "frames": int(ds.sizes["frame"]),
            "q_points": int(ds.sizes["q"]),
            "q_min": float(q.min()) if q.size else None,
            "q_max": float(q.max()) if q.size else None,
            "q_unit": ds["q"].attrs.get("units", ""),
            "intensity_unit": ds["intensity"].attrs.get("units", ""),
            "sigma_estimated": bool(ds.attrs.get("sigma_estimated", 0)),
            "dask": ds["intensity"].chunks is not None,
            "scan": {},
        }
        for name in self.scan_coords:
            v = ds[name].values
            if v.dtype.kind in "fiu" and v.size:
                out["scan"][name] = {
                    "min": float(np.nanmin(v)),
                    "max": float(np.nanmax(v)),
                    "units": ds[name].attrs.get("units", ""),
                }
        if "sample" in ds.attrs:
            out["sample"] = str(ds.attrs["sample"])
        return out

    def __repr__(self) -> str:
        s = self.summary()
        lines = [
            f"SAXS series: {s['frames']} frames x {s['q_points']} q points",
            f"  q: {s['q_min']:.4g} .. {s['q_max']:.4g} {s['q_unit']}",
            f"  intensity: {s['intensity_unit']}"
            + ("  (sigma estimated from scatter)" if s["sigma_estimated"] else ""),
        ]
        for name, r in s["scan"].items():
            lines.append(f"  {name}: {r['min']:.4g} .. {r['max']:.4g} {r['units']}")
        return "\n".join(lines)

    def _repr_html_(self) -> str:
        rows = "".join(
            f"<tr><td>{html.escape(line.split(':', 1)[0].strip())}</td>"
            f"<td>{html.escape(line.split(':', 1)[1].strip())}</td></tr>"
            for line in repr(self).splitlines()[1:]
        )
        head = html.escape(repr(self).splitlines()[0])
        return f"<div><b>{head}</b><table>{rows}</table></div>"

    # ---- corrections
    def subtract(self, background: xr.Dataset, *, scale: float = 1.0) -> xr.Dataset:
        """Subtract a background series; sigma is propagated in quadrature.

        Parameters
        ----------
        background : Dataset
            A series on the same q grid with the same intensity unit, with either one
            frame (subtracted from every frame) or as many frames as this series
            (matched by position).
        scale : float
            Factor applied to the background (transmission/thickness ratio).

        Returns
        -------
        A new Dataset: intensity ``I - scale I_bg``, sigma
        ``sqrt(sigma^2 + (scale sigma_bg)^2)``, mask the union of both masks, the
        operation recorded in ``attrs["history"]``. See
        :func:`saxsnb.corrections.subtract_background`.
        """
        from .corrections import subtract_background

        ds = self._ds
        bI, bS, bM = _matching_background(ds, background)
        I, S = ds["intensity"], ds["sigma"]
        if I.chunks is not None:
            I, S = I.chunk({"q": -1}), S.chunk({"q": -1})
        out_i, out_s = xr.apply_ufunc(
            subtract_background, I, S, bI, bS, kwargs={"scale": float(scale)},
            input_core_dims=[["q"]] * 4, output_core_dims=[["q"], ["q"]],
            dask="parallelized", output_dtypes=[float, float],
        )
        out = ds.copy()
        out["intensity"] = out_i.transpose("frame", "q").assign_attrs(ds["intensity"].attrs)
        out["sigma"] = out_s.transpose("frame", "q").assign_attrs(ds["sigma"].attrs)
        if bM is not None:
            mask = bM if "mask" not in ds.data_vars else (ds["mask"] | bM)
            out["mask"] = mask.transpose("frame", "q").assign_attrs(long_name="excluded points")
        if background.attrs.get("sigma_estimated", 0):
            out.attrs["sigma_estimated"] = 1
        return add_history(
            out, "subtract", scale=float(scale), background_frames=int(background.sizes["frame"]),
            background_sample=str(background.attrs.get("sample", "")),
        )

    # -------------------------------------------------- mapping over frames
    def _map_frames(
        self,
        func: Callable[..., Mapping[str, np.ndarray]],
        outputs: Mapping[str, OutputSpec],
        *,
        operation: str,
        parameters: Mapping[str, Any] | None = None,
        extra_args: tuple = (),
        **kwargs,
    ) -> xr.Dataset:
        """Run ``func(q, intensity, sigma, *extra_args, **kwargs)`` over all frames.

        Uses ``xarray.apply_ufunc`` with ``dask="parallelized"``: on a dask-backed
        series each frame chunk is processed independently (q must be one chunk and
        is rechunked if needed). ``extra_args`` are per-frame arrays (DataArrays
        on ``frame`` and possibly other core dims) passed after sigma.

        Returns a Dataset on ``frame`` (plus the new dims of ``outputs``) with the
        scan coordinates kept, units on each variable and provenance in attrs.
        """
        ds = self._ds
        I, S = self.masked()
        q = ds["q"]
        names = list(outputs)

        def _run(I_, S_, *extra):
            res = func(q.values, I_, S_, *extra, **kwargs)
            return tuple(np.asarray(res[n]).astype(outputs[n].dtype, copy=False) for n in names)

        if I.chunks is not None:
            I = I.chunk({"q": -1})
            S = S.chunk({"q": -1})
        extra_core = []
        for a in extra_args:
            extra_core.append([d for d in a.dims if d != "frame"])
        sizes: dict[str, int] = {}
        for spec in outputs.values():
            sizes.update(spec.sizes)
        result = xr.apply_ufunc(
            _run,
            I,
            S,
            *extra_args,
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
        out = xr.Dataset(data_vars)
        for c in self.scan_coords:
            out = out.assign_coords({c: ds[c]})
        out = out.assign_coords(frame=ds["frame"])
        out.attrs = provenance(operation, parameters or kwargs)
        return out


def provenance(operation: str, parameters: Mapping[str, Any]) -> dict[str, Any]:
    """Attrs recording how a result was made: method, parameters (JSON), version."""
    import json

    from .series import _jsonable

    return {
        "operation": operation,
        "parameters": json.dumps(_jsonable(dict(parameters)), sort_keys=True),
        "saxsnb_version": __version__,
    }


def _matching_background(ds: xr.Dataset, background) -> tuple[xr.DataArray, ...]:
    """Background intensity, sigma and mask (or None) ready to combine with ``ds``.

    One background frame gives arrays on ``q`` only; as many frames as ``ds`` gives
    arrays on ``(frame, q)`` carrying the frame labels of ``ds``. Anything else is a
    SaxsInputError naming the parameter ``background``.
    """
    if not isinstance(background, xr.Dataset):
        raise SaxsInputError(
            f"background must be a series Dataset, got {type(background).__name__}",
            parameter="background",
        )
    try:
        validate(background)
    except SaxsInputError as exc:
        raise SaxsInputError(f"background is not a series: {exc}", parameter="background") from None
    q, bq = ds["q"], background["q"]
    if normalize_q_unit(q.attrs["units"]) != normalize_q_unit(bq.attrs["units"]):
        raise SaxsInputError(
            f"background q is in {bq.attrs['units']}, the series in {q.attrs['units']}",
            parameter="background",
        )
    if bq.size != q.size or not np.allclose(bq.values, q.values, rtol=1e-9, atol=0.0):
        raise SaxsInputError(
            f"background q grid ({bq.size} points, {float(bq.min()):.4g}..{float(bq.max()):.4g}) "
            f"differs from the series ({q.size} points, {float(q.min()):.4g}..{float(q.max()):.4g});"
            " regrid one of them first",
            parameter="background",
        )
    units = ds["intensity"].attrs.get("units", "arb"), background["intensity"].attrs.get("units", "arb")
    if units[0] != units[1]:
        raise SaxsInputError(
            f"background intensity is in {units[1]!r}, the series in {units[0]!r}",
            parameter="background",
        )
    n, nb = ds.sizes["frame"], background.sizes["frame"]
    names = ["intensity", "sigma"] + (["mask"] if "mask" in background.data_vars else [])
    if nb == 1:
        out = [
            xr.DataArray(background[v].data[0], dims=("q",), coords={"q": q}) for v in names
        ]
    elif nb == n:
        coords = {"frame": ds["frame"], "q": q}
        out = [xr.DataArray(background[v].data, dims=("frame", "q"), coords=coords) for v in names]
    else:
        raise SaxsInputError(
            f"background has {nb} frames; expected 1 or {n} (one per frame of the series)",
            parameter="background",
        )
    if out[0].chunks is not None:
        out = [a.chunk({"q": -1}) for a in out]
    return out[0], out[1], (out[2] if len(out) == 3 else None)

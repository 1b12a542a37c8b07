"""``ds.saxs`` methods on the series itself: selection, units, summary, report, saving,
background subtraction."""

from __future__ import annotations

import html
from typing import Any

import numpy as np
import xarray as xr

from ..errors import SaxsInputError
from ..series import CANONICAL_Q_UNIT, add_history, normalize_q_unit, q_unit_factor, validate
from ._core import AccessorBase

__all__ = ["SeriesMethods"]


class SeriesMethods(AccessorBase):
    """Selection, units, summary, report, saving and background subtraction."""

    def validate(self) -> xr.Dataset:
        """Check the layout (see :func:`saxsnb.validate`); return the Dataset.

        Examples
        --------
        >>> import saxsnb
        >>> ds = saxsnb.from_arrays([0.1, 0.2], [[1.0, 2.0]], [[0.1, 0.1]])
        >>> ds.saxs.validate() is ds
        True
        """
        return validate(self._ds)

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

        Examples
        --------
        >>> import saxsnb
        >>> ds = saxsnb.from_arrays([0.1, 0.2], [[1.0, 1.0], [2.0, 2.0]], [[0.1, 0.1], [0.1, 0.1]],
        ...                         scan={"temperature": [20.0, 30.0]})
        >>> float(ds.saxs.frame(27.0).temperature), int(ds.saxs.frame(index=0).frame)
        (30.0, 0)
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
        fin = np.sort(vals[np.isfinite(vals)])
        step = float(np.median(np.diff(fin))) if fin.size > 1 else 0.0
        if fin.size and not fin[0] - step <= float(value) <= fin[-1] + step:
            unit = ds[name].attrs.get("units", "")
            raise SaxsInputError(
                f"{name} = {value} is outside the scan ({fin[0]:g} .. {fin[-1]:g} {unit}); "
                "use index= for a frame position", parameter="value")
        i = int(np.nanargmin(np.abs(vals - float(value))))
        return ds.isel(frame=i)

    def to_q_unit(self, unit: str) -> xr.Dataset:
        """Return a copy with q expressed in ``unit`` ("1/nm" or "1/A").

        Analysis functions expect 1/nm; this is for display and export.

        Examples
        --------
        >>> import saxsnb
        >>> ds = saxsnb.from_arrays([1.0, 2.0], [[1.0, 1.0]], [[0.1, 0.1]])
        >>> a = ds.saxs.to_q_unit("1/A")
        >>> a.q.values.tolist(), a.q.attrs["units"]
        ([0.1, 0.2], '1/A')
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
        """Write the series to NetCDF (.nc) or NXcanSAS HDF5 (.h5, .nxs), atomically.

        Examples
        --------
        >>> import os, tempfile, saxsnb, xarray as xr
        >>> ds = saxsnb.from_arrays([0.1, 0.2], [[1.0, 2.0]], [[0.1, 0.1]], sample="gel")
        >>> path = os.path.join(tempfile.mkdtemp(), "series.nc")
        >>> ds.saxs.save(path)
        >>> xr.testing.assert_identical(saxsnb.open_series(path), ds)
        """
        from ..io import save_series

        save_series(self._ds, path, **options)

    # ----------------------------------------------------------------- summary
    def summary(self) -> dict[str, Any]:
        """A JSON-safe summary: frames, q range and unit, scan ranges, units.

        Examples
        --------
        >>> import saxsnb
        >>> s = saxsnb.from_arrays([0.1, 0.2], [[1.0, 2.0]], [[0.1, 0.1]]).saxs.summary()
        >>> s["frames"], s["q_points"], s["q_unit"]
        (1, 2, '1/nm')
        """
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

    def report(self, *, frame: int | None = None, format: str = "text"):
        """What this series or result is, in words: the same text a panel shows.

        Parameters
        ----------
        frame : int, optional
            Position of one frame: its values (with sigma and status message) instead
            of the series statistics.
        format : {"text", "html", "dict"}
            A text report, its HTML form, or a JSON-safe summary dict.

        Examples
        --------
        >>> import numpy as np, saxsnb
        >>> q = np.linspace(0.02, 1.0, 100)
        >>> ds = saxsnb.from_arrays(q, np.exp(-(2 * q) ** 2 / 3), np.full(100, 0.01), sample="globule")
        >>> print(ds.saxs.guinier().saxs.report(frame=0).splitlines()[0])
        guinier of 1 frame(s): ok 1
        >>> ds.saxs.report(format="dict")["sample"]
        'globule'
        """
        from ..display.report import report_html, report_summary, report_text

        if format == "text":
            return report_text(self._ds, frame=frame)
        if format == "html":
            return report_html(self._ds, frame=frame)
        if format == "dict":
            return report_summary(self._ds)
        raise SaxsInputError(f"format must be 'text', 'html' or 'dict', got {format!r}", parameter="format")

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
        :func:`saxsnb.corrections.subtract_background`. Frames are matched by
        position, not by scan value: sort both series the same way.

        Examples
        --------
        >>> import saxsnb
        >>> ds = saxsnb.from_arrays([0.1, 0.2], [[5.0, 3.0], [6.0, 4.0]], [[0.3, 0.3], [0.3, 0.3]])
        >>> bg = saxsnb.from_arrays([0.1, 0.2], [1.0, 1.0], [0.4, 0.4])
        >>> out = ds.saxs.subtract(bg)
        >>> out.intensity.values.tolist(), out.sigma.values.round(6).tolist()
        ([[4.0, 2.0], [5.0, 3.0]], [[0.5, 0.5], [0.5, 0.5]])
        """
        from ..analysis._corrections import subtract_background

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
            own = ds["mask"] if "mask" in ds.data_vars else xr.zeros_like(ds["intensity"], dtype=bool)
            out["mask"] = (own | bM).transpose("frame", "q").assign_attrs(long_name="excluded points")
        if background.attrs.get("sigma_estimated", 0):
            out.attrs["sigma_estimated"] = 1
        return add_history(
            out, "subtract", scale=float(scale), background_frames=int(background.sizes["frame"]),
            background_sample=str(background.attrs.get("sample", "")),
        )



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

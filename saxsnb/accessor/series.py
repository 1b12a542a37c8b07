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
        """Write the series to NetCDF (.nc), NXcanSAS HDF5 (.h5, .nxs) or a Zarr store
        (.zarr), atomically (see :func:`saxsnb.save_series`). A dask-backed series is
        written chunk by chunk (Zarr and NetCDF chunked along frame like it), never
        computed whole.

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
    def subtract(self, background: xr.Dataset, *, scale: float | str = 1.0, scale_q_range=None,
                 match: str | None = None, tolerance: float | None = None, regrid: bool = False,
                 transmission=None, thickness=None, exposure=None, monitor=None,
                 background_normalization: dict | None = None) -> xr.Dataset:
        """Subtract a background series; sigma is propagated in quadrature.

        Parameters
        ----------
        background : Dataset
            A series with the same intensity unit, on the same q grid (or any grid with
            ``regrid=True``: linear interpolation onto the series' q, points outside
            its range become NaN).
        scale : float or "auto"
            Factor applied to the background; ``"auto"`` fits one per frame on
            ``scale_q_range`` (:func:`saxsnb.analysis.fit_scale`, default the upper
            quarter of the q range), recorded in ``background_scale`` and
            ``background_scale_sigma``.
        match : {None, "position", "scan", "mean"}
            Which background frame goes with each frame: by position (same number of
            frames), by the nearest value of the main scan coordinate within
            ``tolerance`` (:func:`saxsnb.analysis.match_frames`; an error names a frame
            without partner), or the mean of all background frames for every frame.
            Default: the one background frame; else by position, unless both series
            carry the main scan coordinate in different orders, then by scan value
            (never by position silently). Scan matching records ``background_frame``.
        transmission, thickness, exposure, monitor : number, per-frame values or name
            Normalisation: the series (and the background) are divided by transmission
            x exposure x monitor before subtraction and the result by thickness. A
            name is looked up among the per-frame variables and attrs of the series and,
            when present, of the background.
        background_normalization : dict, optional
            The background's own ``transmission`` / ``exposure`` / ``monitor`` values.

        Returns
        -------
        A new Dataset: intensity ``I/N - scale I_bg/N_bg`` (divided by thickness), sigma
        propagated in quadrature, mask the union of both masks, the operation with its
        parameters recorded in ``attrs["history"]``.

        Examples
        --------
        >>> import saxsnb
        >>> ds = saxsnb.from_arrays([0.1, 0.2], [[5.0, 3.0], [6.0, 4.0]], [[0.3, 0.3], [0.3, 0.3]])
        >>> bg = saxsnb.from_arrays([0.1, 0.2], [1.0, 1.0], [0.4, 0.4])
        >>> out = ds.saxs.subtract(bg)
        >>> out.intensity.values.tolist(), out.sigma.values.round(6).tolist()
        ([[4.0, 2.0], [5.0, 3.0]], [[0.5, 0.5], [0.5, 0.5]])
        """
        from ..analysis._averaging import average_frames
        from ..analysis._corrections import fit_scale, match_frames, normalization_factor, subtract_background

        ds = self._ds
        if match not in (None, "position", "scan", "mean"):
            raise SaxsInputError(f"match must be None, 'position', 'scan' or 'mean', got {match!r}",
                                 parameter="match")
        bI, bS, bM = _background_arrays(ds, background, regrid=regrid)
        n, nb = ds.sizes["frame"], bI.shape[0]
        names = {"transmission": transmission, "exposure": exposure, "monitor": monitor}
        own = {k: _norm_value(ds, v, k) for k, v in names.items()}
        bnorm = dict(background_normalization or {})
        unknown = sorted(set(bnorm) - set(names))
        if unknown:
            raise SaxsInputError(f"background_normalization keys must be among {sorted(names)}, "
                                 f"got {unknown}",
                                 parameter="background_normalization")
        for k, v in names.items():
            if k not in bnorm and isinstance(v, str):
                bnorm[k] = _norm_value(background, v, k, required=False)
        n_s = normalization_factor(n, **own)
        n_b = normalization_factor(nb, **bnorm)
        bI, bS = bI / n_b[:, None], bS / n_b[:, None]
        scan = self.scan
        how = match
        if how is None:
            how = "single" if nb == 1 else ("scan" if _orders_differ(ds, background, scan) else "position")
        index = None
        if how == "mean":
            avg = average_frames(ds["q"].values, bI, bS)
            bI, bS = avg["intensity"], avg["sigma"]
            bM = None if bM is None else bM.any(axis=0, keepdims=True)
            how = "single"
        if how == "position" and nb != n:
            raise SaxsInputError(f"background has {nb} frames; expected 1 or {n} (one per frame of the "
                                 "series)", parameter="background")
        if how == "scan":
            if scan == "frame" or scan not in background.coords:
                raise SaxsInputError(f"match='scan' needs the scan coordinate {scan!r} on both series",
                                     parameter="match")
            index = match_frames(ds[scan].values, background[scan].values, tolerance=tolerance)
        elif how == "position":
            index = np.arange(n)
        d = normalization_factor(n, thickness=_norm_value(ds, thickness, "thickness"))
        if index is not None:
            bI, bS = bI[index], bS[index]
            bM = None if bM is None else bM[index]
        I, S = ds["intensity"], ds["sigma"]
        if I.chunks is not None:
            I, S = I.chunk({"q": -1}), S.chunk({"q": -1})
        norm = xr.DataArray(n_s, dims="frame", coords={"frame": ds["frame"]})
        I, S = I / norm, S / norm
        dims = ("q",) if bI.shape[0] == 1 and index is None else ("frame", "q")
        bIa = xr.DataArray(bI[0] if dims == ("q",) else bI, dims=dims)
        bSa = xr.DataArray(bS[0] if dims == ("q",) else bS, dims=dims)
        extra = {}
        if scale == "auto":
            if scale_q_range is None:
                qv = ds["q"].values
                scale_q_range = (float(qv.min() + 0.75 * (qv.max() - qv.min())), float(qv.max()))
            Im, Sm = self.masked()
            if Im.chunks is not None:
                Im, Sm = Im.chunk({"q": -1}), Sm.chunk({"q": -1})
            qv, rng_ = ds["q"].values, scale_q_range
            frames = xr.DataArray(np.arange(n), dims="frame")

            def _fit(I_, S_, B_, BS_, pos_):
                try:
                    r = fit_scale(qv, I_, S_, B_, BS_, q_range=rng_)
                except SaxsInputError as exc:  # frame numbers of the whole series, not of a chunk
                    if exc.frame is None:
                        raise
                    f = int(np.asarray(pos_)[exc.frame])
                    raise SaxsInputError(str(exc.args[0]).replace(f"frame {exc.frame} ", f"frame {f} ", 1),
                                         parameter=exc.parameter, frame=f) from None
                return r["scale"], r["scale_sigma"]

            # per frame (a dask series: per chunk on the workers, lazy)
            In, Sn = (Im / norm).reset_coords(drop=True), (Sm / norm).reset_coords(drop=True)
            if In.chunks is not None:  # one task per chunk, its blocks given as they are
                from ._core import OutputSpec, per_chunk

                k, k_sigma = per_chunk(_fit, In, Sn, [bIa, bSa, frames],
                                       {"k": OutputSpec(()), "k_sigma": OutputSpec(())})
            else:
                k, k_sigma = xr.apply_ufunc(
                    _fit, In, Sn, bIa, bSa, frames, input_core_dims=[["q"]] * 4 + [[]],
                    output_core_dims=[[], []], dask="parallelized", output_dtypes=[float, float],
                )
            k, k_sigma = k.drop_vars("frame", errors="ignore"), k_sigma.drop_vars("frame", errors="ignore")
            extra["background_scale"] = k.assign_attrs(units="1")
            extra["background_scale_sigma"] = k_sigma.assign_attrs(units="1")
            scale_arg = k
        elif isinstance(scale, str):
            raise SaxsInputError(f"scale must be a number or 'auto', got {scale!r}", parameter="scale")
        else:
            scale_arg = xr.DataArray(_background_scale(scale))

        def _sub(I_, S_, B_, BS_, k_):
            return subtract_background(I_, S_, B_, BS_, scale=np.asarray(k_)[..., None])

        if I.chunks is not None:  # one task per chunk, its blocks given as they are
            from ._core import OutputSpec, per_chunk

            out_i, out_s = per_chunk(_sub, I.reset_coords(drop=True), S.reset_coords(drop=True),
                                     [bIa, bSa, scale_arg],
                                     {"i": OutputSpec(("q",)), "s": OutputSpec(("q",))})
        else:
            out_i, out_s = xr.apply_ufunc(
                _sub, I, S, bIa, bSa, scale_arg,
                input_core_dims=[["q"]] * 4 + [[]], output_core_dims=[["q"], ["q"]],
                dask="parallelized", output_dtypes=[float, float],
            )
        dd = xr.DataArray(d, dims="frame", coords={"frame": ds["frame"]})
        out = ds.copy()
        out["intensity"] = (out_i / dd).transpose("frame", "q").assign_attrs(ds["intensity"].attrs)
        out["sigma"] = (out_s / dd).transpose("frame", "q").assign_attrs(ds["sigma"].attrs)
        if bM is not None:
            bMa = xr.DataArray(bM[0] if dims == ("q",) else bM, dims=dims)
            own_m = ds["mask"] if "mask" in ds.data_vars else xr.zeros_like(ds["intensity"], dtype=bool)
            out["mask"] = (own_m | bMa).transpose("frame", "q").assign_attrs(long_name="excluded points")
        for name, var in extra.items():
            out[name] = var
        if how == "scan":
            out["background_frame"] = ("frame", index, {"long_name": "matched background frame (position)"})
        if background.attrs.get("sigma_estimated", 0):
            out.attrs["sigma_estimated"] = 1
        params = dict(scale=scale if scale == "auto" else float(scale),
                      background_frames=int(background.sizes["frame"]),
                      background_sample=str(background.attrs.get("sample", "")),
                      background_history=list(background.attrs.get("history", [])))
        if match is not None or how == "scan":
            params["match"] = how if match is None else match
        if scale == "auto":
            params["scale_q_range"] = list(scale_q_range)
        for k, v in dict(transmission=transmission, thickness=thickness, exposure=exposure,
                         monitor=monitor, regrid=regrid or None, tolerance=tolerance).items():
            if v is not None:
                params[k] = v if isinstance(v, str) or np.ndim(v) == 0 else np.asarray(v).tolist()
        if background_normalization:
            params["background_normalization"] = background_normalization
        return add_history(out, "subtract", **params)


def _norm_value(ds: xr.Dataset, value, name: str, required: bool = True):
    """A normalisation value: number, per-frame values or a name in ``ds``."""
    if not isinstance(value, str):
        return None if value is None else np.asarray(value, dtype=float)
    if value in ds.variables and ds[value].dims == ("frame",):
        return np.asarray(ds[value].values, dtype=float)
    if value in ds.attrs:
        return float(ds.attrs[value])
    if not required:
        return None
    raise SaxsInputError(f"{name}={value!r} names no per-frame variable or attr of the series",
                         parameter=name)


def _orders_differ(ds: xr.Dataset, background: xr.Dataset, scan: str) -> bool:
    """True when both series carry the scan coordinate with distinct values in different orders."""
    if scan == "frame" or scan not in background.coords or background.sizes["frame"] != ds.sizes["frame"]:
        return False
    a = np.asarray(ds[scan].values)
    b = np.asarray(background[scan].values)
    if a.dtype.kind not in "fiu" or b.dtype.kind not in "fiu":
        return False
    if np.unique(b).size != b.size or np.unique(a).size != a.size:
        return False
    return not np.array_equal(np.argsort(a, kind="stable"), np.argsort(b, kind="stable"))


def _background_arrays(ds: xr.Dataset, background, *, regrid: bool = False):
    """Background intensity, sigma (n_background, n_q) and mask (or None) on the q of ``ds``."""
    _check_background(ds, background, regrid=regrid)
    bI = np.asarray(background["intensity"].values, dtype=float)
    bS = np.asarray(background["sigma"].values, dtype=float)
    bM = np.asarray(background["mask"].values, dtype=bool) if "mask" in background.data_vars else None
    q, bq = ds["q"].values, background["q"].values
    if regrid and (bq.size != q.size or not np.allclose(bq, q, rtol=1e-9, atol=0.0)):
        if bM is not None:
            bI, bS = np.where(bM, np.nan, bI), np.where(bM, np.nan, bS)
        j = np.clip(np.searchsorted(bq, q) - 1, 0, bq.size - 2)
        t = (q - bq[j]) / (bq[j + 1] - bq[j])
        inside = (q >= bq[0]) & (q <= bq[-1])
        bI = np.where(inside, bI[:, j] * (1 - t) + bI[:, j + 1] * t, np.nan)
        bS = np.where(inside, np.sqrt((bS[:, j] * (1 - t)) ** 2 + (bS[:, j + 1] * t) ** 2), np.nan)
        bM = None
    return bI, bS, bM


def _check_background(ds: xr.Dataset, background, *, regrid: bool = False) -> None:
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
    if not regrid and (bq.size != q.size or not np.allclose(bq.values, q.values, rtol=1e-9, atol=0.0)):
        raise SaxsInputError(
            f"background q grid ({bq.size} points, {float(bq.min()):.4g}..{float(bq.max()):.4g}) "
            f"differs from the series ({q.size} points, {float(q.min()):.4g}..{float(q.max()):.4g});"
            " regrid one of them first or pass regrid=True",
            parameter="background",
        )
    units = ds["intensity"].attrs.get("units", "arb"), background["intensity"].attrs.get("units", "arb")
    if units[0] != units[1]:
        raise SaxsInputError(
            f"background intensity is in {units[1]!r}, the series in {units[0]!r}",
            parameter="background",
        )


def _background_scale(scale) -> float:
    """A fixed background scale: a finite, non-negative real number (not a bool)."""
    if isinstance(scale, (bool, np.bool_)) or not isinstance(scale, (int, float, np.integer, np.floating)):
        raise SaxsInputError(f"scale must be a number or 'auto', got {scale!r}", parameter="scale")
    value = float(scale)
    if not np.isfinite(value) or value < 0:
        raise SaxsInputError(f"scale must be a finite number >= 0, got {scale!r}", parameter="scale")
    return value

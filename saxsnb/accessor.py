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
            own = ds["mask"] if "mask" in ds.data_vars else xr.zeros_like(ds["intensity"], dtype=bool)
            out["mask"] = (own | bM).transpose("frame", "q").assign_attrs(long_name="excluded points")
        if background.attrs.get("sigma_estimated", 0):
            out.attrs["sigma_estimated"] = 1
        return add_history(
            out, "subtract", scale=float(scale), background_frames=int(background.sizes["frame"]),
            background_sample=str(background.attrs.get("sample", "")),
        )

    # ---- peaks
    def find_peaks(
        self,
        *,
        q_range: tuple[float, float] | None = None,
        min_prominence: float = 6.0,
        profile: str = "pseudo_voigt",
        max_peaks: int = 16,
        baseline_width: float | None = None,
        shoulders: bool = True,
        backfit: bool = True,
        track: bool = True,
        order_by: str | None = None,
        errors: str = "ignore",
    ) -> xr.Dataset:
        """Find, fit and track the Bragg peaks of every frame.

        Parameters are those of :func:`saxsnb.analysis.peaks.find_peaks` (q in 1/nm;
        ``min_prominence`` in units of the noise); ``track`` links peaks of consecutive
        frames (:func:`saxsnb.analysis.tracking.link_peaks`) in the order of the
        coordinate ``order_by`` (default: the main scan; give "time" or "frame" for a
        heating-and-cooling cycle, where sorting by temperature would interleave legs).

        Returns
        -------
        Dataset on (frame, peak), NaN padded: ``position``, ``fwhm`` (1/nm),
        ``height``, ``area`` with ``*_sigma``, ``prominence``, ``eta``, ``redchi``,
        ``track`` (int, -1 none); per frame ``n_peaks`` and ``status``.

        Notes
        -----
        Finding and fitting run per frame chunk through ``_map_frames`` (lazy on a
        dask series). Tracking needs the whole frame axis: the (small) peak table is
        computed first, then linked in memory; with ``track=False`` the result stays
        lazy.
        """
        from .analysis import peaks as _pk
        from .analysis.tracking import link_peaks

        ds = self._ds
        iu = ds["intensity"].attrs.get("units", "arb")
        size = {"peak": int(max_peaks)}
        per = {
            "position": "1/nm", "position_sigma": "1/nm", "fwhm": "1/nm", "fwhm_sigma": "1/nm",
            "height": iu, "height_sigma": iu, "area": f"{iu} 1/nm", "area_sigma": f"{iu} 1/nm",
            "prominence": "1", "eta": "1", "redchi": "1",
        }
        outputs = {k: OutputSpec(("peak",), float, u, sizes=size) for k, u in per.items()}
        outputs["n_peaks"] = OutputSpec((), np.int64, "1")
        outputs["status"] = OutputSpec((), "<U24", None)
        params = dict(q_range=q_range, min_prominence=min_prominence, profile=profile,
                      max_peaks=int(max_peaks), baseline_width=baseline_width, shoulders=bool(shoulders),
                      backfit=bool(backfit), errors=errors)
        out = self._map_frames(_pk.find_peaks, outputs, operation="find_peaks", parameters=params, **params)
        q = ds["q"].values
        lo, hi = (q.min(), q.max()) if q_range is None else (q_range[0], q_range[1])
        out.attrs.update(q_min=float(max(lo, q.min())), q_max=float(min(hi, q.max())), profile=profile)
        if not track:
            return out
        out = out.compute()
        order = self._scan_order(out, order_by)
        out.attrs["order_by"] = self._scan_name(out, order_by)
        t, _ = link_peaks(*(out[v].values[order] for v in ("position", "position_sigma", "fwhm")))
        trk = np.empty_like(t)
        trk[order] = t
        return out.assign(track=(("frame", "peak"), trk, {"units": "1", "long_name": "track number"}))

    def index_phases(
        self,
        peaks: xr.Dataset | None = None,
        *,
        phases: tuple[str, ...] = ("lamellar", "hexagonal", "Pn3m", "Im3m", "Ia3d", "Fd3m", "Pm3n", "Fm3m"),
        max_phases: int = 2,
        tolerance: float = 0.01,
        use_scan_prior: bool = True,
        prior_weight: float = 1.0,
        order_by: str | None = None,
        max_relative_width: float = 0.1,
    ) -> xr.Dataset:
        """Assign each frame's peaks to one phase or two coexisting phases.

        Parameters
        ----------
        peaks : Dataset from :meth:`find_peaks` (computed with defaults if None).
        phases, max_phases, tolerance, use_scan_prior, prior_weight
            See :func:`saxsnb.analysis.lattice.index_peaks`.
        order_by : str, optional
            Coordinate along which the scan prior and re-tracking run (default: the
            one used by :meth:`find_peaks`, else the main scan).
        max_relative_width : float
            Peaks with FWHM / position above this are not taken as Bragg reflections
            and are left out of indexing (counted in ``n_broad``). Form-factor maxima
            of particles (relative widths ~0.2-0.6) would otherwise be indexed as a
            lattice; mesophase reflections are typically far sharper (the demo phase
            ramp: 0.004-0.09). Common practice; raise it for small, disordered domains.

        Returns
        -------
        Dataset on (frame, slot): ``phase`` (str, "" empty), ``lattice`` and
        ``lattice_sigma`` (nm; d for lamellar, cell edge a otherwise), ``score``;
        on frame: ``alternative``, ``status``, ``caveat``, ``cost``, ``margin``,
        ``n_unexplained``; on (frame, peak): ``hkl``, ``peak_phase``, ``position``
        and ``track`` (re-linked so a track ends where its assignment changes).
        """
        from .analysis.lattice import index_peaks
        from .analysis.tracking import link_peaks

        pk = self.find_peaks() if peaks is None else peaks
        if "position" not in pk.data_vars or "peak" not in pk.dims:
            raise SaxsInputError("peaks must be the Dataset of ds.saxs.find_peaks()", parameter="peaks")
        pk = pk.compute()
        order_by = order_by or pk.attrs.get("order_by")
        order = self._scan_order(pk, order_by)
        params = dict(phases=tuple(phases), max_phases=int(max_phases), tolerance=float(tolerance),
                      use_scan_prior=bool(use_scan_prior), prior_weight=float(prior_weight))
        get = lambda v: pk[v].values[order] if v in pk.data_vars else None  # noqa: E731
        pos = get("position")
        with np.errstate(invalid="ignore", divide="ignore"):
            broad = get("fwhm") / pos > float(max_relative_width) if "fwhm" in pk.data_vars else pos != pos
        pos = np.where(broad, np.nan, pos)
        res = index_peaks(pos, get("position_sigma"), get("prominence"),
                          q_min=pk.attrs.get("q_min"), **params)
        res["n_broad"] = broad.sum(axis=-1)
        only_broad = (res["n_broad"] > 0) & ~np.isfinite(pos).any(axis=-1)
        res["status"] = np.where(only_broad, "no_bragg_peaks", res["status"])
        params["max_relative_width"] = float(max_relative_width)
        lab = np.char.add(np.char.add(res["peak_phase"], " "), res["hkl"])
        trk, _ = link_peaks(get("position"), get("position_sigma"), get("fwhm"),
                            labels=np.where(res["hkl"] != "", lab, ""))
        res["track"] = trk
        inv = np.argsort(order)
        if "status" in pk.data_vars:
            bad = pk["status"].values[order] == "no_data"
            res["status"] = np.where(bad, "no_data", res["status"])
        dims = {"phase": ("frame", "slot"), "lattice": ("frame", "slot"), "lattice_sigma": ("frame", "slot"),
                "score": ("frame", "slot"), "hkl": ("frame", "peak"), "peak_phase": ("frame", "peak"),
                "track": ("frame", "peak")}
        units = {"lattice": "nm", "lattice_sigma": "nm", "score": "1", "cost": "1", "margin": "1",
                 "n_unexplained": "1", "track": "1", "n_broad": "1"}
        out = xr.Dataset(
            {k: (dims.get(k, ("frame",)), np.asarray(v)[inv], {"units": units[k]} if k in units else {})
             for k, v in res.items()}
        )
        out["position"] = pk["position"]
        out = out.assign_coords({c: pk[c] for c in pk.coords if pk[c].dims == ("frame",)})
        out = out.assign_coords(slot=np.arange(out.sizes["slot"]))
        out["lattice"].attrs["long_name"] = "d-spacing (lamellar) or cell edge a"
        out.attrs = provenance("index_phases", params)
        out.attrs["scan"] = self._scan_name(pk)
        out.attrs["order_by"] = self._scan_name(pk, order_by)
        out.attrs["note"] = (
            "lattice from a weighted fit over the assigned peaks; frames with few peaks or a "
            "non-empty 'alternative' are ambiguous: read 'caveat'"
        )
        return out

    def phase_map(self, index: xr.Dataset | None = None) -> xr.Dataset:
        """Phases present along the scan, transitions and coexistence windows.

        Parameters
        ----------
        index : Dataset from :meth:`index_phases` (computed with defaults if None).

        Returns
        -------
        Dataset with ``presence`` (bool, (frame, phase_name)), ``share`` and
        ``lattice`` / ``lattice_sigma`` (nm) on (frame, phase_name), ``bonnet_ratio``,
        ``bonnet_ratio_sigma``, ``bonnet_expected``, ``bonnet_pair`` on frame; attrs
        ``transitions``, ``coexistence`` and ``bonnet`` as JSON strings (see
        :func:`saxsnb.analysis.lattice.phase_map`), plus ``scan`` and ``scan_units``.
        """
        import json

        from .analysis.lattice import phase_map

        idx = self.index_phases() if index is None else index
        names = tuple(json.loads(idx.attrs.get("parameters", "{}")).get("phases", ())) or (
            "lamellar", "hexagonal", "Pn3m", "Im3m", "Ia3d", "Fd3m", "Pm3n", "Fm3m")
        scan = idx.attrs.get("scan") or self._scan_name(idx)
        x = self._scan_values(scan, idx.sizes["frame"])
        x = idx["frame"].values if x is None else x
        known = ~np.isin(idx["status"].values, ["no_data", "not_enough_peaks_to_index", "no_phase_found"])
        m = phase_map(idx["phase"].values, x, known=known, lattice=idx["lattice"].values,
                      lattice_sigma=idx["lattice_sigma"].values, score=idx["score"].values, phases=names)
        fp = ("frame", "phase_name")
        out = xr.Dataset(
            {
                "presence": (fp, m["presence"], {"units": "1"}),
                "share": (fp, m["share"], {"units": "1", "long_name": "share of explained peak strength"}),
                "lattice": (fp, m["lattice"], {"units": "nm"}),
                "lattice_sigma": (fp, m["lattice_sigma"], {"units": "nm"}),
                "bonnet_ratio": ("frame", m["bonnet_ratio"], {"units": "1"}),
                "bonnet_ratio_sigma": ("frame", m["bonnet_ratio_sigma"], {"units": "1"}),
                "bonnet_expected": ("frame", m["bonnet_expected"], {"units": "1"}),
                "bonnet_pair": ("frame", m["bonnet_pair"]),
                "known": ("frame", known, {"long_name": "frame could be indexed"}),
            },
            coords={"phase_name": list(names)},
        )
        out = out.assign_coords({c: idx[c] for c in idx.coords if idx[c].dims == ("frame",)})
        out.attrs = provenance("phase_map", {"scan": scan})
        out.attrs.update(
            scan=scan,
            scan_units=str(idx[scan].attrs.get("units", "")) if scan in idx.coords else "",
            transitions=json.dumps(m["transitions"]),
            coexistence=json.dumps(m["coexistence"]),
            bonnet=json.dumps(m["bonnet"]),
        )
        return out

    def phase_report(self, pmap: xr.Dataset | None = None) -> str:
        """Short text report of :meth:`phase_map`: transitions, coexistence, Bonnet ratios."""
        import json

        from .analysis.lattice import phase_map_report

        pm = self.phase_map() if pmap is None else pmap
        scan = pm.attrs.get("scan", "frame")
        xs = self._scan_values(scan, pm.sizes["frame"])
        x = None if xs is None or xs.dtype.kind not in "fiu" else np.sort(xs.astype(float))
        step = float(np.median(np.diff(x))) if x is not None and x.size > 1 else None
        res = {k: json.loads(pm.attrs[k]) for k in ("transitions", "coexistence", "bonnet")}
        return phase_map_report(res, scan=scan, units=pm.attrs.get("scan_units", ""), step=step)

    def _scan_name(self, ds: xr.Dataset, name: str | None = None) -> str:
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
        src = self._ds if self._ds.sizes["frame"] == ds.sizes["frame"] else ds
        name = self._scan_name(src, name)
        v = src[name].values
        if v.dtype.kind not in "fiu":
            return np.arange(ds.sizes["frame"])
        return np.argsort(np.where(np.isfinite(v), v, np.inf), kind="stable")

    # ---- linear regions
    def guinier(
        self,
        q_range=None,
        *,
        shape: str = "compact",
        errors: str = "ignore",
        qrg_limit: float | None = None,
        min_points: int = 8,
        rg=None,
        **search_options,
    ) -> xr.Dataset:
        """Guinier fit of every frame (:func:`saxsnb.analysis.guinier.guinier_fit`).

        Parameters
        ----------
        q_range : None, (q_min, q_max) in 1/nm, or per-frame ranges (array or DataArray
            (frame, 2)); None chooses a range per frame automatically.
        shape : "compact" (Rg, I0), "rod" (cross-section Rc) or "sheet" (thickness).
        errors : "ignore" (failed frames get NaN and a ``status``) or "raise"
            (:class:`~saxsnb.errors.SaxsFitError` naming the first failed frame).
        qrg_limit, min_points, **search_options : see ``guinier_fit``.
        rg : Dataset from ``guinier()`` or DataArray of Rg on frame, optional
            For shape "rod": the rod length L = sqrt(12 (Rg^2 - Rc^2)).

        Returns
        -------
        Dataset on ``frame`` with the scan coordinates: ``rg`` (nm), ``rg_sigma``,
        ``i0`` (intensity units), ``i0_sigma``, ``q_min``, ``q_max`` (1/nm),
        ``qrg_max``, ``n_points``, ``chi2_reduced``, ``status``, the line's ``slope``,
        ``intercept`` and covariance (rod: ``rc``, ``radius``, ``length``; sheet:
        ``rt``, ``thickness``, each with ``_sigma``). Parameters in attrs.

        Examples
        --------
        >>> import numpy as np, saxsnb
        >>> q = np.linspace(0.02, 1.0, 100)
        >>> I = np.exp(-np.outer([2.0, 3.0], q) ** 2 / 3)
        >>> res = saxsnb.from_arrays(q, I, 0.01 * I, scan={"temperature": [20.0, 30.0]}).saxs.guinier()
        >>> res.rg.values.round(6).tolist(), res.rg.attrs["units"], res.status.values.tolist()
        ([2.0, 3.0], 'nm', ['ok', 'ok'])
        """
        from .analysis.guinier import SHAPES, guinier_fit

        if shape not in SHAPES:
            raise SaxsInputError(f"unknown shape {shape!r}; use one of {list(SHAPES)}", parameter="shape")
        iu = self._ds["intensity"].attrs.get("units", "arb")
        i0_unit = {"compact": iu, "rod": f"{iu} 1/nm", "sheet": f"{iu} 1/nm^2"}[shape]
        sizes = {"compact": ("rg",), "rod": ("rc", "radius", "length"), "sheet": ("rt", "thickness")}[shape]
        units = {"q_min": "1/nm", "q_max": "1/nm", "n_points": "1", "chi2_reduced": "1", "status": None,
                 "i0": i0_unit, "i0_sigma": i0_unit, "slope": "nm^2", "slope_sigma": "nm^2",
                 "intercept": "1", "intercept_sigma": "1", "slope_intercept_cov": "nm^2", "qrg_max": "1",
                 "start": "1", "stop": "1"}
        for name in sizes:
            units[name] = units[f"{name}_sigma"] = "nm"
        dtypes = {"n_points": np.int64, "start": np.int64, "stop": np.int64, "status": "<U24"}
        outputs = {k: OutputSpec((), dtypes.get(k, float), u) for k, u in units.items()}
        qr, extra = self._per_frame_range(q_range)
        rg_arrays = ()
        if rg is not None and shape == "rod":
            rg_arrays = self._rg_arrays(rg)
        params = dict(q_range=q_range if qr is None else "per-frame", shape=shape, errors=errors,
                      qrg_limit=qrg_limit, min_points=min_points, rod_length=bool(rg_arrays),
                      **search_options)
        self._check_errors(errors)

        def run(q, I, S, *more):
            more = list(more)
            rng_ = more.pop(0) if qr is not None else q_range
            rg_, rgs_ = (more[0], more[1]) if rg_arrays else (None, None)
            return guinier_fit(q, I, S, q_range=rng_, shape=shape, qrg_limit=qrg_limit,
                               min_points=min_points, rg=rg_, rg_sigma=rgs_, **search_options)

        out = self._map_frames(run, outputs, operation="guinier", parameters=params,
                               extra_args=extra + rg_arrays)
        return self._raise_failed(out, "guinier", errors)

    def porod(self, q_range=None, *, background="fit", errors: str = "ignore") -> xr.Dataset:
        """Porod constant, flat background and power-law exponent of every frame.

        See :func:`saxsnb.analysis.porod.porod_analysis`: q^4 I = Kp + B q^4 when
        ``background="fit"``, else Kp = mean q^4 (I - B) with B given (a number or a
        DataArray on frame); the exponent from log(I - B) vs log q. q_range None is the
        upper quarter of the q grid (a starting point: look at the plot).

        Returns
        -------
        Dataset on ``frame``: ``porod_constant`` (intensity 1/nm^4), ``background``
        (intensity), ``exponent`` ("1"), each with ``_sigma``; ``porod_background_cov``,
        ``prefactor``, ``chi2_reduced``, ``n_points``, ``q_min``, ``q_max``,
        ``status``, ``exponent_status``.
        """
        from .analysis.porod import porod_analysis

        self._check_errors(errors)
        iu = self._ds["intensity"].attrs.get("units", "arb")
        units = {"porod_constant": f"{iu} 1/nm^4", "porod_constant_sigma": f"{iu} 1/nm^4",
                 "background": iu, "background_sigma": iu, "porod_background_cov": f"{iu}^2 1/nm^4",
                 "chi2_reduced": "1", "n_points": "1", "q_min": "1/nm", "q_max": "1/nm", "status": None,
                 "exponent": "1", "exponent_sigma": "1", "prefactor": iu, "prefactor_sigma": iu,
                 "exponent_chi2_reduced": "1", "exponent_status": None}
        dtypes = {"n_points": np.int64, "status": "<U24", "exponent_status": "<U24"}
        outputs = {k: OutputSpec((), dtypes.get(k, float), u) for k, u in units.items()}
        qr, extra = self._per_frame_range(q_range)
        bg_da = None
        if not isinstance(background, str) and np.ndim(background) > 0:
            bg_da = self._per_frame(background, "background")
            extra = extra + (bg_da,)
        elif isinstance(background, str) and background != "fit":
            raise SaxsInputError(f"background must be 'fit' or a number, got {background!r}",
                                 parameter="background")
        params = dict(q_range=q_range if qr is None else "per-frame",
                      background=background if bg_da is None else "per-frame", errors=errors)

        def run(q, I, S, *more):
            more = list(more)
            rng_ = more.pop(0) if qr is not None else q_range
            bg_ = more.pop(0) if bg_da is not None else background
            return porod_analysis(q, I, S, q_range=rng_, background=bg_)

        out = self._map_frames(run, outputs, operation="porod", parameters=params, extra_args=extra)
        return self._raise_failed(out, "porod", errors)

    def invariant(
        self,
        *,
        guinier: xr.Dataset | None = None,
        porod: xr.Dataset | None = None,
        q_range=None,
        porod_q_range=None,
        background="fit",
        volume_fraction=None,
        errors: str = "ignore",
    ) -> xr.Dataset:
        """Invariant Q = int_0^inf q^2 I dq, Porod volume and surface of every frame.

        The low-q part extrapolates the Guinier fit (``guinier``, automatic when
        None), the high-q tail is Kp / q_max from the Porod fit (``porod``, from
        ``porod_q_range`` and ``background`` when None). See
        :func:`saxsnb.analysis.porod.invariant` for the convention (no 4 pi factor)
        and the uncertainties. ``volume_fraction`` (number or DataArray on frame)
        enables ``specific_surface``.

        Returns
        -------
        Dataset on ``frame``: ``invariant``, ``invariant_low``, ``invariant_measured``,
        ``invariant_high`` (intensity 1/nm^3), ``low_fraction``, ``high_fraction``,
        ``porod_volume`` (nm^3), ``surface_to_volume``, ``specific_surface`` (1/nm),
        each with ``_sigma``; ``status``.
        """
        from .analysis.porod import invariant as _invariant

        self._check_errors(errors)
        if q_range is not None and np.shape(q_range) != (2,):
            raise SaxsInputError("q_range of the measured part must be one (q_min, q_max)",
                                 parameter="q_range")
        g = self.guinier() if guinier is None else guinier
        p = self.porod(porod_q_range, background=background) if porod is None else porod
        iu = self._ds["intensity"].attrs.get("units", "arb")
        qu = f"{iu} 1/nm^3"
        units = {"invariant": qu, "invariant_low": qu, "invariant_measured": qu, "invariant_high": qu}
        units = {**units, **{f"{k}_sigma": v for k, v in units.items()}}
        units.update(low_fraction="1", high_fraction="1", porod_volume="nm^3", porod_volume_sigma="nm^3",
                     surface_to_volume="1/nm", surface_to_volume_sigma="1/nm", specific_surface="1/nm",
                     specific_surface_sigma="1/nm", q_min="1/nm", q_max="1/nm", status=None)
        outputs = {k: OutputSpec((), "<U24" if k == "status" else float, u) for k, u in units.items()}
        names = ("rg", "rg_sigma", "i0", "i0_sigma")
        pnames = ("porod_constant", "porod_constant_sigma", "background", "background_sigma",
                  "porod_background_cov")
        extra = tuple(g[n] for n in names) + tuple(p[n] for n in pnames)
        phi = None if volume_fraction is None else self._per_frame(volume_fraction, "volume_fraction")
        if phi is not None:
            extra = extra + (phi,)
        params = dict(q_range=q_range, porod_q_range=porod_q_range, background=background,
                      volume_fraction=None if phi is None else "given", errors=errors,
                      guinier=g.attrs.get("parameters"), porod=p.attrs.get("parameters"))

        def run(q, I, S, rg, rgs, i0, i0s, kp, kps, b, bs, cov, *more):
            return _invariant(q, I, S, rg=rg, rg_sigma=rgs, i0=i0, i0_sigma=i0s, porod_constant=kp,
                              porod_constant_sigma=kps, background=b, background_sigma=bs,
                              porod_background_cov=cov, q_range=q_range,
                              volume_fraction=more[0] if more else None)

        out = self._map_frames(run, outputs, operation="invariant", parameters=params, extra_args=extra)
        return self._raise_failed(out, "invariant", errors)

    def kratky(self, normalize: str | None = None, *, guinier: xr.Dataset | None = None) -> xr.DataArray:
        """Kratky transform of every frame, a DataArray on (frame, q).

        ``normalize=None``: q^2 I (intensity 1/nm^2). ``normalize="rg"``: the
        dimensionless (q Rg)^2 I / I0 with Rg, I0 from ``guinier`` (automatic when
        None); frames without a Guinier result are NaN.
        """
        from .analysis.kratky import kratky as _kratky

        if normalize not in (None, "rg"):
            raise SaxsInputError(f"normalize must be None or 'rg', got {normalize!r}", parameter="normalize")
        iu = self._ds["intensity"].attrs.get("units", "arb")
        unit, label = (f"{iu} 1/nm^2", "q^2 I") if normalize is None else ("1", "(q Rg)^2 I / I0")
        outputs = {"kratky": OutputSpec(("q",), float, unit, long_name=label),
                   "kratky_sigma": OutputSpec(("q",), float, unit, long_name=f"sigma of {label}")}

        def run(q, I, S, *gi):
            K, Ks = _kratky(q, I, S, rg=gi[0] if gi else None, i0=gi[1] if gi else None)
            return {"kratky": K, "kratky_sigma": Ks}

        params: dict[str, Any] = {"normalize": normalize}
        extra: tuple = ()
        if normalize == "rg":
            g = self.guinier() if guinier is None else guinier
            params["guinier"] = g.attrs.get("parameters")
            extra = (g["rg"], g["i0"])
        out = self._map_frames(run, outputs, operation="kratky", parameters=params, extra_args=extra)
        da = out["kratky"].transpose("frame", "q")
        return da.assign_attrs({**out.attrs, **da.attrs})

    def kratky_summary(self, *, guinier: xr.Dataset | None = None, **options) -> xr.Dataset:
        """Peak and high-q shape of every frame's dimensionless Kratky plot.

        See :func:`saxsnb.analysis.kratky.kratky_summary` (``options``: peak_window,
        half_width, bands, bell_level, rise_trend, fall_trend). Returns a Dataset on ``frame``:
        ``peak_qrg``, ``peak_height``, ``level_mid``, ``level_high``, ``trend``,
        ``qrg_max`` (all "1"), ``shape_class`` ("bell", "plateau", "rise",
        "undetermined"), and the ``rg``, ``i0`` used; sortable, e.g.
        ``res.sortby("peak_qrg")``.
        """
        from .analysis.kratky import kratky_summary as _summary

        g = self.guinier() if guinier is None else guinier
        names = ("peak_qrg", "peak_height", "level_mid", "level_high", "trend", "qrg_max")
        outputs = {n: OutputSpec((), float, "1") for n in names}
        outputs["shape_class"] = OutputSpec((), "<U12", None)
        out = self._map_frames(
            lambda q, I, S, rg, i0: _summary(q, I, rg=rg, i0=i0, **options), outputs,
            operation="kratky_summary", parameters={**options, "guinier": g.attrs.get("parameters")},
            extra_args=(g["rg"], g["i0"]),
        )
        return out.assign(rg=g["rg"], i0=g["i0"])

    def _per_frame(self, value, name: str) -> xr.DataArray:
        """A number or per-frame values as a DataArray on ``frame``."""
        n = self._ds.sizes["frame"]
        if isinstance(value, xr.DataArray):
            if value.dims != ("frame",):
                raise SaxsInputError(f"{name} must be on ('frame',), got {value.dims}", parameter=name)
            return value
        arr = np.broadcast_to(np.asarray(value, dtype=float), (n,)) if np.ndim(value) == 0 else np.asarray(
            value, dtype=float)
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

    def _rg_arrays(self, rg):
        if isinstance(rg, xr.Dataset):
            return (rg["rg"], rg["rg_sigma"] if "rg_sigma" in rg else xr.zeros_like(rg["rg"]))
        da = self._per_frame(rg, "rg")
        return (da, xr.zeros_like(da))

    @staticmethod
    def _check_errors(errors: str) -> None:
        if errors not in ("ignore", "raise"):
            raise SaxsInputError(f"errors must be 'ignore' or 'raise', got {errors!r}", parameter="errors")

    def _raise_failed(self, out: xr.Dataset, operation: str, errors: str) -> xr.Dataset:
        """With errors="raise", a SaxsFitError naming the first failed frame and status."""
        if errors != "raise":
            return out
        from .analysis.guinier import STATUS_PARAMETER
        from .errors import SaxsFitError

        status = np.asarray(out["status"].values)
        bad = np.flatnonzero(status != "ok")
        if bad.size == 0:
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
            frame=frame, parameter=STATUS_PARAMETER.get(st, "q_range"),
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
        # scan coordinates are re-attached at the end, so an output may share a name
        # with one (a peak "position" on a "position" scan)
        I, S = I.reset_coords(drop=True), S.reset_coords(drop=True)
        extra_args = tuple(
            a.reset_coords(drop=True) if isinstance(a, xr.DataArray) else a for a in extra_args
        )
        q = ds["q"]
        names = list(outputs)

        def _run(I_, S_, *extra):
            res = func(q.values, I_, S_, *extra, **kwargs)
            out = tuple(np.asarray(res[n]).astype(outputs[n].dtype, copy=False) for n in names)
            return out[0] if len(out) == 1 else out

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
            if c in out.data_vars:  # keep both: the scan coordinate gets a prefix
                out = out.assign_coords(
                    {f"scan_{c}": ds[c].reset_coords(drop=True).assign_attrs(scan_coordinate=c)}
                )
            else:
                out = out.assign_coords({c: ds[c].reset_coords(drop=True)})
        out = out.assign_coords(frame=ds["frame"].reset_coords(drop=True))
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

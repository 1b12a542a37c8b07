"""``ds.saxs`` methods of Bragg peaks and mesophases."""

from __future__ import annotations

import json

import numpy as np
import xarray as xr

from ..analysis._status import STATUS_DTYPE
from ..errors import SaxsInputError
from ._core import TEMPORARIES, AccessorBase, OutputSpec, is_dask, order_along

__all__ = ["PhaseMethods"]

#: dtypes of the non-float outputs of index_phases (string widths are metadata only on
#: a lazy result: the computed arrays keep their own width)
_PHASE_DTYPES = {
    "phase": np.dtype("<U12"), "hkl": np.dtype("<U8"), "peak_phase": np.dtype("<U12"),
    "track": np.dtype(np.int64), "alternative": np.dtype(str), "status": np.dtype(STATUS_DTYPE),
    "caveat": np.dtype(str), "n_unexplained": np.dtype(np.int64), "n_broad": np.dtype(np.int64),
    "n_rejected": np.dtype(np.int64), "rejected": np.dtype(str),
}


class PhaseMethods(AccessorBase):
    """Peaks, phase assignment, phase map and its report."""

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

        Parameters are those of :func:`saxsnb.analysis._peaks.find_peaks` (q in 1/nm;
        ``min_prominence`` in units of the noise); ``track`` links peaks of consecutive
        frames (:func:`saxsnb.analysis._tracking.link_peaks`) in the order of the
        coordinate ``order_by`` (default: the main scan; give "time" or "frame" for a
        heating-and-cooling cycle, where sorting by temperature would interleave legs).

        Returns
        -------
        Dataset on (frame, peak), NaN padded: ``position``, ``fwhm`` (1/nm),
        ``height``, ``area`` with ``*_sigma``, ``prominence``, ``eta``, ``chi2_reduced``,
        ``track`` (int, -1 none); per frame ``n_peaks`` and ``status``.

        Notes
        -----
        Finding and fitting run per frame chunk (``xarray.apply_ufunc``; on a dask
        series, on the workers). Tracking needs the whole frame axis: it runs on the
        (frame, peak) table only, as one task (on a dask series a lazy task on a worker,
        so the client never holds the curves nor the table). The result stays lazy on
        a dask series; ``persist()`` it when several steps read it.

        Examples
        --------
        >>> import saxsnb
        >>> ds = saxsnb.demo.example_series("cubic")
        >>> pk = ds.saxs.find_peaks()
        >>> pk.position.values[0, :4].round(3).tolist(), pk.track.values[:, 0].tolist()
        ([0.889, 1.088, 1.257, 1.539], [0, 0])
        """
        from ..analysis._peaks import find_peaks as _find
        from ..analysis._tracking import track_peaks

        ds = self._ds
        iu = ds["intensity"].attrs.get("units", "arb")
        size = {"peak": int(max_peaks)}
        per = {
            "position": "1/nm", "position_sigma": "1/nm", "fwhm": "1/nm", "fwhm_sigma": "1/nm",
            "height": iu, "height_sigma": iu, "area": f"{iu} 1/nm", "area_sigma": f"{iu} 1/nm",
            "prominence": "1", "eta": "1", "chi2_reduced": "1",
        }
        outputs = {k: OutputSpec(("peak",), float, u, sizes=size) for k, u in per.items()}
        outputs["n_peaks"] = OutputSpec((), np.int64, "1")
        outputs["status"] = OutputSpec((), "status", None)
        params = dict(q_range=q_range, min_prominence=min_prominence, profile=profile,
                      max_peaks=int(max_peaks), baseline_width=baseline_width, shoulders=bool(shoulders),
                      backfit=bool(backfit), errors=errors)
        out = self._apply(_find, outputs, operation="find_peaks", parameters=params, track=False,
                          temporaries=TEMPORARIES["find_peaks"], **params)
        q = ds["q"].values
        lo, hi = (q.min(), q.max()) if q_range is None else (q_range[0], q_range[1])
        out.attrs.update(q_min=float(max(lo, q.min())), q_max=float(min(hi, q.max())), profile=profile)
        if not track:
            return out
        out.attrs["order_by"] = self._scan_name(order_by)
        pos = out["position"]
        n = pos.shape[0]
        trk = self._across_frames(
            lambda p, s, w, x: {"track": track_peaks(p, s, w, order=order_along(x, n))},
            [*(out[v] for v in ("position", "position_sigma", "fwhm")), self._scan_source(out, order_by)],
            {"track": (pos.shape, np.int64)}, frame_chunks=pos.chunks[0] if pos.chunks else None,
        )["track"]
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
        overrides=None,
    ) -> xr.Dataset:
        """Assign each frame's peaks to one phase or two coexisting phases.

        Parameters
        ----------
        peaks : Dataset from :meth:`find_peaks` (computed with defaults if None).
        phases, max_phases, tolerance, use_scan_prior, prior_weight
            See :func:`saxsnb.analysis._lattice.index_peaks`.
        order_by : str, optional
            Coordinate along which the scan prior and re-tracking run (default: the
            one used by :meth:`find_peaks`, else the main scan).
        max_relative_width : float
            Peaks with FWHM / position above this are not taken as Bragg reflections
            and are left out of indexing (counted in ``n_broad``). Form-factor maxima
            of particles (relative widths ~0.2-0.6) would otherwise be indexed as a
            lattice; mesophase reflections are typically far sharper (the demo phase
            ramp: 0.004-0.09). Common practice; raise it for small, disordered domains.
        overrides : mapping frame position -> {"phase": str, "lattice": float or None}
            Frames set by hand (see :func:`saxsnb.analysis.index_phases`): status
            "override", the automatic choice in ``alternative``, the set in
            ``attrs["overrides"]`` (JSON).

        Returns
        -------
        Dataset on (frame, slot): ``phase`` (str, "" empty), ``lattice`` and
        ``lattice_sigma`` (nm; d for lamellar, cell edge a otherwise), ``score``;
        on frame: ``alternative``, ``status``, ``caveat``, ``cost``, ``margin``,
        ``n_unexplained``; on (frame, peak): ``hkl``, ``peak_phase``, ``position``
        and ``track`` (re-linked so a track ends where its assignment changes).

        Examples
        --------
        >>> import saxsnb
        >>> ds = saxsnb.demo.example_series("cubic")
        >>> ix = ds.saxs.index_phases()
        >>> ix.phase.values[:, 0].tolist(), ix.lattice.values[:, 0].round(2).tolist()
        (['Pn3m', 'Pn3m'], [10.0, 10.0])
        >>> fixed = ds.saxs.index_phases(overrides={1: {"phase": "Im3m"}})
        >>> str(fixed.status.values[1]), str(fixed.alternative.values[1])
        ('override', 'automatic: Pn3m')
        """
        from ..analysis._indexing import PHASE_OUTPUTS
        from ..analysis._indexing import index_phases as _index

        pk = self.find_peaks() if peaks is None else peaks
        if "position" not in pk.data_vars or "peak" not in pk.dims:
            raise SaxsInputError("peaks must be the Dataset of ds.saxs.find_peaks()", parameter="peaks")
        order_by = order_by or pk.attrs.get("order_by")
        params = dict(phases=tuple(phases), max_phases=int(max_phases), tolerance=float(tolerance),
                      use_scan_prior=bool(use_scan_prior), prior_weight=float(prior_weight),
                      max_relative_width=float(max_relative_width))
        names = ("position", "position_sigma", "fwhm", "prominence", "status")
        arrays = [pk[v] if v in pk.data_vars else None for v in names] + [self._scan_source(pk, order_by)]
        options = dict(q_min=pk.attrs.get("q_min"), q_step=self._q_step(), overrides=overrides, **params)

        def run(pos, sig, fwhm, prom, status, scan, **kw):
            order = order_along(scan, pos.shape[0])
            return _index(pos, sig, fwhm, prom, peak_status=status, order=order, **kw)

        F, P = pk["position"].shape
        if overrides and pk["position"].chunks is not None:
            _check_overrides(overrides, F)  # now, not when the lazy result is computed
        slots = 1 if int(max_phases) == 1 else 2
        shapes = {"slot": slots, "peak": P}
        outputs = {k: ((F, *(shapes[d] for d in dims)), _PHASE_DTYPES.get(k, float))
                   for k, (dims, _) in PHASE_OUTPUTS.items()}
        chunks = pk["position"].chunks
        res = self._across_frames(run, arrays, outputs, frame_chunks=chunks[0] if chunks else None, **options)
        if overrides:
            params["overrides"] = {str(int(k)): dict(v) for k, v in sorted(overrides.items())}
        data = {k: (("frame", *PHASE_OUTPUTS[k][0]), v,
                    {"units": PHASE_OUTPUTS[k][1]} if PHASE_OUTPUTS[k][1] else {})
                for k, v in res.items()}
        data["position"] = pk["position"].reset_coords(drop=True)
        out = self._result(data, "index_phases", params, coords={"slot": np.arange(slots)},
                           like=pk, after=pk)
        out["lattice"].attrs["long_name"] = "d-spacing (lamellar) or cell edge a"
        out.attrs["scan"] = self._scan_name()
        out.attrs["order_by"] = self._scan_name(order_by)
        if overrides:
            out.attrs["overrides"] = json.dumps(params["overrides"], sort_keys=True)
        out.attrs["note"] = (
            "lattice from a weighted fit over the assigned peaks; frames with few peaks or a "
            "non-empty 'alternative' are ambiguous: read 'caveat'"
        )
        return out

    def _q_step(self) -> float:
        q = np.asarray(self._ds["q"].values, dtype=float)
        return float(np.median(np.diff(q))) if q.size > 1 else float("nan")

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
        :func:`saxsnb.analysis._lattice.phase_map`), plus ``scan`` and ``scan_units``.

        Examples
        --------
        >>> import saxsnb
        >>> ds = saxsnb.demo.example_series("cubic")
        >>> pm = ds.saxs.phase_map()
        >>> pm.presence.sel(phase_name="Pn3m").values.tolist()
        [True, True]
        """
        from ..analysis._lattice import phase_map
        from ..analysis._reflections import PHASES
        from ..analysis._status import UNINDEXED

        idx = self.index_phases() if index is None else index
        names = tuple(json.loads(idx.attrs.get("parameters", "{}")).get("phases", ())) or PHASES
        scan = idx.attrs.get("scan") or self._scan_name()
        same = scan in self._ds.coords and self._ds.sizes["frame"] == idx.sizes["frame"]
        src = self._ds[scan] if same else None
        if any(is_dask(v) for v in idx.variables.values()) or (src is not None and is_dask(src)):
            # a lazy indexing: its per-frame tables ((frame, slot), (frame, peak)) and the scan
            # values computed together, once; the (frame, q) arrays stay on the workers
            import dask

            idx, xv = dask.compute(idx, None if src is None else src.variable.data)
            x = None if xv is None else np.asarray(xv)
        else:
            x = self._scan_values(scan, idx.sizes["frame"])
        x = idx["frame"].values if x is None else x
        known = ~np.isin(idx["status"].values, UNINDEXED)
        m = phase_map(idx["phase"].values, x, known=known, lattice=idx["lattice"].values,
                      lattice_sigma=idx["lattice_sigma"].values, score=idx["score"].values, phases=names)
        fp = ("frame", "phase_name")
        data = {
            "presence": (fp, m["presence"], {"units": "1"}),
            "share": (fp, m["share"], {"units": "1", "long_name": "share of explained peak strength"}),
            "lattice": (fp, m["lattice"], {"units": "nm"}),
            "lattice_sigma": (fp, m["lattice_sigma"], {"units": "nm"}),
            "bonnet_ratio": ("frame", m["bonnet_ratio"], {"units": "1"}),
            "bonnet_ratio_sigma": ("frame", m["bonnet_ratio_sigma"], {"units": "1"}),
            "bonnet_expected": ("frame", m["bonnet_expected"], {"units": "1"}),
            "bonnet_pair": ("frame", m["bonnet_pair"]),
            "known": ("frame", known, {"long_name": "frame could be indexed"}),
        }
        out = self._result(data, "phase_map", {"scan": scan}, coords={"phase_name": list(names)}, like=idx)
        out.attrs.update(
            scan=scan,
            scan_units=str(self._ds[scan].attrs.get("units", "")) if scan in self._ds.coords else "",
            transitions=json.dumps(m["transitions"]),
            coexistence=json.dumps(m["coexistence"]),
            bonnet=json.dumps(m["bonnet"]),
            caveats=json.dumps(_caveat_summary(idx)),
        )
        return out

    def phase_report(self, pmap: xr.Dataset | None = None) -> str:
        """Short text report of :meth:`phase_map`: transitions, coexistence, Bonnet ratios.

        Examples
        --------
        >>> import saxsnb
        >>> ds = saxsnb.demo.example_series("cubic")
        >>> print(ds.saxs.phase_report().splitlines()[1])
          Pn3m: from the start to the end
        """
        from ..display.text import phase_map_report

        pm = self.phase_map() if pmap is None else pmap
        scan = pm.attrs.get("scan", "frame")
        xs = self._scan_values(scan, pm.sizes["frame"])
        x = None if xs is None or xs.dtype.kind not in "fiu" else np.sort(xs.astype(float))
        step = float(np.median(np.diff(x))) if x is not None and x.size > 1 else None
        res = {k: json.loads(pm.attrs[k]) for k in ("transitions", "coexistence", "bonnet")}
        return phase_map_report(res, scan=scan, units=pm.attrs.get("scan_units", ""), step=step,
                                caveats=json.loads(pm.attrs.get("caveats", "{}")))



def _check_overrides(overrides, n_frames: int) -> None:
    """The checks of the indexing's overrides (frame in range, known phase), made up front."""
    from ..analysis._reflections import PHASES

    for frame, choice in overrides.items():
        f = int(frame)
        if not 0 <= f < n_frames:
            raise SaxsInputError(f"override frame {f} outside 0..{n_frames - 1}", parameter="overrides",
                                 frame=f)
        phase = str(dict(choice).get("phase", ""))
        if phase not in PHASES:
            raise SaxsInputError(f"an override needs a phase name out of {list(PHASES)}, got {phase!r}",
                                 parameter="overrides", frame=f)


def _caveat_summary(idx) -> dict:
    """Frames of an indexing result whose label has a close alternative or rests on few
    peaks: ``{"n_frames", "close": {alternative: frames}, "few_peaks": frames}``."""
    phase = np.asarray(idx["phase"].values).astype(str)
    labelled = (phase != "").any(axis=-1) if phase.ndim > 1 else phase != ""
    none = np.full(labelled.shape, "")
    alt = np.asarray(idx["alternative"].values).astype(str) if "alternative" in idx else none
    cav = np.asarray(idx["caveat"].values).astype(str) if "caveat" in idx else none
    close, by_label = {}, {}
    labels = (np.array(["+".join(sorted(p for p in row if p)) for row in phase]) if phase.ndim > 1
              else phase)
    pick = labelled & (alt != "")
    for a, lab in zip(alt[pick], labels[pick]):
        close[str(a)] = close.get(str(a), 0) + 1
        inner = by_label.setdefault(str(lab), {})
        inner[str(a)] = inner.get(str(a), 0) + 1
    few = int(sum(1 for c in cav[labelled] if "rests on few ratios" in c))
    return {"n_frames": int(labelled.size), "close": close, "close_by_label": by_label, "few_peaks": few}

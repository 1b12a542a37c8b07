"""``ds.saxs`` methods that prepare a series: frame comparison, averaging, absolute
scale, q calibration, rebinning, concentration series; and the top-level
:func:`calibrate_q` and :func:`merge_ranges` on Datasets.

Per-frame operations go through :meth:`AccessorBase._apply` (dask-parallel over frame
chunks); operations across frames (comparison, averaging, extrapolation) call the numpy
function on an in-memory series, and on a dask series build a graph of per-chunk work
reduced along frame (:mod:`saxsnb.accessor._across`), never holding (frame, q) arrays in
the client; the result is wrapped with :meth:`AccessorBase._result`. Every result keeps
the series' attrs and appends one history entry.
"""

from __future__ import annotations

import numpy as np
import xarray as xr

from .. import analysis as an
from ..analysis._merging import _concentrations
from ..errors import SaxsInputError
from ..series import validate
from ._core import TEMPORARIES, AccessorBase, OutputSpec, is_dask, result_attrs

__all__ = ["PreparationMethods", "calibrate_q", "merge_ranges", "curve_arrays"]


def curve_arrays(ds: xr.Dataset, name: str = "standard"):
    """q, intensity, sigma (masked points NaN) of a series, as numpy arrays."""
    if not isinstance(ds, xr.Dataset):
        raise SaxsInputError(f"{name} must be a series Dataset, got {type(ds).__name__}", parameter=name)
    try:
        validate(ds)
    except SaxsInputError as exc:
        raise SaxsInputError(f"{name} is not a series: {exc}", parameter=name) from None
    I, S = ds.saxs.masked()
    return ds["q"].values, np.asarray(I.values, dtype=float), np.asarray(S.values, dtype=float)


def _series_like(ds: xr.Dataset, out: xr.Dataset, *, units: str | None = None, q=None) -> xr.Dataset:
    """Give a result on (frame, q) the series layout: q attrs, intensity/sigma attrs."""
    iattrs = dict(ds["intensity"].attrs)
    sattrs = dict(ds["sigma"].attrs)
    if units is not None:
        iattrs["units"] = sattrs["units"] = units
    if q is not None:
        out = out.assign_coords(q=("q", np.asarray(q, dtype=float), dict(ds["q"].attrs)))
    else:
        out = out.assign_coords(q=ds["q"])
    out["intensity"] = out["intensity"].transpose("frame", "q").assign_attrs(iattrs)
    out["sigma"] = out["sigma"].transpose("frame", "q").assign_attrs(sattrs)
    return validate(out)


def _per_frame_value(ds: xr.Dataset, value, name: str):
    """A number, per-frame values, or the name of a coordinate/variable/attr of ``ds``."""
    if value is None:
        return None
    if isinstance(value, str):
        if value in ds.variables and ds[value].dims == ("frame",):
            return np.asarray(ds[value].values, dtype=float)
        if value in ds.attrs:
            return float(ds.attrs[value])
        raise SaxsInputError(f"{name}={value!r} names no per-frame variable or attr of the series",
                             parameter=name)
    if isinstance(value, xr.DataArray):
        return np.asarray(value.values, dtype=float)
    return value


class PreparationMethods(AccessorBase):
    """Frame comparison, averaging, calibration, rebinning, concentration series."""

    def _arrays(self):
        I, S = self.masked()
        return self._ds["q"].values, np.asarray(I.values, dtype=float), np.asarray(S.values, dtype=float)

    def _dask_arrays(self):
        """q and the masked intensity and sigma as dask arrays (frame, q), q in one chunk;
        None when the series is in memory."""
        I, S = self.masked()
        if not (is_dask(I) or is_dask(S)):
            return None
        import dask.array as da

        return (self._ds["q"].values, da.asarray(I.data).astype(float).rechunk({1: -1}),
                da.asarray(S.data).astype(float).rechunk({1: -1}))

    def compare_frames(self, *, test: str = "cormap", reference: int = 0, alpha: float = 0.01,
                       correction: str = "holm", pairwise: bool | str = "auto") -> xr.Dataset:
        """Test every frame against a reference frame (correlation-map or chi-square test).

        See :func:`saxsnb.analysis.compare_frames` (Franke, Jeffries & Svergun 2015,
        Nature Methods 12, 419; Holm's correction). ``pairwise="auto"`` adds the
        (frame, frame2) matrix for series of up to 1,000 frames.

        Returns
        -------
        Dataset on ``frame``: ``score`` (longest same-sign run in points, or reduced
        chi-square), ``p_value``, ``p_adjusted``, ``outlier`` (bool), ``n_points``,
        ``status``; with the matrix ``pairwise_score``, ``pairwise_p_value`` on
        (frame, frame2).

        Examples
        --------
        >>> import saxsnb
        >>> ds = saxsnb.demo.example_series("spheres")
        >>> res = ds.saxs.compare_frames()
        >>> res.outlier.dtype.kind, str(res.status.values[0])
        ('b', 'is_reference')
        """
        lazy = self._dask_arrays()
        if lazy is None:
            q, I, S = self._arrays()
        else:
            q, I, S = lazy
        if pairwise == "auto":
            pairwise = I.shape[0] <= 1000
        if lazy is None:
            res = an.compare_frames(q, I, S, test=test, reference=reference, alpha=alpha,
                                    correction=correction, pairwise=bool(pairwise))
        else:
            res = self._compare_lazy(q, I, S, test=test, reference=reference, alpha=alpha,
                                     correction=correction, pairwise=bool(pairwise))
        units = {"score": "points" if test == "cormap" else "1", "p_value": "1", "p_adjusted": "1"}
        data = {k: (("frame",), v if is_dask(v) else np.asarray(v), {"units": units[k]} if k in units else {})
                for k, v in res.items() if not k.startswith("pairwise")}
        coords = None
        if pairwise:
            for k in ("pairwise_score", "pairwise_p_value"):
                data[k] = (("frame", "frame2"), res[k])
            coords = {"frame2": ("frame2", self._ds["frame"].values)}
        params = dict(test=test, reference=int(reference), alpha=float(alpha), correction=correction,
                      pairwise=bool(pairwise))
        return self._result(data, "compare_frames", params, coords=coords)

    def _compare_lazy(self, q, I, S, *, test, reference, alpha, correction, pairwise) -> dict:
        """compare_frames on dask arrays: the parameter checks now, the data's when computed."""
        from ..analysis._similarity import _check
        from ._across import compare_lazy

        ref = _check(test, reference, alpha, I.shape[0])
        an.adjust_pvalues(np.zeros(0), correction)  # checks the name
        res = compare_lazy(I, S, test=test, ref=ref, correction=correction, alpha=alpha)
        if pairwise:  # one task on a worker; the (frame, q) arrays are gathered there, not here
            nf = I.shape[0]
            pw = self._across_frames(lambda I_, S_: an.pairwise_similarity(q, I_, S_, test=test), [I, S],
                                     {"score": ((nf, nf), float), "p_value": ((nf, nf), float)},
                                     frame_chunks=I.chunks[0])
            res["pairwise_score"], res["pairwise_p_value"] = pw["score"], pw["p_value"]
        return res

    def average(self, *, exclude: str | None = "outliers", by: str | None = None, every: int | None = None,
                test: str = "cormap", alpha: float = 0.01) -> xr.Dataset:
        """Average repeated frames: all, groups by a coordinate, or blocks of ``every``.

        Parameters
        ----------
        exclude : {"outliers", None}
            Leave out the frames that :meth:`compare_frames` flags against the first
            frame of their group (``test``, ``alpha``, Holm's correction).
        by : str, optional
            A per-frame coordinate or variable (a sample name, a concentration): one
            mean per value, in order of first appearance.
        every : int, optional
            One mean per block of ``every`` consecutive frames.

        Returns
        -------
        A series with one frame per group: the mean and ``sqrt(sum sigma^2) / k`` (see
        :func:`saxsnb.analysis.average_frames`), ``n_averaged`` (frame) and
        ``members`` (frame, source_frame) recording which frames went in; numeric scan
        coordinates become the mean over the members, others the first member's value.

        Examples
        --------
        >>> import saxsnb
        >>> ds = saxsnb.from_arrays([0.1, 0.2, 0.3], [[1.0, 2.0, 3.0], [3.0, 4.0, 5.0]],
        ...                         [[0.2, 0.2, 0.2], [0.2, 0.2, 0.2]])
        >>> avg = ds.saxs.average(exclude=None)
        >>> avg.intensity.values.tolist(), int(avg.n_averaged[0])
        ([[2.0, 3.0, 4.0]], 2)
        """
        if exclude not in ("outliers", None):
            raise SaxsInputError(f"exclude must be 'outliers' or None, got {exclude!r}", parameter="exclude")
        ds = self._ds
        lazy = self._dask_arrays()
        q, I, S = self._arrays() if lazy is None else lazy
        n = I.shape[0]
        if by is not None and (by not in ds.variables or ds[by].dims != ("frame",)):
            raise SaxsInputError(f"by={by!r} names no per-frame coordinate of the series", parameter="by")
        if lazy is not None:
            return self._average_lazy(q, I, S, exclude=exclude, by=by, every=every, test=test, alpha=alpha)
        labels, keys = an.group_labels(n, by=None if by is None else ds[by].values, every=every)
        include = np.ones(n, bool)
        if exclude == "outliers":
            for g in range(int(labels.max()) + 1):  # a few groups; each test is vectorised
                idx = np.flatnonzero(labels == g)
                if idx.size > 1:
                    include[idx] = ~an.compare_frames(q, I[idx], S[idx], test=test, alpha=alpha)["outlier"]
        res = an.average_frames(q, I, S, labels=labels, include=include)
        M = res["members"]
        G = M.shape[0]
        coords = {"frame": ("frame", np.arange(G)), "source_frame": ("source_frame", ds["frame"].values)}
        W = M / np.maximum(M.sum(axis=1, keepdims=True), 1)
        for c in self.scan_coords:
            v = ds[c].values
            if c == by:
                coords[c] = ("frame", keys, dict(ds[c].attrs))
            elif v.dtype.kind in "fiu":
                coords[c] = ("frame", W @ v.astype(float), dict(ds[c].attrs))
            else:
                first = np.argmax(M, axis=1)
                coords[c] = ("frame", v[first], dict(ds[c].attrs))
        return _averaged(ds, res["intensity"], res["sigma"], res["n_averaged"], M, coords, include,
                         exclude=exclude, by=by, every=every, test=test, alpha=alpha)

    def _average_lazy(self, q, I, S, *, exclude, by, every, test, alpha) -> xr.Dataset:
        """:meth:`average` of a dask series: the outlier flags (per-frame bools) computed
        once, the group means left lazy (sums along frame per chunk). Per-frame
        coordinates held by dask are read first (one small computation)."""
        import dask

        from ._across import average_lazy, group_include_lazy

        ds = self._ds
        names = list(dict.fromkeys(self.scan_coords + ([by] if by is not None else [])))
        held = {c: ds[c].data for c in names if is_dask(ds[c])}
        if held:
            (got,) = dask.compute(held)
            ds = ds.assign({c: (ds[c].dims, v, ds[c].attrs) for c, v in got.items() if c in ds.data_vars})
            ds = ds.assign_coords({c: (ds[c].dims, v, ds[c].attrs) for c, v in got.items() if c in ds.coords})
        labels, keys = an.group_labels(I.shape[0], by=None if by is None else ds[by].values, every=every)
        n, G = labels.size, int(labels.max()) + 1
        include = np.ones(n, bool)
        if exclude == "outliers":
            include = np.asarray(group_include_lazy(q, I, S, labels, test=test, alpha=alpha).compute())
        mean, sig = average_lazy(q, I, S, labels, include)
        used = labels[include]
        count = np.bincount(used, minlength=G)
        coords = {"frame": ("frame", np.arange(G)), "source_frame": ("source_frame", ds["frame"].values)}
        # the first member of each group (the first frame when a group has none included)
        first = np.full(G, n, dtype=np.int64)
        np.minimum.at(first, used, np.flatnonzero(include))
        first[first == n] = 0
        for c in self.scan_coords:
            v = ds[c].values
            if c == by:
                coords[c] = ("frame", keys, dict(ds[c].attrs))
            elif v.dtype.kind in "fiu":
                with np.errstate(invalid="ignore", divide="ignore"):
                    total = np.bincount(used, weights=v[include].astype(float), minlength=G)
                coords[c] = ("frame", total / np.maximum(count, 1), dict(ds[c].attrs))
            else:
                coords[c] = ("frame", v[first], dict(ds[c].attrs))
        import dask.array as da

        lab = da.from_array(labels, chunks=(I.chunks[0],))
        inc = da.from_array(include, chunks=(I.chunks[0],))
        members = (lab[None, :] == da.arange(G, chunks=-1)[:, None]) & inc[None, :]
        return _averaged(ds, mean, sig, count, members, coords, include,
                         exclude=exclude, by=by, every=every, test=test, alpha=alpha)

    def absolute_scale(self, reference: xr.Dataset, *, kind: str = "water", temperature: float = 20.0,
                       empty: xr.Dataset | None = None, known=None, known_sigma=None,
                       q_range=None) -> xr.Dataset:
        """Put the series on absolute scale (1/cm) with water or a reference curve.

        Parameters
        ----------
        reference : Dataset
            The standard measured like the series (same q grid, units, normalisation);
            its frames are averaged.
        kind : {"water", "curve"}
            Water: the known value is :func:`saxsnb.water_cross_section` at
            ``temperature`` (Orthaber, Bergmann & Glatter 2000), flat in q.
            Curve: ``known`` gives the reference's intensity in 1/cm (array on the q
            grid, or a series).
        temperature : float, degC (water)
        empty : Dataset, optional
            The empty cell, subtracted from ``reference`` first (water must be
            measured against its cell).
        q_range : (q_min, q_max), optional
            Where to fit the factor; default the whole grid.

        Returns
        -------
        The series times the factor, intensity and sigma in 1/cm; the factor and its
        uncertainty in ``attrs["absolute_scale_factor"]`` /
        ``["absolute_scale_factor_sigma"]`` and in the history. The factor's uncertainty
        is common to every point (it shifts the whole curve) and is not folded into
        sigma.

        Examples
        --------
        >>> import numpy as np, saxsnb
        >>> q = np.linspace(0.5, 2.0, 20)
        >>> water = saxsnb.from_arrays(q, np.full(20, 2.0), np.full(20, 0.02))
        >>> ds = saxsnb.from_arrays(q, np.full(20, 10.0), np.full(20, 0.1))
        >>> out = ds.saxs.absolute_scale(water, temperature=20.0)
        >>> out.intensity.attrs["units"], round(float(out.intensity[0, 0]), 4)
        ('1/cm', 0.0821)
        """
        if kind not in ("water", "curve"):
            raise SaxsInputError(f"kind must be 'water' or 'curve', got {kind!r}", parameter="kind")
        ref = reference if empty is None else reference.saxs.subtract(empty, match="mean")
        rq, rI, rS = curve_arrays(ref, "reference")
        if rq.size != self._ds.sizes["q"] or not np.allclose(rq, self._ds["q"].values, rtol=1e-9, atol=0):
            raise SaxsInputError("the reference is on a different q grid from the series",
                                 parameter="reference")
        if kind == "water":
            k_val, k_sig = an.water_cross_section(temperature), None
        else:
            if known is None:
                raise SaxsInputError("kind='curve' needs known= (the reference's intensity in 1/cm)",
                                     parameter="known")
            if isinstance(known, xr.Dataset):
                _, kI, kS = curve_arrays(known, "known")
                k_val, k_sig = np.nanmean(kI, axis=0), np.nanmean(kS, axis=0)
            else:
                k_val, k_sig = np.asarray(known, dtype=float), known_sigma
        cal = an.calibration_factor(rq, rI, rS, k_val, k_sig, q_range=q_range)
        k = cal["factor"]

        def _scaled(q, I, S):
            out_i, out_s = an.scale_intensity(I, S, k)
            return {"intensity": out_i, "sigma": out_s}

        params = dict(kind=kind, temperature=float(temperature) if kind == "water" else None,
                      empty=empty is not None, q_range=q_range, factor=k, factor_sigma=cal["factor_sigma"],
                      reference_sample=str(reference.attrs.get("sample", "")))
        spec = {v: OutputSpec(("q",), units="1/cm") for v in ("intensity", "sigma")}
        out = self._apply(_scaled, spec, operation="absolute_scale", parameters=params,
                          temporaries=TEMPORARIES["absolute_scale"])
        out.attrs["absolute_scale_factor"] = k
        out.attrs["absolute_scale_factor_sigma"] = cal["factor_sigma"]
        return _series_like(self._ds, out, units="1/cm")

    def rescale_q(self, q_scale: float, q_scale_sigma: float | None = None) -> xr.Dataset:
        """Multiply q by a calibration factor (from :func:`saxsnb.calibrate_q`).

        Examples
        --------
        >>> import saxsnb
        >>> ds = saxsnb.from_arrays([1.0, 2.0], [[1.0, 1.0]], [[0.1, 0.1]])
        >>> ds.saxs.rescale_q(1.02).q.values.tolist()
        [1.02, 2.04]
        """
        try:
            s = float(q_scale)
        except (TypeError, ValueError):
            raise SaxsInputError(f"q_scale must be a number, got {q_scale!r}", parameter="q_scale") from None
        if not (np.isfinite(s) and s > 0):
            raise SaxsInputError(f"q_scale must be positive, got {q_scale!r}", parameter="q_scale")
        ds = self._ds
        out = ds.assign_coords(q=("q", ds["q"].values * s, dict(ds["q"].attrs)))
        out.attrs = result_attrs(ds, "rescale_q", dict(q_scale=s, q_scale_sigma=q_scale_sigma))
        if q_scale_sigma is not None:
            out["q"].attrs["q_scale_sigma"] = float(q_scale_sigma)
        return out

    def rebin(self, n: int, *, spacing: str = "log", q_range=None) -> xr.Dataset:
        """Average neighbouring q points into ``n`` bins (log or linear), sigma propagated.

        See :func:`saxsnb.analysis.rebin`; the new q is the mean q of each bin's points.

        Examples
        --------
        >>> import saxsnb
        >>> ds = saxsnb.from_arrays([1.0, 2.0, 3.0, 4.0], [[1.0, 3.0, 5.0, 7.0]], [[0.2] * 4])
        >>> ds.saxs.rebin(2, spacing="linear").intensity.values.tolist()
        [[2.0, 6.0]]
        """
        q = self._ds["q"].values
        grid = an.rebin(q, np.zeros((1, q.size)), np.ones((1, q.size)), n, spacing=spacing, q_range=q_range)
        nb = grid["q"].size

        def _binned(q_, I, S):
            r = an.rebin(q_, I, S, n, spacing=spacing, q_range=q_range)
            return {"intensity": r["intensity"], "sigma": r["sigma"]}

        spec = {v: OutputSpec(("q_bin",), sizes={"q_bin": nb}) for v in ("intensity", "sigma")}
        out = self._apply(_binned, spec, operation="rebin", temporaries=TEMPORARIES["rebin"],
                          parameters=dict(n=int(n), spacing=spacing, q_range=q_range))
        out = out.rename({"q_bin": "q"})
        out = _series_like(self._ds, out, q=grid["q"])
        out["q_count"] = ("q", grid["q_count"], {"long_name": "grid points per bin"})
        return out

    def per_concentration(self, concentration) -> xr.Dataset:
        """Intensity and sigma divided by each frame's concentration.

        ``concentration``: a number, per-frame values, or the name of a per-frame
        coordinate; zero or negative values raise SaxsInputError naming the frame.

        Examples
        --------
        >>> import saxsnb
        >>> ds = saxsnb.from_arrays([0.1, 0.2], [[2.0, 4.0]], [[0.2, 0.2]], scan={"concentration": [2.0]})
        >>> ds.saxs.per_concentration("concentration").intensity.values.tolist()
        [[1.0, 2.0]]
        """
        c = _per_frame_value(self._ds, concentration, "concentration")
        c = _concentrations(c, self._ds.sizes["frame"])
        carg = xr.DataArray(c, dims="frame")

        def _per(q, I, S, c_):
            return an.per_concentration(q, I, S, c_)

        unit = self._ds["intensity"].attrs.get("units", "arb")
        spec = {v: OutputSpec(("q",)) for v in ("intensity", "sigma")}
        params = dict(concentration=concentration if isinstance(concentration, str) else c.tolist())
        out = self._apply(_per, spec, operation="per_concentration", parameters=params, extra_args=(carg,),
                          temporaries=TEMPORARIES["per_concentration"])
        return _series_like(self._ds, out, units=f"{unit} per concentration unit")

    def extrapolate_concentration(self, concentration, *, i0: str = "guinier") -> xr.Dataset:
        """Extrapolate I/c to zero concentration per q; report the slope of I0/c vs c.

        Parameters
        ----------
        concentration : number array or per-frame coordinate name, > 0
        i0 : {"guinier", "lowest_q"}
            Where I(0) of each frame comes from for the interparticle check: the
            automatic Guinier fit, or the lowest finite q point.

        Returns
        -------
        A one-frame series: ``intensity`` and ``sigma`` of I/c at c = 0; ``slope`` and
        ``slope_sigma`` (frame, q) of I/c against c; ``i0_intercept``, ``i0_slope``,
        ``i0_slope_sigma``, ``relative_i0_slope`` on frame (see
        :func:`saxsnb.analysis.extrapolate_concentration`): a relative slope far from 0
        signals interparticle interference (negative: repulsion).

        Examples
        --------
        >>> import numpy as np, saxsnb
        >>> q = np.linspace(0.05, 1.0, 40)
        >>> c = np.array([1.0, 2.0, 4.0])
        >>> I = c[:, None] * np.exp(-(q * 3) ** 2 / 3) * (1 - 0.05 * c[:, None])
        >>> ds = saxsnb.from_arrays(q, I, 1e-4 * np.ones_like(I), scan={"concentration": c})
        >>> ex = ds.saxs.extrapolate_concentration("concentration")
        >>> round(float(ex.intensity[0, 0]), 3), round(float(ex.relative_i0_slope[0]), 3)
        (0.993, -0.05)
        """
        if i0 not in ("guinier", "lowest_q"):
            raise SaxsInputError(f"i0 must be 'guinier' or 'lowest_q', got {i0!r}", parameter="i0")
        c = _per_frame_value(self._ds, concentration, "concentration")
        lazy = self._dask_arrays()
        if lazy is None:
            q, I, S = self._arrays()
            i0v = i0s = None
            if i0 == "guinier":
                g = an.guinier(q, I, S)
                if np.all(g["status"] == "ok"):
                    i0v, i0s = g["i0"], g["i0_sigma"]
            res = an.extrapolate_concentration(q, I, S, c, i0=i0v, i0_sigma=i0s)
        else:
            res, i0v = self._extrapolate_lazy(lazy, c, i0)
        data = {
            "intensity": (("frame", "q"), res["intensity"][None]),
            "sigma": (("frame", "q"), res["sigma"][None]),
            "slope": (("frame", "q"), res["slope"][None], {"long_name": "d(I/c)/dc"}),
            "slope_sigma": (("frame", "q"), res["slope_sigma"][None]),
        }
        for k in ("i0_intercept", "i0_slope", "i0_slope_sigma", "relative_i0_slope"):
            data[k] = (("frame",), res[k][None] if is_dask(res[k]) else [res[k]])
        params = dict(concentration=concentration if isinstance(concentration, str)
                      else np.asarray(c, dtype=float).tolist(),
                      i0="guinier" if i0v is not None else "lowest_q")
        out = xr.Dataset(data, coords={"frame": ("frame", [0])})
        out.attrs = result_attrs(self._ds, "extrapolate_concentration", params)
        unit = self._ds["intensity"].attrs.get("units", "arb")
        return _series_like(self._ds, out, units=f"{unit} per concentration unit")

    def _extrapolate_lazy(self, arrays, c, i0):
        """:meth:`extrapolate_concentration` of a dask series: the Guinier statuses and I0
        (per-frame values) computed once when ``i0="guinier"``, the per-q line lazy."""
        import dask

        from ..analysis._merging import _concentrations
        from ._across import concentration_lazy
        from ._core import scalar_outputs

        q, I, S = arrays
        c = _concentrations(c, I.shape[0])
        if np.unique(c).size < 2:
            raise SaxsInputError("at least two distinct concentrations are needed", parameter="concentration")
        i0v = i0s = None
        if i0 == "guinier":
            def fit(q_, I_, S_):
                g = an.guinier(q_, I_, S_)
                return {k: g[k] for k in ("status", "i0", "i0_sigma")}

            g = self._apply(fit, scalar_outputs({"status": None, "i0": None, "i0_sigma": None}),
                            operation="guinier", parameters={})
            st, v, vs = dask.compute(g["status"].data, g["i0"].data, g["i0_sigma"].data)
            if np.all(st == "ok"):
                i0v, i0s = v, vs
        return concentration_lazy(I, S, c, i0=i0v, i0_sigma=i0s), i0v


def calibrate_q(standard, *, d_spacing: float = an.SILVER_BEHENATE_D, orders=None, wavelength=None,
                distance=None, **options) -> dict:
    """q calibration from a lamellar powder standard (silver behenate by default).

    Parameters
    ----------
    standard : Dataset (frames averaged) or (q, intensity[, sigma]) arrays, q in 1/nm
    d_spacing : float, nm (5.8380, Huang, Toraya, Blanton & Wu 1993, J. Appl. Cryst. 26, 180)
    orders : sequence of int, optional; wavelength (nm) and distance (any unit), optional
    **options : min_prominence, tolerance (see :func:`saxsnb.analysis.calibrate_q`)

    Returns
    -------
    dict: ``q_scale`` (true q = q_scale x measured q), ``q_scale_sigma``, ``orders``,
    ``positions`` (1/nm), ``residuals``, and ``distance`` / ``distance_sigma`` (corrected,
    in the unit given) with the geometry; apply with ``ds.saxs.rescale_q(q_scale)``.

    Examples
    --------
    >>> import numpy as np, saxsnb
    >>> q = np.linspace(0.5, 6.0, 1100)
    >>> q1 = 2 * np.pi / 5.838 / 1.02
    >>> I = 1 + sum(10 / n * np.exp(-0.5 * ((q - n * q1) / 0.02) ** 2) for n in range(1, 6))
    >>> std = saxsnb.from_arrays(q, I, 0.01 * I)
    >>> round(saxsnb.calibrate_q(std)["q_scale"], 4)
    1.02
    """
    if isinstance(standard, xr.Dataset):
        q, I, S = curve_arrays(standard, "standard")
        if wavelength is None and "wavelength_nm" in standard.attrs and distance is not None:
            wavelength = float(standard.attrs["wavelength_nm"])
    else:
        try:
            q, I, *rest = standard
        except (TypeError, ValueError):
            raise SaxsInputError("standard must be a series or (q, intensity[, sigma])",
                                 parameter="standard") from None
        S = rest[0] if rest else None
    return an.calibrate_q(q, I, S, d_spacing=d_spacing, orders=orders, wavelength=wavelength,
                          distance=distance, **options)


def merge_ranges(low: xr.Dataset, high: xr.Dataset, *, overlap=None) -> xr.Dataset:
    """Merge two q ranges of the same frames: the high range scaled onto the low one.

    See :func:`saxsnb.analysis.merge_ranges`. Returns a series on the merged q grid
    with ``factor`` and ``factor_sigma`` (frame) such that ``low = factor x high`` on
    the overlap, ``n_overlap`` (frame); attrs and history from ``low``.

    Examples
    --------
    >>> import numpy as np, saxsnb
    >>> ql, qh = np.linspace(0.1, 1.0, 10), np.linspace(0.6, 3.0, 25)
    >>> low = saxsnb.from_arrays(ql, 1 / ql, 0.01 / ql)
    >>> high = saxsnb.from_arrays(qh, 0.5 / qh, 0.005 / qh)
    >>> m = saxsnb.merge_ranges(low, high)
    >>> round(float(m.factor[0]), 6), m.sizes["q"]
    (2.0, 30)
    """
    ql, L, SL = curve_arrays(low, "low")
    qh, H, SH = curve_arrays(high, "high")
    if low.sizes["frame"] != high.sizes["frame"]:
        raise SaxsInputError(f"low has {low.sizes['frame']} frames and high {high.sizes['frame']}",
                             parameter="high")
    if low["intensity"].attrs.get("units") != high["intensity"].attrs.get("units"):
        raise SaxsInputError("low and high have different intensity units", parameter="high")
    res = an.merge_ranges(ql, L, SL, qh, H, SH, overlap=overlap)
    data = {
        "intensity": (("frame", "q"), res["intensity"]),
        "sigma": (("frame", "q"), res["sigma"]),
        "factor": (("frame",), res["factor"], {"long_name": "low / high on the overlap"}),
        "factor_sigma": (("frame",), res["factor_sigma"]),
        "n_overlap": (("frame",), res["n_overlap"]),
    }
    coords = {c: low[c] for c in low.coords if low[c].dims == ("frame",)}
    coords["frame"] = low["frame"]
    out = xr.Dataset(data, coords=coords)
    params = dict(overlap=overlap, high_sample=str(high.attrs.get("sample", "")),
                  factor=res["factor"].tolist())
    out.attrs = result_attrs(low, "merge_ranges", params)
    return _series_like(low, out, q=res["q"])


def _averaged(ds, mean, sig, count, members, coords, include, *, exclude, by, every, test, alpha):
    """The series of :meth:`average` (numpy or dask arrays alike) with its attrs."""
    data = {
        "intensity": (("frame", "q"), mean),
        "sigma": (("frame", "q"), sig),
        "n_averaged": (("frame",), count),
        "members": (("frame", "source_frame"), members, {"long_name": "frames averaged into this frame"}),
    }
    out = xr.Dataset(data, coords=coords)
    params = dict(exclude=exclude, by=by, every=every, test=test, alpha=float(alpha),
                  excluded_frames=ds["frame"].values[~include].tolist())
    out.attrs = result_attrs(ds, "average", params)
    return _series_like(ds, out.assign_coords(q=ds["q"]))

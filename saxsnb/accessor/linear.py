"""``ds.saxs`` methods of the linear regions: Guinier, Porod, invariant, Kratky."""

from __future__ import annotations

from typing import Any

import numpy as np
import xarray as xr

from ..errors import SaxsInputError
from ._core import TEMPORARIES, AccessorBase, OutputSpec, scalar_outputs

__all__ = ["LinearMethods"]


#: How the Guinier sigmas are made (result attrs "sigma_note" and the report).
GUINIER_SIGMA_NOTE = (
    "sigmas from the weights (1/sigma^2), multiplied by sigma_scale = sqrt(chi2_reduced) where "
    "the fit misses the data (fixed range: chi2_reduced > 1 + 3 sqrt(2/dof)); automatic range: "
    "averaged over the acceptable windows, including the spread between them"
)


class LinearMethods(AccessorBase):
    """Guinier, Porod, invariant and Kratky analyses of every frame."""

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
        """Guinier fit of every frame (:func:`saxsnb.analysis._guinier.guinier`).

        Parameters
        ----------
        q_range : None, (q_min, q_max) in 1/nm, or per-frame ranges (array or DataArray
            (frame, 2)); None chooses a range per frame automatically.
        shape : "compact" (Rg, I0), "rod" (cross-section Rc) or "sheet" (thickness).
        errors : "ignore" (failed frames get NaN and a ``status``) or "raise"
            (:class:`~saxsnb.errors.SaxsFitError` naming the first failed frame).
        qrg_limit, min_points, **search_options : see ``guinier``.
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
        from ..analysis._guinier import guinier as _guinier
        from ..analysis._linear import SHAPE_PLOTS

        if shape not in SHAPE_PLOTS:
            raise SaxsInputError(f"unknown shape {shape!r}; use one of {list(SHAPE_PLOTS)}",
                                 parameter="shape")
        plot = SHAPE_PLOTS[shape]
        iu = self._ds["intensity"].attrs.get("units", "arb")
        i0_unit = iu + {0: "", 1: " 1/nm", 2: " 1/nm^2"}[plot.y_power]
        units = {"q_min": "1/nm", "q_max": "1/nm", "n_points": "1", "chi2_reduced": "1", "status": None,
                 "i0": i0_unit, "i0_sigma": i0_unit, "slope": "nm^2", "slope_sigma": "nm^2",
                 "intercept": "1", "intercept_sigma": "1", "slope_intercept_cov": "nm^2", "qrg_max": "1",
                 "start": "1", "stop": "1", "sigma_scale": "1"}
        for name in (plot.size, *plot.derived):
            units[name] = units[f"{name}_sigma"] = "nm"
        outputs = scalar_outputs(units, {"n_points": np.int64, "start": np.int64, "stop": np.int64})
        qr, extra = self._per_frame_range(q_range)
        rg_arrays = ()
        if rg is not None and shape == "rod":
            rg_arrays = self._rg_arrays(rg)
        params = dict(q_range=q_range if qr is None else "per-frame", shape=shape, errors=errors,
                      qrg_limit=qrg_limit, min_points=min_points, rod_length=bool(rg_arrays),
                      **search_options)

        def run(q, I, S, *more):
            more = list(more)
            rng_ = more.pop(0) if qr is not None else q_range
            rg_, rgs_ = (more[0], more[1]) if rg_arrays else (None, None)
            return _guinier(q, I, S, q_range=rng_, shape=shape, qrg_limit=qrg_limit,
                               min_points=min_points, rg=rg_, rg_sigma=rgs_, **search_options)

        out = self._apply(run, outputs, operation="guinier", parameters=params,
                          extra_args=extra + rg_arrays, errors=errors)
        out.attrs["sigma_note"] = GUINIER_SIGMA_NOTE
        return out

    def porod(self, q_range=None, *, background="fit", errors: str = "ignore") -> xr.Dataset:
        """Porod constant, flat background and power-law exponent of every frame.

        See :func:`saxsnb.analysis._porod.porod`: q^4 I = Kp + B q^4 when
        ``background="fit"``, else Kp = mean q^4 (I - B) with B given (a number or a
        DataArray on frame); the exponent from log(I - B) vs log q. q_range None is the
        upper quarter of the q grid (a starting point: look at the plot).

        Returns
        -------
        Dataset on ``frame``: ``porod_constant`` (intensity 1/nm^4), ``background``
        (intensity), ``exponent`` ("1"), each with ``_sigma``; ``porod_background_cov``,
        ``prefactor``, ``chi2_reduced``, ``n_points``, ``q_min``, ``q_max``,
        ``status``, ``exponent_status``.

        Examples
        --------
        >>> import numpy as np, saxsnb
        >>> q = np.linspace(1.0, 4.0, 200)
        >>> I = 2.0 / q**4 + 0.001
        >>> res = saxsnb.from_arrays(q, I, 0.01 * I).saxs.porod((2.0, 4.0))
        >>> round(float(res.porod_constant[0]), 3), round(float(res.background[0]), 4)
        (2.0, 0.001)
        """
        from ..analysis._porod import porod

        iu = self._ds["intensity"].attrs.get("units", "arb")
        units = {"porod_constant": f"{iu} 1/nm^4", "porod_constant_sigma": f"{iu} 1/nm^4",
                 "background": iu, "background_sigma": iu, "porod_background_cov": f"{iu}^2 1/nm^4",
                 "chi2_reduced": "1", "n_points": "1", "q_min": "1/nm", "q_max": "1/nm", "status": None,
                 "exponent": "1", "exponent_sigma": "1", "prefactor": iu, "prefactor_sigma": iu,
                 "exponent_chi2_reduced": "1", "exponent_status": None}
        dtypes = {"n_points": np.int64, "status": "status", "exponent_status": "status"}
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
            return porod(q, I, S, q_range=rng_, background=bg_)

        return self._apply(run, outputs, operation="porod", parameters=params, extra_args=extra,
                           errors=errors, temporaries=TEMPORARIES["porod"])

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
        :func:`saxsnb.analysis._porod.invariant` for the convention (no 4 pi factor)
        and the uncertainties. ``volume_fraction`` (number or DataArray on frame)
        enables ``specific_surface``.

        Returns
        -------
        Dataset on ``frame``: ``invariant``, ``invariant_low``, ``invariant_measured``,
        ``invariant_high`` (intensity 1/nm^3), ``low_fraction``, ``high_fraction``,
        ``porod_volume`` (nm^3), ``surface_to_volume``, ``specific_surface`` (1/nm),
        each with ``_sigma``; ``status``.

        Examples
        --------
        >>> import saxsnb
        >>> ds = saxsnb.demo.example_series("spheres")
        >>> inv = ds.saxs.invariant()
        >>> inv.status.values.tolist(), inv.invariant.attrs["units"]
        (['ok', 'ok'], 'arb 1/nm^3')
        """
        from ..analysis._invariant import invariant as _invariant

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
        outputs = {k: OutputSpec((), "status" if k == "status" else float, u) for k, u in units.items()}
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

        return self._apply(run, outputs, operation="invariant", parameters=params, extra_args=extra,
                           errors=errors, temporaries=TEMPORARIES["invariant"])

    def kratky(self, normalize: str | None = None, *, guinier: xr.Dataset | None = None) -> xr.DataArray:
        """Kratky transform of every frame, a DataArray on (frame, q).

        ``normalize=None``: q^2 I (intensity 1/nm^2). ``normalize="rg"``: the
        dimensionless (q Rg)^2 I / I0 with Rg, I0 from ``guinier`` (automatic when
        None); frames without a Guinier result are NaN.

        Examples
        --------
        >>> import saxsnb
        >>> ds = saxsnb.demo.example_series("spheres")
        >>> k = ds.saxs.kratky(normalize="rg")
        >>> k.dims, k.attrs["units"], bool(float(k.max()) > 1.0)
        (('frame', 'q'), '1', True)
        """
        from ..analysis._kratky import kratky as _kratky

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
        out = self._apply(run, outputs, operation="kratky", parameters=params, extra_args=extra,
                          temporaries=TEMPORARIES["kratky"])
        da = out["kratky"].transpose("frame", "q")
        return da.assign_attrs({**out.attrs, **da.attrs})

    def kratky_summary(self, *, guinier: xr.Dataset | None = None, **options) -> xr.Dataset:
        """Peak and high-q shape of every frame's dimensionless Kratky plot.

        See :func:`saxsnb.analysis._kratky.kratky_summary` (``options``: peak_window,
        half_width, bands, bell_level, rise_trend, fall_trend). Returns a Dataset on ``frame``:
        ``peak_qrg``, ``peak_height``, ``level_mid``, ``level_high``, ``trend``,
        ``qrg_max`` (all "1"), ``shape_class`` ("bell", "plateau", "rise",
        "undetermined"), and the ``rg``, ``i0`` used; sortable, e.g.
        ``res.sortby("peak_qrg")``.

        Examples
        --------
        >>> import saxsnb
        >>> ds = saxsnb.demo.example_series("spheres")
        >>> ks = ds.saxs.kratky_summary()
        >>> ks.shape_class.values.tolist(), ks.peak_qrg.values.round(1).tolist()
        (['bell', 'bell'], [1.6, 1.6])
        """
        from ..analysis._kratky import kratky_summary as _summary

        g = self.guinier() if guinier is None else guinier
        names = ("peak_qrg", "peak_height", "level_mid", "level_high", "trend", "qrg_max")
        outputs = {n: OutputSpec((), float, "1") for n in names}
        outputs["shape_class"] = OutputSpec((), "<U12", None)
        out = self._apply(
            lambda q, I, S, rg, i0: _summary(q, I, rg=rg, i0=i0, **options), outputs,
            operation="kratky_summary", parameters={**options, "guinier": g.attrs.get("parameters")},
            extra_args=(g["rg"], g["i0"]), after=g, temporaries=TEMPORARIES["kratky_summary"],
        )
        return out.assign(rg=g["rg"], i0=g["i0"])

    def _rg_arrays(self, rg):
        if isinstance(rg, xr.Dataset):
            return (rg["rg"], rg["rg_sigma"] if "rg_sigma" in rg else xr.zeros_like(rg["rg"]))
        da = self._per_frame(rg, "rg")
        return (da, xr.zeros_like(da))

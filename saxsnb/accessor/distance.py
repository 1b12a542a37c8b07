"""``ds.saxs`` method of the pair-distance distribution p(r)."""

from __future__ import annotations

import numpy as np
import xarray as xr

from ._core import TEMPORARIES, AccessorBase, OutputSpec, scalar_outputs

__all__ = ["DistanceMethods"]


class DistanceMethods(AccessorBase):
    """The pair-distance distribution of every frame."""

    def distance_distribution(
        self,
        dmax=None,
        *,
        weight=None,
        q_range=None,
        n_r: int = 51,
        nonnegative: bool = False,
        background: bool = False,
        dmax_candidates=None,
        min_points: int = 10,
        min_channels: float = 3.0,
        errors: str = "ignore",
    ) -> xr.Dataset:
        """p(r) of every frame by the regularised indirect Fourier transform.

        See :func:`saxsnb.analysis.distance_distribution` (Glatter 1977; the weight and,
        when ``dmax`` is None, Dmax chosen per frame by the Bayesian evidence, Hansen
        2000). ``dmax`` is one number (nm), one per frame (array or DataArray on
        ``frame``), or None (estimated per frame from a scan of ``dmax_candidates``).

        Returns
        -------
        Dataset: ``r``, ``p``, ``p_sigma`` on (frame, r) (r in nm, each frame's own grid
        0..Dmax; p in intensity units per nm); ``fit`` on (frame, q); per frame ``rg``,
        ``rg_sigma`` (nm), ``i0``, ``i0_sigma``, ``background`` (intensity), ``dmax``,
        ``dmax_sigma`` (nm), ``weight``, ``log_evidence``, ``shannon_channels``,
        ``chi2_reduced``, ``n_effective``, ``n_points``, ``q_min``, ``q_max``,
        ``status``; ``dmax_candidates`` (nm) and ``dmax_score`` (log evidence relative
        to the chosen Dmax) on (frame, candidate), the curve that shows why a Dmax won.

        Examples
        --------
        >>> import saxsnb
        >>> res = saxsnb.demo.example_series("spheres").saxs.distance_distribution()
        >>> res.rg.values.round(2).tolist(), res.status.values.tolist(), res.p.dims
        ([1.55, 1.94], ['ok', 'ok'], ('frame', 'r'))
        """
        from ..analysis import default_dmax_candidates
        from ..analysis import distance_distribution as _pr

        ds = self._ds
        iu = ds["intensity"].attrs.get("units", "arb")
        q = np.asarray(ds["q"].values, dtype=float)
        per_frame = dmax is not None and np.ndim(dmax) > 0
        if dmax is not None:
            n_cand = 1
        elif dmax_candidates is not None:
            n_cand = int(np.size(dmax_candidates))
        else:
            n_cand = int(np.size(default_dmax_candidates(q, q_range)))
        sizes = {"r": int(n_r), "candidate": n_cand}
        outputs = {
            "r": OutputSpec(("r",), float, "nm", sizes=sizes),
            "p": OutputSpec(("r",), float, f"{iu}/nm", sizes=sizes),
            "p_sigma": OutputSpec(("r",), float, f"{iu}/nm", sizes=sizes),
            "fit": OutputSpec(("q",), float, iu),
            "dmax_candidates": OutputSpec(("candidate",), float, "nm", sizes=sizes),
            "dmax_score": OutputSpec(("candidate",), float, "1", sizes=sizes),
        }
        outputs.update(scalar_outputs(
            {"rg": "nm", "rg_sigma": "nm", "i0": iu, "i0_sigma": iu, "background": iu, "dmax": "nm",
             "dmax_sigma": "nm", "weight": "1", "log_evidence": "1", "shannon_channels": "1",
             "chi2_reduced": "1", "n_effective": "1", "n_points": "1", "q_min": "1/nm", "q_max": "1/nm",
             "status": None},
            {"n_points": np.int64},
        ))
        options = dict(weight=weight, q_range=q_range, n_r=int(n_r), nonnegative=bool(nonnegative),
                       background=bool(background), dmax_candidates=dmax_candidates,
                       min_points=int(min_points), min_channels=float(min_channels))
        params = {"dmax": "per-frame" if per_frame else dmax, **options, "errors": errors}
        extra = (self._per_frame(dmax, "dmax"),) if per_frame else ()

        def run(q_, I, S, *more):
            return _pr(q_, I, S, dmax=more[0] if more else dmax, **options)

        return self._apply(run, outputs, operation="distance_distribution", parameters=params,
                           extra_args=extra, errors=errors, temporaries=TEMPORARIES["distance_distribution"])

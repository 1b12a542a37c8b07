"""Guinier analysis of a whole series: Rg and I(0), rod cross-sections, sheet thickness.

The fits are straight lines in a linearising plot (see :mod:`saxsnb.analysis._linear`):

========  ===============  ===========================  ==================  ===========
shape     plot             law (Guinier 1939)           size                default
                                                                            limit
========  ===============  ===========================  ==================  ===========
compact   ln I vs q^2      ln I = ln I0 - q^2 Rg^2 / 3  Rg = sqrt(-3 b)     q Rg <= 1.3
rod       ln(q I) vs q^2   ln qI = c - q^2 Rc^2 / 2     Rc = sqrt(-2 b)     q Rc <= 1.0
sheet     ln(q^2 I) vs q^2 ln q^2 I = c - q^2 Rt^2      Rt = sqrt(-b)       q Rt <= 0.7
========  ===============  ===========================  ==================  ===========

(b is the slope.) For a solid cylinder of radius R, Rc^2 = R^2 / 2 and its length is
L = sqrt(12 (Rg^2 - Rc^2)); for a flat sheet of thickness T, Rt^2 = T^2 / 12
(Glatter & Kratky 1982, Small Angle X-ray Scattering; Pedersen 1997, Adv. Colloid
Interface Sci. 70, 171). The validity limits qmax Rg <= 1.3 for compact particles
(about 0.8 for elongated ones: pass ``qrg_limit=0.8``) and qmax Rc <~ 1 follow
Guinier (1939, Ann. Phys. 12, 161) and Jacques & Trewhella (2010, Protein Sci. 19,
642). The sheet limit 0.7 is our own choice: ln sinc^2(qT/2) departs from the line by
(q Rt)^4 / 10, 2.4 % at q Rt = 0.7.

Automatic range (``q_range=None``), our criterion, evaluated for every frame and every
candidate window at once through prefix sums (:class:`~saxsnb.analysis._linear.WindowMoments`):

1. candidate windows ``[start, stop)`` on the q grid: the windows start at the first
   usable point of the validity region, and only for frames where none of them is
   acceptable at ``n_starts - 1`` later starts: for "compact" the next usable points
   (default 3 starts in all, so one or two bad first points can be skipped), for
   "rod"/"sheet" starts spread up to ``min_points`` before the decay bound below
   (default 8 in all, so a region that begins higher than estimated is still found).
   For "compact" the region starts at the
   first usable point; for "rod"/"sheet" at the low-q end of their validity region
   (q >> 1/L, q >> 1/D), found in two passes from the whole particle's Rg (``rg`` if
   given, else the automatic compact search on the same frames): first q Rg >= 3 (rod)
   or 4 (sheet); then, from the first pass's Rc or Rt, the q above which the finite
   length (rod: q I ~ (pi / L)(1 - 2 / (pi q L)), L = sqrt(12 (Rg^2 - Rc^2))) or the
   lateral size (sheet: q R >= 18, R = sqrt(2 (Rg^2 - Rt^2)) for a disc) biases the
   window's size^2 by less than 1.5 % up to q R = limit; a frame left with no acceptable
   window there gets ``"outside_validity"``. Where the compact search finds the whole
   particle too large for the grid, its Rg lower bound sets the first pass only; where
   it finds no Guinier region at all, the windows may start at the first point.
   ``max_ends`` (default 32) stops evenly spaced from ``min_points`` usable points
   after the first start up to the third point where ln(q^p I) lies more than
   ``limit^2 / k + 0.3`` below its value at the first start (k = 3, 2, 1 for compact,
   rod, sheet: a Guinier curve has lost that much only beyond q R = limit; the 0.3 is a
   margin for curves that decay more slowly, such as chains). Measured
   (tests/validation/test_shapes_validation.py, cylinders and discs by quadrature, 20
   noise draws): median Rc within 2.2 % for L / Rc >= 90, Rt within 1.4 % for a disc
   R / T = 20; no "ok" result off by more than 3 sigma + 3 %;
2. a window is acceptable when it holds at least ``min_points`` usable points and no
   negative intensity or zero sigma, its slope is negative, ``q_max * R <= limit``
   with R from the window's own fit, and it shows no curvature: the quadratic term c
   of a fit ``y = a + b x + c x^2`` on the same window is either not significant
   (``|c| <= curvature_z * sigma_c``, sigma_c scaled by sqrt(chi2_red) when that
   exceeds 1) or small (the local slope changes by less than ``max_drift`` = 5 %
   across the window: R^2 is stable against the range to that fraction); and its first
   point is no outlier (squared weighted residual from the window's line below 4^2
   times the line's reduced chi-square, at least 1), so that a shadowed or
   contaminated first point makes the search move to the next start;
3. among acceptable windows the one with the smallest estimated mean-squared error
   of its slope as an estimate of the slope at q = 0 wins: var(b) (scaled as above)
   plus (c * lever)^2, where c * lever is the offset a quadratic term causes in a
   straight-line slope (lever = cov(x, x^2) / var(x)) and c^2 is estimated without its
   noise bias (c^2 - sigma_c^2, floored at 0). With noisy data this picks long windows
   (the variance dominates), with precise data shorter ones (the curvature bias
   dominates). The frame fails with a status when no window is acceptable.
4. the reported line (slope, intercept, hence Rg, I0 and their sigmas) is the average
   over all acceptable windows of the frame, weighted by exp(-(m - m_best) /
   (5 m_best)) with m a window's relative mean-squared error from step 3, and its
   variance is the weighted mean of each window's variance plus its squared offset
   from the average (model averaging, Buckland, Burnham & Augustin 1997, Biometrics
   53, 603): the sigma then includes the range-choice variance. ``q_min``, ``q_max``,
   ``n_points``, ``start``, ``stop`` and ``qrg_max`` describe the best window. Each
   window's variance is scaled by the reduced chi-square of its quadratic fit when
   that exceeds 1. Measured (tests/validation, 120-200 noise draws, nine shapes,
   0.1-10 % noise at I(0)): spread of Rg over draws / median reported sigma
   0.86-1.16 (was 1.4-2.9 with the single best window), for I0 0.94-1.04.

5. low-q upturn (compact): a single population of particles cannot curve upwards in
   ln I vs q^2 beyond a limit. With c the quadratic coefficient and b the line slope of
   a window, the relative curvature kappa = c / b^2 is, for a sum of Guinier terms,
   half the squared relative spread of the intensity-weighted Rg^2 (the second
   cumulant of ln I in q^2), and 1 / (2 a) for a power law q^-a. Measured on closed
   forms and quadratures (tests/validation/test_shapes_validation.py): below 1.25 up to
   q Rg = 2 for Gaussian chains (0.25-0.41), cylinders (L / R up to 30), Schulz spheres
   (z = 4: 0.09), ellipsoids, a Debye-Bueche medium (0.25), negative for spheres and
   vesicles; above 5 where the small spheres take over from 1 % by weight of 10x larger
   ones, or where a power-law background fades into the particle's curve. When a
   window from the first usable point has c - 1.5 b^2 above 4 sigma_c (sigma_c from the
   data's sigma alone), the frame gets ``"curvature_aggregation"`` and no Rg, whatever
   the later starts gave. A frame with no acceptable window whose windows curve upwards
   without such an upturn gets ``"curved_approximate"``: the shortest window within the
   limit, numbers kept, an approximate (low) Rg. Limits: only the columns up to the
   decay bound of step 1 are examined, so aggregates whose own Guinier region the grid
   resolves (q_min Rg_aggregate < ~2) look like one large particle (their z-average
   Rg; too large for a coarse grid gives ``"qrg_limit_exceeded"``); a background a
   few % of I(0) at q_min biases Rg by ~1 % unseen (the flow-growth demo without
   subtraction: 0.8 %). Subtract the background first.

Measured on noisy Schulz-sphere curves (tests/test_guinier.py): the median error of Rg
against the apparent Rg of Kotlarchyk & Chen (1983) is below 1 % at 1 % noise.

Statuses (``status`` output): ``"ok"``; ``"no_data"`` (no finite point);
``"range_outside_data"`` (the q range misses the measured points); ``"too_few_points"``;
``"negative_intensity"`` (I <= 0 where a logarithm is needed); ``"zero_sigma"``;
``"positive_slope"`` (intensity rising with q over a fixed range);
``"curvature_aggregation"`` (automatic, compact: the low-q upturn of step 5, the
signature of aggregation, attraction or background left in); ``"curved_approximate"``
(automatic, compact: step 5, numbers kept); ``"qrg_limit_exceeded"`` (fixed range beyond
the limit: numbers kept; automatic: even the shortest window exceeds it);
``"no_linear_region"`` (automatic: every window curves); ``"outside_validity"``
(automatic rod/sheet: step 1). Failed frames get NaN, except
"qrg_limit_exceeded" with a fixed range and "curved_approximate".
"""

from __future__ import annotations

import numpy as np

from ..errors import SaxsInputError
from ._arrays import as_frames
from ._guinier_fixed import _fit_windows
from ._guinier_search import SHAPES, _check_shape, _search_shape, guinier_search
from ._linear import index_range
from ._status import STATUS_DTYPE

__all__ = ["SHAPES", "guinier_search", "guinier", "rod_length"]


_STATUS_DTYPE = STATUS_DTYPE


def guinier(
    q,
    intensity,
    sigma=None,
    *,
    q_range=None,
    shape: str = "compact",
    qrg_limit: float | None = None,
    min_points: int = 8,
    rg=None,
    rg_sigma=None,
    **search_options,
) -> dict:
    """Guinier fit of every frame: Rg and I(0) (or Rc, Rt for rods and sheets).

    Parameters
    ----------
    q : array (n_q,), 1/nm, increasing
    intensity : array (n_frames, n_q) or (n_q,)
        Non-finite points (masked points arrive as NaN) are excluded.
    sigma : array like ``intensity``, optional
        Weights 1/sigma^2 and absolute uncertainties; without it, unweighted with the
        scatter of the residuals as uncertainty.
    q_range : None, (q_min, q_max) or array (n_frames, 2)
        None chooses a range per frame (:func:`guinier_search`, module notes).
    shape : {"compact", "rod", "sheet"}
        See the module table.
    qrg_limit : float, optional
        Validity limit of q_max R (default by shape: 1.3, 1.0, 0.7).
    min_points : int
        Fewest points for the automatic range (a fixed range needs 3).
    rg, rg_sigma : arrays (n_frames,), optional
        Rg of the whole particle, for the rod length (shape "rod").
    **search_options
        ``n_starts``, ``max_ends``, ``curvature_z``, ``max_drift`` of :func:`guinier_search`.

    Returns
    -------
    dict of arrays (n_frames,) (scalars per key for 1-D input are kept as length-1
    arrays): ``q_min``, ``q_max`` (1/nm), ``n_points``, ``chi2_reduced``, ``status``
    (str), ``i0``, ``i0_sigma`` (the extrapolated intercept exp(a): I(0) for compact,
    lim q I for rod, lim q^2 I for sheet), ``slope``, ``slope_sigma``, ``intercept``,
    ``intercept_sigma``, ``slope_intercept_cov``, ``qrg_max`` (q_max times the size),
    ``start``, ``stop`` (column indices), ``sigma_scale`` (the factor applied to the
    sigmas: sqrt(chi2_reduced) for a fixed range whose chi2_reduced exceeds
    1 + 3 sqrt(2 / dof), else 1; automatic range: the best window's
    sqrt(max(chi2_reduced of its quadratic fit, 1))); and by shape: compact ``rg``, ``rg_sigma``
    (nm); rod ``rc``, ``rc_sigma``, ``radius``, ``radius_sigma`` (solid circular
    cross-section, sqrt(2) Rc), ``length``, ``length_sigma`` (NaN without ``rg``);
    sheet ``rt``, ``rt_sigma``, ``thickness``, ``thickness_sigma`` (sqrt(12) Rt).

    Notes
    -----
    Rg = sqrt(-3 b), sigma_Rg = 3 sigma_b / (2 Rg); I0 = exp(a), sigma_I0 = I0 sigma_a
    (first-order propagation). See the module notes for the laws, limits and the
    automatic range (Guinier 1939; Jacques & Trewhella 2010).

    Examples
    --------
    >>> q = np.linspace(0.02, 0.5, 60)
    >>> I = 50 * np.exp(-(q * 2.0) ** 2 / 3)
    >>> r = guinier(q, I, 0.01 * I, q_range=(0.02, 0.6))
    >>> round(float(r["rg"][0]), 6), round(float(r["i0"][0]), 4), str(r["status"][0])
    (2.0, 50.0, 'ok')
    """
    kind, default_limit, k = _check_shape(shape)
    limit = float(default_limit if qrg_limit is None else qrg_limit)
    q, I, S, _ = as_frames(q, intensity, sigma)
    F, n_q = I.shape
    if F == 0 or n_q == 0:
        raise SaxsInputError(f"no {'frames' if F == 0 else 'q points'} to fit (intensity shape {I.shape})",
                             parameter="intensity")
    if q_range is None:
        if min_points < 3:
            raise SaxsInputError("min_points must be at least 3", parameter="min_points")
        opts = {
            "n_starts": 3 if shape == "compact" else 8,
            "max_ends": 32,
            "curvature_z": 3.0,
            "max_drift": 0.05,
        }
        unknown = set(search_options) - set(opts)
        if unknown:
            raise SaxsInputError(f"unknown option(s) {sorted(unknown)}", parameter=sorted(unknown)[0])
        opts.update(search_options)
        found, fit = _search_shape(
            q, I, S, kind, k, limit, min_points, int(opts["n_starts"]), int(opts["max_ends"]),
            float(opts["curvature_z"]), float(opts["max_drift"]), shape, rg,
        )
        start, stop, status = found["start"], found["stop"], found["status"]
    else:
        if search_options:
            raise SaxsInputError(
                f"{sorted(search_options)} apply to the automatic range only (q_range=None)",
                parameter=sorted(search_options)[0],
            )
        start, stop = index_range(q, q_range, F)
        status = np.full(F, "ok", dtype=_STATUS_DTYPE)
        fit = _fit_windows(q, I, S, start, stop, kind)
    n = fit["n_points"]
    # fixed range with sigma: the covariance is scaled by chi2_reduced when the line
    # misses the data clearly (chi2_reduced > 1 + 3 sqrt(2 / dof); common practice);
    # the automatic range scales each window by its quadratic fit's chi2_reduced > 1
    sigma_scale = np.ones(F)
    if q_range is not None and S is not None:
        with np.errstate(invalid="ignore", divide="ignore"):
            dof = np.maximum(n - 2.0, 1.0)
            c2 = fit["chi2_reduced"]
            far = c2 > 1.0 + 3.0 * np.sqrt(2.0 / dof)
            sigma_scale = np.where(far, np.sqrt(np.where(far, c2, 1.0)), 1.0)
        if far.any():
            fit = dict(fit)
            fit["slope_sigma"] = fit["slope_sigma"] * sigma_scale
            fit["intercept_sigma"] = fit["intercept_sigma"] * sigma_scale
            fit["slope_intercept_cov"] = fit["slope_intercept_cov"] * sigma_scale**2
    elif q_range is None:
        sigma_scale = fit.get("sigma_scale", sigma_scale)
    with np.errstate(invalid="ignore", divide="ignore"):
        size = np.sqrt(-k * fit["slope"])
        size_sigma = k * fit["slope_sigma"] / (2.0 * size)
        i0 = np.exp(fit["intercept"])
        i0_sigma = i0 * fit["intercept_sigma"]
        # q_max R of the chosen window, with the window's own size (the automatic range
        # reports the average over acceptable windows, each within the limit)
        qr = fit["q_max"] * np.sqrt(-k * fit.get("slope_window", fit["slope"]))
    if q_range is not None:
        # frames without a finite point in range: no data at all, or a range outside them
        empty = fit["n_finite"] == 0
        has_data = np.ones(F, dtype=bool)
        outside = np.zeros(F, dtype=bool)
        if empty.any():
            fin = np.isfinite(I[empty]) if S is None else np.isfinite(I[empty]) & np.isfinite(S[empty])
            has = fin.any(axis=-1)
            first = q[np.where(has, np.argmax(fin, axis=-1), 0)]
            last = q[np.where(has, n_q - 1 - np.argmax(fin[:, ::-1], axis=-1), 0)]
            lo_b, hi_b = np.broadcast_to(np.asarray(q_range, dtype=float), (F, 2))[empty].T
            has_data[empty] = has
            outside[empty] = (hi_b < first) | (lo_b > last)
        status[n < 3] = "too_few_points"
        status[fit["n_zero_sigma"] > 0] = "zero_sigma"
        status[fit["n_negative"] > 0] = "negative_intensity"
        status[outside] = "range_outside_data"
        status[~has_data] = "no_data"
        valid = status == "ok"
        status[valid & ~(fit["slope"] < 0)] = "positive_slope"
        status[(status == "ok") & (qr > limit)] = "qrg_limit_exceeded"
    good = (status == "ok") | ((status == "qrg_limit_exceeded") & (q_range is not None))
    good |= status == "curved_approximate"
    nan = np.nan

    def keep(a):
        return np.where(good, a, nan)

    out = {
        "q_min": keep(fit["q_min"]),
        "q_max": keep(fit["q_max"]),
        "n_points": np.where(good, n, 0).astype(np.int64),
        "chi2_reduced": keep(fit["chi2_reduced"]),
        "status": status,
        "i0": keep(i0),
        "i0_sigma": keep(i0_sigma),
        "slope": keep(fit["slope"]),
        "slope_sigma": keep(fit["slope_sigma"]),
        "intercept": keep(fit["intercept"]),
        "intercept_sigma": keep(fit["intercept_sigma"]),
        "slope_intercept_cov": keep(fit["slope_intercept_cov"]),
        "qrg_max": keep(qr),
        "sigma_scale": keep(sigma_scale),
        "start": np.where(good, start, -1).astype(np.int64),
        "stop": np.where(good, stop, -1).astype(np.int64),
    }
    if shape == "compact":
        out["rg"], out["rg_sigma"] = keep(size), keep(size_sigma)
    elif shape == "rod":
        out["rc"], out["rc_sigma"] = keep(size), keep(size_sigma)
        out["radius"], out["radius_sigma"] = keep(np.sqrt(2.0) * size), keep(np.sqrt(2.0) * size_sigma)
        if rg is None:
            out["length"] = np.full(F, nan)
            out["length_sigma"] = np.full(F, nan)
        else:
            L, Ls = rod_length(rg, out["rc"], rg_sigma, out["rc_sigma"])
            out["length"] = np.broadcast_to(L, (F,)).copy()
            out["length_sigma"] = np.broadcast_to(Ls, (F,)).copy()
    else:
        out["rt"], out["rt_sigma"] = keep(size), keep(size_sigma)
        s12 = np.sqrt(12.0)
        out["thickness"], out["thickness_sigma"] = keep(s12 * size), keep(s12 * size_sigma)
    return out


def rod_length(rg, rc, rg_sigma=None, rc_sigma=None):
    """Length of a rod from its Rg and cross-section Rc: L = sqrt(12 (Rg^2 - Rc^2)).

    Parameters
    ----------
    rg, rc : arrays (nm)
    rg_sigma, rc_sigma : arrays (nm), optional

    Returns
    -------
    length, length_sigma : arrays (nm); NaN where Rg <= Rc.

    Notes
    -----
    For a cylinder Rg^2 = Rc^2 + L^2/12 (Glatter & Kratky 1982); first-order
    propagation sigma_L = 12 sqrt((Rg s_Rg)^2 + (Rc s_Rc)^2) / L.

    Examples
    --------
    >>> L, _ = rod_length(np.sqrt(0.5 + 100.0 / 12), np.sqrt(0.5))
    >>> round(float(L), 10)
    10.0
    """
    rg = np.asarray(rg, dtype=float)
    rc = np.asarray(rc, dtype=float)
    with np.errstate(invalid="ignore", divide="ignore"):
        d = rg * rg - rc * rc
        L = np.where(d > 0, np.sqrt(12.0 * np.where(d > 0, d, np.nan)), np.nan)
        sg = 0.0 if rg_sigma is None else np.asarray(rg_sigma, dtype=float)
        sc = 0.0 if rc_sigma is None else np.asarray(rc_sigma, dtype=float)
        Ls = 12.0 * np.sqrt((rg * sg) ** 2 + (rc * sc) ** 2) / L
    return L, Ls


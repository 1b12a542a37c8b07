"""Porod analysis of a whole series: power-law exponent, Porod constant, invariant,
Porod volume and specific surface.

Conventions (Porod 1951, Kolloid-Z. 124, 83; Glatter & Kratky 1982, Small Angle X-ray
Scattering):

- power law I(q) - B ~ A q^-p on a q range; ``exponent`` is p (4 for a smooth sharp
  surface, 6 - Ds for a surface fractal, Dm for a mass fractal, 2 for sheets and
  Gaussian coils, 1 for thin rods; Bale & Schmidt 1984, PRL 53, 596);
- Porod constant Kp = lim q^4 (I - B), with a flat background B either given or
  fitted: q^4 I = Kp + B q^4 is a straight line in q^4 (common practice);
- invariant **Q = int_0^inf q^2 I(q) dq** (no 4 pi or 1/(2 pi^2) factor), so that
  Q = 2 pi^2 drho^2 phi (1 - phi) for a two-phase sample, the Porod volume is
  V = 2 pi^2 I(0) / Q and the specific surface (surface per sample volume) is
  S/V = pi phi (1 - phi) Kp / Q; the surface per particle volume is
  pi (1 - phi) Kp / Q (dilute limit pi Kp / Q, 3/R for spheres).

All functions take ``q`` (n_q,) in 1/nm and ``intensity`` (n_frames, n_q) (or one
curve (n_q,)); non-finite points (masked points arrive as NaN) are excluded. Units
follow the intensity: Kp in [I] nm^-4, Q in [I] nm^-3, V in nm^3 when [I] is the
same for I(0) and Q, S/V in 1/nm.
"""

from __future__ import annotations

import numpy as np

from ..errors import SaxsInputError
from ._arrays import as_frames
from ._linear import index_range, line_fit_shared_x
from ._status import STATUS_DTYPE

__all__ = [
    "default_porod_range",
    "power_law_fit",
    "porod_fit",
    "porod",
]

_STATUS_DTYPE = STATUS_DTYPE

#: Exponents tried by the joint fit of I = A q^-p + B (see :func:`porod`).
_P_GRID = np.linspace(0.5, 7.0, 651)


def default_porod_range(q) -> tuple[float, float]:
    """The range used when none is given: the upper quarter of the q grid.

    A starting point only: no published criterion picks the Porod region for every
    sample; look at the q^4 I plot and choose.

    >>> default_porod_range(np.linspace(1.0, 5.0, 5))
    (4.0, 5.0)
    """
    q = np.asarray(q, dtype=float)
    return float(q[int(0.75 * (q.size - 1))]), float(q[-1])


def _window(q, I, S, q_range):
    """Columns of the range (common slice) and the per-frame in-range mask."""
    F = I.shape[0]
    if q_range is None:
        q_range = default_porod_range(q)
    start, stop = index_range(q, q_range, F)
    lo, hi = int(start.min()), int(max(stop.max(), start.min()))
    cols = np.arange(lo, hi)
    inside = (cols[None, :] >= start[:, None]) & (cols[None, :] < stop[:, None])
    Iw = I[:, lo:hi]
    Sw = None if S is None else S[:, lo:hi]
    return q[lo:hi], Iw, Sw, inside, start, stop, q_range


def _common_status(q, I, S, Dw, Sw, finite, q_range, *, need_positive):
    """Status per frame for a fixed-range fit, and the mask of usable points
    (``finite``: finite and in range; ``Dw``: the values that must be positive)."""
    F = I.shape[0]
    zero = finite & (Sw <= 0) if Sw is not None else np.zeros_like(finite)
    neg = finite & (Dw <= 0) if need_positive else np.zeros_like(finite)
    usable = finite & ~zero & ~neg if need_positive or Sw is not None else finite
    status = np.full(F, "ok", dtype=_STATUS_DTYPE)
    status[np.count_nonzero(usable, axis=-1) < 3] = "too_few_points"
    status[zero.any(-1)] = "zero_sigma"
    status[neg.any(-1)] = "negative_intensity"
    empty = ~finite.any(-1)
    if empty.any():
        fin = np.isfinite(I[empty]) if S is None else np.isfinite(I[empty]) & np.isfinite(S[empty])
        has = fin.any(-1)
        first = q[np.where(has, np.argmax(fin, -1), 0)]
        last = q[np.where(has, q.size - 1 - np.argmax(fin[:, ::-1], -1), 0)]
        rng = np.broadcast_to(np.asarray(q_range, dtype=float), (F, 2))[empty]
        st = status[empty]
        st[(rng[:, 1] < first) | (rng[:, 0] > last)] = "range_outside_data"
        st[~has] = "no_data"
        status[empty] = st
    return status, usable


def _span(qw, usable):
    n = usable.shape[1]
    if n == 0:
        return np.full(usable.shape[0], np.nan), np.full(usable.shape[0], np.nan)
    has = usable.any(-1)
    lo = np.where(has, np.argmax(usable, -1), 0)
    hi = np.where(has, n - 1 - np.argmax(usable[:, ::-1], -1), 0)
    return np.where(has, qw[lo], np.nan), np.where(has, qw[hi], np.nan)


def power_law_fit(q, intensity, sigma=None, *, q_range=None, background=0.0) -> dict:
    """Power-law exponent from a straight line in log-log coordinates, per frame.

    Parameters
    ----------
    q : array (n_q,), 1/nm
    intensity, sigma : arrays (n_frames, n_q) or (n_q,)
    q_range : None, (q_min, q_max) or array (n_frames, 2)
        None: :func:`default_porod_range`.
    background : float or array (n_frames,)
        Flat background subtracted before the logarithm (same unit as intensity).

    Returns
    -------
    dict of arrays (n_frames,): ``exponent`` (p in I - B ~ A q^-p, dimensionless),
    ``exponent_sigma``, ``prefactor`` (A, [I] nm^-p), ``prefactor_sigma``,
    ``chi2_reduced``, ``n_points``, ``q_min``, ``q_max``, ``status`` ("ok",
    "no_data", "range_outside_data", "too_few_points", "zero_sigma",
    "negative_intensity": I - B <= 0 inside the range, where no logarithm exists).

    Notes
    -----
    ln(I - B) = ln A - p ln q, weights (I - B)^2 / sigma^2 (first-order propagation,
    :func:`~saxsnb.analysis._linear.linearize`). Exponents: 4 smooth surfaces (Porod
    1951), 2 Gaussian coils and sheets, 1 rods (Bale & Schmidt 1984; Schmidt 1991,
    J. Appl. Cryst. 24, 414).

    Examples
    --------
    >>> q = np.geomspace(1.0, 10.0, 30)
    >>> r = power_law_fit(q, 5.0 * q**-4, q_range=(1.0, 10.0))
    >>> round(float(r["exponent"][0]), 9), round(float(r["prefactor"][0]), 9)
    (4.0, 5.0)
    """
    q, I, S, _ = as_frames(q, intensity, sigma)
    return _power_law(_prepare(q, I, S, q_range), background)


def _prepare(q, I, S, q_range):
    """The common column slice of the range, its in-range mask, the finite mask, and
    whether every point in range is finite with a positive sigma (then the fits skip
    all masking: the common case, and the fast one)."""
    qw, Iw, Sw, inside, _, _, q_range = _window(q, I, S, q_range)
    finite = np.isfinite(Iw) & inside
    if Sw is not None:
        finite &= np.isfinite(Sw)
    clean = bool(finite.all()) and finite.shape[1] >= 3 and (Sw is None or bool((Sw > 0).all()))
    return q, I, S, qw, Iw, Sw, inside, finite, q_range, clean


def _power_law(prep, background):
    q, I, S, qw, Iw, Sw, inside, finite, q_range, clean = prep
    F = I.shape[0]
    B = np.broadcast_to(np.asarray(background, dtype=float), (F,))[:, None]
    D = Iw - B if np.any(B != 0) else Iw
    n_points = None
    if clean and bool((D > 0).all()):
        status = np.full(F, "ok", dtype=_STATUS_DTYPE)
        usable = finite
        n_points = np.full(F, D.shape[1])
        y = np.log(D)
        w = D / Sw if Sw is not None else np.ones_like(D)
        w *= w
    else:
        status, usable = _common_status(q, I, S, D, Sw, finite, q_range, need_positive=True)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            y = np.log(np.where(usable, D, 1.0))
            if Sw is None:
                w = usable.astype(float)
            else:  # the same operations as the fast path, so that batch equals loop
                w = D / Sw
                w *= w
                w = np.where(usable, w, 0.0)
    fit = line_fit_shared_x(np.log(qw), y, w, scale_covariance=Sw is None, n_points=n_points)
    good = status == "ok"
    q_lo, q_hi = _span(qw, usable)
    nan = np.nan
    with np.errstate(invalid="ignore", over="ignore"):
        A = np.exp(fit["intercept"])
    return {
        "exponent": np.where(good, -fit["slope"], nan),
        "exponent_sigma": np.where(good, fit["slope_sigma"], nan),
        "prefactor": np.where(good, A, nan),
        "prefactor_sigma": np.where(good, A * fit["intercept_sigma"], nan),
        "chi2_reduced": np.where(good, fit["chi2_reduced"], nan),
        "n_points": np.where(good, fit["n_points"], 0).astype(np.int64),
        "q_min": np.where(good, q_lo, nan),
        "q_max": np.where(good, q_hi, nan),
        "status": status,
    }


def porod_fit(q, intensity, sigma=None, *, q_range=None, background="fit") -> dict:
    """Porod constant Kp = lim q^4 (I - B), with a flat background fitted or given.

    Parameters
    ----------
    q : array (n_q,), 1/nm
    intensity, sigma : arrays (n_frames, n_q) or (n_q,)
    q_range : None, (q_min, q_max) or array (n_frames, 2)
        None: :func:`default_porod_range`.
    background : "fit", float or array (n_frames,)
        "fit": straight line q^4 I = Kp + B q^4 (intercept Kp, slope B). A number:
        Kp is the weighted mean of q^4 (I - B) over the range.

    Returns
    -------
    dict of arrays (n_frames,): ``porod_constant`` ([I] nm^-4), ``porod_constant_sigma``,
    ``background`` ([I]; the given value when not fitted), ``background_sigma`` (0
    when given), ``porod_background_cov``, ``chi2_reduced``, ``n_points``, ``q_min``,
    ``q_max``, ``status`` (as :func:`power_law_fit`, negative intensities allowed,
    plus "negative_porod_constant" when Kp <= 0: numbers kept, but a Porod law
    with a positive constant does not describe the range).

    Notes
    -----
    The fitted background assumes the exponent is 4 on the range; check it with
    :func:`power_law_fit` (on I - B). Uncertainties from the weights (absolute sigma);
    without sigma, from the scatter of the residuals.

    Examples
    --------
    >>> q = np.linspace(2.0, 4.0, 50)
    >>> r = porod_fit(q, 3.0 / q**4 + 0.01, q_range=(2.0, 4.0))
    >>> round(float(r["porod_constant"][0]), 9), round(float(r["background"][0]), 9)
    (3.0, 0.01)
    """
    q, I, S, _ = as_frames(q, intensity, sigma)
    return _porod(_prepare(q, I, S, q_range), background)


def _porod(prep, background):
    q, I, S, qw, Iw, Sw, inside, finite, q_range, clean = prep
    F = I.shape[0]
    q4 = qw**4
    nan = np.nan
    n_points = None
    if clean:
        status = np.full(F, "ok", dtype=_STATUS_DTYPE)
        usable = finite
        n_points = np.full(F, Iw.shape[1])
        if Sw is None:
            w = np.ones_like(Iw)
        else:
            # weights of y = q^4 I: 1 / (q^4 sigma)^2
            w = np.reciprocal(Sw)
            w *= w
            w /= (q4 * q4)[None, :]
    else:
        status, usable = _common_status(q, I, S, Iw, Sw, finite, q_range, need_positive=False)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            if Sw is None:
                w = usable.astype(float)
            else:  # the same operations as the fast path, so that batch equals loop
                w = np.reciprocal(Sw)
                w *= w
                w /= (q4 * q4)[None, :]
                w = np.where(usable, w, 0.0)
    if isinstance(background, str):
        if background != "fit":
            raise SaxsInputError(
                f"background must be 'fit' or a number, got {background!r}", parameter="background"
            )
        y = Iw * q4 if clean else np.where(usable, q4 * Iw, 0.0)
        fit = line_fit_shared_x(q4, y, w, scale_covariance=Sw is None, n_points=n_points)
        Kp, Ks = fit["intercept"], fit["intercept_sigma"]
        B, Bs, cov = fit["slope"], fit["slope_sigma"], fit["slope_intercept_cov"]
        chi2r, n = fit["chi2_reduced"], fit["n_points"]
    else:
        B = np.broadcast_to(np.asarray(background, dtype=float), (F,)).astype(float)
        y = np.where(usable, q4 * (Iw - B[:, None]), 0.0)
        n = usable.sum(-1)
        with np.errstate(divide="ignore", invalid="ignore"):
            S0 = w.sum(-1)
            Kp = np.einsum("ij,ij->i", w, y) / S0
            r = y - Kp[:, None]
            chi2 = np.einsum("ij,ij->i", w * r, r)
            chi2r = np.where(n > 1, chi2 / np.maximum(n - 1, 1), nan)
            Ks = np.sqrt(1.0 / S0) if Sw is not None else np.sqrt(chi2r / S0)
        Bs = np.zeros(F)
        cov = np.zeros(F)
    good = (status == "ok") & np.isfinite(Kp)
    status[good & (Kp <= 0)] = "negative_porod_constant"
    keep = good
    q_lo, q_hi = _span(qw, usable)
    return {
        "porod_constant": np.where(keep, Kp, nan),
        "porod_constant_sigma": np.where(keep, Ks, nan),
        "background": np.where(keep, B, nan),
        "background_sigma": np.where(keep, Bs, nan),
        "porod_background_cov": np.where(keep, cov, nan),
        "chi2_reduced": np.where(keep, chi2r, nan),
        "n_points": np.where(keep, n, 0).astype(np.int64),
        "q_min": np.where(keep, q_lo, nan),
        "q_max": np.where(keep, q_hi, nan),
        "status": status,
    }


def porod(q, intensity, sigma=None, *, q_range=None, background="fit") -> dict:
    """:func:`porod_fit` and the power-law exponent on the same range, in one call.

    With a given background B the exponent is fitted on log(I - B)
    (:func:`power_law_fit`). With ``background="fit"`` the exponent comes from a joint
    fit of ``I = A q^-p + B`` (A, B and p free; no exponent presumed, unlike the
    Porod-constant line, which assumes p = 4), so it is the exponent of I - B.

    Returns
    -------
    The dict of :func:`porod_fit`, plus ``exponent``, ``exponent_sigma``,
    ``prefactor``, ``prefactor_sigma``, ``exponent_chi2_reduced`` and
    ``exponent_status``. ``status`` becomes "porod_region_not_reached" (numbers kept)
    where the exponent differs from 4 by more than 3 sigma and 0.3 (see
    :data:`saxsnb.analysis.STATUS`).

    Notes
    -----
    Joint fit by variable projection: for each p of a grid (0.5..7, step 0.01) A and
    B are the weighted linear least-squares solution, the chi-square minimum over the
    grid is refined by a parabola, and sigma_p = sqrt(2 / chi2''(p)) (scaled by
    sqrt(chi2_red) when above 1), the usual Delta chi2 = 1 rule (common practice).

    Examples
    --------
    >>> q = np.linspace(2.0, 4.0, 50)
    >>> r = porod(q, 3.0 / q**4, q_range=(2.0, 4.0), background=0.0)
    >>> round(float(r["exponent"][0]), 9), round(float(r["porod_constant"][0]), 9)
    (4.0, 3.0)
    >>> r = porod(q, 3.0 / q**3.5 + 0.05, q_range=(2.0, 4.0))
    >>> round(float(r["exponent"][0]), 3), str(r["status"][0])
    (3.5, 'porod_region_not_reached')
    """
    q, I, S, _ = as_frames(q, intensity, sigma)
    prep = _prepare(q, I, S, q_range)
    out = _porod(prep, background)
    fitted = isinstance(background, str)
    pl = _power_law(prep, 0.0 if fitted else background)
    if fitted:
        pl.update(_power_law_with_background(prep, pl["status"]))
    for key in ("exponent", "exponent_sigma", "prefactor", "prefactor_sigma"):
        out[key] = pl[key]
    out["exponent_chi2_reduced"] = pl["chi2_reduced"]
    out["exponent_status"] = pl["status"]
    with np.errstate(invalid="ignore"):
        off = np.abs(out["exponent"] - 4.0) > np.maximum(3.0 * out["exponent_sigma"], 0.3)
    out["status"] = np.where((out["status"] == "ok") & off, "porod_region_not_reached", out["status"])
    # a flat (constant) or background-only frame: no q^-4 term above its noise
    with np.errstate(invalid="ignore"):
        flat = ~(out["porod_constant"] > 2.0 * out["porod_constant_sigma"])
        flat |= ~np.isfinite(out["exponent_sigma"])
    out["status"] = np.where((out["status"] == "ok") & flat, "no_porod_signal", out["status"])
    return out


def _power_law_with_background(prep, status):
    """Joint fit I = A q^-p + B on the range (variable projection over a grid of p)."""
    q, I, S, qw, Iw, Sw, inside, finite, q_range, clean = prep
    usable = np.isfinite(Iw) & (np.ones_like(Iw, dtype=bool) if Sw is None else np.isfinite(Sw) & (Sw > 0))
    with np.errstate(divide="ignore", invalid="ignore"):
        w = np.where(usable, 1.0 if Sw is None else 1.0 / np.where(usable, Sw, 1.0) ** 2, 0.0)
    y = np.where(usable, Iw, 0.0)
    lq = np.log(qw)
    X = np.exp(-_P_GRID[:, None] * lq[None, :])  # (G, n) basis q^-p
    # weighted normal equations of y = A X + B per frame and p, and the residual sums,
    # in chunks of frames (bounded (frames, p, q) work arrays). Sums run along q frame
    # by frame (no matrix product, whose rounding depends on the number of frames:
    # batch must equal loop); the residuals are summed directly (the expanded form
    # cancels badly on clean data).
    F = y.shape[0]
    chi2 = np.empty((F, _P_GRID.size))
    Sw0 = w.sum(-1)[:, None]  # (F, 1)
    Sy = (w * y).sum(-1)[:, None]
    X2 = X * X
    for a in range(0, F, 32):
        sl = slice(a, a + 32)
        wc = w[sl, None, :]
        Sx = (wc * X[None]).sum(-1)
        Sxx = (wc * X2[None]).sum(-1)
        Sxy = ((w[sl] * y[sl])[:, None, :] * X[None]).sum(-1)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            det = Sxx * Sw0[sl] - Sx * Sx
            A = (Sxy * Sw0[sl] - Sx * Sy[sl]) / det
            B = (Sxx * Sy[sl] - Sx * Sxy) / det
            res = y[sl, None, :] - A[:, :, None] * X[None] - B[:, :, None]
            res *= res
            res *= wc
            chi2[sl] = res.sum(-1)
    chi2 = np.where(np.isfinite(chi2), chi2, np.inf)
    F, G = chi2.shape
    j = np.clip(np.argmin(chi2, axis=1), 1, G - 2)
    r = np.arange(F)
    c0, c1, c2 = chi2[r, j - 1], chi2[r, j], chi2[r, j + 1]
    h = _P_GRID[1] - _P_GRID[0]
    with np.errstate(divide="ignore", invalid="ignore"):
        curv = (c0 - 2 * c1 + c2) / h**2
        shift = np.where(curv > 0, 0.5 * h * (c0 - c2) / (c0 - 2 * c1 + c2), 0.0)
        p = _P_GRID[j] + np.clip(shift, -h, h)
        n = usable.sum(-1)
        chi2_min = np.maximum(c1 - 0.25 * (c0 - c2) * shift / h, 0.0)
        red = chi2_min / np.maximum(n - 3, 1)
        scale = red if Sw is None else np.maximum(red, 1.0)
        sp = np.sqrt(np.maximum(2.0 / curv * scale, 0.0))
    # prefactor at the refined p
    pw = np.exp(-p[:, None] * lq[None, :])
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        s0, sx, sxx = Sw0[:, 0], (w * pw).sum(-1), (w * pw * pw).sum(-1)
        sy, sxy = Sy[:, 0], (w * y * pw).sum(-1)
        dd = sxx * s0 - sx * sx
        A = (sxy * s0 - sx * sy) / dd
        As = np.sqrt(s0 / dd * scale)
    edge = (np.argmin(chi2, axis=1) == 0) | (np.argmin(chi2, axis=1) == G - 1)
    good = (status == "ok") & np.isfinite(p) & np.isfinite(sp) & ~edge
    st = np.where((status == "ok") & ~good, "no_power_law", status).astype(_STATUS_DTYPE)
    nan = np.nan
    return {
        "exponent": np.where(good, p, nan),
        "exponent_sigma": np.where(good, sp, nan),
        "prefactor": np.where(good, A, nan),
        "prefactor_sigma": np.where(good, As, nan),
        "chi2_reduced": np.where(good, red, nan),
        "status": st,
    }

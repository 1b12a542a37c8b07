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

import functools

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
_COARSE = 10  # the coarse grid of the joint fit: every tenth node
_MAX_WALK = 60  # fine-grid steps allowed from the coarse estimate


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


def _power_law_status(prep):
    """The ``status`` of :func:`_power_law` with no background, without the fit."""
    q, I, S, qw, Iw, Sw, inside, finite, q_range, clean = prep
    if clean and bool((Iw > 0).all()):
        return np.full(I.shape[0], "ok", dtype=_STATUS_DTYPE)
    return _common_status(q, I, S, Iw, Sw, finite, q_range, need_positive=True)[0]


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
    All frames at once: the minimum is located on every tenth node, then found on the
    fine grid by a descent from there (the chi-square is evaluated at a few nodes per
    frame, not all 651); this equals the full-grid search (exponent to 1e-8 relative,
    sigma to 1e-5, tested) unless the chi-square has two separate minima of nearly
    equal depth. ``benchmarks/bench_porod.py`` times it against per-frame loops.

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
    if fitted:  # the statuses of the log-log fit (no logarithm of I <= 0), then the joint fit
        pl = _power_law_with_background(prep, _power_law_status(prep))
    else:
        pl = _power_law(prep, background)
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


def _grid_chi2(j, X, w, wy, y, Sw0, Sy):
    """Chi-square of the best I = A q^-p + B at p = _P_GRID[j], one node per frame
    (``X``: the basis q^-p at every node; residuals summed directly, row by row:
    batch equals loop)."""
    x = X[j]
    wx = w * x
    Sx = wx.sum(-1)
    Sxx = np.einsum("ij,ij->i", wx, x)
    Sxy = np.einsum("ij,ij->i", wy, x)
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        det = Sxx * Sw0 - Sx * Sx
        A = (Sxy * Sw0 - Sx * Sy) / det
        B = (Sxx * Sy - Sx * Sxy) / det
        x *= A[:, None]  # x becomes the residual y - A x - B
        x += B[:, None]
        np.subtract(y, x, out=x)
        c = np.einsum("ij,ij,ij->i", w, x, x)
    return np.where(np.isfinite(c), c, np.inf)


def _power_law_with_background(prep, status):
    """Joint fit I = A q^-p + B on the range (variable projection over a grid of p).

    All frames at once: the chi-square of every node of a coarse grid (every tenth node
    of ``_P_GRID``) from the weighted sums (matrix products over all frames), the
    coarse minimum refined by a parabola to a node of the fine grid, then a descent
    node by node on the fine grid (residuals summed directly) to its local minimum,
    where the parabola through three nodes gives p and its curvature. The result is
    the fine-grid fit of the previous implementation (a chi-square at every one of the
    651 nodes) wherever the fine-grid minimum lies in the basin of the coarse one.
    """
    q, I, S, qw, Iw, Sw, inside, finite, q_range, clean = prep
    if clean:  # every point finite with sigma > 0: no masking
        usable = None
        y = Iw
        w = np.ones(Iw.shape) if Sw is None else np.reciprocal(Sw)
        w *= w
    else:
        # finite and inside the frame's own range (a per-frame range: the window is their union)
        usable = finite if Sw is None else finite & (Sw > 0)
        with np.errstate(divide="ignore", invalid="ignore"):
            w = np.where(usable, 1.0 if Sw is None else 1.0 / np.where(usable, Sw, 1.0) ** 2, 0.0)
        y = np.where(usable, Iw, 0.0)
    lq = np.log(qw)
    F, G = y.shape[0], _P_GRID.size
    wy = w * y
    Sw0 = w.sum(-1)
    Sy = wy.sum(-1)
    # coarse grid: the expanded chi-square Syy - A Sxy - B Sy from matrix products is
    # precise enough to choose the basin; the fine nodes below use direct residuals
    X = np.exp(-_P_GRID[:, None] * lq[None, :])  # (G, n) basis q^-p at every node
    Xc = X[::_COARSE]
    Pc = _P_GRID[::_COARSE]
    Sx, Sxx, Sxy = w @ Xc.T, w @ (Xc * Xc).T, wy @ Xc.T
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        det = Sxx * Sw0[:, None] - Sx * Sx
        A = (Sxy * Sw0[:, None] - Sx * Sy[:, None]) / det
        B = (Sxx * Sy[:, None] - Sx * Sxy) / det
        cc = (wy * y).sum(-1)[:, None] - A * Sxy - B * Sy[:, None]
    cc = np.where(np.isfinite(cc), cc, np.inf)
    jc = np.argmin(cc, axis=1)
    r = np.arange(F)
    jm = np.clip(jc, 1, Pc.size - 2)
    a0, a1, a2 = cc[r, jm - 1], cc[r, jm], cc[r, jm + 1]
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        d2 = a0 - 2 * a1 + a2
        sh = np.where((d2 > 0) & (jc == jm), 0.5 * (a0 - a2) / d2, 0.0)
    sh = np.where(np.isfinite(sh), np.clip(sh, -1.0, 1.0), 0.0)
    j = np.where(jc == jm, np.rint((jm + sh) * _COARSE), jc * _COARSE)  # at an edge: start there
    j = np.clip(j.astype(np.intp), 1, G - 2)
    # descent on the fine grid to the local minimum (a node not above its neighbours)
    ev = functools.partial(_grid_chi2, X=X, w=w, wy=wy, y=y, Sw0=Sw0, Sy=Sy)
    c0, c1, c2 = ev(j - 1), ev(j), ev(j + 1)
    edge = np.zeros(F, dtype=bool)
    todo = ~((c1 <= c0) & (c1 <= c2))
    for _ in range(_MAX_WALK):
        left = todo & (c0 < c2)
        right = todo & ~left
        edge |= (left & (j == 1)) | (right & (j == G - 2))
        todo &= ~edge
        left &= todo
        right &= todo
        if not todo.any():
            break
        a = np.nonzero(left)[0]
        j[a] -= 1
        c2[a], c1[a] = c1[a], c0[a]
        c0[a] = ev(j[a] - 1, w=w[a], wy=wy[a], y=y[a], Sw0=Sw0[a], Sy=Sy[a])
        b = np.nonzero(right)[0]
        j[b] += 1
        c0[b], c1[b] = c1[b], c2[b]
        c2[b] = ev(j[b] + 1, w=w[b], wy=wy[b], y=y[b], Sw0=Sw0[b], Sy=Sy[b])
        todo = ~((c1 <= c0) & (c1 <= c2)) & ~edge
    edge |= todo  # no minimum within _MAX_WALK nodes: no result
    Sw0, Sy = Sw0[:, None], Sy[:, None]
    h = _P_GRID[1] - _P_GRID[0]
    with np.errstate(divide="ignore", invalid="ignore"):
        curv = (c0 - 2 * c1 + c2) / h**2
        shift = np.where(curv > 0, 0.5 * h * (c0 - c2) / (c0 - 2 * c1 + c2), 0.0)
        p = _P_GRID[j] + np.clip(shift, -h, h)
        n = np.full(F, y.shape[1]) if usable is None else usable.sum(-1)
        chi2_min = np.maximum(c1 - 0.25 * (c0 - c2) * shift / h, 0.0)
        red = chi2_min / np.maximum(n - 3, 1)
        scale = red if Sw is None else np.maximum(red, 1.0)
        sp = np.sqrt(np.maximum(2.0 / curv * scale, 0.0))
    # prefactor at the refined p
    pw = np.exp(-p[:, None] * lq[None, :])
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        wp = w * pw
        s0, sx, sxx = Sw0[:, 0], wp.sum(-1), np.einsum("ij,ij->i", wp, pw)
        sy, sxy = Sy[:, 0], np.einsum("ij,ij->i", wy, pw)
        dd = sxx * s0 - sx * sx
        A = (sxy * s0 - sx * sy) / dd
        As = np.sqrt(s0 / dd * scale)
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

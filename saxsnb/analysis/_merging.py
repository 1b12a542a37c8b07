"""Two q ranges into one curve, and concentration series.

Merging: the high-q range is scaled onto the low-q range over their overlap (weighted
least squares for the factor, common practice) and the two are combined by
inverse-variance weighting where both measure (common practice; e.g. Taylor 1997, An
Introduction to Error Analysis, ch. 7).

Concentration series: ``I(q, c) / c`` is extrapolated to ``c = 0`` per q by a weighted
straight line in c (the classical dilution extrapolation, e.g. Guinier & Fournet 1955,
Small-Angle Scattering of X-rays, ch. 2; Zimm 1948 for light scattering); the slope of
``I(0)/c`` against c is proportional to ``-2 A2 M`` (second virial coefficient): negative
for repulsion, positive for attraction or aggregation.
"""

from __future__ import annotations

import numpy as np

from ..errors import SaxsInputError
from ._arrays import as_frames

__all__ = ["merge_ranges", "per_concentration", "extrapolate_concentration"]


def merge_ranges(q_low, low, low_sigma, q_high, high, high_sigma, *, overlap=None) -> dict:
    """Scale the high-q range onto the low-q range and merge them, frame by frame.

    Parameters
    ----------
    q_low, low, low_sigma : (n_low,), (n_frames, n_low), (n_frames, n_low)
    q_high, high, high_sigma : (n_high,), (n_frames, n_high), (n_frames, n_high)
        Two measurements of the same frames (one per detector, or per distance).
    overlap : (q_min, q_max), optional
        Where both measure the same curve; default the whole common q range.

    Returns
    -------
    dict with ``q`` (n,) the merged grid (low points up to the end of the overlap, high
    points beyond), ``intensity`` and ``sigma`` (n_frames, n), ``factor`` and
    ``factor_sigma`` (n_frames,) with ``low = factor x high`` on the overlap, and
    ``n_overlap`` (n_frames,) points of the overlap used.

    Notes
    -----
    The high range is interpolated linearly onto the low-range q points of the overlap;
    the factor is ``k = sum w L H / sum w H^2``, ``w = 1 / (s_L^2 + k0^2 s_H^2)``, and its
    sigma includes the scatter (reduced chi-square > 1). In the overlap the low point and
    the scaled high point are averaged with inverse-variance weights. Fewer than 3
    overlap points raise SaxsInputError naming ``overlap``.

    Examples
    --------
    >>> ql, qh = np.linspace(0.1, 1.0, 10), np.linspace(0.6, 3.0, 25)
    >>> out = merge_ranges(ql, [1 / ql], [0.01 / ql], qh, [0.5 / qh], [0.005 / qh])
    >>> round(float(out["factor"][0]), 6), out["q"].size
    (2.0, 30)
    """
    ql, L, SL, _ = as_frames(q_low, low, low_sigma)
    qh, H, SH, _ = as_frames(q_high, high, high_sigma)
    if L.shape[0] != H.shape[0]:
        raise SaxsInputError(f"the ranges have {L.shape[0]} and {H.shape[0]} frames; they must be the "
                             "same scan",
                             parameter="high")
    lo, hi = (max(ql.min(), qh.min()), min(ql.max(), qh.max())) if overlap is None else map(float, overlap)
    if not lo < hi:
        raise SaxsInputError(f"the ranges do not overlap (overlap {lo:g}..{hi:g})", parameter="overlap")
    inov = (ql >= lo) & (ql <= hi) & (ql >= qh.min()) & (ql <= qh.max())
    xo = ql[inov]
    # linear interpolation of every high frame onto the overlap points of the low grid
    j = np.clip(np.searchsorted(qh, xo) - 1, 0, qh.size - 2)
    t = (xo - qh[j]) / (qh[j + 1] - qh[j])
    Hi = H[:, j] * (1 - t) + H[:, j + 1] * t
    SHi = np.sqrt((SH[:, j] * (1 - t)) ** 2 + (SH[:, j + 1] * t) ** 2)
    Lo, SLo = L[:, inov], SL[:, inov]
    ok = np.isfinite(Lo) & np.isfinite(SLo) & np.isfinite(Hi) & np.isfinite(SHi) & (SLo > 0)
    n = ok.sum(axis=1)
    bad = np.flatnonzero(n < 3)
    if bad.size:
        raise SaxsInputError(f"frame {int(bad[0])} has {int(n[bad[0]])} usable points in the overlap "
                             f"{lo:g}..{hi:g}; at least 3 are needed", parameter="overlap", frame=int(bad[0]))
    Lz, Hz = np.where(ok, Lo, 0.0), np.where(ok, Hi, 0.0)
    k = (Lz * Hz).sum(axis=1) / np.maximum((Hz * Hz).sum(axis=1), 1e-300)
    for _ in range(2):
        w = np.where(ok, 1.0 / np.where(ok, SLo**2 + (k[:, None] * SHi) ** 2, 1.0), 0.0)
        shh = (w * Hz * Hz).sum(axis=1)
        k = (w * Lz * Hz).sum(axis=1) / shh
    chi2 = (w * (Lz - k[:, None] * Hz) ** 2).sum(axis=1) / np.maximum(n - 1, 1)
    k_sigma = np.sqrt(np.maximum(chi2, 1.0) / shh)
    # merged grid: low points up to hi, high points above hi
    keep_l = ql <= hi
    keep_h = qh > hi
    q = np.concatenate([ql[keep_l], qh[keep_h]])
    I = np.concatenate([L[:, keep_l], k[:, None] * H[:, keep_h]], axis=1)
    S = np.concatenate([SL[:, keep_l], np.abs(k[:, None]) * SH[:, keep_h]], axis=1)
    # overlap points: inverse-variance mean of the low point and the scaled high point
    pos = np.flatnonzero(inov)  # positions in the low grid == positions in the merged grid
    Hs, SHs = k[:, None] * Hi, np.abs(k[:, None]) * SHi
    both = ok
    wl = np.where(both, 1 / np.where(both, SLo**2, 1.0), 0.0)
    wh = np.where(both, 1 / np.where(both, SHs**2, 1.0), 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = (wl * np.where(both, Lo, 0) + wh * np.where(both, Hs, 0)) / (wl + wh)
        sig = 1 / np.sqrt(wl + wh)
    I[:, pos] = np.where(both, mean, Lo)
    S[:, pos] = np.where(both, sig, SLo)
    return {"q": q, "intensity": I, "sigma": S, "factor": k, "factor_sigma": k_sigma, "n_overlap": n}


def _concentrations(c, n_frames):
    c = np.asarray(c, dtype=float)
    if c.ndim == 0:
        c = np.full(n_frames, float(c))
    if c.shape != (n_frames,):
        raise SaxsInputError(f"concentration has shape {c.shape}; expected ({n_frames},)",
                             parameter="concentration")
    bad = np.flatnonzero(~(np.isfinite(c) & (c > 0)))
    if bad.size:
        i = int(bad[0])
        raise SaxsInputError(f"concentration must be positive; got {c[i]!r} for frame {i}",
                             parameter="concentration", frame=i)
    return c


def per_concentration(q, intensity, sigma, concentration) -> dict:
    """Intensity and sigma divided by the concentration of each frame.

    Examples
    --------
    >>> per_concentration([0.1, 0.2], [[2.0, 4.0]], [[0.2, 0.2]], [2.0])["intensity"].tolist()
    [[1.0, 2.0]]
    """
    q, I, S, _ = as_frames(q, intensity, sigma)
    c = _concentrations(concentration, I.shape[0])[:, None]
    return {"intensity": I / c, "sigma": S / c}


def extrapolate_concentration(q, intensity, sigma, concentration, *, i0=None, i0_sigma=None) -> dict:
    """Extrapolate ``I/c`` to zero concentration, per q, with a weighted line in c.

    Parameters
    ----------
    q : array (n_q,)
    intensity, sigma : arrays (n_frames, n_q), one frame per concentration
    concentration : array (n_frames,) > 0, at least two distinct values
    i0, i0_sigma : arrays (n_frames,), optional
        Forward intensities (e.g. from a Guinier fit) for the interparticle check;
        default the extrapolation of the lowest finite q point.

    Returns
    -------
    dict with ``intensity`` and ``sigma`` (n_q,): ``I/c`` at ``c = 0``; ``slope`` and
    ``slope_sigma`` (n_q,): ``d(I/c)/dc``; ``i0_slope``, ``i0_slope_sigma``,
    ``i0_intercept`` (scalars): the line of ``I(0)/c`` against c; ``relative_i0_slope``
    the slope over the intercept (1/concentration unit): near 0 without interparticle
    effects, negative for repulsion, positive for attraction.

    Notes
    -----
    Weighted least squares of ``y = a + b c`` per q with ``w = c^2 / sigma^2`` (the
    sigma of ``I/c``); parameter sigmas from the covariance (weights as absolute). With
    two concentrations the line goes through both points and has no check of
    linearity.

    Examples
    --------
    >>> c = np.array([1.0, 2.0, 4.0])
    >>> I = c[:, None] * (10.0 - 1.0 * c[:, None]) * np.ones((1, 3))
    >>> out = extrapolate_concentration([0.1, 0.2, 0.3], I, np.full((3, 3), 0.01), c)
    >>> out["intensity"].round(6).tolist(), round(float(out["i0_slope"]), 6)
    ([10.0, 10.0, 10.0], -1.0)
    """
    q, I, S, _ = as_frames(q, intensity, sigma)
    c = _concentrations(concentration, I.shape[0])
    if np.unique(c).size < 2:
        raise SaxsInputError("at least two distinct concentrations are needed", parameter="concentration")
    y, sy = I / c[:, None], S / c[:, None]
    ok = np.isfinite(y) & np.isfinite(sy) & (sy > 0)
    w = np.where(ok, 1 / np.where(ok, sy, 1.0) ** 2, 0.0)
    yz = np.where(ok, y, 0.0)
    C = c[:, None]
    sw, sc, scc = w.sum(0), (w * C).sum(0), (w * C * C).sum(0)
    sy_, scy = (w * yz).sum(0), (w * C * yz).sum(0)
    det = sw * scc - sc**2
    with np.errstate(invalid="ignore", divide="ignore"):
        good = (ok.sum(0) >= 2) & (det > 0)
        a = np.where(good, (scc * sy_ - sc * scy) / det, np.nan)
        b = np.where(good, (sw * scy - sc * sy_) / det, np.nan)
        sa = np.where(good, np.sqrt(scc / det), np.nan)
        sb = np.where(good, np.sqrt(sw / det), np.nan)
    if i0 is None:
        first = int(np.argmax(good)) if good.any() else 0
        i0v, i0s = I[:, first], S[:, first]
    else:
        i0v = np.asarray(i0, dtype=float)
        i0s = np.ones_like(i0v) if i0_sigma is None else np.asarray(i0_sigma, dtype=float)
    i0_a, i0_b, i0_bs, rel = i0_line(i0v, i0s, c)
    return {
        "intensity": a, "sigma": sa, "slope": b, "slope_sigma": sb,
        "i0_intercept": i0_a, "i0_slope": i0_b, "i0_slope_sigma": i0_bs, "relative_i0_slope": rel,
    }


def i0_line(i0, i0_sigma, concentration) -> tuple[float, float, float, float]:
    """Weighted line of ``I0/c`` against c: intercept, slope, slope sigma, slope / intercept.

    Weights ``c^2 / sigma^2`` (the sigma of ``I0/c``), parameter sigmas from the
    covariance; NaN when fewer than two frames have a usable I0.

    Examples
    --------
    >>> c = np.array([1.0, 2.0, 4.0])
    >>> [round(v, 6) for v in i0_line(c * (10.0 - c), np.ones(3), c)]
    [10.0, -1.0, 0.227992, -0.1]
    """
    c = np.asarray(concentration, dtype=float)
    y0, s0 = np.asarray(i0, dtype=float) / c, np.asarray(i0_sigma, dtype=float) / c
    ok0 = np.isfinite(y0) & np.isfinite(s0) & (s0 > 0)
    if ok0.sum() >= 2:
        w0 = 1 / s0[ok0] ** 2
        A = np.vstack([np.ones(ok0.sum()), c[ok0]]).T
        cov = np.linalg.inv(A.T @ (w0[:, None] * A))
        p = cov @ (A.T @ (w0 * y0[ok0]))
        i0_a, i0_b, i0_bs = float(p[0]), float(p[1]), float(np.sqrt(cov[1, 1]))
    else:
        i0_a = i0_b = i0_bs = np.nan
    return i0_a, i0_b, i0_bs, (i0_b / i0_a if np.isfinite(i0_a) and i0_a != 0 else np.nan)

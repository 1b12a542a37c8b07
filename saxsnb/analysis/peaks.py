"""Bragg peaks in a series: baseline, detection and batched peak fitting.

Everything works on a stack of curves ``intensity.shape == (n_frames, n_q)`` at once:
the baseline is a morphological filter applied along q for all frames together,
detection (local maxima by prominence, shoulders from the second derivative) uses
array operations (no per-frame ``scipy.signal.find_peaks`` loop), and all peaks of
all frames are fitted together by one vectorised Levenberg-Marquardt iteration on a
padded ``(n_peaks_total, window)`` array; overlapping peaks are then refined by two
backfitting rounds. Large series are processed in blocks of frames (a loop over
blocks, not frames).
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage

from ..errors import SaxsFitError, SaxsInputError

__all__ = [
    "PROFILES",
    "estimate_baseline",
    "detect_peaks",
    "guess_peaks",
    "fit_peaks",
    "find_peaks",
    "peak_profile",
]

#: Peak shapes known to :func:`fit_peaks`.
PROFILES = ("gaussian", "lorentzian", "pseudo_voigt")

_G = 4.0 * np.log(2.0)  # Gaussian written with its FWHM w: exp(-4 ln2 (x-c)^2 / w^2)
_STATUS = "<U24"


# --------------------------------------------------------------------------- helpers
def _fill_nan(y: np.ndarray) -> np.ndarray:
    """Fill non-finite points along the last axis with the nearest finite value
    (forward then backward fill), vectorised over leading axes. All-NaN rows stay 0."""
    y = np.array(y, dtype=float, copy=True)
    good = np.isfinite(y)
    if good.all():
        return y
    n = y.shape[-1]
    idx = np.where(good, np.arange(n), 0)
    np.maximum.accumulate(idx, axis=-1, out=idx)
    filled = np.take_along_axis(y, idx, axis=-1)
    # leading NaNs: backward fill from the first finite value
    first = np.argmax(good, axis=-1)[..., None]
    lead = np.arange(n) < first
    filled = np.where(lead, np.take_along_axis(y, first, axis=-1), filled)
    filled[~np.isfinite(filled)] = 0.0
    return filled


def _odd(n: float, minimum: int = 3) -> int:
    n = max(int(round(n)), minimum)
    return n if n % 2 else n + 1


def _row_median(a: np.ndarray) -> np.ndarray:
    """Median along the last axis ignoring NaN (NaN for all-NaN rows), vectorised."""
    if a.shape[-1] == 0:
        return np.full(a.shape[:-1], np.nan)
    if np.isfinite(a).all():
        return np.median(a, axis=-1)
    srt = np.sort(a, axis=-1)  # NaN sort last
    n = np.isfinite(srt).sum(axis=-1)
    lo = np.clip((n - 1) // 2, 0, None)[..., None]
    hi = np.clip(n // 2, 0, None)[..., None]
    med = 0.5 * (np.take_along_axis(srt, lo, -1) + np.take_along_axis(srt, hi, -1))[..., 0]
    return np.where(n > 0, med, np.nan)


def _noise_scale(intensity: np.ndarray, sigma: np.ndarray | None) -> np.ndarray:
    """Per-frame typical noise: median of sigma, else from point-to-point differences."""
    with np.errstate(invalid="ignore"):
        if sigma is not None:
            med = _row_median(np.where(np.isfinite(sigma) & (sigma > 0), sigma, np.nan))
        else:
            med = np.full(intensity.shape[:-1], np.nan)
        need = ~(med > 0)
        if need.any():  # no usable sigma: from point-to-point differences (MAD)
            d = np.abs(np.diff(intensity[need], axis=-1))
            med[need] = _row_median(d) * 1.4826 / np.sqrt(2.0)
    return np.where(med > 0, med, 1.0)


# -------------------------------------------------------------------------- baseline
def estimate_baseline(q, intensity, sigma=None, *, width: float | None = None, _scale=None) -> np.ndarray:
    """Smooth diffuse background under Bragg peaks, for every frame at once.

    Parameters
    ----------
    q : array (n_q,), 1/nm, increasing.
    intensity : array (n_frames, n_q); NaN points are ignored (filled from neighbours).
    sigma : array like intensity, optional; sets the scale of the log-like transform.
    width : float, optional
        Width in 1/nm of the structuring window: features narrower than this are
        treated as peaks. Default: 5 % of the q span, at least 15 points.

    Returns
    -------
    baseline : array (n_frames, n_q), same units as intensity, lying under the data.

    Notes
    -----
    A rolling-ball style morphological opening (a running minimum followed by a
    running maximum over ``width``; Sternberg 1983, Computer 16(1), 22) of the
    curve in the transformed scale ``y = arcsinh(I / c)``, with ``c`` the median
    sigma of the frame. For ``I >> c`` this is ``log(2 I / c)``, so the steep
    power-law decay of the diffuse scattering becomes gentle; near zero it is
    linear, so background-subtracted (even negative) data are handled. The opened
    curve is smoothed twice with a running mean over ``width`` (a triangular kernel),
    clipped to stay under the lightly smoothed data, and transformed back. All
    operations are ``scipy.ndimage`` 1-D filters along q, vectorised over frames.
    The q grid is treated as evenly spaced (``width`` is converted to points with
    the median step).

    Examples
    --------
    >>> q = np.linspace(0.3, 3, 600)
    >>> bg = 100 * q ** -2
    >>> I = bg + 500 * np.exp(-0.5 * ((q - 1.5) / 0.01) ** 2)
    >>> b = estimate_baseline(q, I[None])
    >>> bool(abs(b[0, 360] / bg[360] - 1) < 0.02)  # at the peak
    True
    """
    q = np.asarray(q, dtype=float)
    I = np.atleast_2d(np.asarray(intensity, dtype=float))
    S = None if sigma is None else np.broadcast_to(np.asarray(sigma, dtype=float), I.shape)
    n_q = I.shape[-1]
    dq = float(np.median(np.diff(q))) if n_q > 1 else 1.0
    if width is None:
        width = 0.05 * (q[-1] - q[0]) if n_q > 1 else 1.0
    w = min(_odd(max(width / dq, 15)), _odd(n_q))
    c = (_noise_scale(I, S) if _scale is None else np.asarray(_scale, dtype=float).reshape(-1))[..., None]
    y = np.arcsinh(_fill_nan(I) / c)
    ys = ndimage.uniform_filter1d(y, size=min(5, n_q), axis=-1, mode="nearest")
    opened = ndimage.maximum_filter1d(
        ndimage.minimum_filter1d(ys, size=w, axis=-1, mode="nearest"), size=w, axis=-1, mode="nearest"
    )
    sm = ndimage.uniform_filter1d(opened, size=w, axis=-1, mode="nearest")
    sm = ndimage.uniform_filter1d(sm, size=w, axis=-1, mode="nearest")
    base = np.minimum(sm, ys)
    return c * np.sinh(base)


# ------------------------------------------------------------------------- detection
def detect_peaks(
    q,
    residual,
    noise,
    *,
    min_prominence: float = 6.0,
    min_separation: int = 3,
    max_peaks: int = 16,
    window: int = 41,
    smooth: float = 1.5,
    shoulders: bool = True,
):
    """Local maxima (and shoulders) of baseline-subtracted curves, ranked by prominence.

    Parameters
    ----------
    q : array (n_q,)
    residual : array (n_frames, n_q), intensity minus baseline (NaN-free).
    noise : array (n_frames, n_q) or (n_frames, 1), one-sigma noise of ``residual``.
    min_prominence : float
        Threshold on the prominence in units of the noise of the smoothed curve.
    min_separation : int
        Two maxima closer than this many points count as one.
    max_peaks : int
        At most this many peaks per frame (the most prominent), returned sorted by q.
    window : int
        Points each side searched for the bases of a peak (odd).
    smooth : float
        Width (points) of the Gaussian smoothing applied before the search.
    shoulders : bool
        Also report shoulders: maxima of the negative second derivative that are not
        near a local maximum (a weak peak on the flank of a strong one).

    Returns
    -------
    index : int array (n_frames, max_peaks), q index of each peak, -1 padded.
    prominence : array (n_frames, max_peaks), in intensity units, NaN padded (also
        NaN for shoulders, whose prominence is not defined).
    width_points : array (n_frames, max_peaks), estimated FWHM in points.

    Notes
    -----
    A point is a candidate when it is the maximum of the smoothed curve within
    ``+-min_separation`` points and strictly above its left neighbour. Its
    prominence is its height above the higher of the two lowest points found within
    ``window`` points on each side (the windowed prominence of topographic peak
    finding, as in ``scipy.signal.peak_prominences`` with ``wlen``; here the base
    search does not stop at a higher neighbouring peak, so a shoulder's prominence
    is overestimated). A shoulder is a maximum of ``-d2``, the second difference of
    the smoothed curve (the classic resolution-enhancing derivative, Savitzky & Golay
    1964, Anal. Chem. 36, 1627), that exceeds ``min_prominence`` times its own noise
    (propagated from ``noise`` through the smoothing and differencing kernels) and
    has no local maximum within ``2 min_separation`` points. Everything is array
    operations over all frames.
    """
    r = np.asarray(residual, dtype=float)
    n_f, n_q = r.shape
    sm = ndimage.gaussian_filter1d(r, smooth, axis=-1, mode="nearest") if smooth > 0 else r
    # noise of the smoothed curve for independent points: sigma / sqrt(2 sqrt(pi) s)
    factor = 1.0 / np.sqrt(2.0 * np.sqrt(np.pi) * smooth) if smooth > 0 else 1.0
    noise_b = np.broadcast_to(np.asarray(noise, dtype=float), r.shape)
    md = max(int(min_separation), 1)
    is_max = sm == ndimage.maximum_filter1d(sm, size=2 * md + 1, axis=-1, mode="nearest")
    is_max[:, 1:] &= sm[:, 1:] > sm[:, :-1]
    is_max[:, 0] = False
    is_max[:, -1] = False
    half = max(int(window) // 2, 2)
    half += half % 2  # even, so a centred window of half + 1 points is symmetric
    # left base window [i - half, i] is the centred window at i - half/2, right at i + half/2
    cmin = ndimage.minimum_filter1d(sm, size=half + 1, axis=-1, mode="nearest")
    h2 = min(half // 2, n_q - 1)
    # everything else only at the (few) local maxima and shoulder candidates
    fi, qi = np.nonzero(is_max)
    smv = sm[fi, qi]
    nzv = noise_b[fi, qi] * factor
    pv = smv - np.maximum(cmin[fi, np.maximum(qi - h2, 0)], cmin[fi, np.minimum(qi + h2, n_q - 1)])
    okv = (pv > min_prominence * nzv) & (smv > 0)
    fi, qi, pv, nzv = fi[okv], qi[okv], pv[okv], nzv[okv]
    score = np.full(r.shape, -np.inf)
    score[fi, qi] = pv / np.maximum(nzv, 1e-300)
    prom = np.full(r.shape, np.nan)
    prom[fi, qi] = pv
    shoulder = np.zeros(r.shape, dtype=bool)
    if shoulders and n_q > 4 * md + 4:
        # noise of -d2: sigma times the norm of the (smoothing then differencing) kernel
        imp = np.zeros(8 * int(np.ceil(max(smooth, 1))) + 9)
        imp[imp.size // 2] = 1.0
        ker = ndimage.gaussian_filter1d(imp, smooth) if smooth > 0 else imp
        kd2 = np.sqrt(np.sum((ker[:-2] - 2 * ker[1:-1] + ker[2:]) ** 2))
        c = np.zeros_like(sm)
        c[:, 1:-1] = sm[:, 1:-1] * 2.0 - sm[:, :-2] - sm[:, 2:]
        high = (sm > (min_prominence * factor) * noise_b) & (c > (min_prominence * kd2) * noise_b)
        high[:, : 2 * md + 2] = False
        high[:, -(2 * md + 2) :] = False
        fi, qi = np.nonzero(high)
        if fi.size:
            offs = np.arange(-md - 1, md + 2)
            win = sm[fi[:, None], qi[:, None] + offs]
            cw = -(win[:, :-2] - 2.0 * win[:, 1:-1] + win[:, 2:])  # -d2 at offsets -md..md
            cv = cw[:, md]
            nd2 = noise_b[fi, qi] * kd2
            far = ~is_max[fi[:, None], qi[:, None] + np.arange(-2 * md, 2 * md + 1)].any(axis=1)
            keep = (cv > min_prominence * nd2) & np.all(cw <= cv[:, None], axis=1) & far
            fi, qi = fi[keep], qi[keep]
            shoulder[fi, qi] = True
            score[fi, qi] = cv[keep] / np.maximum(nd2[keep], 1e-300)
    k = min(int(max_peaks), n_q)
    if k < n_q:
        top = np.argpartition(-score, k - 1, axis=-1)[:, :k]
    else:
        top = np.argsort(-score, axis=-1, kind="stable")[:, :k]
    good = np.take_along_axis(score, top, axis=-1) > -np.inf
    top = np.where(good, top, n_q + 1)
    top = np.sort(top, axis=-1)
    good = top <= n_q
    top = np.where(good, top, 0)
    p = np.where(good, np.take_along_axis(prom, top, axis=-1), np.nan)
    # FWHM estimate: half-prominence crossings of the smoothed curve near each peak
    offs = np.arange(-half, half + 1)
    cols = np.clip(top[..., None] + offs, 0, n_q - 1)
    rows = np.arange(n_f)[:, None, None]
    g = sm[rows, cols]
    level = (sm[np.arange(n_f)[:, None], top] - 0.5 * np.nan_to_num(p))[..., None]
    below = g < level
    lb = below[..., :half][..., ::-1]
    rb = below[..., half + 1 :]
    lpos = np.where(lb.any(-1), np.argmax(lb, axis=-1) + 1, half)
    rpos = np.where(rb.any(-1), np.argmax(rb, axis=-1) + 1, half)
    width_pts = np.where(good, np.maximum(lpos + rpos - 1, 1).astype(float), np.nan)
    is_sh = good & shoulder[np.arange(n_f)[:, None], top]
    if is_sh.any():
        # a shoulder has no prominence of its own; its width is the frame's typical width
        p = np.where(is_sh, np.nan, p)
        normal = np.where(good & ~is_sh, width_pts, np.nan)
        with np.errstate(all="ignore"):
            typical = np.where(np.isfinite(normal).any(1), np.nanmedian(np.where(
                np.isfinite(normal).any(1)[:, None], normal, 0.0), axis=1), 4.0)
        width_pts = np.where(is_sh, typical[:, None], width_pts)
    if k < max_peaks:  # tiny q grids
        pad = max_peaks - k
        top = np.pad(top, ((0, 0), (0, pad)))
        good = np.pad(good, ((0, 0), (0, pad)))
        p = np.pad(p, ((0, 0), (0, pad)), constant_values=np.nan)
        width_pts = np.pad(width_pts, ((0, 0), (0, pad)), constant_values=np.nan)
    return np.where(good, top, -1), p, width_pts


# --------------------------------------------------------------------------- fitting
def peak_profile(x, center, fwhm, height, eta=None, *, profile: str = "gaussian"):
    """Peak shape of height ``height`` and full width at half maximum ``fwhm``.

    Gaussian ``h exp(-4 ln2 u^2)``, Lorentzian ``h / (1 + 4 u^2)`` with
    ``u = (x - c) / w``; pseudo-Voigt ``eta L + (1 - eta) G`` with the same FWHM
    (Wertheim et al. 1974, J. Electron Spectrosc. 3, 237).

    >>> float(peak_profile(1.05, 1.0, 0.1, 2.0))  # half maximum at c + w/2
    1.0
    """
    u = (np.asarray(x, dtype=float) - center) / fwhm
    g = np.exp(-_G * u * u)
    lo = 1.0 / (1.0 + 4.0 * u * u)
    if profile == "gaussian":
        return height * g
    if profile == "lorentzian":
        return height * lo
    if profile == "pseudo_voigt":
        e = 0.5 if eta is None else eta
        return height * (e * lo + (1.0 - e) * g)
    raise SaxsInputError(f"unknown profile {profile!r}; use one of {PROFILES}", parameter="profile")


def _model(x, p, profile, c0, wgt=None):
    """Peak + local line; returns model (n, m) and Jacobian (n, m, k), the Jacobian
    multiplied by ``wgt`` (n, m) when given."""
    c, w, h, b0, b1 = (p[:, i : i + 1] for i in range(5))
    u = (x - c) / w
    u2 = u * u
    if profile == "gaussian":
        s = np.exp(-_G * u2)
        ds = (-2.0 * _G) * u * s
    else:
        lo = 1.0 / (1.0 + 4.0 * u2)
        if profile == "lorentzian":
            s, ds = lo, -8.0 * u * lo * lo
        else:
            g = np.exp(-_G * u2)
            e = np.clip(p[:, 5:6], 0.0, 1.0)
            s = e * lo + (1 - e) * g
            ds = e * (-8.0 * u * lo * lo) + (1 - e) * (-2.0 * _G * u * g)
    dx = x - c0
    f = h * s + b0 + b1 * dx
    k = 6 if profile == "pseudo_voigt" else 5
    J = np.empty(x.shape + (k,))
    wv = 1.0 if wgt is None else wgt
    a = (-h / w) * ds * wv
    J[..., 0] = a
    J[..., 1] = a * u
    J[..., 2] = s * wv
    J[..., 3] = wv
    J[..., 4] = dx * wv
    if k == 6:
        J[..., 5] = h * (lo - g) * wv
    return f, J


def guess_peaks(q, residual, index, width_points):
    """Starting values for :func:`fit_peaks` from detected peaks.

    Parameters
    ----------
    q : array (n_q,)
    residual : array (n_frames, n_q), baseline-subtracted intensity.
    index, width_points : arrays (n_frames, n_peaks) from :func:`detect_peaks`.

    Returns
    -------
    dict of arrays (n_frames, n_peaks): ``center`` (1/nm), ``fwhm`` (1/nm),
    ``height`` (intensity units); NaN where there is no peak.

    >>> q = np.linspace(0, 2, 201)
    >>> r = np.exp(-4 * np.log(2) * ((q - 1) / 0.1) ** 2)[None]
    >>> g = guess_peaks(q, r, np.array([[100]]), np.array([[10.0]]))
    >>> round(float(g["center"][0, 0]), 3), round(float(g["fwhm"][0, 0]), 3)
    (1.0, 0.1)
    """
    q = np.asarray(q, dtype=float)
    idx = np.asarray(index)
    good = idx >= 0
    i = np.where(good, idx, 0)
    dq = np.gradient(q)[i]
    h = np.take_along_axis(np.asarray(residual, dtype=float), i, axis=-1)
    return {
        "center": np.where(good, q[i], np.nan),
        "fwhm": np.where(good, np.asarray(width_points, dtype=float) * dq, np.nan),
        "height": np.where(good, h, np.nan),
    }


def fit_peaks(
    q,
    residual,
    noise,
    index,
    width_points,
    *,
    profile: str = "pseudo_voigt",
    max_iter: int = 50,
    half_window: int | None = None,
    start: dict | None = None,
    others=None,
):
    """Fit every detected peak of every frame at once (batched Levenberg-Marquardt).

    Parameters
    ----------
    q : array (n_q,), 1/nm.
    residual : array (n_frames, n_q), intensity minus baseline, NaN allowed.
    noise : array broadcastable to residual, one-sigma errors (the fit weights).
    index, width_points : arrays (n_frames, n_peaks) from :func:`detect_peaks`.
    profile : "gaussian", "lorentzian" or "pseudo_voigt" (eta fitted in [0, 1]).
    max_iter : int
    half_window : int, optional
        Largest half-width (points) of a fit window; default 40.
    start : dict of arrays (n_frames, n_peaks), optional
        ``position``, ``fwhm``, ``height`` (and ``eta``) of a previous fit, used as
        starting values; with ``others``, a backfitting pass (see Notes).
    others : array (n_frames, n_q), optional
        Sum of the previously fitted peak profiles of each frame. Each peak is then
        refitted on ``residual - others + own previous profile`` over its full
        window, i.e. with its neighbours' fitted profiles removed.

    Returns
    -------
    dict of arrays (n_frames, n_peaks), NaN where no peak or the fit failed:
    ``position``, ``fwhm`` (1/nm), ``height``, ``area`` (intensity x 1/nm) and their
    ``*_sigma``; ``eta`` (pseudo-Voigt mixing, NaN otherwise); ``redchi``.

    Notes
    -----
    Each peak is fitted on its own window, ``+-2 FWHM`` from the detection estimate
    (at least 4 points, at most ``half_window``) and cut at the midpoint to a
    neighbouring peak, with the model ``peak(q) + b0 + b1 (q - q0)``: the local line
    absorbs what the smooth baseline left. All windows are padded to one length
    (padding has weight zero) and solved together with Levenberg-Marquardt steps
    (Levenberg 1944; Marquardt 1963, J. SIAM 11, 431): ``(J^T J + lambda diag J^T J)
    dp = J^T r`` for all peaks in one ``numpy.linalg.solve``, lambda adapted per peak.
    Uncertainties are ``sqrt(diag((J^T W J)^-1) * chi2_red)``, the covariance
    scaled by the reduced chi-square (as ``scipy.optimize.curve_fit`` with
    ``absolute_sigma=False``). Overlapping peaks are refined by backfitting
    (Hastie & Tibshirani 1986, Stat. Sci. 1, 297): each peak is refitted on the data
    minus its neighbours' current profiles. Areas: Gaussian ``h w sqrt(pi / (4 ln 2))``,
    Lorentzian ``h w pi / 2``, pseudo-Voigt the eta-weighted mix.
    """
    if profile not in PROFILES:
        raise SaxsInputError(f"unknown profile {profile!r}; use one of {PROFILES}", parameter="profile")
    q = np.asarray(q, dtype=float)
    r = np.asarray(residual, dtype=float)
    nz = np.broadcast_to(np.asarray(noise, dtype=float), r.shape)
    idx = np.asarray(index)
    n_f, n_p = idx.shape
    n_q = q.size
    names = ["position", "fwhm", "height", "area"]
    out = {n: np.full((n_f, n_p), np.nan) for n in names}
    out.update({n + "_sigma": np.full((n_f, n_p), np.nan) for n in names})
    out["eta"] = np.full((n_f, n_p), np.nan)
    out["redchi"] = np.full((n_f, n_p), np.nan)
    good = idx >= 0
    if not good.any():
        return out
    fi, pi = np.nonzero(good)
    ci = idx[fi, pi]
    hmax = 40 if half_window is None else int(half_window)
    wpts = np.nan_to_num(np.asarray(width_points, dtype=float)[fi, pi], nan=4.0)
    hw = np.clip(np.round(2.0 * wpts), 4, hmax).astype(int)
    # neighbours in the same frame (peaks are sorted by index, -1 padding at the end)
    idx_f = np.where(good, idx, np.iinfo(np.int64).max // 4)
    prev = np.full((n_f, n_p), -(10**9))
    prev[:, 1:] = idx_f[:, :-1]
    nxt = np.full((n_f, n_p), 10**9)
    nxt[:, :-1] = np.where(good[:, 1:], idx[:, 1:], 10**9)
    lo_lim = np.maximum(ci - hw, (ci + prev[fi, pi]) // 2 + 1)
    hi_lim = np.minimum(ci + hw, (ci + nxt[fi, pi] + 1) // 2 - 1)
    if others is not None:
        others = np.asarray(others, dtype=float)
    if start is not None:
        st_c, st_w, st_h = (np.asarray(start[k], dtype=float)[fi, pi] for k in ("position", "fwhm", "height"))
        st_e = np.asarray(start["eta"], dtype=float)[fi, pi] if "eta" in start else np.full(ci.size, 0.5)
        st_e = np.where(np.isfinite(st_e), st_e, 0.5)
    # peaks are solved in groups of similar window size, so padding stays small
    all_f, all_p, all_c, all_w, all_h, all_lo, all_hi = fi, pi, ci, wpts, hw, lo_lim, hi_lim
    cuts = np.minimum(np.percentile(all_h, [60, 95]).astype(int), hmax)
    edges = np.unique(np.concatenate([[0], cuts, [hmax]]))
    for g_lo, g_hi in zip(edges[:-1], edges[1:]):
        g = np.nonzero((all_h > g_lo) & (all_h <= g_hi))[0]
        if g.size == 0:
            continue
        fi, pi, ci, wpts, hw = all_f[g], all_p[g], all_c[g], all_w[g], all_h[g]
        lo_lim, hi_lim = all_lo[g], all_hi[g]
        if start is not None:
            sc, sw, sh, se = st_c[g], st_w[g], st_h[g], st_e[g]
        hpad = int(hw.max())
        cols = ci[:, None] + np.arange(-hpad, hpad + 1)[None, :]
        inside = (cols >= lo_lim[:, None]) & (cols <= hi_lim[:, None]) & (cols >= 0) & (cols < n_q)
        cols_c = np.clip(cols, 0, n_q - 1)
        x = q[cols_c]
        y = r[fi[:, None], cols_c]
        if others is not None:
            own = peak_profile(x, sc[:, None], sw[:, None], sh[:, None], se[:, None], profile=profile)
            y = y - others[fi[:, None], cols_c] + own
        s = nz[fi[:, None], cols_c]
        inside &= np.isfinite(y) & np.isfinite(s) & (s > 0)
        wgt = np.where(inside, 1.0 / np.where(inside, s, 1.0), 0.0)
        y = np.where(inside, y, 0.0)
        n_pts = inside.sum(axis=1)
        # starting values
        c0 = q[ci]
        dq = np.gradient(q)[ci] if n_q > 1 else np.ones_like(c0)
        w0 = np.maximum(wpts * dq, 2 * dq)
        edge = np.where(inside, y, np.inf).min(axis=1)
        edge = np.where(np.isfinite(edge), edge, 0.0)
        h0 = np.maximum(r[fi, ci] - edge, 1e-12)
        if start is not None:
            c0, w0, h0 = sc, np.maximum(sw, 2 * dq), np.maximum(sh, 1e-12)
        k = 6 if profile == "pseudo_voigt" else 5
        p = np.zeros((ci.size, k))
        p[:, 0], p[:, 1], p[:, 2], p[:, 3] = c0, w0, h0, edge
        if k == 6:
            p[:, 5] = 0.5 if start is None else se
        cref = c0[:, None]
        wmin = 0.25 * dq

        def evaluate(par, sel, x=x, y=y, wgt=wgt, cref=cref):
            ws = wgt[sel]
            f, Jw_ = _model(x[sel], par, profile, cref[sel], ws)
            res = (y[sel] - f) * ws
            return Jw_, res, np.einsum("nm,nm->n", res, res)

        def normal(Jw_, res_):
            Jt = np.swapaxes(Jw_, 1, 2)
            return Jt @ Jw_, (Jt @ res_[..., None])[..., 0]

        all_ = np.arange(ci.size)
        Jw, res, chi = evaluate(p, all_)
        lam = np.full(ci.size, 1e-3)
        done = np.zeros(ci.size, dtype=bool)
        eye = np.eye(k)
        for _ in range(int(max_iter)):
            act = np.nonzero(~done)[0]
            if act.size == 0:
                break
            A, g = normal(Jw[act], res[act])
            D = np.einsum("nkk->nk", A)
            la = lam[act]
            Ad = A + (la[:, None] * (D + 1e-12 * D.max(axis=1, keepdims=True) + 1e-300))[:, :, None] * eye
            with np.errstate(all="ignore"):
                try:
                    dp = np.linalg.solve(Ad, g[..., None])[..., 0]
                except np.linalg.LinAlgError:
                    dp = np.stack([np.linalg.lstsq(a_, b_, rcond=None)[0] for a_, b_ in zip(Ad, g)])
            dp = np.where(np.isfinite(dp), dp, 0.0)
            pn = p[act] + dp
            pn[:, 1] = np.maximum(pn[:, 1], wmin[act])
            if k == 6:
                pn[:, 5] = np.clip(pn[:, 5], 0.0, 1.0)
            Jn, rn, chin = evaluate(pn, act)
            ch = chi[act]
            better = chin < ch
            upd = act[better]
            p[upd] = pn[better]
            Jw[upd] = Jn[better]
            res[upd] = rn[better]
            tiny = (ch - chin) <= 1e-9 * np.maximum(ch, 1e-300)
            chi[upd] = chin[better]
            lam[act] = np.where(better, np.maximum(la / 3.0, 1e-9), la * 4.0)
            done[act] = (better & tiny) | (lam[act] > 1e8) | (np.abs(dp[:, 0]) <= 1e-9 * np.abs(p[act, 0]))
        A, _ = normal(Jw, res)
        dof = np.maximum(n_pts - k, 1)
        redchi = chi / dof
        with np.errstate(all="ignore"):
            det_ok = np.isfinite(A).all(axis=(1, 2)) & (np.abs(np.linalg.det(A)) > 0)
            cov = np.full_like(A, np.nan)
            if det_ok.any():
                cov[det_ok] = np.linalg.inv(A[det_ok])
            cov *= redchi[:, None, None]
            err = np.sqrt(np.einsum("nkk->nk", cov))
        c, w, h = p[:, 0], np.abs(p[:, 1]), p[:, 2]
        if profile == "gaussian":
            af = np.full_like(c, np.sqrt(np.pi / _G))
            deta = np.zeros_like(c)
        elif profile == "lorentzian":
            af = np.full_like(c, np.pi / 2.0)
            deta = np.zeros_like(c)
        else:
            e = p[:, 5]
            af = e * np.pi / 2.0 + (1 - e) * np.sqrt(np.pi / _G)
            deta = h * w * (np.pi / 2.0 - np.sqrt(np.pi / _G))
        area = af * h * w
        grad = np.zeros((ci.size, k))
        grad[:, 1] = af * h
        grad[:, 2] = af * w
        if k == 6:
            grad[:, 5] = deta
        with np.errstate(all="ignore"):
            area_sig = np.sqrt(np.einsum("nk,nkl,nl->n", grad, cov, grad))
        span = hmax * dq
        valid = (
            np.isfinite(p).all(axis=1)
            & (h > 0)
            & (np.abs(c - c0) < np.maximum(hw, 2) * dq)
            & (w < 2 * span + 4 * dq)
            & (n_pts > k)
            & np.isfinite(err[:, 0])
        )
        for name, val in (
            ("position", c),
            ("fwhm", w),
            ("height", h),
            ("area", area),
            ("position_sigma", err[:, 0]),
            ("fwhm_sigma", err[:, 1]),
            ("height_sigma", err[:, 2]),
            ("area_sigma", area_sig),
            ("redchi", redchi),
        ):
            out[name][fi, pi] = np.where(valid, val, np.nan)
        if k == 6:
            out["eta"][fi, pi] = np.where(valid, p[:, 5], np.nan)
    return out


def _profile_sum(q, fit, profile, shape, reach: float = 4.0):
    """Sum over peaks of the fitted profiles, per frame, on ``q`` (out to ``reach`` FWHM)."""
    total = np.zeros(shape)
    pos, w, h = fit["position"], fit["fwhm"], fit["height"]
    ok = np.isfinite(pos) & np.isfinite(w) & np.isfinite(h)
    if not ok.any():
        return total
    fi, pi = np.nonzero(ok)
    n_q = q.size
    dq = float(np.median(np.diff(q)))
    c, ww, hh = pos[fi, pi], w[fi, pi], h[fi, pi]
    e = fit["eta"][fi, pi] if "eta" in fit else np.full(c.size, np.nan)
    e = np.where(np.isfinite(e), e, 0.5)
    ci = np.clip(np.searchsorted(q, c), 0, n_q - 1)
    half = int(min(np.ceil(reach * ww.max() / dq), n_q))
    cols = ci[:, None] + np.arange(-half, half + 1)
    inside = (cols >= 0) & (cols < n_q) & (np.abs(cols - ci[:, None]) <= reach * ww[:, None] / dq)
    cols_c = np.clip(cols, 0, n_q - 1)
    vals = peak_profile(q[cols_c], c[:, None], ww[:, None], hh[:, None], e[:, None], profile=profile)
    flat = (fi[:, None] * n_q + cols_c)[inside]
    total += np.bincount(flat, weights=vals[inside], minlength=total.size).reshape(shape)
    return total


# ------------------------------------------------------------------------ all in one
def find_peaks(
    q,
    intensity,
    sigma=None,
    *,
    q_range: tuple[float, float] | None = None,
    min_prominence: float = 6.0,
    profile: str = "pseudo_voigt",
    max_peaks: int = 16,
    baseline_width: float | None = None,
    min_separation: int = 3,
    shoulders: bool = True,
    backfit: bool = True,
    errors: str = "ignore",
    block: int = 512,
):
    """Find and fit the Bragg peaks of every frame.

    Parameters
    ----------
    q : array (n_q,), 1/nm.
    intensity, sigma : arrays (n_frames, n_q); masked points as NaN. ``sigma`` may be
        None (noise estimated from point-to-point scatter).
    q_range : (q_min, q_max), optional; only this part of the curve is searched.
    min_prominence : float
        Detection threshold, in units of the noise of the smoothed curve (see
        :func:`detect_peaks`).
    profile : "pseudo_voigt" (default; mixing eta fitted per peak, which covers the
        Gaussian and Lorentzian shapes of real Bragg peaks), "gaussian" or "lorentzian".
    max_peaks : int, the most prominent peaks kept per frame.
    baseline_width : float, optional, 1/nm, see :func:`estimate_baseline`.
    min_separation : int, points.
    shoulders : bool, also report shoulders (see :func:`detect_peaks`).
    backfit : bool, refine overlapping peaks by backfitting (see :func:`fit_peaks`).
    errors : "ignore" (per-frame status) or "raise" (:class:`SaxsFitError` for a
        frame without usable data).
    block : int
        Frames processed together; larger series are done block by block (a loop
        over blocks, not frames, that keeps the work arrays in cache).

    Returns
    -------
    dict of arrays: per (frame, peak) ``position``, ``position_sigma``, ``fwhm``,
    ``fwhm_sigma``, ``height``, ``height_sigma``, ``area``, ``area_sigma``,
    ``prominence`` (in noise units), ``eta``, ``redchi``, sorted by position and
    NaN padded to ``max_peaks``; per frame ``n_peaks`` (int) and ``status``
    ("ok", "no_peaks", "no_data").

    Notes
    -----
    Baseline: :func:`estimate_baseline`; detection: :func:`detect_peaks`; fit:
    :func:`fit_peaks`. No Python loop over frames or peaks.

    Examples
    --------
    >>> q = np.linspace(0.5, 3.0, 800)
    >>> I = 50 / q**2 + 40 * np.exp(-4 * np.log(2) * ((q - 1.2) / 0.02) ** 2)
    >>> I = I + 20 * np.exp(-4 * np.log(2) * ((q - 2.4) / 0.02) ** 2)
    >>> res = find_peaks(q, I[None], np.full((1, q.size), 0.05))
    >>> np.round(res["position"][0, :2], 4).tolist(), int(res["n_peaks"][0])
    ([1.2, 2.4], 2)
    """
    I_all = np.atleast_2d(np.asarray(intensity, dtype=float))
    if I_all.shape[0] > block > 0:
        S_all = None if sigma is None else np.broadcast_to(np.asarray(sigma, dtype=float), I_all.shape)
        opts = dict(q_range=q_range, min_prominence=min_prominence, profile=profile, max_peaks=max_peaks,
                    baseline_width=baseline_width, min_separation=min_separation, shoulders=shoulders,
                    backfit=backfit, errors=errors, block=0)
        parts = []
        for b0 in range(0, I_all.shape[0], block):
            sl = slice(b0, b0 + block)
            try:
                parts.append(find_peaks(q, I_all[sl], None if S_all is None else S_all[sl], **opts))
            except SaxsFitError as exc:
                raise SaxsFitError(str(exc).split(" [")[0], frame=b0 + int(exc.frame)) from None
        return {k: np.concatenate([p[k] for p in parts], axis=0) for k in parts[0]}
    if errors not in ("ignore", "raise"):
        raise SaxsInputError("errors must be 'ignore' or 'raise'", parameter="errors")
    if profile not in PROFILES:
        raise SaxsInputError(f"unknown profile {profile!r}; use one of {PROFILES}", parameter="profile")
    if int(max_peaks) < 1:
        raise SaxsInputError("max_peaks must be >= 1", parameter="max_peaks")
    q = np.asarray(q, dtype=float)
    I = np.atleast_2d(np.asarray(intensity, dtype=float))
    S = None if sigma is None else np.broadcast_to(np.asarray(sigma, dtype=float), I.shape)
    sel = np.isfinite(q)
    if q_range is not None:
        lo, hi = float(q_range[0]), float(q_range[1])
        if not lo < hi:
            raise SaxsInputError(f"q_range {q_range} is empty", parameter="q_range")
        sel &= (q >= lo) & (q <= hi)
    if sel.sum() < 12:
        raise SaxsInputError(
            f"q_range {q_range} leaves {int(sel.sum())} points; need at least 12", parameter="q_range"
        )
    qs, Is = q[sel], I[:, sel]
    Ss = None if S is None else S[:, sel]
    finite = np.isfinite(Is)
    enough = finite.sum(axis=1) >= 12
    if errors == "raise" and not enough.all():
        bad = int(np.nonzero(~enough)[0][0])
        raise SaxsFitError("fewer than 12 finite points in the searched q range", frame=bad)
    scale = _noise_scale(Is, Ss)[:, None]
    base = estimate_baseline(qs, Is, Ss, width=baseline_width, _scale=scale)
    all_finite = bool(finite.all())
    resid = Is - base if all_finite else np.where(finite, Is - base, np.nan)
    if Ss is not None:
        noise = np.where(np.isfinite(Ss) & (Ss > 0), Ss, scale)
    else:
        noise = np.broadcast_to(scale, Is.shape)
    dq = float(np.median(np.diff(qs)))
    bw = 0.05 * (qs[-1] - qs[0]) if baseline_width is None else baseline_width
    window = _odd(max(bw / dq, 15))
    rf = resid if all_finite else np.where(finite, resid, 0.0)
    index, prom, wpts = detect_peaks(
        qs,
        rf,
        noise if all_finite else np.where(finite, noise, np.inf),
        min_prominence=min_prominence,
        min_separation=min_separation,
        max_peaks=int(max_peaks),
        window=window,
        shoulders=shoulders,
    )
    index[~enough] = -1
    fit = fit_peaks(qs, resid, noise, index, wpts, profile=profile)
    # overlapping peaks: two backfitting rounds, each peak refitted with its neighbours removed
    pos, fw = fit["position"], fit["fwhm"]
    with np.errstate(invalid="ignore"):
        pair = (pos[:, 1:] - pos[:, :-1]) < 1.5 * (fw[:, 1:] + fw[:, :-1])
    close = np.zeros(pos.shape, dtype=bool)
    close[:, 1:] |= pair
    close[:, :-1] |= pair
    if backfit and close.any():
        for _ in range(2):
            total = _profile_sum(qs, fit, profile, resid.shape)
            ci2 = np.clip(np.searchsorted(qs, np.nan_to_num(fit["position"])), 0, qs.size - 1)
            idx2 = np.where(close & np.isfinite(fit["position"]), ci2, -1)
            fit2 = fit_peaks(
                qs, resid, noise, idx2, fit["fwhm"] / dq, profile=profile, start=fit, others=total
            )
            upd = close & np.isfinite(fit2["position"])
            fit = {k: np.where(upd, fit2[k], v) for k, v in fit.items()}
    with np.errstate(invalid="ignore", divide="ignore"):
        nzp = np.take_along_axis(np.broadcast_to(noise, Is.shape), np.maximum(index, 0), axis=-1)
        prom_n = np.where(index >= 0, prom / nzp, np.nan)
        # shoulders: the fitted height over the noise stands in for the prominence
        prom_n = np.where((index >= 0) & np.isnan(prom), fit["height"] / nzp, prom_n)
    fit["prominence"] = prom_n
    # drop failed fits, sort by position, pad with NaN
    order = np.argsort(np.where(np.isfinite(fit["position"]), fit["position"], np.inf), axis=-1)
    for key in list(fit):
        fit[key] = np.take_along_axis(fit[key], order, axis=-1)
    valid = np.isfinite(fit["position"])
    for key in fit:
        fit[key] = np.where(valid, fit[key], np.nan)
    n_peaks = valid.sum(axis=1).astype(np.int64)
    status = np.where(~enough, "no_data", np.where(n_peaks == 0, "no_peaks", "ok")).astype(_STATUS)
    fit["n_peaks"] = n_peaks
    fit["status"] = status
    return fit

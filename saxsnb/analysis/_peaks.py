"""Bragg peaks in a series: baseline, detection and batched peak fitting.

Everything works on a stack of curves ``intensity.shape == (n_frames, n_q)`` at once:
the baseline is a morphological filter applied along q for all frames together,
detection (local maxima by prominence, shoulders from the second derivative) uses
array operations (no per-frame ``scipy.signal.find_peaks`` loop), and all peaks of
all frames are fitted together by one vectorised Levenberg-Marquardt iteration on a
padded ``(n_peaks_total, window)`` array, each peak stopping when converged;
overlapping peaks are then refined by two backfitting rounds. Large series are
processed in blocks of frames (a loop over blocks, not frames): baseline and
detection per block of ``block`` frames, fits per batch of ``8 * block`` frames.
"""

from __future__ import annotations

import numpy as np
from scipy import ndimage

from ..errors import SaxsFitError, SaxsInputError
from ._peakfit import PROFILES, _profile_sum, fit_peaks, guess_peaks, peak_profile
from ._status import STATUS_DTYPE

__all__ = [
    "PROFILES",
    "estimate_baseline",
    "detect_peaks",
    "guess_peaks",
    "fit_peaks",
    "find_peaks",
    "peak_profile",
]

_STATUS = STATUS_DTYPE


# --------------------------------------------------------------------------- helpers
def _fill_nan(y: np.ndarray) -> np.ndarray:
    """Fill non-finite points along the last axis with the nearest finite value
    (forward then backward fill), vectorised over leading axes. All-NaN rows stay 0.
    Finite input is returned as it is (not copied: the caller only reads it)."""
    y = np.asarray(y, dtype=float)
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


def _running_extreme(y: np.ndarray, size: int, fn=np.minimum) -> np.ndarray:
    """Running minimum (``fn=np.minimum``) or maximum (``np.maximum``) over ``size``
    points along the last axis of a 2-D array, ends extended with the end values:
    the same numbers as ``scipy.ndimage.minimum_filter1d(y, size, mode="nearest")``
    (``maximum_filter1d``), which it replaces for finite data (several times faster
    on a stack of curves).

    Notes
    -----
    Doubling (the sparse table of range-minimum queries; Bender & Farach-Colton 2000,
    LATIN, LNCS 1776, 88): ``m_2s[i] = fn(m_s[i], m_s[i + s])`` until ``s`` reaches
    the largest power of two not above ``size``, then one more ``fn`` of two
    overlapping spans covers the window; about ``log2(size) + 1`` whole-array
    passes on the padded rows laid end to end (a window never leaves its row).
    Exact: a minimum or maximum involves no rounding.
    """
    n_f, n = y.shape
    size = int(size)
    if size <= 1 or n == 0:
        return y.copy()
    if not np.isfinite(y).all():  # NaN order differs: the library filter
        filt = ndimage.minimum_filter1d if fn is np.minimum else ndimage.maximum_filter1d
        return filt(y, size=size, axis=-1, mode="nearest")
    left = size // 2
    width = n + size - 1
    pad = np.empty((n_f, width))
    pad[:, left : left + n] = y
    pad[:, :left] = y[:, :1]
    pad[:, left + n :] = y[:, -1:]
    cur, other = pad.reshape(-1), np.empty(n_f * width)
    span, valid = 1, cur.size
    while 2 * span <= size:
        valid -= span
        fn(cur[:valid], cur[span : span + valid], out=other[:valid])
        cur, other = other, cur
        span *= 2
    rows = cur.reshape(n_f, width)  # rows[:, i] = extreme of pad[:, i : i + span]
    rest = size - span
    return fn(rows[:, :n], rows[:, rest : rest + n]) if rest else rows[:, :n].copy()


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
            usable = np.isfinite(sigma) & (sigma > 0)
            med = np.median(sigma, axis=-1) if usable.all() else _row_median(np.where(usable, sigma, np.nan))
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
    opened = _running_extreme(_running_extreme(ys, w, np.minimum), w, np.maximum)  # opening
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

    Examples
    --------
    >>> q = np.linspace(0.5, 1.5, 201)
    >>> y = np.exp(-4 * np.log(2) * ((q - 1.0) / 0.05) ** 2)[None]
    >>> index, prom, width = detect_peaks(q, y, np.full((1, 1), 0.01), max_peaks=2)
    >>> int(index[0, 0]), round(float(q[index[0, 0]]), 3)
    (100, 1.0)
    """
    r = np.asarray(residual, dtype=float)
    n_f, n_q = r.shape
    sm = ndimage.gaussian_filter1d(r, smooth, axis=-1, mode="nearest") if smooth > 0 else r
    # noise of the smoothed curve for independent points: sigma / sqrt(2 sqrt(pi) s)
    factor = 1.0 / np.sqrt(2.0 * np.sqrt(np.pi) * smooth) if smooth > 0 else 1.0
    noise_b = np.broadcast_to(np.asarray(noise, dtype=float), r.shape)
    md = max(int(min_separation), 1)
    sm_finite = bool(np.isfinite(sm).all())
    # the maximum of its +-md window (ends extended): not below any point of it
    is_max = sm == _running_extreme(sm, 2 * md + 1, np.maximum)
    is_max[:, 1:] &= sm[:, 1:] > sm[:, :-1]
    is_max[:, 0] = False
    is_max[:, -1] = False
    half = max(int(window) // 2, 2)
    half += half % 2  # even, so a centred window of half + 1 points is symmetric
    # left base window [i - half, i] is the centred window at i - half/2, right at i + half/2
    cmin = _running_extreme(sm, half + 1, np.minimum)
    h2 = min(half // 2, n_q - 1)
    # everything else only at the (few) local maxima and shoulder candidates; a maximum
    # whose height above the lowest point of its frame is under the threshold cannot
    # have the prominence (both bases lie at or above that point): dropped first
    cand_mask = is_max & (sm > 0)
    if sm_finite:
        cand_mask &= (sm - sm.min(axis=1, keepdims=True)) > min_prominence * (noise_b * factor)
    flat = np.flatnonzero(cand_mask)
    fi = flat // n_q
    qi = flat - fi * n_q
    smv = sm.reshape(-1)[flat]
    nzv = noise_b[fi, qi] * factor
    pv = smv - np.maximum(cmin[fi, np.maximum(qi - h2, 0)], cmin[fi, np.minimum(qi + h2, n_q - 1)])
    okv = (pv > min_prominence * nzv) & (smv > 0)
    fi, qi, pv, nzv = fi[okv], qi[okv], pv[okv], nzv[okv]
    # candidates as lists: frame, q index, score, prominence (NaN for shoulders), shoulder
    cand = [(fi, qi, pv / np.maximum(nzv, 1e-300), pv, np.zeros(fi.size, dtype=bool))]
    if shoulders and n_q > 4 * md + 4:
        # noise of -d2: sigma times the norm of the (smoothing then differencing) kernel
        imp = np.zeros(8 * int(np.ceil(max(smooth, 1))) + 9)
        imp[imp.size // 2] = 1.0
        ker = ndimage.gaussian_filter1d(imp, smooth) if smooth > 0 else imp
        kd2 = np.sqrt(np.sum((ker[:-2] - 2 * ker[1:-1] + ker[2:]) ** 2))
        # high enough, then (at those few points) curved enough: -d2 above its noise
        high = sm > (min_prominence * factor) * noise_b
        high[:, : 2 * md + 2] = False
        high[:, -(2 * md + 2) :] = False
        flat = np.flatnonzero(high)
        smf = sm.reshape(-1)
        cval = smf[flat] * 2.0 - smf[flat - 1] - smf[flat + 1]
        fi = flat // n_q
        qi = flat - fi * n_q
        curved = cval > (min_prominence * kd2) * noise_b[fi, qi]
        fi, qi = fi[curved], qi[curved]
        if fi.size:
            offs = np.arange(-md - 1, md + 2)
            win = sm[fi[:, None], qi[:, None] + offs]
            cw = -(win[:, :-2] - 2.0 * win[:, 1:-1] + win[:, 2:])  # -d2 at offsets -md..md
            cv = cw[:, md]
            nd2 = noise_b[fi, qi] * kd2
            far = ~is_max[fi[:, None], qi[:, None] + np.arange(-2 * md, 2 * md + 1)].any(axis=1)
            keep = (cv > min_prominence * nd2) & np.all(cw <= cv[:, None], axis=1) & far
            fi, qi = fi[keep], qi[keep]
            cand.append((fi, qi, cv[keep] / np.maximum(nd2[keep], 1e-300), np.full(fi.size, np.nan),
                         np.ones(fi.size, dtype=bool)))
    c_f, c_q, c_score, c_prom, c_sh = (np.concatenate(a) for a in zip(*cand))
    k = min(int(max_peaks), n_q)
    # frames with more than k candidates keep the k highest scores (argpartition over the
    # frame's score row); all candidates of the other frames are kept
    many = np.bincount(c_f, minlength=n_f) > k
    if many.any():
        loc = np.cumsum(many) - 1
        in_many = many[c_f]
        score = np.full((int(many.sum()), n_q), -np.inf)
        score[loc[c_f[in_many]], c_q[in_many]] = c_score[in_many]
        top = np.argpartition(-score, k - 1, axis=-1)[:, :k]
        chosen = np.zeros(score.shape, dtype=bool)
        np.put_along_axis(chosen, top, np.take_along_axis(score, top, axis=-1) > -np.inf, axis=-1)
        sel = ~in_many
        sel[in_many] = chosen[loc[c_f[in_many]], c_q[in_many]]
        c_f, c_q, c_prom, c_sh = c_f[sel], c_q[sel], c_prom[sel], c_sh[sel]
    order = np.lexsort((c_q, c_f))  # by frame, then by q
    c_f, c_q, c_prom, c_sh = c_f[order], c_q[order], c_prom[order], c_sh[order]
    start = np.searchsorted(c_f, np.arange(n_f))
    slot = np.arange(c_f.size) - start[c_f]
    top = np.zeros((n_f, k), dtype=np.intp)
    good = np.zeros((n_f, k), dtype=bool)
    p = np.full((n_f, k), np.nan)
    shoulder = np.zeros((n_f, k), dtype=bool)
    top[c_f, slot] = c_q
    good[c_f, slot] = True
    p[c_f, slot] = c_prom
    shoulder[c_f, slot] = c_sh
    # FWHM estimate: half-prominence crossings of the smoothed curve near each peak
    offs = np.arange(-half, half + 1)
    cols = np.clip(c_q[:, None] + offs, 0, n_q - 1)
    g = sm[c_f[:, None], cols]
    level = (sm[c_f, c_q] - 0.5 * np.nan_to_num(c_prom))[:, None]
    below = g < level
    lb = below[:, :half][:, ::-1]
    rb = below[:, half + 1 :]
    lpos = np.where(lb.any(-1), np.argmax(lb, axis=-1) + 1, half)
    rpos = np.where(rb.any(-1), np.argmax(rb, axis=-1) + 1, half)
    width_pts = np.full((n_f, k), np.nan)
    width_pts[c_f, slot] = np.maximum(lpos + rpos - 1, 1).astype(float)
    is_sh = shoulder
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


# ------------------------------------------------------------------------ all in one
_PEAK_KEYS = ("position", "position_sigma", "fwhm", "fwhm_sigma", "height", "height_sigma", "area",
              "area_sigma", "prominence", "eta", "chi2_reduced", "n_iterations")


def _empty_result(n_frames: int, max_peaks: int, status: str) -> dict:
    """The result of :func:`find_peaks` for frames that cannot be searched: no peaks."""
    out = {k: np.full((n_frames, max_peaks), np.nan) for k in _PEAK_KEYS}
    out["n_peaks"] = np.zeros(n_frames, dtype=np.int64)
    out["status"] = np.full(n_frames, status, dtype=_STATUS)
    return out


#: Frames fitted together, in units of ``block`` (baseline and detection run per block).
_FIT_BLOCKS = 8


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
    track: bool = True,
    order=None,
    iterations: bool = False,
    _detect_block: int | None = None,
):
    """Find, fit and track the Bragg peaks of every frame.

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
        Frames whose baseline and detection are computed together (a loop over
        blocks, not frames, that keeps the work arrays in cache); the peaks of
        ``8 * block`` frames are fitted together (fewer, larger batched steps).
    track : bool
        Link the peaks of consecutive frames into tracks
        (:func:`~saxsnb.analysis._tracking.track_peaks`), in the frame order ``order``
        (an index array, e.g. ``np.argsort(temperature)``; default as given).
    iterations : bool
        Also return ``n_iterations``, the Levenberg-Marquardt iterations of each peak
        (all passes: Gaussian first pass, pseudo-Voigt, backfitting).

    Returns
    -------
    dict of arrays: per (frame, peak) ``position``, ``position_sigma``, ``fwhm``,
    ``fwhm_sigma``, ``height``, ``height_sigma``, ``area``, ``area_sigma``,
    ``prominence`` (in noise units), ``eta``, ``chi2_reduced`` (and ``n_iterations``
    when asked), sorted by position and
    NaN padded to ``max_peaks``; per frame ``n_peaks`` (int) and ``status``
    ("ok", "no_peaks", "no_data" (also for a curve of fewer than 12 q points),
    "too_few_points" (``q_range`` leaves fewer than 12 points), "range_outside_data"
    (none), or
    "negative_intensity" when most points are at or below zero: peaks kept, heights
    suspect). With ``errors="raise"`` the last three raise instead.

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
    if track:
        from ._tracking import track_peaks

        res = find_peaks(q, intensity, sigma, q_range=q_range, min_prominence=min_prominence,
                         profile=profile, max_peaks=max_peaks, baseline_width=baseline_width,
                         min_separation=min_separation, shoulders=shoulders, backfit=backfit,
                         errors=errors, block=block, track=False, iterations=iterations)
        res["track"] = track_peaks(res["position"], res["position_sigma"], res["fwhm"], order=order)
        return res
    I_all = np.atleast_2d(np.asarray(intensity, dtype=float))
    if block > 0 and _detect_block is None:  # a public call: fits in batches of _FIT_BLOCKS blocks
        _detect_block = block
        block = block * _FIT_BLOCKS
    if I_all.shape[0] > block > 0:
        S_all = None if sigma is None else np.broadcast_to(np.asarray(sigma, dtype=float), I_all.shape)
        opts = dict(q_range=q_range, min_prominence=min_prominence, profile=profile, max_peaks=max_peaks,
                    baseline_width=baseline_width, min_separation=min_separation, shoulders=shoulders,
                    backfit=backfit, errors=errors, block=0, track=False, iterations=iterations,
                    _detect_block=_detect_block)
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
    n_sel = int(sel.sum())
    if n_sel < 12:  # a short curve, or a q range leaving too few points
        what = (f"q_range {q_range} leaves {n_sel} points" if q_range is not None
                else f"the curve has {n_sel} finite q points")
        if errors == "raise":
            raise SaxsInputError(f"{what}; need at least 12", parameter="q_range")
        code = "no_data" if q_range is None else "range_outside_data" if n_sel == 0 else "too_few_points"
        out = _empty_result(I.shape[0], int(max_peaks), code)
        if not iterations:
            del out["n_iterations"]
        return out
    # the searched part of the curves, C-ordered: selecting columns by a mask gives a
    # Fortran-ordered copy, on which every operation along q is several times slower
    if sel.all():
        qs, Is, Ss = q, I, S  # only read below
    else:
        qs, Is = q[sel], np.ascontiguousarray(I[:, sel])
        Ss = None if S is None else np.ascontiguousarray(S[:, sel])
    finite = np.isfinite(Is)
    n_finite = finite.sum(axis=1)
    enough = n_finite >= 12
    if errors == "raise" and not enough.all():
        bad = int(np.nonzero(~enough)[0][0])
        raise SaxsFitError("fewer than 12 finite points in the searched q range", frame=bad)
    scale = _noise_scale(Is, Ss)[:, None]
    dq = float(np.median(np.diff(qs)))
    bw = 0.05 * (qs[-1] - qs[0]) if baseline_width is None else baseline_width
    window = _odd(max(bw / dq, 15))
    n_f = Is.shape[0]
    sub = int(_detect_block) if _detect_block and _detect_block > 0 else n_f
    if Ss is not None:
        usable = np.isfinite(Ss) & (Ss > 0)
        noise = Ss if usable.all() else np.where(usable, Ss, scale)  # only read below
    else:
        noise = np.broadcast_to(scale, Is.shape)
    resid = np.empty(Is.shape)
    parts = []
    # baseline and detection in blocks of ``sub`` frames (their work arrays stay in cache);
    # the fits below take all frames of the call at once (fewer, larger batched steps)
    for b0 in range(0, n_f, sub):
        sl = slice(b0, b0 + sub)
        Ib, fb = Is[sl], finite[sl]
        base = estimate_baseline(qs, Ib, None if Ss is None else Ss[sl], width=baseline_width,
                                 _scale=scale[sl])
        all_finite = bool(fb.all())
        if all_finite:
            np.subtract(Ib, base, out=resid[sl])
        else:
            resid[sl] = np.where(fb, Ib - base, np.nan)
        rf = resid[sl] if all_finite else np.where(fb, resid[sl], 0.0)
        parts.append(detect_peaks(
            qs,
            rf,
            noise[sl] if all_finite else np.where(fb, noise[sl], np.inf),
            min_prominence=min_prominence,
            min_separation=min_separation,
            max_peaks=int(max_peaks),
            window=window,
            shoulders=shoulders,
        ))
    index, prom, wpts = (np.concatenate(a, axis=0) for a in zip(*parts))
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
        busy = close.any(axis=1)[:, None]  # the other peaks' profiles are needed only here
        for _ in range(2):
            shapes = {k: np.where(busy, fit[k], np.nan) for k in ("position", "fwhm", "height", "eta")}
            total = _profile_sum(qs, shapes, profile, resid.shape)
            ci2 = np.clip(np.searchsorted(qs, np.nan_to_num(fit["position"])), 0, qs.size - 1)
            idx2 = np.where(close & np.isfinite(fit["position"]), ci2, -1)
            fit2 = fit_peaks(
                qs, resid, noise, idx2, fit["fwhm"] / dq, profile=profile, start=fit, others=total
            )
            upd = close & np.isfinite(fit2["position"])
            fit2["n_iterations"] = fit2["n_iterations"] + fit["n_iterations"]
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
    # a frame whose intensity is mostly at or below zero (an over-subtracted background)
    # is not "ok": its peaks are kept, but heights and prominences are suspect (issue 12)
    with np.errstate(invalid="ignore"):
        nonpos = (finite & (Is <= 0)).sum(axis=1) > 0.5 * n_finite
    status = np.where(enough & nonpos, "negative_intensity", status).astype(_STATUS)
    fit["n_peaks"] = n_peaks
    fit["status"] = status
    if not iterations:
        del fit["n_iterations"]
    return fit

"""Kratky transforms and a sortable summary of each frame's Kratky shape.

- Kratky plot: q^2 I(q) against q (Glatter & Kratky 1982).
- Dimensionless Kratky plot: (q Rg)^2 I(q) / I(0) against q Rg, with Rg and I(0) from a
  Guinier fit (Durand et al. 2010, J. Struct. Biol. 169, 45; Receveur-Brechot & Durand
  2012, Curr. Protein Pept. Sci. 13, 55). It removes size and concentration, so
  frames of a series compare directly: a compact globule gives a bell that peaks
  near q Rg = sqrt(3) at height 3/e = 1.104 (the Guinier form; a solid sphere peaks at
  1.6124, 1.0274) and falls back towards zero; a flexible, unfolded chain rises to a
  plateau (2 for the Gaussian chain of Debye 1947); an extended, rod-like particle keeps
  rising.

:func:`kratky_summary` reduces each frame to numbers a scientist can sort by: the peak
position and height of the dimensionless plot and the level and trend of its high-q
part, with a shape class: "bell" (compact), "plateau" (flexible chain), "rise"
(extended) or "undetermined" (data too short or no Guinier result). The class
thresholds are our own choices, stated in :func:`kratky_summary`.
"""

from __future__ import annotations

import numpy as np

from ..errors import SaxsInputError
from ._arrays import as_frames

__all__ = ["kratky", "kratky_summary", "SHAPE_CLASSES"]

SHAPE_CLASSES = ("bell", "plateau", "rise", "undetermined")


def kratky(q, intensity, sigma=None, *, rg=None, i0=None):
    """Kratky transform q^2 I, or the dimensionless (q Rg)^2 I / I0 when ``rg`` is given.

    Parameters
    ----------
    q : array (n_q,), 1/nm
    intensity : array (n_frames, n_q) or (n_q,)
    sigma : array like ``intensity``, optional
        Transformed alike when given.
    rg, i0 : arrays (n_frames,), optional
        Guinier Rg (nm) and I(0) ([I]); both or neither.

    Returns
    -------
    array (n_frames, n_q) (and its sigma when ``sigma`` is given): [I] nm^-2 for the
    plain transform, dimensionless for the normalised one.

    Examples
    --------
    >>> q = np.array([0.5, 1.0])
    >>> kratky(q, [[4.0, 1.0]]).tolist()
    [[1.0, 1.0]]
    >>> kratky(q, [[4.0, 1.0]], rg=[2.0], i0=[4.0]).tolist()
    [[1.0, 1.0]]
    """
    q, I, _, _ = as_frames(q, intensity)
    if (rg is None) != (i0 is None):
        raise SaxsInputError("give both rg and i0 for the dimensionless form", parameter="rg")
    if rg is None:
        factor = (q * q)[None, :]
    else:
        F = I.shape[0]
        rg_ = np.broadcast_to(np.asarray(rg, dtype=float), (F,))[:, None]
        i0_ = np.broadcast_to(np.asarray(i0, dtype=float), (F,))[:, None]
        with np.errstate(divide="ignore", invalid="ignore"):
            factor = (q[None, :] * rg_) ** 2 / i0_
    out = factor * I
    if sigma is None:
        return out
    S = np.asarray(sigma, dtype=float)
    return out, factor * (S if S.ndim == 2 else S[None, :])


def _band_mean(x, K, lo, hi):
    m = np.isfinite(K) & (x >= lo) & (x <= hi)
    n = m.sum(-1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(n > 0, np.where(m, K, 0.0).sum(-1) / n, np.nan), n


def kratky_summary(
    q,
    intensity,
    *,
    rg,
    i0,
    peak_window=(0.5, 4.0),
    half_width: float = 0.25,
    bands=((3.0, 4.5), (4.5, 6.0)),
    bell_level: float = 0.6,
    rise_trend: float = 0.1,
    fall_trend: float = 0.3,
    peak_z: float = 3.0,
) -> dict:
    """Peak and high-q behaviour of each frame's dimensionless Kratky plot.

    Parameters
    ----------
    q : array (n_q,), 1/nm
    intensity : array (n_frames, n_q)
    rg, i0 : arrays (n_frames,)
        From a Guinier fit.
    peak_window : (float, float)
        q Rg range searched for the maximum.
    half_width : float
        The peak is the maximum of a cubic fitted (unweighted) to the points within
        +- ``half_width`` in q Rg of the maximum of a 5-point running mean, refitted once
        around the maximum found.
    bands : two (lo, hi) pairs of q Rg
        ``level_mid`` and ``level_high`` are the mean dimensionless values in them.
    bell_level, rise_trend, fall_trend : float
        Class thresholds (our choice): "bell" when level_high < ``bell_level`` (the
        curve falls back: the Guinier form and a sphere are below 0.2 there, a Gaussian
        chain about 1.9) or when it still falls clearly between the bands
        (level_high / level_mid - 1 < -``fall_trend``, e.g. a folded-unfolded mixture);
        otherwise "rise" when level_high / level_mid - 1 > ``rise_trend`` (a thin rod
        rises by about 40 % between the bands, a Gaussian chain by about 4 %), else
        "plateau".

    peak_z : float
        Significance of a peak: its height must exceed the mean level 1 to 2.5 in q Rg
        beyond it by ``peak_z`` standard errors (from the scatter of the points about
        the fitted cubic), else there is no peak (a noisy rising curve).

    Returns
    -------
    dict of arrays (n_frames,): ``peak_qrg``, ``peak_height`` (dimensionless; NaN when
    the maximum sits at the upper end of ``peak_window``, i.e. there is no peak, or is
    not significant, see ``peak_z``),
    ``level_mid``, ``level_high``, ``trend`` (level_high / level_mid - 1),
    ``qrg_max`` (largest q Rg measured), ``shape_class`` (str, see
    :data:`SHAPE_CLASSES`).

    Examples
    --------
    >>> q = np.linspace(0.01, 8.0, 4000)
    >>> s = kratky_summary(q, np.exp(-q**2 / 3), rg=1.0, i0=1.0)
    >>> round(float(s["peak_qrg"][0]), 4), round(float(s["peak_height"][0]), 4), str(s["shape_class"][0])
    (1.7321, 1.1036, 'bell')
    """
    q, I, _, _ = as_frames(q, intensity)
    F, n = I.shape
    rg_ = np.broadcast_to(np.asarray(rg, dtype=float), (F,))
    i0_ = np.broadcast_to(np.asarray(i0, dtype=float), (F,))
    options = dict(peak_window=peak_window, half_width=half_width, bands=bands, bell_level=bell_level,
                   rise_trend=rise_trend, fall_trend=fall_trend, peak_z=peak_z)
    # blocks of frames (not frames): the working arrays of one block stay a few MB, so
    # the temporaries are a fraction of a dask chunk instead of ~14 times the input
    step = max(1, BLOCK_POINTS // max(n, 1))
    if F <= step:
        return _summary_rows(q, I, rg_, i0_, **options)
    parts = [_summary_rows(q, I[a:a + step], rg_[a:a + step], i0_[a:a + step], **options)
             for a in range(0, F, step)]
    return {k: np.concatenate([p[k] for p in parts]) for k in parts[0]}


#: Points (frames x q) of the block :func:`kratky_summary` works on at once (about
#: 14 float64 working arrays of this size: 2**15 points -> ~4 MB; smaller blocks
#: measured no slower at 1,000 q).
BLOCK_POINTS = 2**15


def _band_width(w: int) -> int:
    """A band width at which numpy's row sums of a frame's own points followed by zeros
    do not depend on the width: a multiple of 8 up to 128 (the 8 partial sums of its
    pairwise summation each see the same elements), 128 times a power of two above (its
    halving splits fall on the same elements); the zeros add nothing."""
    w = max(int(w), 1)
    if w <= 128:
        return -(-w // 8) * 8
    return 128 * (1 << int(np.ceil(np.log2(w / 128))))


def _summary_rows(q, I, rg_, i0_, *, peak_window, half_width, bands, bell_level, rise_trend, fall_trend,
                  peak_z) -> dict:
    """:func:`kratky_summary` on one block of frames (inputs checked and broadcast)."""
    F, n = I.shape
    K = kratky(q, I, rg=rg_, i0=i0_)
    x = q[None, :] * rg_[:, None]
    finite = np.isfinite(K) & np.isfinite(x)
    Kz = np.where(finite, K, 0.0)
    # 5-point running mean (edges: fewer points) to locate the maximum robustly
    c = np.concatenate([np.zeros((F, 1)), np.cumsum(Kz, -1)], -1)
    cn = np.concatenate([np.zeros((F, 1)), np.cumsum(finite, -1)], -1)
    lo_i = np.clip(np.arange(n) - 2, 0, n)
    hi_i = np.clip(np.arange(n) + 3, 0, n)
    with np.errstate(invalid="ignore", divide="ignore"):
        smooth = (c[:, hi_i] - c[:, lo_i]) / (cn[:, hi_i] - cn[:, lo_i])
    inwin = finite & (x >= peak_window[0]) & (x <= peak_window[1])
    cand = np.where(inwin, smooth, -np.inf)
    imax = np.argmax(cand, -1)
    rows = np.arange(F)
    has_peak = inwin.any(-1)
    x0 = np.where(has_peak, x[rows, imax], np.nan)
    for _ in range(2):  # fit, then refit around the maximum
        # the fit uses the points within half_width of x0 only: the columns from each
        # frame's first to its last such point are gathered into a narrow band (tens of
        # columns, not all n), the moments summed there (the same terms; the full-width
        # sums differ by rounding, ~1e-15). The band width is rounded (_band_width) so a
        # frame's sums do not depend on the other frames of its block: batch = loop exactly
        m_full = finite & (np.abs(x - x0[:, None]) <= half_width)
        any_m = m_full.any(-1)
        lo = np.where(any_m, np.argmax(m_full, -1), 0)
        hi = np.where(any_m, n - np.argmax(m_full[:, ::-1], -1), 1)
        W = _band_width(int((hi - lo).max(initial=1)))
        cols = lo[:, None] + np.arange(W)
        inside = cols < n
        cols = np.minimum(cols, n - 1)
        xg = np.take_along_axis(x, cols, -1)
        Kzg = np.take_along_axis(Kz, cols, -1)
        t = xg - x0[:, None]
        m = np.take_along_axis(m_full, cols, -1) & inside
        tz = np.where(m, t, 0.0)
        w = m.astype(float)
        pw = [w]  # w tz^k by repeated products (not pow)
        for _k in range(6):
            pw.append(pw[-1] * tz)
        mom = [p_.sum(-1) for p_ in pw]
        rhs = np.stack([(pw[k] * Kzg).sum(-1) for k in range(4)], -1)
        A = np.stack([np.stack([mom[i + j] for j in range(4)], -1) for i in range(4)], -2)
        ok = (m.sum(-1) >= 5) & has_peak
        A[~ok] = np.eye(4)
        rhs[~ok] = 0.0
        a0, a1, a2, a3 = np.moveaxis(np.linalg.solve(A, rhs[..., None])[..., 0], -1, 0)
        # maximum of the cubic: a1 + 2 a2 t + 3 a3 t^2 = 0 with a negative second
        # derivative; written in the cancellation-free form of the quadratic root
        with np.errstate(invalid="ignore", divide="ignore"):
            disc = np.sqrt(a2 * a2 - 3.0 * a1 * a3)
            shift = -a1 / (a2 - disc)
            shift = np.where(ok & (a2 < 0), shift, np.nan)
            shift = np.where(np.abs(shift) <= half_width, shift, np.nan)
        x0 = x0 + shift
    peak_x = x0
    with np.errstate(invalid="ignore"):
        peak_h = a0 + shift * (a1 + shift * (a2 + shift * a3))
    at_edge = peak_x > peak_window[1] - half_width
    # significance of the peak: it must stand above the mean level of the points from
    # 1 to 2.5 in q Rg after it by more than ``peak_z`` standard errors (the scatter of
    # the points about the cubic, for the peak and for the level); a rising or flat
    # curve (a Gaussian chain) with noise otherwise shows a local maximum
    with np.errstate(invalid="ignore", divide="ignore"):
        n_fit = m.sum(-1)
        cubic = a0[:, None] + tz * (a1[:, None] + tz * (a2[:, None] + tz * a3[:, None]))
        resid = np.where(m, Kzg - cubic, 0.0)
        s_res = np.sqrt((resid * resid).sum(-1) / np.maximum(n_fit - 4, 1))
        after = finite & (x >= (peak_x + 1.0)[:, None]) & (x <= (peak_x + 2.5)[:, None])
        n_after = after.sum(-1)
        level_after = np.where(after, Kz, 0.0).sum(-1) / n_after
        se = s_res * np.sqrt(4.0 / np.maximum(n_fit, 1) + 1.0 / np.maximum(n_after, 1))
        drop = a0 + shift * (a1 + shift * (a2 + shift * a3)) - level_after
        not_significant = (n_after >= 3) & ~(drop > peak_z * se)
    peak_x = np.where(at_edge | not_significant, np.nan, peak_x)
    peak_h = np.where(np.isfinite(peak_x), peak_h, np.nan)
    level_mid, n_mid = _band_mean(x, K, *bands[0])
    level_high, n_high = _band_mean(x, K, *bands[1])
    with np.errstate(invalid="ignore", divide="ignore"):
        trend = level_high / level_mid - 1.0
    shape = np.full(F, "undetermined", dtype="<U12")
    known = (n_high > 0) & (n_mid > 0) & np.isfinite(rg_) & np.isfinite(i0_)
    falls = (level_high < bell_level) | (trend < -fall_trend)
    shape[known & falls] = "bell"
    shape[known & ~falls & (trend > rise_trend)] = "rise"
    shape[known & ~falls & (trend <= rise_trend)] = "plateau"
    has = finite.any(-1)
    qrg_max = np.where(has, np.where(finite, x, -np.inf).max(-1, initial=-np.inf), np.nan)
    return {
        "peak_qrg": peak_x,
        "peak_height": peak_h,
        "level_mid": level_mid,
        "level_high": level_high,
        "trend": trend,
        "qrg_max": qrg_max,
        "shape_class": shape,
    }

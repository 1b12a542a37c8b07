"""Axis ranges, ticks and drawable lines for the panels (pure numpy)."""

from __future__ import annotations

import numpy as np

__all__ = [
    "positive_range",
    "finite_points",
    "drawable_line",
    "drawable_lines",
    "fill_missing",
    "log_ticks",
    "value_range",
    "colour_bar_ticks",
]


def positive_range(values, *, lower: float = 0.05, upper: float = 99.95, pad: float = 1.5):
    """A fixed log-axis range that holds almost every positive finite value.


    Parameters
    ----------
    values : array
    lower, upper : float
        Percentiles (0-100) of the positive finite values used as the range ends.
    pad : float
        Factor applied outwards to each end (the range is ``lo / pad, hi * pad``).


    Returns
    -------
    (lo, hi) floats, or (1e-3, 1.0) when there is no positive finite value.


    >>> positive_range(np.array([1.0, 10.0, -1.0, np.nan]), lower=0, upper=100, pad=1.0)
    (1.0, 10.0)
    """
    a = np.asarray(values, dtype=float).ravel()
    a = a[np.isfinite(a) & (a > 0)]
    if a.size == 0:
        return (1e-3, 1.0)
    lo, hi = np.percentile(a, [lower, upper])
    return (float(lo / pad), float(hi * pad))


def finite_points(x, y, *, positive: bool = False):
    """The points of a scatter plot that can be drawn, with their original indices.


    Parameters
    ----------
    x, y : arrays (n,)
    positive : bool
        Also drop points with ``y <= 0`` (for a logarithmic y axis).


    Returns
    -------
    x, y, index : arrays of the kept points and their positions in the input.


    >>> finite_points(np.array([1.0, 2.0, 3.0]), np.array([1.0, np.nan, -1.0]), positive=True)
    (array([1.]), array([1.]), array([0]))
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    keep = np.isfinite(x) & np.isfinite(y)
    if positive:
        keep &= y > 0
    idx = np.flatnonzero(keep)
    return x[idx], y[idx], idx


def _drawable(x, y, positive: bool):
    ok = np.isfinite(x) & np.isfinite(y)
    if positive:
        with np.errstate(invalid="ignore"):
            ok &= y > 0
    return ok


def drawable_line(x, y, *, positive: bool = False):
    """End a polyline on a point a plotting library can place.


    Interior undefined points (NaN, or y <= 0 on a log axis) are gaps and harmless,
    but a browser plot places a line's label at its *last* point, which must be a
    real point. This drops the undefined points at the end.


    Parameters
    ----------
    x, y : arrays (n,)
    positive : bool
        y <= 0 counts as undefined (log axis).


    Returns
    -------
    x, y trimmed after the last drawable point, or None when no point is drawable.


    >>> drawable_line(np.array([1.0, 2.0, 3.0]), np.array([1.0, 2.0, -1.0]), positive=True)
    (array([1., 2.]), array([1., 2.]))
    >>> drawable_line(np.array([1.0]), np.array([np.nan])) is None
    True
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    xb = np.broadcast_to(x, y.shape)
    ok = np.flatnonzero(_drawable(xb, y, positive))
    if ok.size == 0:
        return None
    end = ok[-1] + 1
    return xb[:end], y[:end]


def drawable_lines(x, y, *, positive: bool = False):
    """Several polylines (rows) as 2-D x and y whose last points are all drawable.


    The undefined points at the end of each row repeat the row's last drawable point
    (a zero-length piece of line: nothing extra is drawn); a row with no drawable point
    repeats the first drawable point of the whole set.


    Parameters
    ----------
    x : array (n,) or (n_rows, n)
    y : array (n_rows, n)


    Returns
    -------
    x, y : arrays (n_rows, n), or None when nothing at all is drawable.


    >>> x, y = drawable_lines(np.array([1.0, 2.0, 3.0]), np.array([[1.0, 2.0, np.nan], [1.0, 1.0, 1.0]]))
    >>> x.tolist(), y.tolist()
    ([[1.0, 2.0, 2.0], [1.0, 2.0, 3.0]], [[1.0, 2.0, 2.0], [1.0, 1.0, 1.0]])
    """
    y = np.array(y, dtype=float, ndmin=2)
    x = np.array(np.broadcast_to(np.asarray(x, dtype=float), y.shape))
    ok = _drawable(x, y, positive)
    if not ok.any():
        return None
    n = y.shape[1]
    last = n - 1 - np.argmax(ok[:, ::-1], axis=1)
    has = ok.any(axis=1)
    r0, c0 = np.argwhere(ok)[0]
    rows = np.arange(y.shape[0])
    lx = np.where(has, x[rows, last], x[r0, c0])
    ly = np.where(has, y[rows, last], y[r0, c0])
    tail = np.arange(n)[None, :] > np.where(has, last, -1)[:, None]
    x = np.where(tail, lx[:, None], x)
    y = np.where(tail, ly[:, None], y)
    return x, y


def fill_missing(a):
    """Replace non-finite entries of a map by its smallest finite value (for a colour
    map, which has no colour for "missing"); all-missing maps become zeros.


    Returns
    -------
    filled : array like ``a``
    missing : bool array, True where a value was filled in


    >>> filled, missing = fill_missing(np.array([[1.0, np.nan], [3.0, 2.0]]))
    >>> filled.tolist(), missing.tolist()
    ([[1.0, 1.0], [3.0, 2.0]], [[False, True], [False, False]])
    """
    a = np.asarray(a, dtype=float)
    ok = np.isfinite(a)
    low = a[ok].min() if ok.any() else 0.0
    return np.where(ok, a, low), ~ok


def tick_format(lo: float, hi: float) -> str:
    """A d3 tick format that keeps the ticks of a linear axis over ``lo .. hi`` short:
    ``"~g"`` for ordinary ranges, exponent form (``"1e-6"``, not ``"0.000001"``) when the
    largest magnitude is below 1e-3 or from 1e5 on.

    >>> tick_format(0.0, 5.0), tick_format(0.0, 3e-6), tick_format(-2e5, 1e6)
    ('~g', '.2~e', '.2~e')
    >>> tick_format(float("nan"), 1.0)
    '~g'
    """
    top = max(abs(float(lo)), abs(float(hi))) if np.isfinite(lo) and np.isfinite(hi) else np.nan
    if np.isfinite(top) and top > 0 and (top < 1e-3 or top >= 1e5):
        return ".2~e"
    return "~g"


def log_ticks(lo: float, hi: float) -> np.ndarray:
    """Tick positions of a logarithmic axis from ``lo`` to ``hi`` (both > 0): the
    decades, plus 2 and 5 times them when the range spans fewer than three decades.


    >>> log_ticks(0.03, 3.0).tolist()
    [0.05, 0.1, 0.2, 0.5, 1.0, 2.0]
    >>> log_ticks(1e-3, 1e3).tolist()
    [0.001, 0.01, 0.1, 1.0, 10.0, 100.0, 1000.0]
    """
    if not (np.isfinite(lo) and np.isfinite(hi) and 0 < lo < hi):
        return np.array([])
    k0, k1 = int(np.floor(np.log10(lo))), int(np.ceil(np.log10(hi)))
    mult = (1.0,) if k1 - k0 > 3 else (1.0, 2.0, 5.0)
    t = np.array([m * 10.0**k for k in range(k0, k1 + 1) for m in mult])
    t = t[(t >= lo * (1 - 1e-9)) & (t <= hi * (1 + 1e-9))]
    return np.round(t, 12)


def value_range(values, *, lower: float = 0.5, upper: float = 99.5, pad: float = 0.05, include=()):
    """A fixed linear-axis range holding almost all finite values (and ``include``).


    Parameters
    ----------
    values : array
    lower, upper : float
        Percentiles (0-100) used as the ends, so a few outliers do not squash the plot.
    pad : float
        Fraction of the span added at each end.
    include : sequence of float
        Values the range must contain (e.g. 0, or a reference level).


    Returns
    -------
    (lo, hi) floats; (0, 1) when there is no finite value.


    >>> value_range(np.array([0.0, 1.0, 2.0, np.nan]), lower=0, upper=100, pad=0.0, include=(3.0,))
    (0.0, 3.0)
    """
    a = np.asarray(values, dtype=float).ravel()
    a = a[np.isfinite(a)]
    ends = [float(v) for v in include]
    if a.size:
        lo, hi = np.percentile(a, [lower, upper])
        ends += [float(lo), float(hi)]
    if not ends:
        return (0.0, 1.0)
    lo, hi = min(ends), max(ends)
    span = hi - lo if hi > lo else max(abs(hi), 1.0)
    return (lo - pad * span, hi + pad * span)


def colour_bar_ticks(values, *, max_ticks: int = 5):
    """Fixed range and a few round tick values for the colour bar of a log10 map.


    Parameters
    ----------
    values : array
        The map (log10 of an intensity); non-finite entries are ignored.
    max_ticks : int
        Most ticks returned.


    Returns
    -------
    lo, hi : float
        Smallest and largest finite value (the colour scale range; 0, 1 when none).
    ticks : array
        Whole decades inside ``[lo, hi]``, every 1, 2, 5, 10, ... of them so that at
        most ``max_ticks`` remain; when the range holds fewer than two whole decades,
        the ends rounded inwards to one decimal and their middle.


    Examples
    --------
    >>> lo, hi, t = colour_bar_ticks(np.array([[-3.2, 0.5], [np.nan, 2.7]]))
    >>> lo, hi, t.tolist()
    (-3.2, 2.7, [-2.0, 0.0, 2.0])
    >>> colour_bar_ticks(np.array([2.31, 2.79]))[2].tolist()
    [2.4, 2.6, 2.7]
    """
    a = np.asarray(values, dtype=float)
    a = a[np.isfinite(a)]
    if a.size == 0:
        return 0.0, 1.0, np.array([0.0, 1.0])
    lo, hi = float(a.min()), float(a.max())
    if hi <= lo:
        hi = lo + 1.0
    k0, k1 = int(np.ceil(lo)), int(np.floor(hi))
    if k1 - k0 + 1 >= 2:
        n = k1 - k0 + 1
        steps = [m * 10**e for e in range(0, 6) for m in (1, 2, 5)]
        step = next(s for s in steps if (n - 1) // s + 1 <= max(int(max_ticks), 2))
        first = int(np.ceil(k0 / step) * step)
        ticks = np.arange(first, k1 + 1, step, dtype=float)
        if ticks.size >= 2:
            return lo, hi, ticks
    a0, a1 = np.ceil(lo * 10) / 10, np.floor(hi * 10) / 10
    ticks = np.unique(np.round([a0, 0.5 * (a0 + a1), a1], 1)) if a1 > a0 else np.array([lo, hi])
    return lo, hi, ticks

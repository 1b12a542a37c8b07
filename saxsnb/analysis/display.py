"""Display transforms for the interactive panels: pure numpy, no fitting.

The widgets in :mod:`saxsnb.widgets` only show numbers; the few array reshapes a
plot needs (a downsampled overview map, error-bar segments, conversions between q and
the abscissa of a linearised plot) live here so they are tested like any analysis
function and the widgets stay free of maths.
"""

from __future__ import annotations

import numpy as np

from ..errors import SaxsInputError

__all__ = [
    "overview_map",
    "errorbar_segments",
    "positive_range",
    "linear_x",
    "q_from_linear_x",
    "LINEAR_X",
    "line_coefficients",
    "line_residuals",
    "KRATKY_REFERENCES",
    "scaled_q",
    "curve_at",
    "finite_points",
    "drawable_line",
    "drawable_lines",
    "fill_missing",
    "log_ticks",
    "value_range",
    "colour_bar_ticks",
    "STATUS_MESSAGES",
    "status_message",
    "describe_status",
    "indexing_summary",
]

#: Abscissa of each linearised plot, as a power of q (Guinier-type laws use q^2;
#: the Porod plot q^4 I against q^4 uses q^4).
LINEAR_X = {"guinier": 2, "rod": 2, "sheet": 2, "porod": 4}


def _block_edges(n: int, max_blocks: int) -> np.ndarray:
    """Start indices of at most ``max_blocks`` contiguous blocks covering ``range(n)``."""
    k = max(1, int(np.ceil(n / max(1, int(max_blocks)))))
    return np.arange(0, n, k)


def overview_map(q, intensity, *, max_rows: int = 400, max_cols: int = 400) -> dict:
    """Downsample a series to a small map of log10 intensity over (frame, q).

    Parameters
    ----------
    q : array (n_q,), 1/nm
    intensity : array (n_frames, n_q)
        Non-positive and non-finite points are left out of the block means.
    max_rows, max_cols : int
        Largest number of rows (frame blocks) and columns (q blocks) of the map.

    Returns
    -------
    dict with ``log10_intensity`` (n_rows, n_cols), the mean of log10 I over each
    block (NaN where a block holds no positive point); ``q`` (n_cols,), the
    geometric mean q of each column block (1/nm); ``frame_start``, ``frame_stop``
    (n_rows,), the frames ``[start, stop)`` that each row averages; ``row_step``
    and ``col_step``, the block sizes (1 when nothing was merged).

    Examples
    --------
    >>> m = overview_map(np.array([1.0, 2.0, 4.0, 8.0]), np.full((6, 4), 10.0), max_rows=3, max_cols=2)
    >>> m["log10_intensity"].tolist(), m["frame_start"].tolist(), m["row_step"], m["col_step"]
    ([[1.0, 1.0], [1.0, 1.0], [1.0, 1.0]], [0, 2, 4], 2, 2)
    >>> np.round(m["q"], 3).tolist()
    [1.414, 5.657]
    """
    q = np.asarray(q, dtype=float)
    I = np.asarray(intensity, dtype=float)
    if I.ndim != 2 or I.shape[1] != q.size:
        raise SaxsInputError(
            f"intensity has shape {I.shape}; expected (n_frames, {q.size})", parameter="intensity"
        )
    n_f, n_q = I.shape
    rows = _block_edges(n_f, max_rows)
    cols = _block_edges(n_q, max_cols)
    ok = np.isfinite(I) & (I > 0)
    with np.errstate(divide="ignore", invalid="ignore"):
        logI = np.where(ok, np.log10(np.where(ok, I, 1.0)), 0.0)
    total = np.add.reduceat(np.add.reduceat(logI, rows, axis=0), cols, axis=1)
    count = np.add.reduceat(np.add.reduceat(ok.astype(float), rows, axis=0), cols, axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        mean = np.where(count > 0, total / np.where(count > 0, count, 1.0), np.nan)
        qpos = q > 0
        lq = np.where(qpos, np.log(np.where(qpos, q, 1.0)), 0.0)
        qsum = np.add.reduceat(lq, cols)
        qcount = np.add.reduceat(qpos.astype(float), cols)
        qmean = np.where(
            qcount > 0,
            np.exp(qsum / np.where(qcount > 0, qcount, 1.0)),
            np.add.reduceat(q, cols) / np.diff(np.append(cols, n_q)),
        )
    return {
        "log10_intensity": mean,
        "q": qmean,
        "frame_start": rows,
        "frame_stop": np.append(rows[1:], n_f),
        "row_step": int(rows[1] - rows[0]) if rows.size > 1 else 1,
        "col_step": int(cols[1] - cols[0]) if cols.size > 1 else 1,
    }


def errorbar_segments(q, intensity, sigma, *, floor: float | None = None):
    """Vertical +-sigma bars of one curve as a single polyline with gaps.

    Parameters
    ----------
    q, intensity, sigma : arrays (n_q,)
    floor : float, optional
        Lower ends below ``floor`` are drawn from ``floor`` (for a log axis that
        starts there; a bar reaching zero or below cannot be drawn on a log axis).

    Returns
    -------
    x, y : arrays (3 n_q,): for each point ``(q, I - sigma), (q, I + sigma), gap``;
    the gap has ``y = NaN`` (a plotting library leaves the line undefined there).

    Examples
    --------
    >>> x, y = errorbar_segments([1.0, 2.0], [10.0, 5.0], [1.0, 6.0], floor=0.5)
    >>> x.tolist()[:2], y.tolist()[:2], y.tolist()[3:5]
    ([1.0, 1.0], [9.0, 11.0], [0.5, 11.0])
    """
    q = np.asarray(q, dtype=float)
    I = np.asarray(intensity, dtype=float)
    S = np.asarray(sigma, dtype=float)
    lo = I - S
    if floor is not None:
        lo = np.where(lo < floor, floor, lo)
    x = np.repeat(q, 3)
    y = np.empty(3 * q.size)
    y[0::3] = lo
    y[1::3] = I + S
    y[2::3] = np.nan
    return x, y


def linear_x(q, kind: str):
    """Abscissa of the linearised plot ``kind`` for q (q^2, or q^4 for Porod).

    >>> linear_x(np.array([2.0]), "guinier").tolist(), linear_x(2.0, "porod")
    ([4.0], 16.0)
    """
    return np.asarray(q, dtype=float) ** _power(kind) if np.ndim(q) else float(q) ** _power(kind)


def q_from_linear_x(x, kind: str):
    """Inverse of :func:`linear_x`: q in 1/nm from the plot abscissa (NaN below 0).

    >>> q_from_linear_x(np.array([4.0, 16.0]), "guinier").tolist()
    [2.0, 4.0]
    """
    x = np.asarray(x, dtype=float)
    with np.errstate(invalid="ignore"):
        out = np.where(x >= 0, np.abs(x) ** (1.0 / _power(kind)), np.nan)
    return out if out.ndim else float(out)


def _power(kind: str) -> int:
    if kind not in LINEAR_X:
        raise SaxsInputError(f"unknown linear plot {kind!r}; use one of {sorted(LINEAR_X)}", parameter="kind")
    return LINEAR_X[kind]


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


#: Guinier law per linear plot: R^2 = -k * slope (Guinier 1939; see analysis.guinier).
_GUINIER_K = {"guinier": 3.0, "rod": 2.0, "sheet": 1.0}


def line_coefficients(kind: str, values: dict) -> tuple[float, float]:
    """Intercept and slope of the straight line behind a fit result, in plot coordinates.

    Parameters
    ----------
    kind : {"guinier", "rod", "sheet", "porod"}
    values : mapping of result name -> float
        A Guinier result: ``intercept`` and ``slope`` when present, else ``i0`` and the
        size (``rg``, ``rc`` or ``rt``) with ln i0 = intercept and size^2 = -k slope
        (k = 3, 2, 1). A Porod result: ``porod_constant`` (intercept of q^4 I against
        q^4) and ``background`` (slope).

    Returns
    -------
    (intercept, slope) floats (NaN when the fit failed).

    >>> line_coefficients("guinier", {"i0": float(np.e), "rg": 3.0})
    (1.0, -3.0)
    >>> line_coefficients("porod", {"porod_constant": 2.0, "background": 0.1})
    (2.0, 0.1)
    """
    if kind == "porod":
        return float(values.get("porod_constant", np.nan)), float(values.get("background", np.nan))
    if "intercept" in values and "slope" in values:
        return float(values["intercept"]), float(values["slope"])
    size = {"guinier": "rg", "rod": "rc", "sheet": "rt"}[kind]
    i0, r = float(values.get("i0", np.nan)), float(values.get(size, np.nan))
    with np.errstate(divide="ignore", invalid="ignore"):
        return float(np.log(i0)) if i0 > 0 else np.nan, -(r * r) / _GUINIER_K[kind]


def line_residuals(x, y, sigma_y, intercept: float, slope: float):
    """The straight line ``intercept + slope x`` and normalised residuals.

    Returns
    -------
    line : array like ``x``
    residual : array, ``(y - line) / sigma_y`` (``y - line`` when ``sigma_y`` is None)

    >>> x, y, sy = np.array([0.0, 1.0]), np.array([1.0, 0.0]), np.array([0.5, 0.5])
    >>> line, res = line_residuals(x, y, sy, 1.0, -0.5)
    >>> line.tolist(), res.tolist()
    ([1.0, 0.5], [0.0, -1.0])
    """
    x = np.asarray(x, dtype=float)
    line = intercept + slope * x
    diff = np.asarray(y, dtype=float) - line
    if sigma_y is None:
        return line, diff
    with np.errstate(divide="ignore", invalid="ignore"):
        return line, diff / np.asarray(sigma_y, dtype=float)


#: Reference levels of the dimensionless Kratky plot (q Rg)^2 I / I0: the Guinier form
#: exp(-(q Rg)^2 / 3) peaks at q Rg = sqrt(3) with height 3/e (Durand et al. 2010,
#: J. Struct. Biol. 169, 45); the Gaussian chain tends to the plateau 2 (Debye 1947,
#: J. Phys. Colloid Chem. 51, 18).
KRATKY_REFERENCES = {
    "globule_peak_qrg": float(np.sqrt(3.0)),
    "globule_peak_height": float(3.0 / np.e),
    "chain_plateau": 2.0,
}


def scaled_q(q, size):
    """q times a size for each frame (the abscissa q Rg of a dimensionless plot).

    Parameters
    ----------
    q : array (n_q,), 1/nm
    size : array (n_frames,), nm

    Returns
    -------
    array (n_frames, n_q), dimensionless (NaN rows where ``size`` is NaN).

    >>> scaled_q(np.array([0.5, 1.0]), np.array([2.0])).tolist()
    [[1.0, 2.0]]
    """
    return np.asarray(q, dtype=float)[None, :] * np.asarray(size, dtype=float).reshape(-1, 1)


def curve_at(q, intensity, positions):
    """Intensity of one curve at given q positions (linear interpolation, for markers).

    Parameters
    ----------
    q : array (n_q,), increasing
    intensity : array (n_q,)
    positions : array (n,), NaN allowed (gives NaN)

    >>> curve_at(np.array([1.0, 2.0]), np.array([10.0, 20.0]), np.array([1.5, np.nan])).tolist()
    [15.0, nan]
    """
    p = np.asarray(positions, dtype=float)
    out = np.interp(
        np.where(np.isfinite(p), p, 0.0), np.asarray(q, dtype=float), np.asarray(intensity, dtype=float)
    )
    return np.where(np.isfinite(p), out, np.nan)


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


#: Plain-language text of the per-frame ``status`` codes of the analyses (for people;
#: the codes stay in the results). ``{size}`` and ``{limit}`` are filled in by
#: :func:`status_message` (default Rg and 1.3, the compact-particle Guinier limit).
STATUS_MESSAGES = {
    "all_nan": "no finite intensity in this frame",
    "no_data": "no usable intensity in this frame",
    "range_outside_data": "the chosen q range misses the measured points",
    "too_few_points": "fewer than 3 usable points in the q range: widen the range",
    "negative_intensity": "intensity at or below zero in the range: its logarithm is undefined "
    "(check the background subtraction)",
    "zero_sigma": "some points in the range have sigma = 0 and cannot be weighted",
    "positive_slope": "the intensity rises with q over this range: not a Guinier region",
    "curvature_aggregation": "the lowest-q points curve upwards (a sign of aggregation or "
    "attraction): no Guinier fit",
    "qrg_limit_exceeded": "q_max\u00b7{size} above the validity limit {limit}: the range is too "
    "long for a Guinier fit",
    "no_linear_region": "no straight low-q stretch found: every candidate range curves",
    "no_guinier": "no Guinier region at low q",
    "no_porod_constant": "no Porod region at high q",
    "negative_porod_constant": "the Porod constant came out negative (check the background)",
    "no_peaks": "no Bragg peaks found in this frame",
    "no_bragg_peaks": "no Bragg peaks found in this frame (only broad features, e.g. particle "
    "form-factor maxima)",
    "not_enough_peaks_to_index": "only one peak: at least two are needed to index a lattice",
    "no_phase_found": "the peaks fit none of the known phases",
    "unexplained_peaks": "some peaks are not explained by the assigned phase(s)",
    "override": "override (phase set by hand)",
}


def status_message(code: str, *, size: str = "Rg", limit: float = 1.3) -> str:
    """Plain-language text of a ``status`` code (the code itself when unknown).

    >>> status_message("too_few_points")
    'fewer than 3 usable points in the q range: widen the range'
    >>> status_message("qrg_limit_exceeded", size="Rc", limit=1.0)
    'q_max\u00b7Rc above the validity limit 1.0: the range is too long for a Guinier fit'
    >>> status_message("something_new")
    'something_new'
    """
    text = STATUS_MESSAGES.get(str(code))
    return str(code) if text is None else text.format(size=size, limit=limit)


def describe_status(text: str, **context) -> str:
    """A panel's status line with a trailing status code replaced by its message.

    ``"position 2 mm (frame 1): too_few_points"`` becomes
    ``"position 2 mm (frame 1): fewer than 3 usable points ..."``; other text (error
    messages) is returned unchanged. ``context`` goes to :func:`status_message`.

    >>> describe_status("frame 3: no_peaks")
    'frame 3: no Bragg peaks found in this frame'
    >>> describe_status("fit: SaxsInputError: bad q_range")
    'fit: SaxsInputError: bad q_range'
    """
    head, sep, tail = str(text).rpartition(": ")
    code = tail.strip()
    if code in STATUS_MESSAGES:
        return f"{head}{sep}{status_message(code, **context)}"
    return str(text)


#: Statuses of ``index_phases`` for a frame that has a phase assignment.
INDEXED_STATUSES = ("ok", "unexplained_peaks", "override")


def indexing_summary(status) -> str:
    """One line on a series where no frame has a phase: "" when some frame has one.

    Parameters
    ----------
    status : array (n_frames,) of str
        The ``status`` of ``ds.saxs.index_phases`` (or with overrides applied).

    Returns
    -------
    str, e.g. ``"no frame could be indexed: no Bragg peaks found in this frame (3 of 4
    frames); ..."``, reasons by decreasing count.

    >>> for part in indexing_summary(np.array(["no_peaks", "no_peaks", "no_phase_found"])).split("; "):
    ...     print(part)
    no frame could be indexed: no Bragg peaks found (2 of 3 frames)
    the peaks fit none of the known phases (1 of 3 frames)
    >>> indexing_summary(np.array(["ok", "no_peaks"]))
    ''
    """
    st = np.asarray(status).astype(str).ravel()
    if st.size == 0 or np.isin(st, INDEXED_STATUSES).any():
        return ""
    codes, counts = np.unique(st, return_counts=True)
    order = np.argsort(-counts, kind="stable")
    parts = [
        f"{status_message(codes[k]).replace(' in this frame', '')} ({counts[k]} of {st.size} frames)"
        for k in order
    ]
    return "no frame could be indexed: " + "; ".join(parts)

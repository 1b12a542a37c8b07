"""Window moments: prefix sums from which the weighted line fit of any contiguous window
of every frame follows in a few array operations.
"""

from __future__ import annotations

import numpy as np

from ..errors import SaxsInputError
from ._linear import _weights, line_from_sums

__all__ = ["running_sum", "WindowMoments"]


def running_sum(a, axis: int = 0):
    """Cumulative sum along ``axis`` with a leading zero: out[0] = 0,
    out[i + 1] = out[i] + a[i] (indices along ``axis``).

    Each step adds whole slices (a loop over q columns, vectorised over frames),
    several times faster than ``numpy.cumsum`` along a non-last axis, and strictly in
    sequence, so a prefix does not depend on what follows it.

    >>> running_sum(np.array([1.0, 2.0, 3.0])).tolist()
    [0.0, 1.0, 3.0, 6.0]
    """
    a = np.moveaxis(np.asarray(a), axis, 0)
    if a.ndim == 1:
        return np.concatenate([[0.0], np.cumsum(a, dtype=np.float64)])
    out = np.empty((a.shape[0] + 1,) + a.shape[1:], dtype=np.result_type(a.dtype, np.float64))
    out[0] = 0
    for i in range(a.shape[0]):
        np.add(out[i], a[i], out=out[i + 1])
    return np.moveaxis(out, 0, axis)


class WindowMoments:
    """Prefix sums of weighted moments, giving the fit of any index window at once.

    For each row, with ``u = x - x_ref`` and ``v = y - y_ref`` (per-row reference
    values that keep the sums well conditioned), cumulative sums along the q axis of
    ``w, w u, w v, w u^2, w u v, w v^2`` (and, for the curvature test, ``w u^3, w u^4,
    w u^2 v``) and of the point count are stored with a leading zero. The sums over a
    window ``[i, j)`` are then ``P[j] - P[i]``: the regression of every window of
    every frame costs a few array operations, whatever the window length.

    Parameters
    ----------
    x, y : arrays (n_frames, n)
    sigma : array (n_frames, n) or None
        Excluded points (non-finite, sigma <= 0) get weight 0.
    ref : int array (n_frames,), optional
        Index of each row's reference point (default: the first usable point).
    quadratic : bool
        Also keep the moments needed by :meth:`curvature`.

    Notes
    -----
    The cumulative sums add sequentially along q, element by element, so a prefix
    sum does not depend on how many columns follow it nor on the other frames: the
    fit of a window is the same whether a frame is processed alone or in a batch
    (batch equals loop, exactly).

    Examples
    --------
    >>> x = np.arange(6.0)[None, :]
    >>> m = WindowMoments(x, 2.0 - 0.5 * x)
    >>> r = m.fit(np.array([[0, 1]]), np.array([[4, 6]]))
    >>> r["slope"].round(12).tolist()
    [[-0.5, -0.5]]
    """

    def __init__(self, x, y, sigma=None, *, ref=None, quadratic: bool = False):
        y = np.asarray(y, dtype=float)
        x = np.broadcast_to(np.asarray(x, dtype=float), y.shape)
        w = _weights(y, sigma)
        use = np.isfinite(x) & np.isfinite(y) & (w > 0)
        F, n = y.shape
        if ref is None:
            ref = np.argmax(use, axis=-1)
        ref = np.asarray(ref, dtype=np.int64)
        rows = np.arange(F)
        xr_ = x[rows, ref]
        yr_ = y[rows, ref]
        self.x_ref = np.where(np.isfinite(xr_), xr_, 0.0)
        self.y_ref = np.where(np.isfinite(yr_), yr_, 0.0)
        # layout (column, term, frame): each step of the running sum adds one
        # contiguous (term, frame) block (numpy's cumsum along a non-last axis is
        # much slower)
        useT = np.ascontiguousarray(use.T)
        w = np.where(useT, w.T, 0.0)
        u = np.where(useT, x.T - self.x_ref, 0.0)
        v = np.where(useT, y.T - self.y_ref, 0.0)
        self._build(useT, w, u, v, quadratic)

    @classmethod
    def from_weights(cls, x, y, w, usable, *, quadratic: bool = False) -> WindowMoments:
        """Faster construction when all rows share one abscissa.

        Parameters
        ----------
        x : array (n,), shared by all rows; the reference is ``x[0]`` for every row
            (it depends on the grid only, so batch equals loop still holds).
        y : array (n_frames, n), finite where ``usable``.
        w : array (n_frames, n), weights, 0 where not ``usable``.
        usable : bool array (n_frames, n).
        """
        self = cls.__new__(cls)
        x = np.asarray(x, dtype=float)
        F, n = y.shape
        rows = np.arange(F)
        yr_ = y[rows, np.argmax(usable, axis=-1)]
        self.x_ref = np.full(F, x[0] if n else 0.0)
        self.y_ref = np.where(np.isfinite(yr_), yr_, 0.0)
        useT = np.ascontiguousarray(usable.T)
        u = (x - self.x_ref[0] if n else x)[:, None]
        v = np.where(useT, y.T - self.y_ref, 0.0)
        self._build(useT, w.T, u, v, quadratic)
        self._u, self._v, self._w = u[:, 0], v, w.T  # for first-point residuals
        return self

    def _build(self, useT, w, u, v, quadratic):
        n, F = useT.shape
        T = 10 if quadratic else 7
        terms = np.empty((n, T, F))
        terms[:, 0] = useT
        terms[:, 1] = w
        wu = np.multiply(w, u, out=terms[:, 2])
        wv = np.multiply(w, v, out=terms[:, 3])
        wuu = np.multiply(wu, u, out=terms[:, 4])
        np.multiply(wu, v, out=terms[:, 5])
        np.multiply(wv, v, out=terms[:, 6])
        if quadratic:
            np.multiply(wuu, u, out=terms[:, 7])
            np.multiply(terms[:, 7], u, out=terms[:, 8])
            np.multiply(wuu, v, out=terms[:, 9])
        self.P = running_sum(terms)
        self.quadratic = quadratic
        self._T, self._F = T, F

    def _gather(self, idx, rows=None):
        """Prefix sums at column ``idx`` (int array (F, ...)) of each frame (or of the
        frames ``rows``): array (T, F, ...)."""
        idx = np.asarray(idx, dtype=np.int64)
        T, F = self._T, self._F
        P2 = self.P.reshape(self.P.shape[0], T * F)
        f = np.arange(F) if rows is None else np.asarray(rows)
        f = f.reshape((-1,) + (1,) * (idx.ndim - 1))
        t = np.arange(T).reshape((T,) + (1,) * idx.ndim)
        return P2[idx[None], t * F + f[None]]

    def _sums(self, start, stop, rows=None):
        D = self._gather(stop, rows) - self._gather(start, rows)
        return D, D.shape[1:]

    def fit(self, start, stop, *, scale_covariance: bool = False) -> dict:
        """Straight-line fit of the windows ``[start, stop)`` of each row.

        Parameters
        ----------
        start, stop : int arrays (n_frames, ...) broadcastable to each other
            Column indices (stop exclusive); any number of windows per frame. Give
            starts as (n_frames, K, 1) and stops as (n_frames, 1, E) for all K x E
            combinations: the prefix sums are read once per start and per stop.
        scale_covariance : bool
            As in :func:`weighted_linear_fit`.

        Returns
        -------
        dict as :func:`weighted_linear_fit`, each array of the broadcast shape.
        """
        D, shape = self._sums(start, stop)
        return self._fit_from(D, shape, scale_covariance)

    def _fit_from(self, D, shape, scale_covariance=False):
        n = np.rint(D[0]).astype(np.int64)
        S0, Su, Sv, Suu, Suv, Svv = D[1:7]
        extra = (slice(None),) + (None,) * (len(shape) - 1)
        return line_from_sums(n, S0, Su, Sv, Suu, Suv, Svv, self.x_ref[extra], self.y_ref[extra],
                              scale_covariance)

    def fit_and_curvature(self, start, stop):
        """:meth:`fit` and :meth:`curvature` of the same windows, reading the sums once."""
        D, shape = self._sums(start, stop)
        return self._fit_from(D, shape), self._curvature_from(D, shape)

    def search_stats(self, start, stop, rows=None):
        """Lean statistics for a window search: the straight line's slope and its
        variance (from the weights), the point count, and the quadratic term
        (:meth:`curvature`) with its variance, the quadratic fit's chi-square, the
        relative slope drift and the lever; computed with as few array operations
        as possible since it runs on every candidate window.

        Returns
        -------
        dict of arrays of the broadcast shape of ``start`` and ``stop``: ``slope``,
        ``slope_var``, ``n_points``, ``c``, ``c_var``, ``chi2_quadratic``, ``drift``,
        ``lever``, ``chi2_line`` (the straight line's chi-square), ``intercept``,
        ``intercept_var``, ``slope_intercept_cov`` and, for objects
        made by :meth:`from_weights`, ``first_residual2``: the squared weighted residual
        of each window's first point from its straight line. Degenerate windows give
        NaN (compare with care). ``rows`` (optional int array) restricts the
        statistics to those frames; ``start`` and ``stop`` then have ``len(rows)`` as
        their first dimension.
        """
        if not self.quadratic:
            raise SaxsInputError("built without quadratic=True", parameter="quadratic")
        D, shape = self._sums(start, stop, rows)
        cnt, S0, Su, Sv, Suu, Suv, Svv, S3, S4, Suuv = D
        extra = (slice(None),) + (None,) * (len(shape) - 1)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            xr = (self.x_ref if rows is None else self.x_ref[rows])[extra]
            yr = (self.y_ref if rows is None else self.y_ref[rows])[extra]
            out = window_stats(cnt, S0, Su, Sv, Suu, Suv, Svv, S3, S4, Suuv, xr, yr)
            Y, slope, m = out.pop("_Y"), out["slope"], out.pop("_m")
            if hasattr(self, "_v"):
                st = np.clip(np.asarray(start, dtype=np.int64), 0, max(self._v.shape[0] - 1, 0))
                f = np.arange(self._F) if rows is None else np.asarray(rows)
                f = f.reshape((-1,) + (1,) * (st.ndim - 1))
                r0 = self._v[st, f] - Y - slope * (self._u[st] - m)
                out["first_residual2"] = r0 * r0 * self._w[st, f]
        return out

    def curvature(self, start, stop):
        """Quadratic term of ``y = a + b x + c x^2`` on each window, with its sigma.

        Returns
        -------
        dict with ``c``, ``c_sigma`` (from the weights), ``chi2_quadratic`` and
        ``drift``: the relative change of the local slope across the window,
        ``2 c (x_last - x_first) / b``, approximated with the window's x spread
        ``sqrt(12 var(x))`` for x_last - x_first; ``lever``: cov(x, x^2) / var(x), so
        that ``c * lever`` is how far the straight-line slope of the window departs
        from the slope at x = 0 when the data follow the quadratic.
        """
        D, shape = self._sums(start, stop)
        return self._curvature_from(D, shape)

    def _curvature_from(self, D, shape):
        if not self.quadratic:
            raise SaxsInputError("built without quadratic=True", parameter="quadratic")
        S0, Su, Sv, Suu, Suv, Svv, S3, S4, Suuv = D[1:]
        extra = (slice(None),) + (None,) * (len(shape) - 1)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            inv = 1.0 / S0
            m = Su * inv
            M2, M3, M4 = Suu * inv, S3 * inv, S4 * inv
            Y, C1, C2 = Sv * inv, Suv * inv, Suuv * inv
            mm = m * m
            mu2 = M2 - mm
            mu3 = M3 - 3 * m * M2 + 2 * mm * m
            mu4 = M4 - 4 * m * M3 + 6 * mm * M2 - 3 * mm * mm
            cuy = C1 - m * Y
            cu2y = C2 - 2 * m * C1 + mm * Y - mu2 * Y
            k4 = mu4 - mu2 * mu2
            det = mu2 * k4 - mu3 * mu3
            b = (k4 * cuy - mu3 * cu2y) / det
            c = (mu2 * cu2y - mu3 * cuy) / det
            var_c = mu2 / det * inv
            chi2q = np.maximum(Svv - Sv * Y - S0 * (b * cuy + c * cu2y), 0.0)
            drift = 2.0 * c * np.sqrt(12.0 * np.maximum(mu2, 0.0)) / b
            lever = mu3 / mu2 + 2.0 * (m + self.x_ref[extra])
        good = det > 0
        return {
            "c": np.where(good, c, np.nan),
            "c_sigma": np.where(good, np.sqrt(np.abs(var_c)), np.nan),
            "chi2_quadratic": np.where(good, chi2q, np.nan),
            "drift": np.where(good, drift, np.nan),
            "lever": np.where(good, lever, np.nan),
        }


def window_stats(n, S0, Su, Sv, Suu, Suv, Svv, S3, S4, Suuv, x_ref, y_ref) -> dict:
    """The lean window statistics of :meth:`WindowMoments.search_stats` from the nine
    weighted moment sums of each window (x and y relative to ``x_ref`` / ``y_ref``,
    broadcastable to the sums): the straight line (slope, intercept, their variances and
    covariance, chi-square), the quadratic term with its variance and chi-square, the
    relative slope drift and the lever. Also ``_m`` and ``_Y`` (the window's mean x and
    y, relative) for the caller's first-point residual. Call under ``np.errstate``:
    degenerate windows give NaN or inf."""
    inv = 1.0 / S0
    m = Su * inv
    mm = m * m
    M2 = Suu * inv
    Y = Sv * inv
    C1 = Suv * inv
    mu2 = M2 - mm
    mu3 = S3 * inv - m * (3.0 * M2 - 2.0 * mm)
    mu4 = S4 * inv - m * (4.0 * S3 * inv - m * (6.0 * M2 - 3.0 * mm))
    cuy = C1 - m * Y
    cu2y = Suuv * inv - m * (2.0 * C1 - m * Y) - mu2 * Y
    k4 = mu4 - mu2 * mu2
    det = mu2 * k4 - mu3 * mu3
    idet = 1.0 / det
    bq = (k4 * cuy - mu3 * cu2y) * idet
    c = (mu2 * cu2y - mu3 * cuy) * idet
    slope = cuy / mu2
    xm = m + x_ref
    ym = Y + y_ref
    return {
        "slope": slope,
        "slope_var": inv / mu2,
        "n_points": n,
        "c": c,
        "c_var": mu2 * idet * inv,
        "chi2_quadratic": Svv - Sv * Y - S0 * (bq * cuy + c * cu2y),
        "drift": 2.0 * c * np.sqrt(12.0 * mu2) / bq,
        "lever": mu3 / mu2 + 2.0 * xm,
        "chi2_line": Svv - Sv * Y - S0 * slope * cuy,
        # intercept of the straight line in absolute x, y, its variance and its
        # covariance with the slope (from the weights)
        "intercept": ym - slope * xm,
        "intercept_var": inv * (1.0 + xm * xm / mu2),
        "slope_intercept_cov": -xm * inv / mu2,
        "_m": m,
        "_Y": Y,
    }

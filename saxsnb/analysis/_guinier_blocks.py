"""The automatic Guinier search on a block of frames (see saxsnb.analysis._guinier for
the criterion and saxsnb.analysis._guinier_search for the driver).

Work per block, in as few and as large numpy operations as the criterion allows:

- the usable-point bookkeeping (k-th usable point, blocking points, last usable point
  before a stop) is plain index arithmetic for frames whose points are all usable up
  to their horizon (the common case); only the other frames take running counts;
- the nine weighted moments of each point are written once into one array of layout
  (column, frame, moment) and summed in place along the columns from the block's first
  window start, each frame's moments before its own first start set to zero (the sums
  start at the window, whatever the other frames of the block);
- the window sums are two gathers of whole (moment) rows of that array per window end;
- the window statistics are evaluated once per window on contiguous arrays.

A frame's numbers depend only on its own data and its horizon: batch equals loop,
whatever the blocks (tests/test_guinier_blocks.py). Against the earlier search (one
prefix sum per group of frames from column 0): compact results are the same bits (the
moments before a compact frame's first usable point are zero either way); rod and sheet
windows, which start far from column 0, lost digits to cancellation there (up to 2e-4
relative on a chosen window's size, 5e-4 on the range-averaged slope of the flow-growth
demo's sheets), and now equal a direct centred fit of the same window to 1e-9 (test);
statuses unchanged on the demo, benchmark and test series.
"""

from __future__ import annotations

import numpy as np

from ._guinier_points import _clean_rows, _Counts
from ._linear import line_from_sums
from ._status import STATUS_DTYPE
from ._windows import window_stats

_OUTLIER_Z = 4.0

#: low-q upturn test (compact): the relative curvature kappa = c / b^2 of ln I vs q^2
#: (c the quadratic coefficient, b the line slope of a window from the first usable
#: point) that no single population of particles exceeds below q Rg ~ 2. For a sum of
#: Guinier terms kappa is half the squared relative spread of the intensity-weighted
#: Rg^2 (the second cumulant of ln I in q^2); measured on closed forms and quadratures
#: (tests/validation/test_shapes_validation.py): sphere -0.07, vesicle -0.1, Schulz spheres z = 4
#: 0.09 (z = 1: 0.16), prolate ellipsoid 3x3x9 0.12-0.22, Debye-Bueche 0.25, Gaussian
#: chain 0.25-0.41, cylinders R = 2 nm, L = 30-60 nm 0.2-1.2 (the highest, at q Rg = 2,
#: beyond the searched windows); a mixture with 1 % by weight of 10x larger spheres,
#: or a power-law background fading into the particle's curve, reaches 5-30.
_UPTURN_KAPPA = 1.5
#: significance of the upturn: (c - kappa_max b^2) above this many sigma_c
_UPTURN_Z = 4.0

#: width of the window weights exp(-(m - m_best) / (tau m_best)) on the relative
#: mean-squared error m of the acceptable windows (calibrated on the validation shapes,
#: tests/validation: spread over noise draws / median sigma 0.85-1.15 at 0.1-10 % noise)
_AVERAGE_TAU = 5.0

#: number of moments per point: w, w u, w v, w u^2, w u v, w v^2, w u^3, w u^4, w u^2 v
_T = 9


#: columns of moments written and summed at a time (kept in cache)
_COLS = 16


def _ordinate(q, Iv, kind):
    """y = ln(q^p I) (p = 0, 1, 2 for compact, rod, sheet), as the linearised plot."""
    with np.errstate(divide="ignore", invalid="ignore"):
        y = np.log(Iv)
        if kind == "rod":
            y += np.log(q)
        elif kind == "sheet":
            y += 2.0 * np.log(q)
    return y


class _BlockSums:
    """Running sums, from the block's first window start, of the nine moments of every
    frame (layout (column, frame, moment)); window sums by two gathers.

    x = q^2 and u = x - q[0]^2; v = y - y_ref with y_ref the ordinate at the frame's
    first usable point; weights (I / sigma)^2 (1 without sigma), 0 where not usable
    (first-order propagation, as :func:`~saxsnb.analysis._linear.linearize`).
    """

    def __init__(self, q, Ib, Sb, kind, counts, s0, buf=None):
        F, nc = Ib.shape
        c0 = int(min(max(s0.min(), 0), nc - 1)) if F else 0
        self.c0 = c0
        n = nc - c0
        self.n = n
        self.q, self.kind = q, kind
        x = q * q
        x_ref = x[0] if q.size else 0.0
        self.x_ref = x_ref
        self.u = x - x_ref
        self.Ib, self.Sb = Ib, Sb
        # the reference ordinate: y at each frame's first usable point
        fu = counts.first_use
        y0 = _ordinate(q[fu], Ib[np.arange(F), fu], kind)
        self.y_ref = np.where(np.isfinite(y0) & (counts.n_usable > 0), y0, 0.0)
        g = counts.gen
        late = np.flatnonzero(s0 > c0)
        size = (n + 1) * F * _T
        if buf is None or buf.size < size:
            buf = np.empty(size)
        P = buf[:size].reshape(n + 1, F, _T)
        P[0] = 0.0
        y = np.empty((_COLS, F))
        w = np.empty((_COLS, F))
        for a in range(0, n, _COLS):
            b = min(n, a + _COLS)
            m_ = b - a
            ca, cb = c0 + a, c0 + b
            It = Ib[:, ca:cb].T
            ya, wa = y[:m_], w[:m_]
            with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
                np.log(It, out=ya)
                if kind == "rod":
                    ya += np.log(q[ca:cb])[:, None]
                elif kind == "sheet":
                    ya += 2.0 * np.log(q[ca:cb])[:, None]
                if Sb is None:
                    wa[...] = 1.0
                else:
                    np.divide(It, Sb[:, ca:cb].T, out=wa)
                    wa *= wa
            v = np.subtract(ya, self.y_ref[None, :], out=ya)
            if g.size:
                ut = counts.usable[:, ca:cb].T
                v[:, g] = np.where(ut, v[:, g], 0.0)
                wa[:, g] = np.where(ut, wa[:, g], 0.0)
            if late.size and ca < s0[late].max():  # the sums start at each frame's first start
                m = np.arange(ca, cb)[:, None] < s0[late][None, :]
                v[:, late] = np.where(m, 0.0, v[:, late])
                wa[:, late] = np.where(m, 0.0, wa[:, late])
            u = self.u[ca:cb, None]
            T = P[1 + a : 1 + b]
            T[:, :, 0] = wa
            wu = np.multiply(wa, u, out=T[:, :, 1])
            wv = np.multiply(wa, v, out=T[:, :, 2])
            wuu = np.multiply(wu, u, out=T[:, :, 3])
            np.multiply(wu, v, out=T[:, :, 4])
            np.multiply(wv, v, out=T[:, :, 5])
            np.multiply(wuu, u, out=T[:, :, 6])
            np.multiply(T[:, :, 6], u, out=T[:, :, 7])
            np.multiply(wuu, v, out=T[:, :, 8])
            for i in range(a, b):  # whole (frame, moment) slices per step, in sequence along q
                np.add(P[i], P[i + 1], out=P[i + 1])
        self.P = P
        self.buf = buf
        self._V = P.reshape((n + 1) * F, _T).view(np.dtype((np.void, 8 * _T))).reshape(-1)
        self.F = F

    def gather(self, r, col):
        """sums before column ``col`` (int array (len(r), ...)) of the frames r:
        array (moment, len(r), ...)."""
        i = np.clip(col - self.c0, 0, self.n)
        rr = np.asarray(r).reshape((-1,) + (1,) * (col.ndim - 1))
        g = np.take(self._V, (i * self.F + rr).ravel()).view(np.float64).reshape(col.shape + (_T,))
        return np.moveaxis(g, -1, 0)

    def point(self, r, col):
        """u, v, w of the point at column ``col`` (int array (len(r), ...)); zero weight
        where it is not usable (a start at the horizon)."""
        nc = self.Ib.shape[1]
        c = np.clip(col, 0, nc - 1)
        rr = np.asarray(r).reshape((-1,) + (1,) * (col.ndim - 1))
        Iv = self.Ib[rr, c]
        v = _ordinate(self.q[c], Iv, self.kind) - self.y_ref[rr]
        if self.Sb is None:
            w = np.ones(c.shape)
        else:
            with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
                w = Iv / self.Sb[rr, c]
                w *= w
        return self.u[c], v, w


def _window_stats(bs, r, s2, e, n):
    """Statistics of the windows [s2 (R, k, 1), e (R, 1, E)) of the frames r, as
    :meth:`saxsnb.analysis._windows.WindowMoments.search_stats` (the same formulas:
    :func:`~saxsnb.analysis._windows.window_stats`)."""
    Ge = bs.gather(r, e[:, 0, :])[:, :, None, :]
    Gs = bs.gather(r, s2[:, :, 0])[:, :, :, None]
    D = np.empty((_T, len(r), s2.shape[1], e.shape[2]))
    np.subtract(Ge, Gs, out=D)
    S0, Su, Sv, Suu, Suv, Svv, S3, S4, Suuv = D
    yr = bs.y_ref[r][:, None, None]
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        out = window_stats(n, S0, Su, Sv, Suu, Suv, Svv, S3, S4, Suuv, bs.x_ref, yr)
        Y, slope, m = out.pop("_Y"), out["slope"], out.pop("_m")
        u0, v0, w0 = bs.point(r, s2)
        r0 = v0 - Y - slope * (u0 - m)
        out["first_residual2"] = r0 * r0 * w0
    return out


def _window_average(accept, key, slope, slope_var, intercept, intercept_var, cov):
    """Average of the line over the acceptable windows of each frame, and its variance
    including the spread between windows (Buckland, Burnham & Augustin 1997,
    Biometrics 53, 603: the variance of a model-averaged estimate is the weighted mean
    of each model's variance plus its squared offset from the average). The weight of a
    window falls with its estimated relative mean-squared error ``-key`` (see
    ``evaluate``): exp(-(m - m_best) / (tau m_best)), tau = :data:`_AVERAGE_TAU`.

    All inputs are (n_frames, n_starts, n_stops); returns a dict of (n_frames,) arrays.
    """
    F = accept.shape[0]
    A = accept.reshape(F, -1)
    m = -key.reshape(F, -1)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        m_best = np.min(np.where(A, m, np.inf), axis=-1, keepdims=True)
        w = np.where(A, np.exp(-(m - m_best) / (_AVERAGE_TAU * m_best)), 0.0)
        tot = w.sum(-1, keepdims=True)
        w = np.where(tot > 0, w / np.where(tot > 0, tot, 1.0), 0.0)
        b = np.where(A, slope.reshape(F, -1), 0.0)
        a = np.where(A, intercept.reshape(F, -1), 0.0)
        vb = np.where(A, slope_var.reshape(F, -1), 0.0)
        va = np.where(A, intercept_var.reshape(F, -1), 0.0)
        c = np.where(A, cov.reshape(F, -1), 0.0)
        bm = (w * b).sum(-1)
        am = (w * a).sum(-1)
        db = b - bm[:, None]
        da = a - am[:, None]
        return {
            "slope": bm,
            "intercept": am,
            "slope_var": (w * (vb + db * db)).sum(-1),
            "intercept_var": (w * (va + da * da)).sum(-1),
            "cov": (w * (c + db * da)).sum(-1),
            "n_windows": A.sum(-1),
        }


def search_block(q, I, S, rows, h, bound, col_lo, kind, k, limit, min_points, K, E,
                 curvature_z, max_drift, shape, work=None):
    """Window search on the frames ``rows`` of ``I, S``; ``h`` (len(rows),) each
    frame's horizon (the columns it may use), ``bound`` its decay bound, ``col_lo`` the
    first column of its validity region; ``work`` (dict, optional) keeps the moment
    buffer for the next block of the same call. Returns start, stop, status and the fit."""
    F = rows.size
    nc = int(h.max())
    q = q[:nc]
    Ib = I[rows, :nc]
    Sb = None if S is None else S[rows, :nc]
    L = np.arange(F)
    cn = _Counts(Ib, Sb, h, _clean_rows(Ib, Sb, h))
    n_usable = cn.n_usable
    # candidate starts (F, K): the j-th usable point from column col_lo on (0 for
    # compact; rod, sheet: the low-q end of their validity region)
    before = cn.before(col_lo)
    before = np.where(col_lo >= h, n_usable, before)
    if shape == "compact":
        kth = before[:, None] + np.arange(1, K + 1)[None, :]
    else:
        # rod, sheet: the later starts spread up to min_points before the decay bound, so a
        # frame whose validity region starts higher than estimated still finds its window
        at_bound = cn.before(np.clip(bound, 1, h))
        span = np.maximum(at_bound - before - min_points, 0)
        steps = np.rint(np.linspace(0.0, 1.0, K)[None, :] * span[:, None]).astype(np.int64)
        kth = before[:, None] + 1 + steps
    starts = cn.nth(kth)
    # candidate stops (F, E): from min_points usable after the first start to the bound
    lo = cn.nth(before[:, None] + min_points)[:, 0] + 1
    hi = np.maximum(bound, lo)
    stops = np.rint(lo[:, None] + np.linspace(0.0, 1.0, E)[None, :] * (hi - lo)[:, None]).astype(np.int64)
    stops = np.minimum(stops, h[:, None])
    q_last_all = q[cn.last(np.maximum(stops - 1, 0))]
    work = {} if work is None else work
    bs = _BlockSums(q, Ib, Sb, kind, cn, np.minimum(starts[:, 0], h), work.get("buf"))
    work["buf"] = bs.buf

    def evaluate(r, s2):
        """Acceptance and score of the windows (starts s2 (len(r), k) x all stops); also
        the low-q upturn statistic (module notes of saxsnb.analysis._guinier): the largest
        significance, over the windows, of a relative curvature above _UPTURN_KAPPA."""
        e3 = stops[r][:, None, :]
        s3 = s2[:, :, None]
        n = cn.count(r, s3, e3).astype(float)
        st = _window_stats(bs, r, s3, e3, n)
        nblk = cn.blocked(r, s3, e3)
        slope = st["slope"]
        with np.errstate(invalid="ignore", divide="ignore"):
            # curvature: significance (sigma scaled by sqrt(chi2_red) when above 1) or size
            var_scale = np.maximum(st["chi2_quadratic"] / np.maximum(n - 3.0, 1.0), 1.0)
            c2 = st["c"] * st["c"]
            c_var = st["c_var"] * var_scale
            flat = (c2 <= curvature_z * curvature_z * c_var) | (np.abs(st["drift"]) <= max_drift)
            # the first point must not be an outlier of the window's line (beam-stop
            # shadow, parasitic scattering): its squared weighted residual below
            # outlier_z^2 times the line's reduced chi-square (at least 1)
            line_scale = np.maximum(st["chi2_line"] / np.maximum(n - 2.0, 1.0), 1.0)
            clean_start = st["first_residual2"] <= _OUTLIER_Z**2 * line_scale
            inside = (q_last_all[r] ** 2)[:, None, :] * (-k * slope) <= limit * limit
            geom = (s3 < e3) & (nblk == 0) & (n >= min_points - 0.5)
            negative = slope < 0
            accept = geom & negative & inside & flat & clean_start
            # score: estimated mean-squared error of the slope as an estimate of the
            # slope at q = 0: its variance plus the squared departure c * lever that
            # the quadratic term causes (c^2 estimated without its noise bias)
            mse = st["slope_var"] * var_scale + np.maximum(c2 - c_var, 0.0) * st["lever"] ** 2
            key = np.where(accept, -mse / (slope * slope), -np.inf).reshape(len(r), -1)
            # sigma_c from the data's sigma alone (a quadratic misfits an upturn: scaling
            # by its chi2 would hide the upturn it measures); scaled without sigma
            up_var = c_var if Sb is None else st["c_var"]
            up_z = np.where(geom, (st["c"] - _UPTURN_KAPPA * slope * slope) / np.sqrt(up_var), -np.inf)
            up_z = np.max(np.where(np.isnan(up_z), -np.inf, up_z).reshape(len(r), -1), -1)
        best = np.argmax(key, axis=-1)
        ok_ = accept.reshape(len(r), -1)[np.arange(len(r)), best]
        bs_, be = np.unravel_index(best, (s2.shape[1], E))
        avg = _window_average(accept, key, slope, st["slope_var"] * var_scale, st["intercept"],
                              st["intercept_var"] * var_scale, st["slope_intercept_cov"] * var_scale)
        avg["sigma_scale"] = np.sqrt(var_scale.reshape(len(r), -1)[np.arange(len(r)), best])
        diag = (geom, negative, inside, flat, st["c"], up_z)
        return ok_, s2[np.arange(len(r)), bs_], stops[r, be], diag, avg

    # the windows of a few hundred frames at a time (their arrays stay in cache)
    parts = [_finish(R, evaluate, starts, stops, cn, rows, h, q, bs, I, S, Sb is None, K, shape)
             for R in np.array_split(L, max(1, -(-F // _FRAMES)))]
    start = np.concatenate([p[0] for p in parts])
    stop = np.concatenate([p[1] for p in parts])
    status = np.concatenate([p[2] for p in parts])
    fit = {key: np.concatenate([p[3][key] for p in parts]) for key in parts[0][3]}
    return start, stop, status, fit


#: frames whose windows are scored together
_FRAMES = 512


def _finish(L, evaluate, starts, stops, cn, rows, h, q, bs, I, S, no_sigma, K, shape):
    """Stages 1 and 2 of the window search, statuses and the reported line, for the
    frames ``L`` (indices into the block)."""
    F = L.size
    idx = np.arange(F)
    # stage 1: windows from the first usable point (compact) or from all starts (rod,
    # sheet); stage 2, only for frames without an acceptable window: the later starts
    K1 = 1
    ok, start, stop, diag, avg = evaluate(L, starts[L, :K1])
    start = np.where(ok, start, -1)
    stop = np.where(ok, stop, -1)
    if K > K1 and not ok.all():
        i2 = np.flatnonzero(~ok)
        r2 = L[i2]
        ok2, start2, stop2, _, avg2 = evaluate(r2, starts[r2, K1:])
        ok[i2] = ok2
        start[i2] = np.where(ok2, start2, -1)
        stop[i2] = np.where(ok2, stop2, -1)
        for key_, v in avg2.items():
            avg[key_][i2] = v
    geom, negative, inside, flat, c_curv, up_z = diag

    status = np.full(F, "ok", dtype=STATUS_DTYPE)
    # the low-q upturn (compact): the windows from the first usable point curve upwards
    # more than any single population allows -> no Guinier result, whatever the later
    # starts gave (aggregates, attraction, unsubtracted background or parasitic scattering)
    upturn = (up_z > _UPTURN_Z) if shape == "compact" else np.zeros(F, dtype=bool)
    ok &= ~upturn
    start = np.where(ok, start, -1)
    stop = np.where(ok, stop, -1)
    approx = np.zeros(F, dtype=bool)
    fail = ~ok
    if fail.any():
        # why a frame failed, judged on the windows from the first start
        g0 = geom[:, 0, :]
        any_geom = g0.any(axis=-1)
        rising = (g0 & (~negative[:, 0, :] | ((c_curv[:, 0, :] > 0) & ~flat[:, 0, :]))).any(axis=-1)
        if shape != "compact":  # ln(q I), ln(q^2 I) rise at low q by nature: no aggregation sign
            rising[:] = False
        short_inside = inside[:, 0, :][idx, np.argmax(g0, axis=-1)]
        block_kind = np.where(cn.block_neg[L], "negative_intensity", "zero_sigma")
        status[fail & any_geom & ~short_inside] = "qrg_limit_exceeded"
        status[fail & any_geom & short_inside] = "no_linear_region"
        # curving upwards, but no more than a single population can (chains, rods, broad
        # size distributions): the shortest window within the limit, as an approximation
        g_in = g0 & negative[:, 0, :] & inside[:, 0, :]
        curved = fail & rising & ~upturn & g_in.any(axis=-1)
        status[curved] = "curved_approximate"
        approx = curved
        start = np.where(curved, starts[L, 0], start)
        stop = np.where(curved, stops[L, np.argmax(g_in, axis=-1)], stop)
        status[upturn] = "curvature_aggregation"
        status[fail & ~any_geom] = "too_few_points"
        few = fail & ~any_geom & cn.has_block[L]
        status[few] = block_kind[few]
        empty = fail & (cn.n_usable[L] == 0)
        if empty.any():
            fr = rows[L[empty]]
            full = np.isfinite(I[fr]) if S is None else np.isfinite(I[fr]) & np.isfinite(S[fr])
            st_ = status[empty]
            st_[~full.any(axis=-1)] = "no_data"
            status[empty] = st_
    s_ = np.maximum(start, 0)
    e_ = np.maximum(stop, 0)
    fit = _chosen_fit(bs, cn, L, s_, e_, no_sigma)
    # the reported line: the average over the acceptable windows (module notes); a
    # "curved_approximate" frame keeps its one window's line
    for key_ in ("slope", "intercept"):
        fit[key_ + "_window"] = fit[key_]
        fit[key_] = np.where(ok, avg[key_], np.where(approx, fit[key_], np.nan))
    for key_ in ("slope_sigma", "intercept_sigma"):
        fit[key_ + "_window"] = fit[key_]
        fit[key_] = np.where(ok, np.sqrt(avg[key_[:-6] + "_var"]), np.where(approx, fit[key_], np.nan))
    cov_window = fit["slope_intercept_cov"]
    fit["slope_intercept_cov"] = np.where(ok, avg["cov"], np.where(approx, cov_window, np.nan))
    fit["n_windows"] = np.where(ok, avg["n_windows"], 0)
    fit["sigma_scale"] = np.where(ok, avg["sigma_scale"], np.where(approx, 1.0, np.nan))
    kept = ok | approx
    fit["q_min"] = np.where(kept, q[np.minimum(s_, h[L] - 1)], np.nan)
    fit["q_max"] = np.where(kept, q[cn.last(np.maximum(e_ - 1, 0), L)], np.nan)
    return start, stop, status, fit


def _chosen_fit(bs, cn, r, s, e, scale):
    """Straight-line fit of one window [s, e) per frame from the block sums, as
    :meth:`saxsnb.analysis._windows.WindowMoments.fit`."""
    D = bs.gather(r, e) - bs.gather(r, s)
    n = cn.count(r, s, e).astype(np.int64)
    S0, Su, Sv, Suu, Suv, Svv = D[:6]
    return line_from_sums(n, S0, Su, Sv, Suu, Suv, Svv, bs.x_ref, bs.y_ref[r], scale)

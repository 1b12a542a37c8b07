"""The automatic Guinier range: every candidate window of every frame evaluated at once
(see saxsnb.analysis._guinier for the criterion).
"""

from __future__ import annotations

import numpy as np

from ..errors import SaxsInputError
from ._arrays import as_frames
from ._linear import SHAPE_PLOTS
from ._status import STATUS_DTYPE
from ._windows import WindowMoments

__all__ = ["guinier_search"]

#: shape -> (transform, default limit of q_max * R, factor k in R^2 = -k slope), from
#: the one table of linearised plots (:data:`saxsnb.analysis._linear.LINEAR_PLOTS`).
SHAPES = {s: (p.name, p.limit, p.size_factor) for s, p in SHAPE_PLOTS.items()}
_STATUS_DTYPE = STATUS_DTYPE


_CHUNK = 256


_DECAY_MARGIN = 0.3


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


#: rod and sheet: the low-q end of their validity region (q >> 1/L, q >> 1/D), first
#: pass, as q Rg of the whole particle: rod q Rg >= 3 (q L >= 10 for a long cylinder,
#: Rg ~ L / sqrt(12)), sheet q Rg >= 4 (q R >= 5.7 for a flat disc of radius R,
#: Rg ~ R / sqrt(2)). Our choice; the second pass (:func:`_finite_size_q_low`) refines it.
_WHOLE_QRG = {"rod": 3.0, "sheet": 4.0}
#: the finite-size bias allowed on the size^2 of a rod or sheet window (second pass)
_FINITE_SIZE_BIAS = 0.015
#: sheet: lowest q R_lateral of a window (the lateral oscillation of q^2 I,
#: J1(2 q R) / (q R) ~ (q R)^-1.5 / sqrt(pi), below 0.0075 = half of 3 % of the
#: thickness law's drop 0.49 across a window ending at q Rt = 0.7; der)
_SHEET_QR = 18.0


def _whole_rg(q, I, S, min_points, rg=None):
    """Rg of the whole particle per frame: ``rg`` if given, else the automatic compact
    search on the same frames; where that search finds even its shortest window beyond
    q Rg = 1.3 the particle is larger than 1.3 / q_w (q_w the last q of that window), and
    that lower bound is used for the first pass (it makes the rod and sheet ranges start
    higher, on the safe side) and ``measured`` is False there (no second pass: a lower
    bound of L or D would only push the windows towards the limit). NaN where the curve
    has no Guinier region of the whole particle. Returns (rg, measured)."""
    F = I.shape[0]
    if rg is not None:
        rg = np.broadcast_to(np.asarray(rg, dtype=float), (F,)).copy()
        return rg, np.isfinite(rg)
    found, fit = _search(q, I, S, "guinier", 3.0, 1.3, min_points, 3, 32, 3.0, 0.05, "compact")
    with np.errstate(invalid="ignore"):
        rg = np.sqrt(-3.0 * fit["slope"])
    big = found["status"] == "qrg_limit_exceeded"
    if big.any():
        usable = _flags(I[big], None if S is None else S[big])[3]
        cnt = np.cumsum(usable, axis=-1)
        rg[big] = 1.3 / q[np.minimum(np.argmax(cnt >= min_points, axis=-1), q.size - 1)]
    return rg, np.isfinite(rg) & ~big


def _finite_size_q_low(shape, rg, size, limit):
    """Second pass: the lowest q at which the finite length (rod) or lateral size (sheet)
    biases the size^2 of a window ending at q R = limit by less than
    :data:`_FINITE_SIZE_BIAS` (der, leading terms):

    - rod of length L = sqrt(12 (Rg^2 - Rc^2)): q I ~ (pi / L) (1 - 2 / (pi q L)) on the
      plateau (thin-rod expansion, Pedersen 1997), so ln(q I) gains 2 / (pi L) (1/q1 -
      1/q2) across [q1, q2], against the law's drop Rc^2 (q2^2 - q1^2) / 2; with q2 Rc =
      limit and u = q1 Rc the bias is (4 / (pi lambda)) (1/u - 1/limit) / (limit^2 - u^2),
      lambda = L / Rc, solved for u by bisection. No solution (lambda below ~ 2 / (pi
      bias limit^3) ~ 40): +inf, the rod is too short for its cross-section law;
    - sheet of lateral radius R = sqrt(2 (Rg^2 - Rt^2)) (disc): q R >= :data:`_SHEET_QR`.

    NaN Rg or size gives -inf (no refinement).
    """
    with np.errstate(invalid="ignore", divide="ignore"):
        d = rg * rg - size * size
        if shape == "sheet":
            out = _SHEET_QR / np.sqrt(2.0 * d)
        else:
            lam = np.sqrt(12.0 * d) / size
            eps = _FINITE_SIZE_BIAS

            def bias(u):
                return 4.0 / (np.pi * lam[:, None]) * (1.0 / u - 1.0 / limit) / (limit**2 - u * u)

            u = np.linspace(0.02, 0.98, 49)[None, :] * limit
            b = bias(u)
            okb = b <= eps
            # bias falls with u: the first u where it is small enough (grid, then refined)
            j = np.argmax(okb, axis=-1)
            lo_u = np.where(j > 0, u[0, np.maximum(j - 1, 0)], u[0, 0])
            hi_u = u[0, j]
            for _ in range(20):  # bisection on each frame (vectorised)
                mid = 0.5 * (lo_u + hi_u)
                good = bias(mid[:, None])[:, 0] <= eps
                hi_u = np.where(good, mid, hi_u)
                lo_u = np.where(good, lo_u, mid)
            out = np.where(okb.any(-1), hi_u / size, np.inf)
        bad = ~(np.isfinite(rg) & np.isfinite(size) & (d > 0))
    return np.where(bad, -np.inf, out)


def _search_shape(q, I, S, kind, k, limit, min_points, K, E, curvature_z, max_drift, shape, rg=None):
    """:func:`_search` for every shape; rod and sheet in two passes, their windows
    starting at the low-q end of their validity region (module notes of _guinier)."""
    if shape == "compact":
        return _search(q, I, S, kind, k, limit, min_points, K, E, curvature_z, max_drift, shape)
    rg_w, measured = _whole_rg(q, I, S, min_points, rg)
    with np.errstate(invalid="ignore", divide="ignore"):
        q_low = np.where(np.isfinite(rg_w) & (rg_w > 0), _WHOLE_QRG[shape] / rg_w, -np.inf)
    found, fit = _search(q, I, S, kind, k, limit, min_points, K, E, curvature_z, max_drift, shape, q_low)
    with np.errstate(invalid="ignore"):
        size = np.sqrt(-k * fit["slope"])
    q_low2 = np.where(measured, np.maximum(q_low, _finite_size_q_low(shape, rg_w, size, limit)), q_low)
    redo = np.flatnonzero((found["status"] == "ok") & (q_low2 > fit["q_min"]))
    if redo.size:
        f2, fit2 = _search(q, I[redo], None if S is None else S[redo], kind, k, limit, min_points, K, E,
                           curvature_z, max_drift, shape, q_low2[redo])
        # no window left between the refined low-q end and the limit: the rod or sheet law
        # does not hold to the bias target on this q range
        f2["status"] = np.where(f2["status"] == "ok", "ok", "outside_validity")
        for key in found:
            found[key] = found[key].copy()
            found[key][redo] = f2[key]
        for key in fit:
            if key in fit2:
                fit[key] = fit[key].copy()
                fit[key][redo] = fit2[key]
    return found, fit


def _check_shape(shape):
    if shape not in SHAPES:
        raise SaxsInputError(f"unknown shape {shape!r}; use one of {list(SHAPES)}", parameter="shape")
    return SHAPES[shape]


def _flags(I, S):
    """finite, non-positive intensity, zero/negative sigma, usable (bool arrays)."""
    finite = np.isfinite(I)
    if S is not None:
        finite &= np.isfinite(S)
    neg = finite & (I <= 0)
    zero = finite & ~neg & (S <= 0) if S is not None else np.zeros_like(finite)
    return finite, neg, zero, finite & ~neg & ~zero


def _nth_true(cnt, k, n):
    """Column of the k-th (1-based; int array (F, K)) usable point, from the running
    count ``cnt`` of usable points (F, n); ``n`` where a row has fewer."""
    out = np.empty(k.shape, dtype=np.int64)
    for j in range(k.shape[1]):  # a handful of candidate starts, not frames
        hit = cnt >= k[:, j : j + 1]
        out[:, j] = np.where(hit[:, -1], np.argmax(hit, axis=-1), n)
    return out


def guinier_search(
    q,
    intensity,
    sigma=None,
    *,
    shape: str = "compact",
    qrg_limit: float | None = None,
    min_points: int = 8,
    n_starts: int | None = None,
    max_ends: int = 32,
    curvature_z: float = 3.0,
    max_drift: float = 0.05,
) -> dict:
    """Choose a Guinier range for every frame (the automatic range, see module notes).

    Parameters
    ----------
    q : array (n_q,), 1/nm, increasing
    intensity, sigma : arrays (n_frames, n_q) or (n_q,)
    shape : {"compact", "rod", "sheet"}
    qrg_limit : float, optional
        Upper limit of q_max times Rg (Rc, Rt); default 1.3, 1.0, 0.7 by shape.
    min_points : int
        Fewest usable points in a window.
    n_starts, max_ends : int
        Candidate window starts and stops per frame.
    curvature_z, max_drift : float
        Curvature acceptance thresholds (see module notes).

    Returns
    -------
    dict of arrays (n_frames,): ``start``, ``stop`` (column indices, stop exclusive;
    -1 when none), ``status`` (str).

    Examples
    --------
    >>> q = np.linspace(0.01, 1.0, 200)
    >>> r = guinier_search(q, 10 * np.exp(-(q * 3.0) ** 2 / 3), 0.01 * np.ones(200))
    >>> r["status"].tolist(), bool(q[r["stop"][0] - 1] * 3.0 <= 1.3)
    (['ok'], True)
    """
    kind, default_limit, k = _check_shape(shape)
    limit = float(default_limit if qrg_limit is None else qrg_limit)
    if min_points < 3:
        raise SaxsInputError("min_points must be at least 3", parameter="min_points")
    q, I, S, _ = as_frames(q, intensity, sigma)
    if n_starts is None:
        n_starts = 3 if shape == "compact" else 8
    found, _ = _search_shape(
        q, I, S, kind, k, limit, min_points, int(n_starts), int(max_ends), curvature_z, max_drift, shape
    )
    return found


def _search(q, I, S, kind, k, limit, min_points, K, E, curvature_z, max_drift, shape, q_low=None):
    """The window search; also returns the line fit of each chosen window. ``q_low``
    (n_frames,), optional: the windows start at or above it (rod, sheet: the low-q end
    of their validity region)."""
    F, n_q = I.shape
    start = np.full(F, -1, dtype=np.int64)
    stop = np.full(F, -1, dtype=np.int64)
    status = np.empty(F, dtype=_STATUS_DTYPE)
    fits: dict = {}
    if q_low is None:
        col_lo = np.zeros(F, dtype=np.int64)
    else:
        col_lo = np.searchsorted(q, np.where(np.isnan(q_low), -np.inf, q_low)).astype(np.int64)
    bound, _ = _decay_bound(I, S, kind, limit, k, col_lo, q)
    # Frames are processed in chunks (bounding the memory of the window arrays) of
    # similar column bound, so that few columns are read beyond any frame's bound.
    # Every frame's result depends on its own data only.
    order = np.argsort(bound, kind="stable")
    for a in range(0, F, _CHUNK):
        sel = order[a : a + _CHUNK]
        n_cut = int(bound[sel].max())
        sa, sb, st, fit = _search_chunk(
            q[:n_cut],
            I[:, :n_cut][sel],
            None if S is None else S[:, :n_cut][sel],
            bound[sel],
            col_lo[sel],
            I,
            S,
            sel,
            kind,
            k,
            limit,
            min_points,
            K,
            E,
            curvature_z,
            max_drift,
            shape,
        )
        start[sel], stop[sel], status[sel] = sa, sb, st
        for key, v in fit.items():
            if key not in fits:
                fits[key] = np.empty(F, dtype=v.dtype)
            fits[key][sel] = v
    return {"start": start, "stop": stop, "status": status}, fits


def _decay_bound(I, S, kind, limit, k=3.0, col_lo=None, q=None):
    """Per-frame column bound beyond which no window can satisfy the limit.

    For "compact": just after the third point (after the first positive one) whose
    intensity lies below the first positive intensity times exp(-(limit^2/3 + 0.3)):
    a Guinier curve has lost that much only beyond q Rg = 1.6 for the limit 1.3, a
    Gaussian chain (which decays more slowly) beyond q Rg = 1.8. The columns are read
    in growing blocks, frames already bounded are not read again, so the high-q part
    of a long curve is never touched. Rod and sheet: the same on q I and q^2 I from the
    column ``col_lo`` on, with the drop limit^2 / k + 0.3 (k = 2, 1: the drop of the
    cross-section or thickness law at q R = limit).
    """
    F, n_q = I.shape
    bound = np.full(F, n_q, dtype=np.int64)
    if n_q == 0:
        return bound, n_q
    if kind != "guinier":
        p = 1.0 if kind == "rod" else 2.0
        lo = np.zeros(F, dtype=np.int64) if col_lo is None else np.minimum(col_lo, n_q - 1)
        with np.errstate(invalid="ignore"):
            Y = I * q[None, :] ** p
        cols = np.arange(n_q)[None, :]
        pos = (Y > 0) & (cols >= lo[:, None])
        has = pos.any(-1)
        first = np.argmax(pos, axis=-1)
        thr = Y[np.arange(F), first] * np.exp(-(limit * limit / k + _DECAY_MARGIN))
        with np.errstate(invalid="ignore"):
            below = (Y < thr[:, None]) & (cols > first[:, None])
        cnt = np.cumsum(below, axis=-1, dtype=np.int32)
        found = has & (cnt[:, -1] >= 3)
        bound[found] = np.argmax(cnt[found] >= 3, axis=-1) + 1
        return bound, int(bound.max())
    factor = np.exp(-(limit * limit / 3.0 + _DECAY_MARGIN))
    todo = np.arange(F)
    c = min(n_q, 128)
    while todo.size:
        Ic = I[:, :c] if todo.size == F else I[todo, :c]
        pos = Ic > 0
        first = np.argmax(pos, axis=-1)
        thr = Ic[np.arange(todo.size), first] * factor
        below = (Ic < thr[:, None]) & (np.arange(c)[None, :] > first[:, None])
        cnt = np.cumsum(below, axis=-1, dtype=np.int32)
        found = cnt[:, -1] >= 3
        bound[todo[found]] = np.argmax(cnt[found] >= 3, axis=-1) + 1
        if c == n_q:
            break
        todo = todo[~found]
        c = min(n_q, 2 * c)
    return bound, int(bound.max())


def _search_chunk(
    q, Ic, Sc, bound, col_lo, I, S, sel, kind, k, limit, min_points, K, E, curvature_z, max_drift, shape
):
    """Window search on the frames ``sel``; ``Ic, Sc`` hold their first columns."""
    F, n_cut = Ic.shape
    rows = np.arange(F)
    finite, neg, zero, usable = _flags(Ic, Sc)
    cnt = np.cumsum(usable, axis=-1, dtype=np.int32)
    n_usable = cnt[:, -1]
    # candidate starts (F, K): the j-th usable point from column col_lo on (0 for
    # compact; rod, sheet: the low-q end of their validity region)
    before = np.where(col_lo > 0, cnt[rows, np.clip(col_lo - 1, 0, n_cut - 1)], 0)
    before = np.where(col_lo >= n_cut, n_usable, before)
    if shape == "compact":
        kth = before[:, None] + np.arange(1, K + 1)[None, :]
    else:
        # rod, sheet: the later starts spread up to min_points before the decay bound, so a
        # frame whose validity region starts higher than estimated still finds its window
        at_bound = cnt[rows, np.clip(bound - 1, 0, n_cut - 1)]
        span = np.maximum(at_bound - before - min_points, 0)
        steps = np.rint(np.linspace(0.0, 1.0, K)[None, :] * span[:, None]).astype(np.int64)
        kth = before[:, None] + 1 + steps
    starts = _nth_true(cnt, kth, n_cut)
    # candidate stops (F, E): from min_points usable after the first start to the bound
    lo = _nth_true(cnt, before[:, None] + min_points, n_cut)[:, 0] + 1
    hi = np.maximum(bound, lo)
    stops = np.rint(lo[:, None] + np.linspace(0.0, 1.0, E)[None, :] * (hi - lo)[:, None]).astype(np.int64)
    stops = np.minimum(stops, n_cut)

    mom = _moments(q, Ic, Sc, usable, kind, quadratic=True)
    # blocking points (non-positive intensity, zero sigma) must not lie inside a window
    blocking = neg | zero
    blk = np.zeros((F, n_cut + 1), dtype=np.int32)
    np.cumsum(blocking, axis=-1, out=blk[:, 1:])
    idx = np.where(usable, np.arange(n_cut)[None, :], 0)
    last_use = np.maximum.accumulate(idx, axis=-1)
    q_last_all = q[last_use[rows[:, None], np.maximum(stops - 1, 0)]]

    def evaluate(r, s2):
        """Acceptance and score of the windows (starts s2 (len(r), k) x all stops); also
        the low-q upturn statistic (module notes of saxsnb.analysis._guinier): the largest
        significance, over the windows, of a relative curvature above _UPTURN_KAPPA."""
        e3 = stops[r][:, None, :]
        s3 = s2[:, :, None]
        st = mom.search_stats(s3, e3, rows=r)
        nblk = blk[r[:, None], stops[r]][:, None, :] - blk[r[:, None], s2][:, :, None]
        slope = st["slope"]
        n = st["n_points"]
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
            up_var = c_var if Sc is None else st["c_var"]
            up_z = np.where(geom, (st["c"] - _UPTURN_KAPPA * slope * slope) / np.sqrt(up_var), -np.inf)
            up_z = np.max(np.where(np.isnan(up_z), -np.inf, up_z).reshape(len(r), -1), -1)
        best = np.argmax(key, axis=-1)
        ok_ = accept.reshape(len(r), -1)[np.arange(len(r)), best]
        bs, be = np.unravel_index(best, (s2.shape[1], E))
        avg = _window_average(accept, key, slope, st["slope_var"] * var_scale, st["intercept"],
                              st["intercept_var"] * var_scale, st["slope_intercept_cov"] * var_scale)
        avg["sigma_scale"] = np.sqrt(var_scale.reshape(len(r), -1)[np.arange(len(r)), best])
        diag = (geom, negative, inside, flat, st["c"], up_z)
        return ok_, s2[np.arange(len(r)), bs], stops[r, be], diag, avg

    # stage 1: windows from the first usable point (compact) or from all starts (rod,
    # sheet); stage 2, only for frames without an acceptable window: the later starts
    K1 = 1
    ok, start, stop, diag, avg = evaluate(rows, starts[:, :K1])
    start = np.where(ok, start, -1)
    stop = np.where(ok, stop, -1)
    if K > K1 and not ok.all():
        r2 = rows[~ok]
        ok2, start2, stop2, _, avg2 = evaluate(r2, starts[r2, K1:])
        ok[r2] = ok2
        start[r2] = np.where(ok2, start2, -1)
        stop[r2] = np.where(ok2, stop2, -1)
        for key_, v in avg2.items():
            avg[key_][r2] = v
    geom, negative, inside, flat, c_curv, up_z = diag

    status = np.full(F, "ok", dtype=_STATUS_DTYPE)
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
        short_inside = inside[:, 0, :][rows, np.argmax(g0, axis=-1)]
        has_block = blocking.any(axis=-1)
        first_block = np.argmax(blocking, axis=-1)
        block_kind = np.where(neg[rows, first_block], "negative_intensity", "zero_sigma")
        status[fail & any_geom & ~short_inside] = "qrg_limit_exceeded"
        status[fail & any_geom & short_inside] = "no_linear_region"
        # curving upwards, but no more than a single population can (chains, rods, broad
        # size distributions): the shortest window within the limit, as an approximation
        g_in = g0 & negative[:, 0, :] & inside[:, 0, :]
        curved = fail & rising & ~upturn & g_in.any(axis=-1)
        status[curved] = "curved_approximate"
        approx = curved
        start = np.where(curved, starts[:, 0], start)
        stop = np.where(curved, stops[rows, np.argmax(g_in, axis=-1)], stop)
        status[upturn] = "curvature_aggregation"
        status[fail & ~any_geom] = "too_few_points"
        few = fail & ~any_geom & has_block
        status[few] = block_kind[few]
        empty = fail & (n_usable == 0)
        if empty.any():
            fr = sel[empty]
            full = np.isfinite(I[fr]) if S is None else np.isfinite(I[fr]) & np.isfinite(S[fr])
            st_ = status[empty]
            st_[~full.any(axis=-1)] = "no_data"
            status[empty] = st_
    s_ = np.maximum(start, 0)[:, None]
    e_ = np.maximum(stop, 0)[:, None]
    fit = {key: v[:, 0] for key, v in mom.fit(s_, e_, scale_covariance=Sc is None).items()}
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
    fit["q_min"] = np.where(kept, q[np.minimum(s_[:, 0], n_cut - 1)], np.nan)
    fit["q_max"] = np.where(kept, q[last_use[rows, np.maximum(e_[:, 0] - 1, 0)]], np.nan)
    return start, stop, status, fit


#: width of the window weights exp(-(m - m_best) / (tau m_best)) on the relative
#: mean-squared error m of the acceptable windows (calibrated on the validation shapes,
#: tests/validation: spread over noise draws / median sigma 0.85-1.15 at 0.1-10 % noise)
_AVERAGE_TAU = 5.0


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


def _moments(q, Ic, Sc, usable, kind, quadratic=False):
    """Prefix sums of the linearised data: x = q^2, y = ln(q^p I) with p = 0, 1, 2 for
    compact, rod, sheet; weights (I / sigma)^2 (first-order propagation, as
    :func:`~saxsnb.analysis._linear.linearize`)."""
    y, w = _linearised(q, Ic, Sc, usable, kind)
    return WindowMoments.from_weights(q * q, y, w, usable, quadratic=quadratic)


def _linearised(q, I, S, usable, kind):
    """y = ln(q^p I) and weights (I / sigma)^2 (1 without sigma), 0 where not usable."""
    with np.errstate(divide="ignore", invalid="ignore"):
        y = np.log(np.where(usable, I, 1.0))
        if kind == "rod":
            y += np.log(q)
        elif kind == "sheet":
            y += 2.0 * np.log(q)
        if S is None:
            w = usable.astype(float)
        else:
            w = np.where(usable, I / S, 0.0)
            w *= w
    return y, w

"""The automatic Guinier range: every candidate window of every frame evaluated at once
(see saxsnb.analysis._guinier for the criterion).
"""

from __future__ import annotations

import numpy as np

from ..errors import SaxsInputError
from ._arrays import as_frames
from ._guinier_blocks import search_block
from ._guinier_points import _flags
from ._linear import SHAPE_PLOTS
from ._status import STATUS_DTYPE
from ._windows import WindowMoments

__all__ = ["guinier_search"]

#: shape -> (transform, default limit of q_max * R, factor k in R^2 = -k slope), from
#: the one table of linearised plots (:data:`saxsnb.analysis._linear.LINEAR_PLOTS`).
SHAPES = {s: (p.name, p.limit, p.size_factor) for s, p in SHAPE_PLOTS.items()}
_STATUS_DTYPE = STATUS_DTYPE


_CHUNK = 256
#: points (frames x columns) searched together in one block
_BLOCK_POINTS = 1 << 17


_DECAY_MARGIN = 0.3


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
    # Frames in order of their column bound, in groups of _CHUNK: a frame may use the
    # columns up to the largest bound of its group (its horizon), so that few columns
    # are read beyond any frame's bound. Several groups are searched together in one
    # block of about _BLOCK_POINTS points (larger numpy operations).
    order = np.argsort(bound, kind="stable")
    horizon = np.empty(F, dtype=np.int64)
    for a in range(0, F, _CHUNK):
        horizon[a : a + _CHUNK] = bound[order[a : a + _CHUNK]].max()
    a = 0
    work: dict = {}
    while a < F:
        b = min(F, a + _CHUNK)
        while b < F and (b + _CHUNK - a) * horizon[min(F, b + _CHUNK) - 1] <= _BLOCK_POINTS:
            b = min(F, b + _CHUNK)
        sel = order[a:b]
        sa, sb, st, fit = search_block(
            q, I, S, sel, horizon[a:b], bound[sel], col_lo[sel], kind, k, limit, min_points, K, E,
            curvature_z, max_drift, shape, work,
        )
        start[sel], stop[sel], status[sel] = sa, sb, st
        for key, v in fit.items():
            if key not in fits:
                fits[key] = np.empty(F, dtype=v.dtype)
            fits[key][sel] = v
        a = b
    return {"start": start, "stop": stop, "status": status}, fits


def _decay_bound(I, S, kind, limit, k=3.0, col_lo=None, q=None):
    """Per-frame column bound beyond which no window can satisfy the limit.

    For "compact": just after the third point (after the first positive one) whose
    intensity lies below the first positive intensity times exp(-(limit^2/3 + 0.3)):
    a Guinier curve has lost that much only beyond q Rg = 1.6 for the limit 1.3, a
    Gaussian chain (which decays more slowly) beyond q Rg = 1.8. The columns are read
    in growing blocks (32, 64, ... 256), counting the points below the threshold; a
    frame is bounded in the block where its count reaches 3 (the column found there by
    a search) and not read again, so the high-q part of a long curve is never touched.
    The first positive point is looked for in the first 128 columns; frames without one
    there take :func:`_decay_bound_scan` (the same columns, tests/test_guinier_blocks.py).
    Rod and sheet: the same on q I and q^2 I from the
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
    c = min(n_q, 128)
    # the first positive point of each frame, looked for in the first c columns (as the
    # reference scan below, which these frames then match exactly); frames without one
    # there take the reference scan
    first = np.zeros(F, dtype=np.int64)
    late = np.flatnonzero(~(I[:, 0] > 0))
    pos_any = np.ones(F, dtype=bool)
    if late.size:
        head = I[late, :c] > 0
        pos_any[late] = head.any(axis=-1)
        first[late] = np.argmax(head, axis=-1)
    thr = I[np.arange(F), first] * factor
    rest = np.flatnonzero(~pos_any)
    todo = np.flatnonzero(pos_any)
    # columns in blocks: count the points below the threshold; a frame is done in the
    # block where its count reaches 3, found there by a search (no running count)
    count = np.zeros(F, dtype=np.int64)
    a, step = 0, 32
    while todo.size and a < n_q:
        b = min(n_q, a + step)
        with np.errstate(invalid="ignore"):
            if 2 * todo.size > F:
                below = (I[:, a:b] < thr[:, None])[todo]
            else:
                below = I[todo, a:b] < thr[todo, None]
        if a <= first[todo].max():
            below &= np.arange(a, b)[None, :] > first[todo, None]
        got = count[todo] + np.count_nonzero(below, axis=-1)
        done = got >= 3
        if done.any():
            need = 3 - count[todo[done]]
            hit = below[done]
            r = np.arange(hit.shape[0])
            col = np.argmax(hit, axis=-1)
            for j in (2, 3):  # the need-th point below: clear the ones before it
                more = np.flatnonzero(need >= j)
                if not more.size:
                    break
                hit[r[more], col[more]] = False
                col[more] = np.argmax(hit[more], axis=-1)
            bound[todo[done]] = a + col + 1
        count[todo] = got
        todo = todo[~done]
        a, step = b, min(2 * step, 256)
    if rest.size:
        bound[rest] = _decay_bound_scan(I[rest], factor)
    return bound, int(bound.max())


def _decay_bound_scan(I, factor):
    """Reference scan of :func:`_decay_bound` (compact): growing blocks from column 0,
    the first positive point looked for within each block."""
    F, n_q = I.shape
    bound = np.full(F, n_q, dtype=np.int64)
    todo = np.arange(F)
    c = min(n_q, 128)
    while todo.size:
        Ic = I[todo, :c]
        pos = Ic > 0
        first = np.argmax(pos, axis=-1)
        thr = Ic[np.arange(todo.size), first] * factor
        with np.errstate(invalid="ignore"):
            below = (Ic < thr[:, None]) & (np.arange(c)[None, :] > first[:, None])
        cnt = np.cumsum(below, axis=-1, dtype=np.int32)
        found = cnt[:, -1] >= 3
        bound[todo[found]] = np.argmax(cnt[found] >= 3, axis=-1) + 1
        if c == n_q:
            break
        todo = todo[~found]
        c = min(n_q, 2 * c)
    return bound


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

"""Guinier fits on given windows (fixed q ranges): the line of one window per frame,
by the same prefix-sum route as the automatic search or, when every frame shares the
window, by direct weighted row sums (see saxsnb.analysis._guinier).
"""

from __future__ import annotations

import numpy as np

from ._guinier_search import _CHUNK, _flags, _linearised, _moments
from ._linear import _line_from_moments


def _window_fit(mom, q, finite, neg, zero, usable, start, stop, scale):
    """Line fit of one window per frame from the prefix sums, with the window's
    q span and counts of finite, negative and zero-sigma points."""
    n_cut = finite.shape[1]
    s = np.clip(start, 0, n_cut)[:, None]
    e = np.clip(stop, 0, n_cut)[:, None]
    fit = {key: v[:, 0] for key, v in mom.fit(s, e, scale_covariance=scale).items()}
    idx = np.arange(n_cut)[None, :]
    inwin = (idx >= s) & (idx < e)
    u = usable & inwin
    has = u.any(-1)
    lo = np.where(has, np.argmax(u, axis=-1), 0)
    hi = np.where(has, n_cut - 1 - np.argmax(u[:, ::-1], axis=-1), 0)
    fit["q_min"] = np.where(has, q[lo], np.nan)
    fit["q_max"] = np.where(has, q[hi], np.nan)
    fit["n_finite"] = (finite & inwin).sum(-1)
    fit["n_negative"] = (neg & inwin).sum(-1)
    fit["n_zero_sigma"] = (zero & inwin).sum(-1)
    return fit


def _fit_windows(q, I, S, start, stop, kind):
    """Line fit of one window ``[start, stop)`` per frame (fixed ranges), in chunks of
    frames; the same prefix-sum route as the automatic search (summed from the
    window's first column), so a fixed range equal to the chosen one gives the same
    numbers to rounding (tests: 1e-12)."""
    F = I.shape[0]
    if F and (start == start[0]).all() and (stop == stop[0]).all() and stop[0] > start[0] >= 0:
        return _fit_shared_window(q, I, S, int(start[0]), int(stop[0]), kind)
    fits: dict = {}
    order = np.argsort(stop, kind="stable")
    for a in range(0, F, _CHUNK):
        sel = order[a : a + _CHUNK]
        n_cut = int(max(1, stop[sel].max()))
        # the prefix sums start at the first window column of the chunk, not at column 0
        # (a range at high q then costs what its own columns cost)
        lo = int(np.clip(start[sel].min(), 0, n_cut - 1))
        Ic = I[sel, lo:n_cut]
        Sc = None if S is None else S[sel, lo:n_cut]
        finite, neg, zero, usable = _flags(Ic, Sc)
        mom = _moments(q[lo:n_cut], Ic, Sc, usable, kind)
        fit = _window_fit(mom, q[lo:n_cut], finite, neg, zero, usable, start[sel] - lo, stop[sel] - lo,
                          S is None)
        for key, v in fit.items():
            if key not in fits:
                fits[key] = np.empty(F, dtype=v.dtype)
            fits[key][sel] = v
    return fits


def _fit_shared_window(q, I, S, start, stop, kind):
    """:func:`_fit_windows` when every frame has the same window (a fixed q range).

    Fast route for frames whose window holds only usable points (I > 0, sigma > 0, all
    finite; the common case): y = ln(q^p I) and r = I / sigma once, the weighted sums
    as row-wise dot products (``np.einsum``, each frame's numbers independent of the
    others), centred on the window's mean x and each frame's weighted mean y. Frames
    with any unusable point take :func:`_fit_shared_window_general`. The two routes
    agree to rounding (tests: 1e-12), so a result does not depend on which frames
    share the call.
    """
    n_w = stop - start
    if S is None or n_w < 3:
        return _fit_shared_window_general(q, I, S, start, stop, kind)
    qw = q[start:stop]
    Iw = I[:, start:stop]
    Sw = S[:, start:stop]
    F = Iw.shape[0]
    # I > 0 and finite, sigma > 0 and finite (NaN fails every comparison)
    with np.errstate(invalid="ignore"):
        clean = (Iw.min(axis=-1) > 0) & (Sw.min(axis=-1) > 0)
        clean &= (Iw.max(axis=-1) < np.inf) & (Sw.max(axis=-1) < np.inf)
    if clean.all():
        return _fit_clean(qw, Iw, Sw, kind)
    cl = np.flatnonzero(clean)
    bad = np.flatnonzero(~clean)
    fit = _fit_clean(qw, Iw[cl], Sw[cl], kind) if cl.size else _fit_clean(qw, Iw[:0], Sw[:0], kind)
    out = {}
    for key, v in fit.items():
        full = np.full(F, np.nan if v.dtype.kind == "f" else 0, dtype=v.dtype)
        full[cl] = v
        out[key] = full
    out["q_min"][bad] = qw[0]
    out["q_max"][bad] = qw[-1]
    finite, neg, zero, _ = _flags(Iw[bad], Sw[bad])
    n_neg, n_zero = neg.sum(-1), zero.sum(-1)
    # a window holding a non-positive intensity or a zero sigma fails with that status
    # (guinier() reports no numbers for it): only the counts are needed
    blocked = (n_neg > 0) | (n_zero > 0)
    out["n_finite"][bad] = finite.sum(-1)
    out["n_points"][bad] = out["n_finite"][bad] - n_neg - n_zero
    out["n_negative"][bad] = n_neg
    out["n_zero_sigma"][bad] = n_zero
    rest = bad[~blocked]  # excluded (non-finite, e.g. masked) points only: the general route
    if rest.size:
        gen = _fit_shared_window_general(q, I[rest], S[rest], start, stop, kind)
        for key, val in gen.items():
            out[key] = out[key].astype(np.result_type(out[key], val), copy=False)
            out[key][rest] = val
    return out


def _fit_clean(qw, Iw, Sw, kind):
    """The fast route of :func:`_fit_shared_window` on frames whose window points are
    all usable: weighted row sums centred on the window's mean x and each frame's
    weighted mean y."""
    n_w = qw.size
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        y = np.log(Iw)
        if kind != "guinier":
            y += (1.0 if kind == "rod" else 2.0) * np.log(qw)
        w = Iw / Sw
        w *= w
        x = qw * qw
        x0 = float(x.mean())
        u = x - x0
        S0 = np.einsum("ij->i", w)
        Su = np.einsum("ij,j->i", w, u)
        ym = np.einsum("ij,ij->i", w, y) / S0
        v = np.subtract(y, ym[:, None], out=y)
        wv = w * v
        Suv = np.einsum("ij,j->i", wv, u)
        Svv = np.einsum("ij,ij->i", wv, v)
        Sxx = np.einsum("ij,j->i", w, u * u) - Su * Su / S0
        chi2 = np.maximum(Svv - Suv * Suv / Sxx, 0.0)
        xm = x0 + Su / S0
    F = Iw.shape[0]
    n = np.full(F, n_w, dtype=np.int64)
    fit = _line_from_moments(S0, xm, ym, Sxx, Suv, chi2, n, False)
    fit["q_min"] = np.full(F, qw[0])
    fit["q_max"] = np.full(F, qw[-1])
    fit["n_finite"] = n.copy()
    fit["n_negative"] = np.zeros(F, dtype=np.int64)
    fit["n_zero_sigma"] = np.zeros(F, dtype=np.int64)
    return fit


def _fit_shared_window_general(q, I, S, start, stop, kind):
    """:func:`_fit_shared_window` for any frames (unusable points excluded):
    direct weighted row sums over the window's columns, centred on the
    window's mean x and each frame's weighted mean y; equal to the prefix-sum route to
    rounding."""
    qw = q[start:stop]
    Iw = I[:, start:stop]
    Sw = None if S is None else S[:, start:stop]
    finite, neg, zero, usable = _flags(Iw, Sw)
    y, w = _linearised(qw, Iw, Sw, usable, kind)
    with np.errstate(divide="ignore", invalid="ignore"):
        x = qw * qw
        x0 = float(x.mean()) if x.size else 0.0
        u = x - x0
        S0 = w.sum(-1)
        Su = (w * u).sum(-1)  # row sums, not matmul: each frame's numbers do not depend on the others
        wy = np.where(usable, w * y, 0.0)
        ym = wy.sum(-1) / S0
        v = np.where(usable, y - ym[:, None], 0.0)
        wv = w * v
        Suv = (wv * u).sum(-1)
        Svv = (wv * v).sum(-1)
        Sxx = (w * (u * u)).sum(-1) - Su * Su / S0
        chi2 = np.maximum(Svv - Suv * Suv / Sxx, 0.0)
        xm = x0 + Su / S0
    n = usable.sum(-1).astype(np.int64)
    fit = _line_from_moments(S0, xm, ym, Sxx, Suv, chi2, n, S is None)
    has = usable.any(-1)
    lo = np.where(has, np.argmax(usable, axis=-1), 0)
    hi = np.where(has, usable.shape[1] - 1 - np.argmax(usable[:, ::-1], axis=-1), 0)
    fit["q_min"] = np.where(has, qw[lo] if qw.size else np.nan, np.nan)
    fit["q_max"] = np.where(has, qw[hi] if qw.size else np.nan, np.nan)
    fit["n_finite"] = finite.sum(-1)
    fit["n_negative"] = neg.sum(-1)
    fit["n_zero_sigma"] = zero.sum(-1)
    return fit

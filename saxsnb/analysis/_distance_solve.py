"""Regularised solutions of many frames at once: data terms, the evidence of each weight,
the choice of the weight, non-negativity (see saxsnb.analysis._distance).
"""

from __future__ import annotations

import numpy as np
from scipy.optimize import nnls

from ._distance_basis import (  # noqa: F401
    _CACHE_SIZE,
    _g,
    _gprime,
    _hat_matrix,
    _range_bounds,
    _second_differences,
    _Shared,
    _shared,
    default_dmax_candidates,
    forward_transform,
    sphere_distance_distribution,
    transform_matrix,
)

__all__ = []


_CHUNK = 512  # frames per block in the weight search (memory ~ chunk * n_weights * n_r)


_WEIGHTS_COARSE = 10.0 ** np.arange(-12.0, 2.5)  # weight search: one per decade, then


_FINE_PER_DECADE = 8  # eight per decade around the best


_FLOOR = 1e-13  # weights below this times the largest eigenvalue are not resolved


# --------------------------------------------------------------------- the engine
class _Frames:
    """Weighted data of the frames (zero weight on unused points).

    The weights of a frame are ``scale * shape`` with ``scale`` its largest weight and
    ``shape`` rounded to 10 significant digits in log: frames with the same shape share
    one eigendecomposition, and every number of a frame depends on its own data only
    (the same to the last digit whether it is solved alone, in a batch or in any dask
    chunk).
    """

    def __init__(self, q, I, S, usable, background):
        self.known_sigma = S is not None
        w = np.where(usable, 1.0 / np.where(usable, S if S is not None else 1.0, 1.0) ** 2, 0.0)
        scale = w.max(axis=1)
        with np.errstate(divide="ignore"):
            key = np.where(w > 0, np.round(np.log(w / np.where(scale > 0, scale, 1.0)[:, None]), 10), -np.inf)
        shape = np.exp(key)  # exactly zero on unused points
        w = scale[:, None] * shape
        y = np.where(usable, I, 0.0)
        self.q, self.w, self.y = q, w, y
        self.wy = w * y
        self.yy = (self.wy * y).sum(axis=1)
        self.n = np.count_nonzero(usable, axis=1)
        self.background = background
        if background:
            self.sw = w.sum(axis=1)
            self.swy = self.wy.sum(axis=1)
            self.yy = self.yy - self.swy**2 / self.sw
        if w.shape[0] == 1:
            self.rep, self.group = np.zeros(1, dtype=int), np.zeros(1, dtype=int)
        else:
            void = np.dtype((np.void, shape.itemsize * shape.shape[1]))
            rows = np.ascontiguousarray(shape).view(void)[:, 0]
            _, self.rep, self.group = np.unique(rows, return_index=True, return_inverse=True)
        self.group = np.asarray(self.group).ravel()
        self.shape = shape
        self.scale = scale


_G_BLOCK = 128  # frames per product in the data terms (memory ~ block * n_q * n_r)


def _data_terms(sh, fr, rows):
    """Li A^T W A Li^T (len(rows), K, K) and its trace in the p metric, for the weight
    shapes of the frames ``rows`` (scale 1). Each matrix is its own product (a batched
    matmul), so it does not depend on which other frames are computed with it."""
    w = fr.shape[rows]
    AtT = sh.At.T
    G = np.empty((len(rows), sh.K, sh.K))
    for a in range(0, len(rows), _G_BLOCK):
        G[a : a + _G_BLOCK] = (AtT[None, :, :] * w[a : a + _G_BLOCK, None, :]) @ sh.At
    trace = (w * sh.rownorm2).sum(axis=1)
    if fr.background:
        sw = w.sum(axis=1)
        u = (w[:, None, :] @ sh.At)[:, 0]
        G -= u[:, :, None] * u[:, None, :] / sw[:, None, None]
        v = (w[:, None, :] @ sh.A)[:, 0]
        trace = trace - (v * v).sum(axis=1) / sw
    return G, trace


def _rhs(sh, fr, rows):
    b = (fr.wy[rows][:, None, :] @ sh.At)[:, 0]
    if fr.background:
        b = b - (fr.w[rows][:, None, :] @ sh.At)[:, 0] * (fr.swy[rows] / fr.sw[rows])[:, None]
    return b


def _log_evidence(s, cc2, yy, n, lam, known_sigma):
    """log E (up to a constant) for weights lam; s, cc2 (..., K), yy, n (...)."""
    den = s + lam[..., None]
    misfit = yy - np.sum(cc2 / den, axis=-1)  # chi2 + alpha |D2 p|^2
    occam = 0.5 * np.sum(np.log(lam[..., None] / den), axis=-1)
    if known_sigma:
        return -0.5 * misfit + occam
    return -0.5 * n * np.log(np.maximum(misfit, 1e-300)) + occam


def _choose_weight(s, cc2, yy, n, known_sigma):
    """Evidence-maximising weight per frame: a grid of one value per decade, then eight
    per decade within a decade of the best, then a parabola in log w through the best
    three (all frames at once)."""
    F = s.shape[0]
    floor = _FLOOR * s.max(axis=1)

    def scan(grid):  # grid (F, G) -> log E (F, G), -inf where unresolved
        e = _log_evidence(s[:, None, :], cc2[:, None, :], yy[:, None], n[:, None], grid, known_sigma)
        return np.where((grid > floor[:, None]) & np.isfinite(e), e, -np.inf)

    coarse = np.broadcast_to(_WEIGHTS_COARSE, (F, _WEIGHTS_COARSE.size))
    e = scan(coarse)
    lg0 = np.log10(coarse[np.arange(F), np.argmax(e, axis=1)])
    steps = np.arange(-_FINE_PER_DECADE, _FINE_PER_DECADE + 1) / _FINE_PER_DECADE
    lg = np.clip(lg0[:, None] + steps[None, :], np.log10(_WEIGHTS_COARSE[0]), np.log10(_WEIGHTS_COARSE[-1]))
    e = scan(10.0**lg)
    rows = np.arange(F)
    best = np.argmax(e, axis=1)
    k = np.clip(best, 1, steps.size - 2)
    e0, em, ep = e[rows, k], e[rows, k - 1], e[rows, k + 1]
    curv = ep - 2 * e0 + em
    with np.errstate(invalid="ignore", divide="ignore"):
        shift = np.where(np.isfinite(curv) & (curv < 0), 0.5 * (em - ep) / curv, 0.0)
    shift = np.clip(np.nan_to_num(shift), -1.0, 1.0) / _FINE_PER_DECADE
    cand = 10.0 ** np.where(best == k, lg[rows, k] + shift, lg[rows, best])
    ec = np.where(cand > floor, _log_evidence(s, cc2, yy, n, cand, known_sigma), -np.inf)
    eb = e[rows, best]
    better = ec >= eb
    return np.where(better, cand, 10.0 ** lg[rows, best]), np.where(better, ec, eb)


def _evaluate(sh, fr, rows, weight, *, full, nonnegative=False):
    """Solve the frames ``rows`` at one Dmax, in blocks of frames: the full solution when
    ``full`` is True; I0, Rg and their variances when "stats"; else evidence and weight."""
    rows = np.asarray(rows)
    if full is not True:
        return _evaluate_many([(sh, rows)], fr, weight, full)
    parts = [
        _evaluate_block(sh, fr, rows[a : a + _CHUNK], weight, full, nonnegative)
        for a in range(0, rows.size, _CHUNK)
    ]
    return {key: np.concatenate([part[key] for part in parts]) for key in parts[0]}


def _evaluate_many(items, fr, weight, full):
    """Evidence and weight (and I0, Rg with their variances when ``full`` is "stats") of
    many (Dmax, frame) pairs: ``items`` is a list of (shared terms, frame rows). Pairs
    are packed in blocks of at most ``_CHUNK`` whatever their Dmax (a short scan of a
    few frames is a few batched calls); every number of a pair comes from its own
    frame and Dmax by the same operations, whatever the packing. Returns arrays in the
    order of the items' rows, concatenated."""
    blocks, cur, size = [], [], 0
    for sh, rows in items:
        rows = np.asarray(rows)
        for a in range(0, rows.size, _CHUNK):
            part = rows[a : a + _CHUNK]
            if size + part.size > _CHUNK and cur:
                blocks.append(cur)
                cur, size = [], 0
            cur.append((sh, part))
            size += part.size
    if cur:
        blocks.append(cur)
    parts = [_stats_block(block, fr, weight, full) for block in blocks]
    return {key: np.concatenate([part[key] for part in parts]) for key in parts[0]}


def _stats_block(items, fr, weight, full):
    Gs, c, b, where, m2, li_m2, h, rows_all = [], [], [], [], [], [], [], []
    offset = 0
    for sh, rows in items:
        groups, wh = np.unique(fr.group[rows], return_inverse=True)
        wh = wh.ravel()
        G, trace = _data_terms(sh, fr, fr.rep[groups])  # of the weight shapes (scale 1)
        c_shape = trace / sh.trace_omega
        Gs.append(G / c_shape[:, None, None])
        ci = c_shape[wh] * fr.scale[rows]
        c.append(ci)
        b.append(_rhs(sh, fr, rows) / np.sqrt(ci)[:, None])
        where.append(wh + offset)
        offset += groups.size
        m2.append(np.broadcast_to(sh.m2, (rows.size, sh.K)))
        li_m2.append(np.broadcast_to(sh.li_m2, (rows.size, sh.K)))
        h.append(np.full(rows.size, sh.h))
        rows_all.append(rows)
    sh0 = items[0][0]  # Li, its sums and the trace of the prior depend on n_r only
    s, Q = np.linalg.eigh(np.concatenate(Gs))
    s = np.maximum(s, 0.0)
    where = np.concatenate(where)
    c, b, rows = np.concatenate(c), np.concatenate(b), np.concatenate(rows_all)
    sf, Qf = s[where], Q[where]
    cc = (b[:, None, :] @ Qf)[:, 0, :]
    cc2 = cc * cc
    yy, n = fr.yy[rows], fr.n[rows].astype(float)
    if weight is None:
        lam, ev = _choose_weight(sf, cc2, yy, n, fr.known_sigma)
    else:
        lam = np.full(rows.size, float(weight))
        ev = _log_evidence(sf, cc2, yy, n, lam, fr.known_sigma)
    out = {"evidence": ev, "weight": lam}
    if not full:
        return out
    den = sf + lam[:, None]
    z = cc / den
    u = (Qf @ z[:, :, None])[:, :, 0]
    p_in = (u[:, None, :] @ sh0.Li)[:, 0] / np.sqrt(c)[:, None]
    n_eff = np.sum(sf / den, axis=1) + (1.0 if fr.background else 0.0)
    dof = np.maximum(n - n_eff, 1.0)
    chi2 = yy - np.sum(cc2 * (sf + 2 * lam[:, None]) / den**2, axis=1)
    noise = np.ones(rows.size) if fr.known_sigma else np.maximum(chi2, 0.0) / dof
    tot = p_in.sum(axis=1)
    mom = (p_in * np.concatenate(m2)).sum(axis=1)
    h = np.concatenate(h)
    with np.errstate(invalid="ignore", divide="ignore"):
        rg2 = np.where(tot > 0, mom / (2 * tot), np.nan)
        g1 = sh0.li_one @ Qf  # (Li 1)^T Q, (F, K)
        g2 = (np.concatenate(li_m2)[:, None, :] @ Qf)[:, 0]
        v_one = np.sum(g1 * g1 / den, axis=1) / c
        gr = (g2 - 2 * rg2[:, None] * g1) / (2 * tot)[:, None]
        v_rg2 = np.sum(gr * gr / den, axis=1) / c
    out.update(_moment_outputs(h, tot, rg2, v_one, v_rg2, noise))
    return out


def _evaluate_block(sh, fr, rows, weight, full, nonnegative):
    """The full solution of the frames ``rows`` at one Dmax."""
    groups, where = np.unique(fr.group[rows], return_inverse=True)
    where = where.ravel()
    rep_rows = fr.rep[groups]
    G, trace = _data_terms(sh, fr, rep_rows)  # of the weight shapes (scale 1)
    c_shape = trace / sh.trace_omega
    Gs = G / c_shape[:, None, None]
    s, Q = np.linalg.eigh(Gs)
    s = np.maximum(s, 0.0)
    c = c_shape[where] * fr.scale[rows]
    b = _rhs(sh, fr, rows) / np.sqrt(c)[:, None]
    sf = s[where]
    Qf = Q[where] if len(groups) > 1 else np.broadcast_to(Q[0], (len(rows), sh.K, sh.K))
    cc = (b[:, None, :] @ Qf)[:, 0, :]
    cc2 = cc * cc
    yy, n = fr.yy[rows], fr.n[rows].astype(float)
    if weight is None:
        lam, ev = _choose_weight(sf, cc2, yy, n, fr.known_sigma)
    else:
        lam = np.full(len(rows), float(weight))
        ev = _log_evidence(sf, cc2, yy, n, lam, fr.known_sigma)
    out = {"evidence": ev, "weight": lam}
    den = sf + lam[:, None]
    z = cc / den
    u = (Qf @ z[:, :, None])[:, :, 0]
    p_in = (u[:, None, :] @ sh.Li)[:, 0] / np.sqrt(c)[:, None]  # p = Li^T u / sqrt(c)
    n_eff = np.sum(sf / den, axis=1) + (1.0 if fr.background else 0.0)
    dof = np.maximum(n - n_eff, 1.0)
    cov = None
    if nonnegative:
        p_in, cov, n_eff = _nonnegative(sh, Gs[where], c, b, lam, p_in)
        n_eff = n_eff + (1.0 if fr.background else 0.0)
        dof = np.maximum(n - n_eff, 1.0)
        var = np.einsum("fkk->fk", cov)
    else:
        # posterior covariance of p: Li^T Q diag(1/den) Q^T Li / c
        B = sh.Li.T @ Qf
        var = ((B * B) @ (1.0 / den)[:, :, None])[:, :, 0] / c[:, None]
    fit = (p_in[:, None, :] @ sh.A.T)[:, 0]
    if fr.background:
        bg = (fr.w[rows] * (fr.y[rows] - fit)).sum(axis=1) / fr.sw[rows]
        fit = fit + bg[:, None]
    else:
        bg = np.zeros(len(rows))
    resid = fr.y[rows] - fit
    chi2 = (fr.w[rows] * resid * resid).sum(axis=1)
    noise = np.ones(len(rows)) if fr.known_sigma else np.maximum(chi2, 0.0) / dof
    h = sh.h
    tot = p_in.sum(axis=1)
    mom = (p_in * sh.m2).sum(axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        rg2 = np.where(tot > 0, mom / (2 * tot), np.nan)
        if cov is None:
            g1 = sh.li_one @ Qf  # (Li 1)^T Q, (F, K)
            g2 = (np.broadcast_to(sh.li_m2, (len(rows), sh.K))[:, None, :] @ Qf)[:, 0]
            v_one = np.sum(g1 * g1 / den, axis=1) / c
            gr = (g2 - 2 * rg2[:, None] * g1) / (2 * tot)[:, None]
            v_rg2 = np.sum(gr * gr / den, axis=1) / c
        else:
            v_one = np.einsum("fij->f", cov)
            gr = (sh.m2[None, :] - 2 * rg2[:, None]) / (2 * tot)[:, None]
            v_rg2 = np.einsum("fi,fij,fj->f", gr, cov, gr)
    out.update(_moment_outputs(h, tot, rg2, v_one, v_rg2, noise))
    out.update(
        p_inner=p_in,
        p_var=var * noise[:, None],
        fit=fit,
        background=bg,
        chi2=chi2,
        chi2_reduced=chi2 / dof if fr.known_sigma else np.full(len(rows), np.nan),
        n_eff=n_eff,
    )
    return out


def _nonnegative(sh, Gs, c, b, lam, p0, max_iter=30):
    """p >= 0 by the primal-dual active-set method, all frames at once (module notes).

    Works in the p metric scaled by 1/c: H' = Lc (Gs + lam) Lc^T, b' = Lc b / sqrt(c);
    returns p, the posterior covariance of the free values (zero elsewhere) and the
    effective number of parameters.
    """
    F, K = p0.shape
    eye = np.eye(K)
    H = np.einsum("ij,fjk,lk->fil", sh.Lc, Gs + lam[:, None, None] * eye, sh.Lc)
    rhs = (b[:, None, :] @ sh.Lc.T)[:, 0] / np.sqrt(c)[:, None]
    active = p0 < 0
    done = np.zeros(F, dtype=bool)
    p = p0.copy()
    for _ in range(max_iter):
        free = ~active
        Hm = np.where(free[:, :, None] & free[:, None, :], H, 0.0) + active[:, :, None] * eye
        p = np.linalg.solve(Hm, np.where(free, rhs, 0.0)[..., None])[..., 0]
        mu = np.einsum("fij,fj->fi", H, p) - rhs  # multipliers (zero on the free set)
        # an active value whose multiplier is negative is freed; a free value below zero is held
        new = (active & (mu > 0)) | (~active & (p < 0))
        done = np.all(new == active, axis=1)
        active = new
        if done.all():
            break
    p = np.where(active, 0.0, p)
    for f in np.flatnonzero(~done):  # rare: the active-set iteration has not settled
        R = np.linalg.cholesky(H[f]).T  # H' = R^T R
        d = np.linalg.solve(R.T, rhs[f])
        p[f] = nnls(R, d)[0]
        active[f] = p[f] <= 0
    free = ~active
    both = free[:, :, None] & free[:, None, :]
    Hm = np.where(both, H, 0.0) + active[:, :, None] * eye
    Hinv = np.linalg.inv(Hm) * both
    omega = sh.Lc @ sh.Lc.T
    n_eff = free.sum(axis=1) - lam * np.einsum("fij,ji->f", Hinv, omega)
    return p, Hinv / c[:, None, None], n_eff


def _moment_outputs(h, tot, rg2, v_one, v_rg2, noise) -> dict:
    """I0 and Rg from the zeroth and second moments of p(r), with their sigmas."""
    with np.errstate(invalid="ignore", divide="ignore"):
        rg = np.sqrt(np.where(rg2 > 0, rg2, np.nan))
        return dict(
            i0=4 * np.pi * h * tot,
            i0_sigma=4 * np.pi * h * np.sqrt(np.maximum(v_one * noise, 0)),
            rg=rg,
            rg_sigma=np.sqrt(np.maximum(v_rg2 * noise, 0)) / (2 * rg),
        )

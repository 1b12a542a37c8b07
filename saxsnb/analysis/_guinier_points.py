"""Usable-point bookkeeping of the automatic Guinier search (saxsnb.analysis._guinier_blocks):
which points of a block of frames are usable, and the k-th usable point, the blocking
points and the last usable point of each window, by index arithmetic for frames whose
points are all usable and by running counts for the others.
"""

from __future__ import annotations

import numpy as np


def _flags(I, S):
    """finite, non-positive intensity, zero/negative sigma, usable (bool arrays)."""
    finite = np.isfinite(I)
    if S is not None:
        finite &= np.isfinite(S)
    neg = finite & (I <= 0)
    zero = finite & ~neg & (S <= 0) if S is not None else np.zeros_like(finite)
    return finite, neg, zero, finite & ~neg & ~zero


def _clean_rows(Ib, Sb, h):
    """Frames whose points are all usable (finite, I > 0, sigma > 0) before their
    horizon ``h`` (constant over runs of frames)."""
    F = Ib.shape[0]
    clean = np.empty(F, dtype=bool)
    edges = np.flatnonzero(np.diff(h)) + 1
    with np.errstate(invalid="ignore"):
        for a, b in zip(np.r_[0, edges], np.r_[edges, F]):
            hg = int(h[a])
            seg = Ib[a:b, :hg]
            ok = (seg.min(axis=-1) > 0) & (seg.max(axis=-1) < np.inf)
            if Sb is not None:
                sg = Sb[a:b, :hg]
                ok &= (sg.min(axis=-1) > 0) & (sg.max(axis=-1) < np.inf)
            clean[a:b] = ok
    return clean


class _Counts:
    """Usable-point bookkeeping of a block: index arithmetic for clean frames, running
    counts for the others (``gen``)."""

    def __init__(self, Ib, Sb, h, clean):
        F, nc = Ib.shape
        self.h = h
        self.clean = clean
        self.gen = np.flatnonzero(~clean)
        self.pos = np.full(F, -1, dtype=np.int64)
        self.pos[self.gen] = np.arange(self.gen.size)
        n_usable = h.copy()
        self.has_block = np.zeros(F, dtype=bool)
        self.block_neg = np.zeros(F, dtype=bool)
        self.first_use = np.zeros(F, dtype=np.int64)
        if self.gen.size:
            g = self.gen
            finite, neg, zero, usable = _flags(Ib[g], None if Sb is None else Sb[g])
            inside = np.arange(nc)[None, :] < h[g, None]
            finite &= inside
            neg &= inside
            zero &= inside
            usable &= inside
            self.usable = usable
            self.finite = finite
            cp = np.zeros((g.size, nc + 1), dtype=np.int32)
            np.cumsum(usable, axis=-1, out=cp[:, 1:])
            self.cp = cp  # usable points before each column
            blocking = neg | zero
            bp = np.zeros((g.size, nc + 1), dtype=np.int32)
            np.cumsum(blocking, axis=-1, out=bp[:, 1:])
            self.bp = bp
            idx = np.where(usable, np.arange(nc)[None, :], 0)
            self.last_use = np.maximum.accumulate(idx, axis=-1)
            n_usable[g] = cp[:, -1]
            self.has_block[g] = blocking.any(axis=-1)
            first_block = np.argmax(blocking, axis=-1)
            self.block_neg[g] = neg[np.arange(g.size), first_block]
            self.first_use[g] = np.argmax(usable, axis=-1)
        self.n_usable = n_usable

    def before(self, col):
        """usable points before column ``col`` (F,), clipped to the horizon."""
        out = np.minimum(col, self.h)
        g = self.gen
        if g.size:
            out[g] = self.cp[np.arange(g.size), np.minimum(col[g], self.h[g])]
        return out

    def nth(self, k):
        """column of the k-th (1-based, int array (F, K)) usable point; the horizon
        where a frame has fewer."""
        h = self.h[:, None]
        out = np.where(k <= h, k - 1, h)
        g = self.gen
        if g.size:
            cnt = self.cp[:, 1:]
            kg = k[g]
            og = np.empty(kg.shape, dtype=np.int64)
            for j in range(kg.shape[1]):  # a handful of candidate starts, not frames
                hit = cnt >= kg[:, j : j + 1]
                og[:, j] = np.where(hit[:, -1], np.argmax(hit, axis=-1), self.h[g])
            out[g] = og
        return out

    def _rows(self, r):
        gi = self.pos[r]
        sel = np.flatnonzero(gi >= 0)
        return sel, gi[sel]

    def count(self, r, s, e):
        """usable points in the windows [s, e) of the frames r (s, e broadcast)."""
        h = self.h[r].reshape((-1,) + (1,) * (np.ndim(s) - 1))
        n = np.minimum(e, h) - np.minimum(s, h)
        sel, gi = self._rows(r)
        if sel.size:
            gi_ = gi.reshape((-1,) + (1,) * (np.ndim(s) - 1))
            e_ = np.broadcast_to(e, np.broadcast_shapes(np.shape(s), np.shape(e)))
            s_ = np.broadcast_to(s, e_.shape)
            n = np.broadcast_to(n, e_.shape).copy()
            n[sel] = self.cp[gi_, e_[sel]] - self.cp[gi_, s_[sel]]
        return n

    def blocked(self, r, s, e):
        """blocking points (I <= 0, sigma <= 0) in the windows [s, e) of the frames r."""
        shape = np.broadcast_shapes(np.shape(s), np.shape(e))
        nb = np.zeros(shape, dtype=np.int32)
        sel, gi = self._rows(r)
        if sel.size:
            gi_ = gi.reshape((-1,) + (1,) * (len(shape) - 1))
            e_ = np.broadcast_to(e, shape)[sel]
            s_ = np.broadcast_to(s, shape)[sel]
            nb[sel] = self.bp[gi_, e_] - self.bp[gi_, s_]
        return nb

    def last(self, col, r=None):
        """last usable column at or before ``col`` (int array (len(r), ...)) of the
        frames r (default all)."""
        out = col.copy()
        if r is None:
            r = np.arange(self.h.size)
        sel, gi = self._rows(r)
        if sel.size:
            out[sel] = self.last_use[gi.reshape((-1,) + (1,) * (col.ndim - 1)), col[sel]]
        return out
